"""Rig builders shared by the tests (random valid rigs of every family)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from upswing.model.rig import Rig, rig_from_table

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.toml"))

FAMILIES = {
    "acrobot": ("fixed", ["elbow"]),
    "pendubot": ("fixed", ["shoulder"]),
    "cart": ("cart", ["cart"]),
    "fully actuated": ("fixed", ["shoulder", "elbow"]),
}


def random_rig_table(rng: np.random.Generator, family: str) -> dict:
    """A valid rig table with random, bench-sized parameters for one family."""
    base, actuated = FAMILIES[family]

    def link() -> dict:
        length = rng.uniform(0.1, 0.6)
        mass = rng.uniform(0.05, 1.5)
        return {"mass": mass, "length": length, "com": rng.uniform(0.2, 1.0) * length,
                "inertia": mass * length**2 * rng.uniform(0.02, 0.15), "damping": rng.uniform(0, 0.01)}

    table = {"name": f"random {family}", "base": base, "actuated": actuated, "gravity": 9.80665,
             "link1": link(), "link2": link(),
             "actuator": {j: {"peak": 5.0, "continuous": 2.0, "max_speed": 20.0} for j in actuated}}
    if base == "cart":
        table["cart"] = {"mass": rng.uniform(0.3, 3.0), "damping": rng.uniform(0, 5.0), "travel": 0.5}
    return table


def random_rig(seed: int, family: str) -> Rig:
    return rig_from_table(random_rig_table(np.random.default_rng(seed), family), source=f"<random {seed}>")
