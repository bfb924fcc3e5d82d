"""Shared helpers for the report tests: demo rigs, a synthetic trajectory, and a pixel test for blank images."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
from PIL import Image

from upswing.model.rig import Rig, load_rig
from upswing.verification.budgets import Budget

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"

# Share of pixels that must differ from the background for a figure to count as "not blank". Measured: an empty
# axes with title, axis labels, ticks and grid covers 2.5-3.8 % of a report-sized figure, real figures 8-65 %;
# 6 % sits between, so an axes frame without data fails and every real figure passes.
MIN_INK = 0.06


def scenario_rig(name: str) -> Rig:
    """A demo rig by file stem ("acrobot", "cart-double", ...)."""
    return load_rig(SCENARIOS / f"{name}.toml")


def budget(name: str, value: float, limit: float | None, unit: str, ok: bool | None) -> Budget:
    """A budget line as verification makes them (median = value, no meaning text)."""
    return Budget(name=name, value=value, limit=limit, unit=unit, ok=ok, median=value, meaning="")


def swing_trajectory(rig: Rig, duration: float = 2.0, n: int = 201) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A smooth made-up swing from hanging to upright (not a solution of the dynamics: the figures only draw it).

    theta1 = pi (1 - s), theta2 = 0.6 sin(2 pi t / T) (1 - s) with s = 3 tau^2 - 2 tau^3, tau = t / T; the cart
    (if any) moves x = 0.1 sin(pi tau). Velocities are the exact derivatives; the effort is 0.8 peak sin(3 pi tau).
    """
    t = np.linspace(0.0, duration, n)
    tau = t / duration
    s, ds = 3 * tau**2 - 2 * tau**3, (6 * tau - 6 * tau**2) / duration
    wave, dwave = np.sin(2 * math.pi * tau), 2 * math.pi / duration * np.cos(2 * math.pi * tau)
    th1, dth1 = math.pi * (1 - s), -math.pi * ds
    th2, dth2 = 0.6 * wave * (1 - s), 0.6 * (dwave * (1 - s) - wave * ds)
    if rig.cart is not None:
        x, dx = 0.1 * np.sin(math.pi * tau), 0.1 * math.pi / duration * np.cos(math.pi * tau)
        X = np.column_stack([x, th1, th2, dx, dth1, dth2])
    else:
        X = np.column_stack([th1, th2, dth1, dth2])
    U = np.column_stack([0.8 * a.peak * np.sin(3 * math.pi * tau) for a in rig.actuators])
    return t, X, U


def pixels(data: bytes) -> np.ndarray:
    """Decode PNG/GIF bytes (first frame) to an (h, w, 3) uint8 array."""
    return np.asarray(Image.open(io.BytesIO(data)).convert("RGB"))


def ink_fraction(rgb: np.ndarray) -> float:
    """Share of pixels that differ from the most common colour (the background) by more than 24 in summed RGB
    (about 3 % per channel: ignores compression and palette noise, catches any drawn line)."""
    flat = rgb.reshape(-1, 3).astype(np.int32)
    keys = (flat[:, 0] << 16) | (flat[:, 1] << 8) | flat[:, 2]
    common = int(np.argmax(np.bincount(keys, minlength=1 << 24)))
    background = np.array([common >> 16, (common >> 8) & 255, common & 255])
    return float(np.mean(np.abs(flat - background).sum(axis=1) > 24))
