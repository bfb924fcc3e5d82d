"""Closed-form equations of motion and the RK4 step, vectorized across rollouts.

The batch engine (:mod:`upswing.verification.simulate`) spends nearly all its time here. The model is the one
:mod:`upswing.model.dynamics` derives symbolically (``docs/conventions.md``), written out in closed form so that it
runs on arrays that hold one entry per rollout ("structure of arrays": row j of a state array is state j of every
rollout). With generalized coordinates q = [x, theta1, theta2] (the x entries vanish on a fixed base), s_i = sin,
c_i = cos, s12 = sin(theta1 + theta2), w_i the joint rates, and the per-rollout constants

    A0 = I1 + m1 lc1^2 + I2 + m2 (l1^2 + lc2^2),  B = m2 l1 lc2,  D = I2 + m2 lc2^2,
    E1 = m1 lc1 + m2 l1,  E2 = m2 lc2,  MT = mc + m1 + m2,

the mass matrix is

    M = [[MT, -(E1 c1 + E2 c12), -E2 c12], [., A0 + 2 B c2, D + B c2], [., ., D]]   (symmetric),

and M q_ddot = tau + Q_f - c - g with Coriolis/centrifugal terms c = [E1 s1 w1^2 + E2 s12 (w1 + w2)^2,
-B s2 (2 w1 w2 + w2^2), B s2 w1^2] and gravity g = -gravity [0, E1 s1 + E2 s12, E2 s12]. M is solved by cofactors.
Friction Q_f = -b v - f sgn(v) with sgn(0) = 0 (no stiction model; near zero speed a fixed step makes the speed
chatter by about f h / I, far below the encoder resolution on the demo rigs).

Two backends run the same element functions:

* ``numba`` (default when numba imports): loops over rollouts compiled by LLVM with ``error_model="numpy"`` so
  that divisions carry no zero checks and the loops vectorize to SIMD; sin and cos come from :func:`sincos`, a
  Cody-Waite reduction with the fdlibm kernel polynomials (Sun Microsystems, 1993), because numba has no vector
  math library here and scalar libm calls would stop vectorization. No C compiler is needed (numba brings LLVM).
* ``numpy``: the same element functions on whole arrays with ``np.sin``/``np.cos``; the fallback when numba is
  missing, and the reference the tests compare the numba path with.

Why this technique: measured on a 2-core machine (``benchmarks/bench_batch_simulation.py``), numpy vectorized over
rollouts gives ~9e6 right-hand-side evaluations per second and core, numba with scalar libm ~3e7, numba with the
vectorizable sincos ~8e7 for one evaluation loop and ~5e7-7e7 inside the full RK4 step.
"""

from __future__ import annotations

import os

import numpy as np

try:  # numba is the fast path; the numpy backend below needs nothing beyond numpy
    import numba

    HAVE_NUMBA = os.environ.get("UPSWING_BACKEND", "") != "numpy"
except ImportError:  # pragma: no cover - exercised only where numba is not installed
    numba = None
    HAVE_NUMBA = False

# Rows of the per-rollout coefficient array (see the module docstring); cart rows are zero on a fixed base.
COEFFICIENTS = ("A0", "B", "D", "E1", "E2", "gravity", "b1", "f1", "b2", "f2", "m_links", "l1", "l2",
                "MT", "bc", "fc")
# Rows of the monitor array written at the start of every controller sample.
MONITORS = ("force_x", "force_y", "moment", "tip_speed", "kinetic_energy")


def plant_coefficients(P: np.ndarray) -> np.ndarray:
    """Per-rollout constants of the closed-form model.

    Parameters
    ----------
    P : ndarray, shape (N, 16)
        Physical parameters in :data:`upswing.model.rig.PARAMETER_NAMES` order, one row per rollout.

    Returns
    -------
    ndarray, shape (len(COEFFICIENTS), N)
        Rows as :data:`COEFFICIENTS` [kg m^2, kg m, kg, m/s^2, N m s/rad, N m, m, N s/m, N].
    """
    P = np.asarray(P, dtype=float)
    (m1, l1, lc1, I1, b1, f1, m2, l2, lc2, I2, b2, f2, mc, bc, fc, g) = P.T
    return np.ascontiguousarray(np.vstack([
        I1 + m1 * lc1**2 + I2 + m2 * (l1**2 + lc2**2), m2 * l1 * lc2, I2 + m2 * lc2**2,
        m1 * lc1 + m2 * l1, m2 * lc2, g, b1, f1, b2, f2, m1 + m2, l1, l2, mc + m1 + m2, bc, fc]))


# ----------------------------------------------------------------------------------------------------------------
# sin and cos that vectorize: argument reduction by pi/2 in two parts (Cody & Waite, 1980) and the minimax kernel
# polynomials of fdlibm's k_sin.c / k_cos.c on [-pi/4, pi/4]. Accurate to about one ulp for |x| < 1e5 rad,
# far beyond any angle a bounded rollout reaches.

_INV_PIO2 = 6.36619772367581382433e-01
_PIO2_1 = 1.57079632673412561417e+00   # first 33 bits of pi/2
_PIO2_1T = 6.07710050650619224932e-11  # pi/2 - _PIO2_1
_S = (-1.66666666666666324348e-01, 8.33333333332248946124e-03, -1.98412698298579493134e-04,
      2.75573137070700676789e-06, -2.50507602534068634195e-08, 1.58969099521155010221e-10)
_C = (4.16666666666666019037e-02, -1.38888888888741095749e-03, 2.48015872894767294178e-05,
      -2.75573143513906633035e-07, 2.08757232129817482790e-09, -1.13596475577881948265e-11)
S1, S2, S3, S4, S5, S6 = _S
C1, C2, C3, C4, C5, C6 = _C


def sincos(x: float) -> tuple[float, float]:
    """(sin x, cos x) for one float, by quadrant reduction and fdlibm's kernel polynomials (compiled by numba)."""
    k = np.rint(x * _INV_PIO2)
    r = (x - k * _PIO2_1) - k * _PIO2_1T
    z = r * r
    s = r + r * z * (S1 + z * (S2 + z * (S3 + z * (S4 + z * (S5 + z * S6)))))
    c = 1.0 - 0.5 * z + z * z * (C1 + z * (C2 + z * (C3 + z * (C4 + z * (C5 + z * C6)))))
    n = np.int64(k) & 3
    sin_x = c if (n & 1) else s
    cos_x = s if (n & 1) else c
    sin_x = -sin_x if (n & 2) else sin_x
    cos_x = -cos_x if ((n + 1) & 2) else cos_x
    return sin_x, cos_x


# ----------------------------------------------------------------------------------------------------------------
# Element functions: plain arithmetic, valid for floats (inside numba loops) and for numpy arrays alike.


def accelerations(s1, c1, s2, c2, v, w1, w2, F, tau1, tau2,
                  A0, B, D, E1, E2, g, b1, f1, b2, f2, MT, bc, fc, cart):
    """Generalized accelerations (x_ddot, theta1_ddot, theta2_ddot) from M q_ddot = tau + Q_f - c - g.

    ``cart`` is a bool (a compile-time constant in each kernel): without a cart the x row is dropped and
    x_ddot = 0. Units: m/s^2 and rad/s^2.
    """
    s12 = s1 * c2 + c1 * s2
    c12 = c1 * c2 - s1 * s2
    a11 = A0 + 2.0 * B * c2
    a12 = D + B * c2
    h = B * s2
    r1 = tau1 - b1 * w1 - f1 * np.sign(w1) + h * (2.0 * w1 * w2 + w2 * w2) + g * (E1 * s1 + E2 * s12)
    r2 = tau2 - b2 * w2 - f2 * np.sign(w2) - h * w1 * w1 + g * E2 * s12
    if not cart:
        det = a11 * D - a12 * a12
        return 0.0 * v, (D * r1 - a12 * r2) / det, (a11 * r2 - a12 * r1) / det
    w12 = w1 + w2
    m01 = -(E1 * c1 + E2 * c12)
    m02 = -E2 * c12
    r0 = F - bc * v - fc * np.sign(v) - (E1 * s1 * w1 * w1 + E2 * s12 * w12 * w12)
    k00 = a11 * D - a12 * a12
    k01 = a12 * m02 - m01 * D
    k02 = m01 * a12 - a11 * m02
    k11 = MT * D - m02 * m02
    k12 = m01 * m02 - MT * a12
    k22 = MT * a11 - m01 * m01
    det = MT * k00 + m01 * k01 + m02 * k02
    return ((k00 * r0 + k01 * r1 + k02 * r2) / det, (k01 * r0 + k11 * r1 + k12 * r2) / det,
            (k02 * r0 + k12 * r1 + k22 * r2) / det)


def monitors(s1, c1, s2, c2, v, w1, w2, ax, a1, a2, tau1,
             A0, B, D, E1, E2, g, b1, f1, m_links, l1, l2, MT):
    """Base load, tip speed and kinetic energy of one state (``MT`` = m_links on a fixed base, where mc = 0).

    Returns force_x, force_y [N] that the rig exerts on its base (y up; at rest force_y = -total mass * g), the
    moment [N m] the shoulder passes to the base (minus the net shoulder torque), the tip speed [m/s] and the
    kinetic energy [J].
    """
    s12 = s1 * c2 + c1 * s2
    c12 = c1 * c2 - s1 * s2
    w12 = w1 + w2
    a12_ = a1 + a2
    mass_ax = MT * ax - E1 * (c1 * a1 - s1 * w1 * w1) - E2 * (c12 * a12_ - s12 * w12 * w12)
    mass_ay = -E1 * (s1 * a1 + c1 * w1 * w1) - E2 * (s12 * a12_ + c12 * w12 * w12)
    force_x = -mass_ax
    force_y = -MT * g - mass_ay
    moment = -(tau1 - b1 * w1 - f1 * np.sign(w1))
    tip_vx = v - l1 * c1 * w1 - l2 * c12 * w12
    tip_vy = -l1 * s1 * w1 - l2 * s12 * w12
    tip_speed = np.sqrt(tip_vx * tip_vx + tip_vy * tip_vy)
    m01 = -(E1 * c1 + E2 * c12)
    m02 = -E2 * c12
    kinetic = 0.5 * (MT * v * v + 2.0 * v * (m01 * w1 + m02 * w2)
                     + (A0 + 2.0 * B * c2) * w1 * w1 + 2.0 * (D + B * c2) * w1 * w2 + D * w2 * w2)
    return force_x, force_y, moment, tip_speed, kinetic


# ----------------------------------------------------------------------------------------------------------------
# numpy backend


def _np_eval(X: np.ndarray, T: np.ndarray, C: np.ndarray, cart: bool) -> tuple[np.ndarray, ...]:
    """Right-hand side for every rollout at once; X rows are the state, T rows the generalized forces."""
    if cart:
        v, th1, th2, w1, w2 = X[3], X[1], X[2], X[4], X[5]
        F, tau1, tau2 = T[0], T[1], T[2]
    else:
        th1, th2, w1, w2 = X[0], X[1], X[2], X[3]
        v = F = 0.0 * th1
        tau1, tau2 = T[0], T[1]
    s1, c1, s2, c2 = np.sin(th1), np.cos(th1), np.sin(th2), np.cos(th2)
    A0, B, D, E1, E2, g, b1, f1, b2, f2, m_links, l1, l2, MT, bc, fc = C
    ax, a1, a2 = accelerations(s1, c1, s2, c2, v, w1, w2, F, tau1, tau2,
                               A0, B, D, E1, E2, g, b1, f1, b2, f2, MT, bc, fc, cart)
    return (s1, c1, s2, c2, v, w1, w2, ax, a1, a2, tau1)


def _np_derivative(X: np.ndarray, T: np.ndarray, C: np.ndarray, cart: bool) -> np.ndarray:
    _, _, _, _, v, w1, w2, ax, a1, a2, _ = _np_eval(X, T, C, cart)
    if cart:
        return np.stack([v, w1, w2, ax, a1, a2])
    return np.stack([w1, w2, a1, a2])


def advance_numpy(S: np.ndarray, T: np.ndarray, C: np.ndarray, h: float, nsub: int, M: np.ndarray) -> None:
    """RK4 over ``nsub`` steps of ``h`` seconds with the generalized forces ``T`` held; updates ``S`` in place.

    Parameters
    ----------
    S : ndarray, shape (n_states, N)
        States, one column per rollout (rows in the rig's state order).
    T : ndarray, shape (n_q, N)
        Generalized forces from the inputs [N, N m], held over the whole call (zero-order hold).
    C : ndarray, shape (len(COEFFICIENTS), N)
        From :func:`plant_coefficients`.
    h : float
        Step [s].
    nsub : int
        Number of steps.
    M : ndarray, shape (len(MONITORS), N)
        Receives the monitors at the initial state (after the new input is applied).
    """
    cart = S.shape[0] == 6
    ev = _np_eval(S, T, C, cart)
    A0, B, D, E1, E2, g, b1, f1, b2, f2, m_links, l1, l2, MT, bc, fc = C
    M[:] = monitors(*ev, A0, B, D, E1, E2, g, b1, f1, m_links, l1, l2, MT)
    for _ in range(nsub):
        k1 = _np_derivative(S, T, C, cart)
        k2 = _np_derivative(S + 0.5 * h * k1, T, C, cart)
        k3 = _np_derivative(S + 0.5 * h * k2, T, C, cart)
        k4 = _np_derivative(S + h * k3, T, C, cart)
        S += h / 6.0 * (k1 + 2.0 * (k2 + k3) + k4)


# ----------------------------------------------------------------------------------------------------------------
# numba backend: the same element functions in loops over rollouts, one loop per RK4 stage so that each loop body is
# straight-line code LLVM can vectorize.

if HAVE_NUMBA:
    _jit = numba.njit(inline="always", error_model="numpy")
    _kernel = numba.njit(error_model="numpy", cache=True)
    _sincos = _jit(sincos)
    _acc = _jit(accelerations)
    _mon = _jit(monitors)

    # Each RK4 stage is its own loop that writes only the accelerations: when a loop also stores copies of the
    # velocities, or writes several arrays, LLVM does not vectorize it (measured: 1.5e7-3.5e7 against 1.4e8
    # evaluations/s). RK4 for q_ddot = a(q, v) is written in its second-order form, algebraically the classical
    # scheme: with stage accelerations A1..A4 the stage states are
    #   (q0, v0), (q0 + h/2 v0, v0 + h/2 A1), (q0 + h/2 v0 + h^2/4 A1, v0 + h/2 A2), (q0 + h v0 + h^2/2 A2, v0 + h A3)
    # and the update is q += h v0 + h^2/6 (A1 + A2 + A3), v += h/6 (A1 + 2 A2 + 2 A3 + A4).

    @_jit
    def _eval_fixed(S, a, b, Aq, c, Av, T, C, i):  # pragma: no cover - compiled
        th1 = S[0, i] + a * S[2, i] + b * Aq[0, i]
        th2 = S[1, i] + a * S[3, i] + b * Aq[1, i]
        w1 = S[2, i] + c * Av[0, i]
        w2 = S[3, i] + c * Av[1, i]
        s1, c1 = _sincos(th1)
        s2, c2 = _sincos(th2)
        _, a1, a2 = _acc(s1, c1, s2, c2, 0.0, w1, w2, 0.0, T[0, i], T[1, i], C[0, i], C[1, i], C[2, i], C[3, i],
                         C[4, i], C[5, i], C[6, i], C[7, i], C[8, i], C[9, i], C[13, i], C[14, i], C[15, i], False)
        return (a1, a2, 0.0), (s1, c1, s2, c2, 0.0, w1, w2, 0.0, a1, a2, T[0, i])

    @_jit
    def _eval_cart(S, a, b, Aq, c, Av, T, C, i):  # pragma: no cover - compiled
        th1 = S[1, i] + a * S[4, i] + b * Aq[1, i]
        th2 = S[2, i] + a * S[5, i] + b * Aq[2, i]
        v = S[3, i] + c * Av[0, i]
        w1 = S[4, i] + c * Av[1, i]
        w2 = S[5, i] + c * Av[2, i]
        s1, c1 = _sincos(th1)
        s2, c2 = _sincos(th2)
        ax, a1, a2 = _acc(s1, c1, s2, c2, v, w1, w2, T[0, i], T[1, i], T[2, i], C[0, i], C[1, i], C[2, i],
                          C[3, i], C[4, i], C[5, i], C[6, i], C[7, i], C[8, i], C[9, i], C[13, i], C[14, i],
                          C[15, i], True)
        return (ax, a1, a2), (s1, c1, s2, c2, v, w1, w2, ax, a1, a2, T[1, i])

    @_kernel
    def _stage_fixed(S, a, b, Aq, c, Av, T, C, An):  # pragma: no cover - compiled
        for i in range(S.shape[1]):
            k, _ = _eval_fixed(S, a, b, Aq, c, Av, T, C, i)
            An[0, i] = k[0]
            An[1, i] = k[1]

    @_kernel
    def _stage_cart(S, a, b, Aq, c, Av, T, C, An):  # pragma: no cover - compiled
        for i in range(S.shape[1]):
            k, _ = _eval_cart(S, a, b, Aq, c, Av, T, C, i)
            An[0, i] = k[0]
            An[1, i] = k[1]
            An[2, i] = k[2]

    @_jit
    def _store_monitors(e, C, M, i):  # pragma: no cover - compiled
        fx, fy, mo, tip, ke = _mon(e[0], e[1], e[2], e[3], e[4], e[5], e[6], e[7], e[8], e[9], e[10],
                                   C[0, i], C[1, i], C[2, i], C[3, i], C[4, i], C[5, i], C[6, i], C[7, i],
                                   C[10, i], C[11, i], C[12, i], C[13, i])
        M[0, i] = fx
        M[1, i] = fy
        M[2, i] = mo
        M[3, i] = tip
        M[4, i] = ke

    @_kernel
    def _monitors_fixed(S, T, C, M, Z):  # pragma: no cover - compiled
        for i in range(S.shape[1]):
            _, e = _eval_fixed(S, 0.0, 0.0, Z, 0.0, Z, T, C, i)
            _store_monitors(e, C, M, i)

    @_kernel
    def _monitors_cart(S, T, C, M, Z):  # pragma: no cover - compiled
        for i in range(S.shape[1]):
            _, e = _eval_cart(S, 0.0, 0.0, Z, 0.0, Z, T, C, i)
            _store_monitors(e, C, M, i)

    @_kernel
    def _update(S, A1, A2, A3, A4, h):  # pragma: no cover - compiled
        nq = A1.shape[0]
        h2 = h * h / 6.0
        h6 = h / 6.0
        for j in range(nq):
            for i in range(S.shape[1]):
                S[j, i] += h * S[nq + j, i] + h2 * (A1[j, i] + A2[j, i] + A3[j, i])
            for i in range(S.shape[1]):
                S[nq + j, i] += h6 * (A1[j, i] + 2.0 * (A2[j, i] + A3[j, i]) + A4[j, i])

    @_kernel
    def _rk4_fixed(S, T, C, h, nsub, M, A1, A2, A3, A4):  # pragma: no cover - compiled
        A4[:] = 0.0  # read with weight zero in the first stage: keep it finite
        _monitors_fixed(S, T, C, M, A4)
        for _ in range(nsub):
            _stage_fixed(S, 0.0, 0.0, A4, 0.0, A4, T, C, A1)
            _stage_fixed(S, 0.5 * h, 0.0, A1, 0.5 * h, A1, T, C, A2)
            _stage_fixed(S, 0.5 * h, 0.25 * h * h, A1, 0.5 * h, A2, T, C, A3)
            _stage_fixed(S, h, 0.5 * h * h, A2, h, A3, T, C, A4)
            _update(S, A1, A2, A3, A4, h)

    @_kernel
    def _rk4_cart(S, T, C, h, nsub, M, A1, A2, A3, A4):  # pragma: no cover - compiled
        A4[:] = 0.0
        _monitors_cart(S, T, C, M, A4)
        for _ in range(nsub):
            _stage_cart(S, 0.0, 0.0, A4, 0.0, A4, T, C, A1)
            _stage_cart(S, 0.5 * h, 0.0, A1, 0.5 * h, A1, T, C, A2)
            _stage_cart(S, 0.5 * h, 0.25 * h * h, A1, 0.5 * h, A2, T, C, A3)
            _stage_cart(S, h, 0.5 * h * h, A2, h, A3, T, C, A4)
            _update(S, A1, A2, A3, A4, h)


def advance_numba(S: np.ndarray, T: np.ndarray, C: np.ndarray, h: float, nsub: int, M: np.ndarray,
                  work: np.ndarray | None = None) -> None:
    """As :func:`advance_numpy`, compiled (requires numba). ``work``, shape (4, n_q, N), holds the stage
    accelerations; a caller that steps the same batch many times passes it to save four allocations a call."""
    if work is None:
        work = np.empty((4, *T.shape))
    kernel = _rk4_cart if S.shape[0] == 6 else _rk4_fixed
    kernel(S, T, C, float(h), int(nsub), M, work[0], work[1], work[2], work[3])


def advance(S: np.ndarray, T: np.ndarray, C: np.ndarray, h: float, nsub: int, M: np.ndarray,
            backend: str = "auto", work: np.ndarray | None = None) -> None:
    """RK4 step of the batch with held inputs; ``backend`` is ``"numba"``, ``"numpy"`` or ``"auto"``; ``work``
    as in :func:`advance_numba` (unused by numpy)."""
    if backend == "numba" or (backend == "auto" and HAVE_NUMBA):
        advance_numba(S, T, C, h, nsub, M, work)
    else:
        advance_numpy(S, T, C, h, nsub, M)


def default_backend() -> str:
    """``"numba"`` when numba is importable (and ``UPSWING_BACKEND`` is not ``numpy``), else ``"numpy"``."""
    return "numba" if HAVE_NUMBA else "numpy"
