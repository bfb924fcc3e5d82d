"""LQR at the upright: closed forms, reference solvers, convergence of the discrete design, closed-loop stability."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
from balance_helpers import DEMO_RIGS, design, rig

from upswing.model.dynamics import model_for
from upswing.model.rig import PARAMETER_NAMES
from upswing.synthesis.balance import augment_delay, continuous_lqr, discrete_lqr, zero_order_hold


@pytest.mark.parametrize(("q", "r"), [(1.0, 1.0), (40.0, 0.5), (1e-2, 3.0)])
def test_double_integrator_closed_form(q, r):
    # x_dot = [[0, 1], [0, 0]] x + [0, 1]' u, Q = diag(q, 0), R = r: K = [sqrt(q/r), sqrt(2 sqrt(q/r))]
    # (closed form; Anderson & Moore, Optimal Control: Linear Quadratic Methods, 1990; from memory).
    A = np.array([[0.0, 1.0], [0.0, 0.0]])
    B = np.array([[0.0], [1.0]])
    sol = continuous_lqr(A, B, np.diag([q, 0.0]), np.array([[r]]))
    expected = np.array([[math.sqrt(q / r), math.sqrt(2.0 * math.sqrt(q / r))]])
    # A 2x2 well-conditioned Riccati equation is solved to ~1e-13; 1e-9 leaves room and still catches any error.
    np.testing.assert_allclose(sol.K, expected, rtol=1e-9)
    # Closed-loop poles of s^2 + k2 s + k1: a damping ratio of 1/sqrt(2) (same closed form).
    wn = (q / r) ** 0.25
    np.testing.assert_allclose(np.sort_complex(sol.poles),
                               np.sort_complex(wn * np.array([-1 - 1j, -1 + 1j]) / math.sqrt(2)), rtol=1e-9)


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_riccati_residual_below_1e9(name):
    # The bar: relative residual below 1e-9 on the demo rigs, recomputed here independently of the design.
    d = design(name)
    P, Pd = d.P, d.P_discrete
    cont = d.A.T @ P + P @ d.A - P @ d.B @ np.linalg.solve(d.R, d.B.T @ P) + d.Q
    disc = (d.Ad.T @ Pd @ d.Ad - Pd - d.Ad.T @ Pd @ d.Bd @ np.linalg.solve(d.R + d.Bd.T @ Pd @ d.Bd,
                                                                             d.Bd.T @ Pd @ d.Ad) + d.Q)
    assert np.linalg.norm(cont) / np.linalg.norm(d.Q) < 1e-9
    assert np.linalg.norm(disc) / np.linalg.norm(d.Q) < 1e-9
    assert d.riccati_residual < 1e-9 and d.riccati_residual_discrete < 1e-9


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_python_control_and_scipy_agree(name):
    # Reference: scipy's Schur-method Riccati solvers (Laub, 1979) against python-control's lqr / dlqr (which the
    # design uses, with one Newton polish). Both are backward stable; the demo rigs' Riccati solutions have
    # condition numbers up to ~1e6, so gains agree to ~1e-10; 1e-8 relative is the bar.
    d = design(name)
    P = scipy.linalg.solve_continuous_are(d.A, d.B, d.Q, d.R)
    K = np.linalg.solve(d.R, d.B.T @ P)
    Pd = scipy.linalg.solve_discrete_are(d.Ad, d.Bd, d.Q, d.R)
    Kd = np.linalg.solve(d.R + d.Bd.T @ Pd @ d.Bd, d.Bd.T @ Pd @ d.Ad)
    np.testing.assert_allclose(d.K, K, rtol=1e-8, atol=1e-8 * np.abs(K).max())
    np.testing.assert_allclose(d.K_discrete, Kd, rtol=1e-8, atol=1e-8 * np.abs(Kd).max())
    Kc, _, _ = control.lqr(d.A, d.B, d.Q, d.R)
    np.testing.assert_allclose(d.K, Kc, rtol=1e-8, atol=1e-8 * np.abs(K).max())


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_discrete_gain_converges_to_continuous(name):
    # The discrete LQR on the zero-order-hold model differs from the continuous one by O(T) (Franklin, Powell &
    # Workman, Digital Control of Dynamic Systems, 1998, ch. 9; from memory): the error must shrink ~10x per decade
    # of rate. A ratio in [7, 13] allows the O(T^2) term at 1 kHz.
    errors = []
    for rate in (1e3, 1e4, 1e5):
        d = design(name, 0, rate)
        errors.append(np.linalg.norm(d.K_discrete - d.K) / np.linalg.norm(d.K))
    assert errors[2] < 5e-3
    for a, b in zip(errors, errors[1:], strict=False):
        assert 7.0 < a / b < 13.0


@pytest.mark.parametrize("name", DEMO_RIGS)
@pytest.mark.parametrize("delay", [0, 1, 2])
def test_closed_loop_hurwitz_and_schur(name, delay):
    # Stability recomputed with numpy's eigenvalues (LAPACK), not taken from the design's own pole lists.
    d = design(name, delay)
    assert np.max(np.linalg.eigvals(d.A - d.B @ d.K).real) < 0.0
    assert np.max(np.abs(np.linalg.eigvals(d.Ad - d.Bd @ d.K_discrete))) < 1.0
    # The open loop is unstable at upright, so the check is not vacuous (every demo rig is an inverted pendulum).
    assert np.max(np.linalg.eigvals(d.A).real) > 1.0


def test_zero_order_hold_matches_python_control():
    # Reference: python-control's c2d with the zero-order hold (scipy's cont2discrete underneath).
    d = design("cart-double")
    sysd = control.c2d(control.ss(d.A, d.B, np.eye(6), 0), 1.0 / 500.0, method="zoh")
    Ad, Bd = zero_order_hold(d.A, d.B, 1.0 / 500.0)
    np.testing.assert_allclose(Ad, sysd.A, rtol=1e-12, atol=1e-14)  # both exact matrix exponentials
    np.testing.assert_allclose(Bd, sysd.B, rtol=1e-12, atol=1e-14)


def test_delay_augmentation_is_a_plain_delay():
    # A slow plain reference: push an input sequence through the augmented model and through the plain model with
    # the inputs shifted by d samples; the states must agree (definition of a d-sample delay).
    d = design("acrobot")
    Ad, Bd = zero_order_hold(d.A, d.B, 1.0 / 500.0)
    rng = np.random.default_rng(3)
    u = rng.normal(size=(40, 1))
    for delay in (1, 3):
        Az, Bz = augment_delay(Ad, Bd, delay)
        z = np.zeros(Az.shape[0])
        x = np.zeros(4)
        for k in range(40):
            z = Az @ z + Bz @ u[k]
            x = Ad @ x + Bd @ (u[k - delay] if k >= delay else np.zeros(1))
            np.testing.assert_allclose(z[:4], x, rtol=1e-12, atol=1e-12)


def test_discrete_lqr_matches_brute_force_value_iteration():
    # Plain slow reference: iterate the Riccati difference equation (dynamic programming) to its fixed point.
    d = design("pendubot")
    P = d.Q.copy()
    for _ in range(20000):
        K = np.linalg.solve(d.R + d.Bd.T @ P @ d.Bd, d.Bd.T @ P @ d.Ad)
        P_next = d.Q + d.Ad.T @ P @ (d.Ad - d.Bd @ K)
        if np.linalg.norm(P_next - P) < 1e-13 * np.linalg.norm(P):
            break
        P = P_next
    sol = discrete_lqr(d.Ad, d.Bd, d.Q, d.R)
    # The iteration contracts at the slowest closed-loop pole squared per step; it stops at 1e-13 relative change,
    # so the gains agree to ~1e-9.
    np.testing.assert_allclose(sol.K, K, rtol=1e-7)


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_sign_convention_on_the_nonlinear_model(name):
    # u = u_eq - K (x - x_eq) must catch a small tilt on the nonlinear model (integrated with scipy's LSODA), while
    # the opposite sign must not: a check of the sign convention against an outside integrator. Coulomb friction is
    # set to zero as in the linearization: with it a passive joint may stick a little off upright, which is
    # physics, not a sign error.
    r = rig(name)
    d = design(name)
    model = model_for(r)
    p = np.array([0.0 if n.endswith(".coulomb") else v for n, v in zip(PARAMETER_NAMES, r.parameter_vector(),
                                                                      strict=True)])
    x0 = d.x_eq.copy()
    x0[r.state_names.index("theta1")] += 0.02  # rad
    x0[r.state_names.index("theta2")] -= 0.01

    def closed(sign: float):
        def f(t, x):
            return model.rhs(x, d.u_eq - sign * d.K @ (x - d.x_eq), p)
        return f

    good = scipy.integrate.solve_ivp(closed(1.0), (0.0, 3.0), x0, method="LSODA", rtol=1e-7, atol=1e-9)
    assert good.success
    angles = [r.state_names.index(s) for s in ("theta1", "theta2")]
    # Slowest closed-loop pole ~ -1.6 1/s (cart rig): after 3 s a 0.02 rad tilt is below ~0.02 * e^-4.7 ~ 2e-4,
    # and Coulomb friction can hold it there; 2e-3 rad is a clear pass that a wrong sign cannot reach.
    assert np.max(np.abs(good.y[angles, -1])) < 2e-3
    over = lambda t, x: np.max(np.abs(x[angles])) - 0.5  # noqa: E731
    over.terminal = True
    bad = scipy.integrate.solve_ivp(closed(-1.0), (0.0, 0.5), x0, method="LSODA", rtol=1e-6, atol=1e-9,
                                    events=over)
    assert np.max(np.abs(bad.y[angles, -1])) > 0.1  # the wrong sign throws it over
