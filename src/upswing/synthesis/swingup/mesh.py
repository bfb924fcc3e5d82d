"""The accuracy check of a collocated trajectory, interval by interval, and the mesh refinement it drives.

A collocation solution satisfies its defect equations exactly, yet the true solution of the differential
equation under the same input can drift from it within each interval; on a coarse mesh the optimizer even
exploits that error. The check integrates every interval [t_k, t_{k+1}] separately from the node state x_k with
scipy's DOP853 (Hairer, Norsett & Wanner 1993, *Solving ODEs I*, sec. II.10) under the interpolated input of the
scheme, and compares the end state with x_{k+1}:

    e_k = max_i w_i |x_int,i(t_{k+1}) - x_{k+1,i}|,   w_i = 1 for angles [rad] and cart position [m],
                                                      w_i = 0.1 s for speeds [rad/s, m/s],

so a speed error counts as the position error it would cause within a tenth of a second. Starting each interval
afresh is deliberate: integrating the whole horizon open loop measures the instability of the upright end, not
the accuracy of the mesh.

Intervals with e_k above the tolerance are split, into more pieces the larger the excess: the usual
error-equidistributing refinement in a simple form (Betts 2010, *Practical Methods for Optimal Control...*, 2nd
ed., sec. 4.7). The piece count assumes the error falls only as h^2, not with the schemes' smooth-case orders (h^5
for Hermite–Simpson, h^3 for trapezoidal): the intervals that fail are those where the input jumps (a speed or
motor-line bound becoming active, friction reversing), and there the smooth-case order does not hold (measured on
the demo acrobot: the median interval error fell as h^5 with N, the largest only as about h^1.5).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp

from upswing.model.dynamics import RigModel

SPEED_WEIGHT = 0.1  # s: weight of speed errors against position errors
ASSUMED_ORDER = 2  # error ~ h^ASSUMED_ORDER at the failing intervals (module docstring)
MAX_SPLIT = 4


def error_weights(n_states: int) -> np.ndarray:
    """w_i of the module docstring: 1 on positions (first half of the state), 0.1 s on speeds."""
    n_q = n_states // 2
    return np.concatenate([np.ones(n_q), np.full(n_q, SPEED_WEIGHT)])


def input_on_interval(scheme: str, u0: np.ndarray, u_mid: np.ndarray, u1: np.ndarray, s: float) -> np.ndarray:
    """The scheme's input interpolant at fraction s in [0, 1] of each interval (rows are intervals)."""
    if scheme == "hermite-simpson":
        return (1 - s) * (1 - 2 * s) * u0 + 4 * s * (1 - s) * u_mid + s * (2 * s - 1) * u1
    return (1 - s) * u0 + s * u1


def interval_errors(model: RigModel, p: np.ndarray, scheme: str, t: np.ndarray, x: np.ndarray, u: np.ndarray,
                    u_mid: np.ndarray, *, rtol: float = 1e-10, atol: float = 1e-12) -> np.ndarray:
    """Per-interval re-integration errors e_k (module docstring), all intervals integrated as one batch.

    The N intervals are stacked into one system on the normalized time s in [0, 1]: dz_k/ds = h_k f(z_k, u_k(s)),
    z_k(0) = x_k, so a single DOP853 run with a vectorized right-hand side serves them all (its step size follows
    the most demanding interval, which only makes the others more accurate).

    Parameters
    ----------
    model : RigModel
        The model the trajectory was optimized on (same Coulomb smoothing).
    p : ndarray
        Parameter vector (``rig.parameter_vector()``).
    scheme : str
    t : ndarray, shape (N+1,)
    x : ndarray, shape (N+1, n_states)
    u : ndarray, shape (N+1, n_inputs)
    u_mid : ndarray, shape (N, n_inputs)
    rtol, atol : float
        DOP853 tolerances; far below any mesh tolerance so the reference error does not count.

    Returns
    -------
    ndarray, shape (N,)
        e_k [rad or m].
    """
    N, n = len(t) - 1, x.shape[1]
    h = np.diff(t)[:, None]

    def rhs(s: float, z: np.ndarray) -> np.ndarray:
        states = z.reshape(N, n)
        inputs = input_on_interval(scheme, u[:-1], u_mid, u[1:], s)
        return (h * model.rhs_batch(states, inputs, p)).ravel()

    result = solve_ivp(rhs, (0.0, 1.0), x[:-1].ravel(), method="DOP853", rtol=rtol, atol=atol)
    if not result.success:
        return np.full(N, np.inf)
    end = result.y[:, -1].reshape(N, n)
    return np.max(np.abs(end - x[1:]) * error_weights(n), axis=1)


def refine(mesh: np.ndarray, errors: np.ndarray, tolerance: float, *, max_intervals: int,
           everywhere: bool = False) -> np.ndarray:
    """Split the intervals whose error exceeds ``tolerance``.

    An interval with error e is cut into ceil((e / tolerance)^(1/2)) equal pieces (2 to 4) (module docstring),
    and its neighbours in two. Splitting stops at ``max_intervals``, worst intervals first. With ``everywhere``,
    every interval is halved instead (as far as ``max_intervals`` allows, worst first).

    Parameters
    ----------
    mesh : ndarray, shape (N+1,)
        Fractions of the duration, 0 to 1.
    errors : ndarray, shape (N,)
    tolerance : float
    max_intervals : int

    Returns
    -------
    ndarray
        The new mesh (unchanged when nothing needs splitting or no room is left).
    """
    pieces = np.ones(len(errors), dtype=int)
    budget = max_intervals - (len(mesh) - 1)
    if everywhere:
        chosen = np.argsort(-errors)[:max(budget, 0)]
        pieces[chosen] = 2
        budget = 0
    for k in np.argsort(-errors):
        if errors[k] <= tolerance or budget <= 0:
            break
        wanted = math.ceil((errors[k] / tolerance) ** (1.0 / ASSUMED_ORDER)) if np.isfinite(errors[k]) else MAX_SPLIT
        extra = min(max(wanted, 2), MAX_SPLIT, budget + 1) - 1
        pieces[k] += extra
        budget -= extra
        # The neighbours are halved too: otherwise the re-solve tends to move the hard stretch (a fast spin, an
        # input jump) next door, onto the coarse mesh, one interval per round.
        for j in (k - 1, k + 1):
            if 0 <= j < len(errors) and pieces[j] == 1 and budget > 0:
                pieces[j] = 2
                budget -= 1
    points = [mesh[:1]]
    for k, count in enumerate(pieces):
        points.append(np.linspace(mesh[k], mesh[k + 1], count + 1)[1:])
    return np.concatenate(points)
