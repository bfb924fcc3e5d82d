"""Closed-form numpy evaluators of the equations-of-motion terms over a batch of states.

The casadi functions of :mod:`upswing.model.dynamics` are the reference; these closed forms are the fast path
that batch controllers (energy-based swing-up laws evaluated over thousands of rollouts at once) use. They are
written out from the geometry of ``docs/conventions.md``, with

    a = m1 lc1 + m2 l1,    b = m2 lc2,    h = m2 l1 lc2 sin(theta2),

and every array is laid out as a batch: states ``X`` of shape (N, n_states), results (N, ...). The test suite
compares each function with its casadi counterpart on random states.

Terms (fixed base, q = [theta1, theta2]):

    M11 = I1 + I2 + m1 lc1^2 + m2 (l1^2 + lc2^2 + 2 l1 lc2 cos theta2)
    M12 = I2 + m2 (lc2^2 + l1 lc2 cos theta2),   M22 = I2 + m2 lc2^2
    c   = [-h (2 theta1_dot theta2_dot + theta2_dot^2), h theta1_dot^2]
    g   = -gravity [a sin theta1 + b sin(theta1 + theta2), b sin(theta1 + theta2)]

On a cart (q = [x, theta1, theta2]) the angle rows keep these terms and the cart adds

    Mxx = mc + m1 + m2,  Mx1 = -a cos theta1 - b cos phi2,  Mx2 = -b cos phi2     (phi2 = theta1 + theta2)
    c_x = a sin(theta1) theta1_dot^2 + b sin(phi2) phi2_dot^2,   g_x = 0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.model.rig import PARAMETER_NAMES


@dataclass(frozen=True)
class _Params:
    m1: float
    l1: float
    lc1: float
    I1: float
    b1: float
    f1: float
    m2: float
    lc2: float
    I2: float
    b2: float
    f2: float
    mc: float
    bc: float
    fc: float
    g: float


def _unpack(p: np.ndarray) -> _Params:
    v = dict(zip(PARAMETER_NAMES, (float(x) for x in np.asarray(p, dtype=float).ravel()), strict=True))
    return _Params(m1=v["link1.mass"], l1=v["link1.length"], lc1=v["link1.com"], I1=v["link1.inertia"],
                   b1=v["link1.damping"], f1=v["link1.coulomb"], m2=v["link2.mass"], lc2=v["link2.com"],
                   I2=v["link2.inertia"], b2=v["link2.damping"], f2=v["link2.coulomb"], mc=v["cart.mass"],
                   bc=v["cart.damping"], fc=v["cart.coulomb"], g=v["gravity"])


def _split(X: np.ndarray, base: str) -> tuple[np.ndarray, ...]:
    """(x_cart, theta1, theta2, x_dot, theta1_dot, theta2_dot) columns; the cart ones are zeros on a fixed base."""
    X = np.atleast_2d(np.asarray(X, dtype=float))
    if base == "cart":
        return X[:, 0], X[:, 1], X[:, 2], X[:, 3], X[:, 4], X[:, 5]
    zero = np.zeros(X.shape[0])
    return zero, X[:, 0], X[:, 1], zero, X[:, 2], X[:, 3]


def mass_matrix_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """Mass matrix M(q) for every state of a batch.

    Parameters
    ----------
    X : ndarray, shape (N, n_states)
        States (only the coordinates are used).
    p : ndarray, shape (n_parameters,)
        Parameter vector in :data:`~upswing.model.rig.PARAMETER_NAMES` order.
    base : {"fixed", "cart"}

    Returns
    -------
    ndarray, shape (N, n_q, n_q)
        [kg, kg m, kg m^2].
    """
    P = _unpack(p)
    _, th1, th2, _, _, _ = _split(X, base)
    c2 = np.cos(th2)
    m11 = P.I1 + P.I2 + P.m1 * P.lc1**2 + P.m2 * (P.l1**2 + P.lc2**2 + 2.0 * P.l1 * P.lc2 * c2)
    m12 = P.I2 + P.m2 * (P.lc2**2 + P.l1 * P.lc2 * c2)
    m22 = np.full_like(th1, P.I2 + P.m2 * P.lc2**2)
    if base != "cart":
        return np.stack([np.stack([m11, m12], -1), np.stack([m12, m22], -1)], -2)
    a, b = P.m1 * P.lc1 + P.m2 * P.l1, P.m2 * P.lc2
    c12 = np.cos(th1 + th2)
    mxx = np.full_like(th1, P.mc + P.m1 + P.m2)
    mx1 = -a * np.cos(th1) - b * c12
    mx2 = -b * c12
    return np.stack([np.stack([mxx, mx1, mx2], -1), np.stack([mx1, m11, m12], -1),
                     np.stack([mx2, m12, m22], -1)], -2)


def bias_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """Coriolis, centrifugal and gravity terms c(q, q_dot) + g(q) for every state of a batch.

    Returns
    -------
    ndarray, shape (N, n_q)
        [N or N m], in generalized-coordinate order.
    """
    P = _unpack(p)
    _, th1, th2, _, w1, w2 = _split(X, base)
    a, b = P.m1 * P.lc1 + P.m2 * P.l1, P.m2 * P.lc2
    s12 = np.sin(th1 + th2)
    h = P.m2 * P.l1 * P.lc2 * np.sin(th2)
    row1 = -h * (2.0 * w1 * w2 + w2**2) - P.g * (a * np.sin(th1) + b * s12)
    row2 = h * w1**2 - P.g * b * s12
    if base != "cart":
        return np.stack([row1, row2], -1)
    rowx = a * np.sin(th1) * w1**2 + b * s12 * (w1 + w2) ** 2
    return np.stack([rowx, row1, row2], -1)


def friction_batch(X: np.ndarray, p: np.ndarray, base: str, *, coulomb_smoothing: float = 0.0) -> np.ndarray:
    """Generalized friction forces -b v - f sgn(v) at every joint (sgn(0) = 0, or tanh(v / v_s) when smoothed).

    Returns
    -------
    ndarray, shape (N, n_q)
        [N or N m], acting on the rig.
    """
    P = _unpack(p)
    _, _, _, v, w1, w2 = _split(X, base)

    def sgn(s: np.ndarray) -> np.ndarray:
        return np.tanh(s / coulomb_smoothing) if coulomb_smoothing > 0 else np.sign(s)

    rows = [-P.b1 * w1 - P.f1 * sgn(w1), -P.b2 * w2 - P.f2 * sgn(w2)]
    if base == "cart":
        rows.insert(0, -P.bc * v - P.fc * sgn(v))
    return np.stack(rows, -1)


def energy_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """Kinetic, potential and total energy of the whole rig (cart included) for every state.

    Potential energy is zero at the shoulder pivot's height, as in :mod:`upswing.model.dynamics`.

    Returns
    -------
    ndarray, shape (N, 3)
        [T, V, T + V] in J.
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    n_q = X.shape[1] // 2
    qd = X[:, n_q:]
    M = mass_matrix_batch(X, p, base)
    kinetic = 0.5 * np.einsum("ni,nij,nj->n", qd, M, qd)
    potential = link_potential_batch(X, p, base)
    return np.stack([kinetic, potential, kinetic + potential], -1)


def link_potential_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """Potential energy of the links, g (a cos theta1 + b cos(theta1 + theta2)) [J], shape (N,)."""
    P = _unpack(p)
    _, th1, th2, _, _, _ = _split(X, base)
    a, b = P.m1 * P.lc1 + P.m2 * P.l1, P.m2 * P.lc2
    return P.g * (a * np.cos(th1) + b * np.cos(th1 + th2))


def pendulum_energy_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """Energy of the two links in the frame moving with the pivot [J], shape (N,).

    E_p = 1/2 w' M_aa w + V, with w = [theta1_dot, theta2_dot] and M_aa the angle block of the mass matrix: the
    energy the links would have if the pivot stood still. On a fixed base it is the total energy. With the pivot
    accelerating at a (m/s^2, positive to the right) the links feel the inertial force -m a, so

        dE_p/dt = a * H(q, q_dot) - (joint friction power),
        H = (m1 lc1 + m2 l1) cos(theta1) theta1_dot + m2 lc2 cos(phi2) phi2_dot,

    which is what the cart's energy-pumping law uses (:func:`pivot_coupling_batch` returns H).
    """
    X = np.atleast_2d(np.asarray(X, dtype=float))
    n_q = X.shape[1] // 2
    M = mass_matrix_batch(X, p, base)
    w = X[:, n_q:]
    if base == "cart":
        M, w = M[:, 1:, 1:], w[:, 1:]
    return 0.5 * np.einsum("ni,nij,nj->n", w, M, w) + link_potential_batch(X, p, base)


def pivot_coupling_batch(X: np.ndarray, p: np.ndarray, base: str) -> np.ndarray:
    """H(q, q_dot) = (m1 lc1 + m2 l1) cos(theta1) theta1_dot + m2 lc2 cos(phi2) phi2_dot [kg m/s], shape (N,).

    Minus the links' horizontal momentum relative to the pivot; dE_p/dt = a H for a pivot acceleration a.
    """
    P = _unpack(p)
    _, th1, th2, _, w1, w2 = _split(X, base)
    a, b = P.m1 * P.lc1 + P.m2 * P.l1, P.m2 * P.lc2
    return a * np.cos(th1) * w1 + b * np.cos(th1 + th2) * (w1 + w2)
