"""What happens at each controller sample besides the integration: sensor readings, actuator limits, bookkeeping.

Each step has a numpy form (plain array expressions, the reference and the fallback) and, when numba is present, a
compiled form that does the same in one pass over the rollouts (per-sample numpy calls otherwise cost more than the
integration itself: measured ~450 ns against ~240 ns per rollout and sample). The tests compare the two.

Array layout: components in rows, rollouts in columns (``S`` is (n_states, N)), as in
:mod:`upswing.verification.kernels`.
"""

from __future__ import annotations

import math

import numpy as np

from upswing.verification.kernels import HAVE_NUMBA

if HAVE_NUMBA:
    import numba

TWO_PI = 2.0 * math.pi


def wrap(a: np.ndarray | float) -> np.ndarray | float:
    """Angles wrapped to (-pi, pi]: a + 2 pi floor((pi - a) / (2 pi)) [rad]."""
    return a + TWO_PI * np.floor((math.pi - a) / TWO_PI)


# ----------------------------------------------------------------------------------------------------------------
# numpy forms


def read_numpy(S: np.ndarray, x_eq: np.ndarray, is_angle: np.ndarray, n_meas: int, quantum: np.ndarray,
               noise: np.ndarray | None, Y: np.ndarray) -> None:
    """Y (N, p) = reading of the first ``n_meas`` rows of S: quantized to ``quantum`` (if > 0) plus ``noise``,
    minus ``x_eq``, angles wrapped. With n_meas = n_states and quantum = 0 this is the exact state error."""
    R = S[:n_meas]
    Q = np.where(quantum[:, None] > 0, np.rint(R / np.where(quantum > 0, quantum, 1.0)[:, None]) * quantum[:, None],
                 R)
    if noise is not None:
        Q = Q + noise
    E = Q - x_eq[:n_meas, None]
    E = np.where(is_angle[:n_meas, None], wrap(E), E)
    Y[:] = E.T


def limit_numpy(U: np.ndarray, S: np.ndarray, peak: np.ndarray, stall: np.ndarray, no_load: np.ndarray,
                joint: np.ndarray, n_q: int, T: np.ndarray, acc: np.ndarray) -> None:
    """Apply the actuator limits to commands U (m, N); write generalized forces T (n_q, N) and update ``acc``.

    Limit: |u| <= peak; with a motor line (stall > 0) and the motor driving (u w > 0) also
    |u| <= max(0, stall (1 - |w| / no_load)) with w the joint's speed. ``acc`` rows, per input j (4 m rows):
    [4j] max |applied|, [4j+1] max |command|, [4j+2] sum applied^2, [4j+3] number of samples with |command| >= limit.
    """
    m = U.shape[0]
    T[:] = 0.0
    for j in range(m):
        w = S[n_q + joint[j]]
        limit = np.full(U.shape[1], peak[j])
        if stall[j] > 0:
            driving = U[j] * w > 0.0
            limit = np.where(driving, np.minimum(peak[j], np.maximum(0.0, stall[j] * (1.0 - np.abs(w) / no_load[j]))),
                             peak[j])
        u = np.minimum(np.maximum(U[j], -limit), limit)
        T[joint[j]] = u
        acc[4 * j] = np.maximum(acc[4 * j], np.abs(u))
        acc[4 * j + 1] = np.maximum(acc[4 * j + 1], np.abs(U[j]))
        acc[4 * j + 2] += u * u
        acc[4 * j + 3] += np.abs(U[j]) >= limit


def check_numpy(S: np.ndarray, M: np.ndarray, x_eq: np.ndarray, is_angle: np.ndarray, cart: bool, travel: float,
                angle_bound: float, speed_bound: np.ndarray, box: np.ndarray, t: float, hold_from: float,
                acc: np.ndarray, status: np.ndarray) -> int:
    """Peaks and bounds after a sample; returns the number of rollouts that failed at it. ``acc`` rows: [0:n_q]
    max |speed|, [n_q] max |x|, [n_q+1 : n_q+6] max |monitor|, [n_q+6] max |force|, [n_q+7] last time outside
    ``box``, [n_q+8 : n_q+8+n] max |error| from ``hold_from`` on. ``box`` (n,) bounds |error| per state (inf = no
    bound). ``status`` gets the failure code (see :mod:`upswing.verification.simulate`), 0 when none."""
    n = S.shape[0]
    n_q = n // 2
    E = S - x_eq[:, None]
    E = np.where(is_angle[:, None], wrap(E), E)
    V = S[n_q:]
    acc[:n_q] = np.maximum(acc[:n_q], np.abs(V))
    if cart:
        acc[n_q] = np.maximum(acc[n_q], np.abs(S[0]))
    acc[n_q + 1:n_q + 6] = np.maximum(acc[n_q + 1:n_q + 6], np.abs(M))
    acc[n_q + 6] = np.maximum(acc[n_q + 6], np.hypot(M[0], M[1]))
    inside = np.all(np.abs(E) <= box[:, None], axis=0)
    acc[n_q + 7] = np.where(inside, acc[n_q + 7], t)
    if t >= hold_from:
        acc[n_q + 8:n_q + 8 + n] = np.maximum(acc[n_q + 8:n_q + 8 + n], np.abs(E))
    status[:] = 0
    status[np.any(np.where(is_angle[:, None], np.abs(E), 0.0) > angle_bound, axis=0)] = 2
    status[np.any(np.abs(V) > speed_bound[:, None], axis=0)] = 4
    if cart:
        status[np.abs(S[0]) >= travel] = 3
    status[~np.all(np.isfinite(S), axis=0)] = 5
    return int(np.count_nonzero(status))


# ----------------------------------------------------------------------------------------------------------------
# compiled forms (one pass over the rollouts)

if HAVE_NUMBA:

    @numba.njit(error_model="numpy", cache=True)
    def _read(S, x_eq, is_angle, n_meas, quantum, noise, use_noise, Y):  # pragma: no cover - compiled
        for i in range(S.shape[1]):
            for j in range(n_meas):
                r = S[j, i]
                if quantum[j] > 0:
                    r = np.rint(r / quantum[j]) * quantum[j]
                if use_noise:
                    r += noise[j, i]
                e = r - x_eq[j]
                if is_angle[j] and (e > math.pi or e <= -math.pi):  # wrap only what lies outside (-pi, pi]
                    e = e + TWO_PI * np.floor((math.pi - e) / TWO_PI)
                Y[i, j] = e

    @numba.njit(error_model="numpy", cache=True)
    def _limit(U, S, peak, stall, no_load, joint, n_q, T, acc):  # pragma: no cover - compiled
        m = U.shape[0]
        for i in range(U.shape[1]):
            for r in range(n_q):
                T[r, i] = 0.0
            for j in range(m):
                c = U[j, i]
                limit = peak[j]
                if stall[j] > 0:
                    w = S[n_q + joint[j], i]
                    if c * w > 0.0:
                        limit = min(peak[j], max(0.0, stall[j] * (1.0 - abs(w) / no_load[j])))
                u = min(max(c, -limit), limit)
                T[joint[j], i] = u
                acc[4 * j, i] = max(acc[4 * j, i], abs(u))
                acc[4 * j + 1, i] = max(acc[4 * j + 1, i], abs(c))
                acc[4 * j + 2, i] += u * u
                if abs(c) >= limit:
                    acc[4 * j + 3, i] += 1.0

    # Failure flags, combined per rollout and turned into a status code at the end.
    _FELL, _RUNAWAY, _END_STOP, _NON_FINITE, _OUTSIDE = 1, 2, 4, 8, 16

    @numba.njit(error_model="numpy", cache=True)
    def _check(S, M, x_eq, is_angle, cart, travel, angle_bound, speed_bound, box, t, hold_from, acc,
               status):  # pragma: no cover - compiled
        # Row by row, rollouts innermost: each loop runs along contiguous memory and LLVM vectorizes it (a loop
        # over rollouts with the rows inside strides through a dozen arrays per rollout: measured ~20 % slower).
        n, N = S.shape
        n_q = n // 2
        hold = t >= hold_from
        flags = np.zeros(N, dtype=np.int8)
        for j in range(n):
            xe, bound, angle = x_eq[j], box[j], is_angle[j]
            for i in range(N):
                s = S[j, i]
                e = s - xe
                if angle and (e > math.pi or e <= -math.pi):  # wrap only what lies outside (-pi, pi]
                    e = e + TWO_PI * np.floor((math.pi - e) / TWO_PI)
                a = abs(e)
                f = flags[i]
                if angle and a > angle_bound:
                    f |= _FELL
                if not np.isfinite(s):
                    f |= _NON_FINITE
                if a > bound:
                    f |= _OUTSIDE
                flags[i] = f
                if hold:
                    acc[n_q + 8 + j, i] = max(acc[n_q + 8 + j, i], a)
        for j in range(n_q):
            limit = speed_bound[j]
            for i in range(N):
                v = abs(S[n_q + j, i])
                acc[j, i] = max(acc[j, i], v)
                if v > limit:
                    flags[i] |= _RUNAWAY
        if cart:
            for i in range(N):
                x = abs(S[0, i])
                acc[n_q, i] = max(acc[n_q, i], x)
                if x >= travel:
                    flags[i] |= _END_STOP
        for j in range(5):
            for i in range(N):
                acc[n_q + 1 + j, i] = max(acc[n_q + 1 + j, i], abs(M[j, i]))
        for i in range(N):  # |force|: forces of a bench rig are far from overflow, so no need for hypot's care
            acc[n_q + 6, i] = max(acc[n_q + 6, i], math.sqrt(M[0, i] * M[0, i] + M[1, i] * M[1, i]))
        failed = 0
        for i in range(N):
            f = flags[i]
            if f & _OUTSIDE:
                acc[n_q + 7, i] = t
            code = 0  # precedence as in check_numpy: non-finite > end stop > runaway > fell
            if f & _FELL:
                code = 2
            if f & _RUNAWAY:
                code = 4
            if f & _END_STOP:
                code = 3
            if f & _NON_FINITE:
                code = 5
            status[i] = code
            if code != 0:
                failed += 1
        return failed


def read(S, x_eq, is_angle, n_meas, quantum, noise, Y, compiled: bool) -> None:
    """Sensor reading into Y (N, p); see :func:`read_numpy`."""
    if compiled:
        use = noise is not None
        _read(S, x_eq, is_angle, n_meas, quantum, noise if use else S, use, Y)
    else:
        read_numpy(S, x_eq, is_angle, n_meas, quantum, noise, Y)


def limit(U, S, peak, stall, no_load, joint, n_q, T, acc, compiled: bool) -> None:
    """Actuator limits; see :func:`limit_numpy`."""
    if compiled:
        _limit(U, S, peak, stall, no_load, joint, n_q, T, acc)
    else:
        limit_numpy(U, S, peak, stall, no_load, joint, n_q, T, acc)


def check(S, M, x_eq, is_angle, cart, travel, angle_bound, speed_bound, box, t, hold_from, acc, status,
          compiled: bool) -> int:
    """Peaks, bounds and settling; returns the number of failed rollouts; see :func:`check_numpy`."""
    if compiled:
        return _check(S, M, x_eq, is_angle, cart, travel, angle_bound, speed_bound, box, t, hold_from, acc, status)
    return check_numpy(S, M, x_eq, is_angle, cart, travel, angle_bound, speed_bound, box, t, hold_from, acc,
                       status)
