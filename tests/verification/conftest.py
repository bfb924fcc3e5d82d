"""Shared fixtures: the demo rigs and a rig with friction removed."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from upswing.model.rig import PARAMETER_NAMES, Rig, load_rig

SCENARIOS = Path(__file__).resolve().parents[2] / "scenarios"
DEMO_RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")


@pytest.fixture(scope="session", params=DEMO_RIGS)
def demo_rig(request) -> Rig:
    return load_rig(SCENARIOS / f"{request.param}.toml")


def rig(name: str) -> Rig:
    return load_rig(SCENARIOS / f"{name}.toml")


def frictionless(r: Rig, *, viscous: bool = True) -> Rig:
    """The rig with Coulomb friction (and, with viscous=False, viscous friction too) set to zero."""
    drop = (".coulomb",) if viscous else (".coulomb", ".damping")
    p = r.parameter_vector()
    return r.with_parameters(np.array([0.0 if n.endswith(drop) else v for n, v in zip(PARAMETER_NAMES, p,
                                                                                       strict=True)]))
