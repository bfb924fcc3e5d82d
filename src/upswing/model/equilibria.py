"""The four equilibria of a double pendulum and angle-aware state errors."""

from __future__ import annotations

import math

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import Rig

# (theta1, theta2) of each equilibrium; theta1 from the upward vertical, theta2 relative to link 1.
EQUILIBRIA: dict[str, tuple[float, float]] = {
    "upright": (0.0, 0.0),
    "hanging": (math.pi, 0.0),
    "down-up": (math.pi, math.pi),
    "up-down": (0.0, math.pi),
}


def equilibrium_state(rig: Rig, name: str) -> np.ndarray:
    """State vector of a named equilibrium (cart at x = 0, all velocities zero).

    Raises
    ------
    RequestError
        For a name other than upright, hanging, down-up, up-down.
    """
    if name not in EQUILIBRIA:
        raise RequestError(f"equilibrium must be one of {', '.join(EQUILIBRIA)}; got {name!r}")
    th1, th2 = EQUILIBRIA[name]
    q = [0.0, th1, th2] if rig.base == "cart" else [th1, th2]
    return np.concatenate([q, np.zeros(len(q))])


def angle_mask(rig: Rig) -> np.ndarray:
    """Boolean mask of the state entries that are angles (wrapped when errors are formed)."""
    return np.array([name in ("theta1", "theta2") for name in rig.state_names])


def wrap_angle(angle: np.ndarray | float) -> np.ndarray | float:
    """Wrap angles to (-pi, pi] [rad]."""
    wrapped = np.pi - np.mod(np.pi - np.asarray(angle, dtype=float), 2.0 * np.pi)
    return float(wrapped) if np.ndim(wrapped) == 0 else wrapped


def state_error(rig: Rig, x: np.ndarray, x_ref: np.ndarray) -> np.ndarray:
    """x - x_ref with the angle entries wrapped to (-pi, pi]; works along the last axis of batched states."""
    error = np.asarray(x, dtype=float) - np.asarray(x_ref, dtype=float)
    mask = angle_mask(rig)
    error[..., mask] = wrap_angle(error[..., mask])
    return error
