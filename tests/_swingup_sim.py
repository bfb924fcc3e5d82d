"""A plain closed-loop simulator for the swing-up tests: scipy's DOP853 between samples, inputs held (zero-order
hold) over each sample, as the firmware will apply them. Slow and obvious on purpose: it is the outside reference
the batched laws are checked against.

The right-hand side is written out once more in plain Python (math.sin, a 2x2 or 3x3 solve) because a casadi
call costs ~0.1 ms, which would make a 15 s closed-loop run take minutes; ``test_swingup_energy`` compares it with
the casadi model on random states, so it cannot drift from the model the rest of upswing uses.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp

from upswing.model.rig import PARAMETER_NAMES, Rig

# Coulomb friction f sgn(v) is smoothed to f tanh(v / v_s) in these simulations (docs/conventions.md allows it when
# v_s is stated): with the exact sgn() an adaptive integrator resolves every stick of a joint with ever smaller
# steps (one second of acrobot swing-up took ~5 minutes). 0.05 rad/s (m/s) is far below the speeds of a swing-up.
COULOMB_SMOOTHING = 0.05


def plain_rhs(rig: Rig, p: np.ndarray | None = None, *, coulomb_smoothing: float = COULOMB_SMOOTHING
              ) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    """x_dot = f(x, u) of the rig's exact model (docs/conventions.md); Coulomb friction f tanh(v / v_s), or
    f sgn(v) with sgn(0) = 0 when ``coulomb_smoothing`` is 0."""
    v = dict(zip(PARAMETER_NAMES, (float(a) for a in (rig.parameter_vector() if p is None else p)), strict=True))
    m1, l1, lc1, I1, b1, f1 = (v[f"link1.{k}"] for k in ("mass", "length", "com", "inertia", "damping", "coulomb"))
    m2, lc2, I2, b2, f2 = (v[f"link2.{k}"] for k in ("mass", "com", "inertia", "damping", "coulomb"))
    mc, bc, fc, g = v["cart.mass"], v["cart.damping"], v["cart.coulomb"], v["gravity"]
    a, b = m1 * lc1 + m2 * l1, m2 * lc2

    def sgn(s: float) -> float:
        if coulomb_smoothing > 0:
            return math.tanh(s / coulomb_smoothing)
        return 1.0 if s > 0 else (-1.0 if s < 0 else 0.0)

    cart = rig.base == "cart"
    S = {"cart": 0, "shoulder": 1, "elbow": 2} if cart else {"shoulder": 0, "elbow": 1}
    n_q = 3 if cart else 2

    def f(x: np.ndarray, u: np.ndarray) -> np.ndarray:
        if cart:
            _, t1, t2, xd, w1, w2 = (float(s) for s in x)
        else:
            t1, t2, w1, w2 = (float(s) for s in x)
            xd = 0.0
        c2, s2, s12 = math.cos(t2), math.sin(t2), math.sin(t1 + t2)
        m11 = I1 + I2 + m1 * lc1**2 + m2 * (l1**2 + lc2**2 + 2 * l1 * lc2 * c2)
        m12 = I2 + m2 * (lc2**2 + l1 * lc2 * c2)
        m22 = I2 + m2 * lc2**2
        h = m2 * l1 * lc2 * s2
        r1 = -(-h * (2 * w1 * w2 + w2**2) - g * (a * math.sin(t1) + b * s12)) - b1 * w1 - f1 * sgn(w1)
        r2 = -(h * w1**2 - g * b * s12) - b2 * w2 - f2 * sgn(w2)
        force = [0.0] * n_q
        for j, name in enumerate(rig.actuated):
            force[S[name]] = float(u[j])
        if not cart:
            r1 += force[0]
            r2 += force[1]
            det = m11 * m22 - m12 * m12
            return np.array([w1, w2, (m22 * r1 - m12 * r2) / det, (m11 * r2 - m12 * r1) / det])
        c1, c12 = math.cos(t1), math.cos(t1 + t2)
        mx1, mx2 = -a * c1 - b * c12, -b * c12
        M = np.array([[mc + m1 + m2, mx1, mx2], [mx1, m11, m12], [mx2, m12, m22]])
        rx = -(a * math.sin(t1) * w1**2 + b * s12 * (w1 + w2) ** 2) - bc * xd - fc * sgn(xd) + force[0]
        qdd = np.linalg.solve(M, np.array([rx, r1 + force[1], r2 + force[2]]))
        return np.concatenate([[xd, w1, w2], qdd])

    return f


@dataclass(frozen=True)
class SampledRun:
    t: np.ndarray  # (K + 1,) sample times [s]
    x: np.ndarray  # (K + 1, n) states at the sample times
    u: np.ndarray  # (K, m) inputs held over each sample
    stopped_at: int | None  # sample index at which `stop` returned True, if it did


def simulate_sampled(rig: Rig, controller: Callable[[int, np.ndarray], np.ndarray], x0: np.ndarray,
                     duration: float, *, stop: Callable[[int, np.ndarray], bool] | None = None,
                     p: np.ndarray | None = None, rtol: float = 1e-8, atol: float = 1e-10) -> SampledRun:
    """Run ``u[k] = controller(k, x[k])`` held over [t_k, t_k + 1/f_s) on the rig's exact model (DOP853).

    ``stop(k, x[k])`` ends the run early (e.g. once a hand-over has happened and been held long enough). The
    controller's output is saturated at the rig's peak here too, as the drive would. ``p`` replaces the plant's
    parameters (the controller keeps its own).
    """
    rhs = plain_rhs(rig, p)
    dt = 1.0 / rig.balance.sample_rate
    peak = rig.peak_inputs
    n_steps = int(round(duration * rig.balance.sample_rate))
    x = np.asarray(x0, dtype=float).copy()
    xs, us = [x.copy()], []
    stopped = None
    for k in range(n_steps):
        if stop is not None and stop(k, x):
            stopped = k
            break
        u = np.clip(np.asarray(controller(k, x), dtype=float).ravel(), -peak, peak)
        sol = solve_ivp(lambda _t, y, u=u: rhs(y, u), (0.0, dt), x, method="DOP853", rtol=rtol, atol=atol)
        x = sol.y[:, -1]
        xs.append(x.copy())
        us.append(u)
    t = np.arange(len(xs)) * dt
    return SampledRun(t=t, x=np.array(xs), u=np.array(us).reshape(-1, rig.n_inputs), stopped_at=stopped)
