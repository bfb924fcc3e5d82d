"""Shared, cached designs of the demo rigs for the balance tests (each design is made once per test session)."""

from __future__ import annotations

from functools import cache
from pathlib import Path

from upswing.model.rig import Rig, load_rig
from upswing.synthesis.balance import BalanceDesign, design_balance
from upswing.synthesis.estimation import EstimatorDesign, finite_difference_estimator, kalman_estimator

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
DEMO_RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")


@cache
def rig(name: str) -> Rig:
    return load_rig(SCENARIOS / f"{name}.toml")


@cache
def design(name: str, delay: int = 0, rate: float | None = None) -> BalanceDesign:
    return design_balance(rig(name), delay_samples=delay, sample_rate=rate)


@cache
def kalman(name: str, delay: int = 0) -> EstimatorDesign:
    return kalman_estimator(rig(name), design(name, delay))


@cache
def finite_difference(name: str, delay: int = 0) -> EstimatorDesign:
    return finite_difference_estimator(rig(name), design(name, delay))


def rig_text(name: str) -> str:
    return (SCENARIOS / f"{name}.toml").read_text()
