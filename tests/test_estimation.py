"""Velocity estimators: Kalman filter against python-control and the time-varying filter, finite difference
against its textbook recursion, separation, and the closed-loop error figures against a Monte Carlo run."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
import scipy.stats
from balance_helpers import DEMO_RIGS, design, finite_difference, kalman, rig

from upswing.errors import RequestError
from upswing.model.modes import measured_states, output_matrix
from upswing.synthesis.estimation import (
    effort_noise_std,
    finite_difference_estimator,
    kalman_estimator,
    measurement_noise_std,
    process_noise_input,
)
from upswing.synthesis.loops import closed_loop, discrete_controller, discrete_plant, measurement_matrix


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_kalman_error_dynamics_are_schur(name):
    # Recomputed from the gain: the prior error obeys e+ = (Ad - Ad L C) e (Anderson & Moore, Optimal Filtering,
    # 1979, ch. 4), so its eigenvalues must lie inside the unit circle.
    est = kalman(name)
    Ad, _ = design(name).discrete_plant
    C = output_matrix(rig(name))
    assert np.max(np.abs(np.linalg.eigvals(Ad - Ad @ est.gain @ C))) < 1.0
    assert np.max(np.abs(est.poles)) < 1.0
    assert est.riccati_residual < 1e-9


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_kalman_gain_matches_python_control(name):
    # Reference: python-control's dlqe gives the predictor gain L_p = Ad M C' (C M C' + R_v)^-1, which must equal
    # Ad times our measurement-update gain, with the same covariance M. Both come from Schur-method Riccati
    # solvers; the covariances are ~1e-7 rad^2 with condition numbers up to ~1e8, so 1e-6 relative is the bar.
    # Noise enters as held accelerations (Gamma) and held efforts (Bd, the demo cart's [balance].effort_noise);
    # dlqe forms G QN G' itself.
    d, est, r = design(name), kalman(name), rig(name)
    Ad, Bd = d.discrete_plant
    Lp, M, E = control.dlqe(Ad, np.hstack([process_noise_input(d), Bd]), output_matrix(r),
                            np.diag(np.concatenate([est.process_noise_std, est.effort_noise_std]) ** 2),
                            np.diag(est.measurement_std**2))
    np.testing.assert_allclose(Ad @ est.gain, Lp, rtol=1e-6, atol=1e-6 * np.abs(Lp).max())
    np.testing.assert_allclose(est.covariance, M, rtol=1e-6, atol=1e-6 * np.abs(M).max())
    np.testing.assert_allclose(np.sort(np.abs(est.poles)), np.sort(np.abs(E)), rtol=1e-6)


def test_kalman_gain_is_the_limit_of_the_time_varying_filter():
    # Plain slow reference: the Riccati difference equation of the time-varying filter (predict, update) converges
    # to the steady-state covariance from any positive start (Anderson & Moore, 1979, sec. 4.4).
    d, est, r = design("cart-double"), kalman("cart-double"), rig("cart-double")
    Ad, Bd = d.discrete_plant
    C = output_matrix(r)
    Gamma = process_noise_input(d)
    assert np.all(est.effort_noise_std > 0)  # the demo cart models a force at the drive
    Qw = Gamma @ np.diag(est.process_noise_std**2) @ Gamma.T + Bd @ np.diag(est.effort_noise_std**2) @ Bd.T
    Rv = np.diag(est.measurement_std**2)
    M = np.eye(6) * 1e-2
    for _ in range(5000):
        L = M @ C.T @ np.linalg.inv(C @ M @ C.T + Rv)
        Z = (np.eye(6) - L @ C) @ M
        M = Ad @ Z @ Ad.T + Qw
    L = M @ C.T @ np.linalg.inv(C @ M @ C.T + Rv)
    # The iteration converges at the square of the slowest error pole (|z| ~ 0.885) per step: after 5000 steps it
    # is at machine precision; 1e-8 relative leaves room for round-off accumulated along the way.
    np.testing.assert_allclose(est.gain, L, rtol=1e-8, atol=1e-8 * np.abs(L).max())


@pytest.mark.parametrize("name", ["acrobot", "cart-double"])
def test_measurement_noise_is_quantization_plus_sensor_noise(name):
    # Uniform rounding error over one count has variance Delta^2 / 12 (Widrow, 1956; common practice), checked
    # against scipy.stats' uniform distribution, plus the rig file's independent Gaussian sensor noise.
    r = rig(name)
    expected = []
    for s in measured_states(r):
        delta, sigma = ((r.sensors.cart_resolution, r.sensors.cart_noise) if s == "x"
                        else (2 * math.pi / r.sensors.encoder_counts, r.sensors.angle_noise))
        expected.append(math.sqrt(scipy.stats.uniform(loc=-delta / 2, scale=delta).var() + sigma**2))
    np.testing.assert_allclose(measurement_noise_std(r), expected, rtol=1e-12)  # same formula, float round-off


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_separation_principle(name):
    # Separation principle (e.g. Anderson & Moore, Optimal Control, 1990, ch. 8): with the Kalman filter in the
    # loop and no delay, the combined poles are the LQR poles together with the estimator poles.
    d, est = design(name), kalman(name)
    expected = np.sort_complex(np.concatenate([d.closed_loop_poles_discrete, est.poles]))
    got = np.sort_complex(est.closed_loop_poles)
    # Eigenvalues of a 8-12 state matrix with a double pole can move by ~sqrt(eps) ~ 1e-8; 1e-6 is the bar.
    np.testing.assert_allclose(got, expected, atol=1e-6)
    assert np.max(np.abs(got)) < 1.0


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_kalman_closed_loop_error_is_the_filter_covariance(name):
    # With the loop closed, the Kalman filter's error does not depend on the control (Anderson & Moore, 1979):
    # the closed-loop Lyapunov computation must reproduce the filter's own posterior covariance (I - L C) M.
    est, r = kalman(name), rig(name)
    C = output_matrix(r)
    Z = (np.eye(r.n_states) - est.gain @ C) @ est.covariance
    # Two different linear solves (Riccati vs. a Lyapunov equation on the whole loop): 1e-5 relative.
    np.testing.assert_allclose(est.error_std, np.sqrt(np.diag(Z)), rtol=1e-5)


@pytest.mark.parametrize("name,kind", [("acrobot", "finite-difference"), ("cart-double", "kalman")])
def test_closed_loop_error_matches_monte_carlo(name, kind):
    # Plain slow reference for the closed-loop error figures: simulate the loop with the noise model (held
    # accelerations through Gamma, held efforts through Bd: the demo cart's effort noise, readings) and measure
    # the error spread. 40,000 samples with a correlation time of ~100 samples give ~5 % sampling error on a
    # standard deviation; 12 % is the bar.
    d, r = design(name), rig(name)
    est = finite_difference(name) if kind == "finite-difference" else kalman(name)
    C = measurement_matrix(d, est)
    plant, ctrl = discrete_plant(d, C), discrete_controller(d, est)
    Gamma = process_noise_input(d)
    rng = np.random.default_rng(7)
    n_steps = 40_000
    x = np.zeros(r.n_states)
    c = np.zeros(ctrl.A.shape[0])
    errors = np.empty((n_steps, r.n_states))
    no = est.F.shape[0]
    for k in range(n_steps):
        y = C @ x + rng.normal(size=C.shape[0]) * est.measurement_std
        xi = c[:no]
        errors[k] = x - (est.Cxi @ xi + est.Dy @ y)
        u = ctrl.C @ c + ctrl.D @ y
        c = ctrl.A @ c + ctrl.B @ y
        x = plant.A @ x + plant.B @ (u + rng.normal(size=u.size) * est.effort_noise_std) \
            + Gamma @ (rng.normal(size=Gamma.shape[1]) * est.process_noise_std)
    measured = errors[2000:].std(axis=0)
    np.testing.assert_allclose(measured, est.error_std, rtol=0.12)


def test_finite_difference_is_the_textbook_recursion():
    # Plain reference: v[k] = a v[k-1] + (1 - a) (y[k] - y[k-1]) / T with a = exp(-2 pi f_c T) (first-order
    # low-pass with its pole mapped exactly; common practice), run beside the general observer form.
    est = finite_difference("cart-double")
    T = 1.0 / est.sample_rate
    a = math.exp(-2 * math.pi * est.cutoff_hz * T)
    rng = np.random.default_rng(1)
    ys = np.cumsum(rng.normal(size=(200, 3)) * 1e-3, axis=0)
    xi = np.zeros(est.F.shape[0])
    y_prev, v = np.zeros(3), np.zeros(3)
    for y in ys:
        x_hat = est.Cxi @ xi + est.Dy @ y
        v = a * v + (1 - a) * (y - y_prev) / T
        y_prev = y
        np.testing.assert_allclose(x_hat[:3], y, rtol=0, atol=1e-15)  # positions pass through
        np.testing.assert_allclose(x_hat[3:], v, rtol=1e-12, atol=1e-12)
        xi = est.F @ xi + est.G @ y + est.H @ np.zeros(1)
    np.testing.assert_allclose(np.sort(np.abs(est.poles)), [0, 0, 0, a, a, a], atol=1e-12)


def test_finite_difference_tracks_a_ramp_exactly():
    # The backward difference of a ramp is its slope, and the low-pass has unit gain at DC: after the filter's
    # transient (a^k with a ~ 0.53 at 50 Hz / 500 Hz) the estimate equals the slope (common practice).
    est = finite_difference("acrobot")
    T = 1.0 / est.sample_rate
    slope = np.array([0.8, -1.3])  # rad/s
    xi = np.zeros(est.F.shape[0])
    for k in range(200):
        y = slope * k * T
        x_hat = est.Cxi @ xi + est.Dy @ y
        xi = est.F @ xi + est.G @ y
    np.testing.assert_allclose(x_hat[2:], slope, rtol=1e-10)


def test_kalman_observer_converges_on_noise_free_data():
    # The observer contract: fed the readings and the applied input of the linear plant, x_hat -> x (Schur error
    # dynamics in action), including with a computation delay designed in.
    for delay in (0, 1):
        name = "arm-2dof"
        d, est, r = design(name, delay), kalman(name, delay), rig(name)
        Ad, Bd = d.discrete_plant
        C = output_matrix(r)
        rng = np.random.default_rng(5)
        x = np.array([0.01, -0.02, 0.1, 0.0])
        xi = np.zeros(est.F.shape[0])
        for _ in range(300):
            u = rng.normal(size=2) * 0.1  # any applied input: the observer only needs to hear it
            y = C @ x
            xi = est.F @ xi + est.G @ y + est.H @ u
            x = Ad @ x + Bd @ u
        # Error poles |z| <= 0.87: after 300 steps the initial error is down by 1e-18; 1e-9 absolute is plenty.
        y = C @ x
        np.testing.assert_allclose(est.Cxi @ xi + est.Dy @ y, x, atol=1e-9)


def test_lqg_poles_use_the_delay_line():
    # With a designed delay the combined loop has plant (4) + observer (4) + delay line (1 per input) states, and
    # with the Kalman filter the separation principle still holds for the augmented design.
    d, est = design("acrobot", 1), kalman("acrobot", 1)
    expected = np.sort_complex(np.concatenate([d.closed_loop_poles_discrete, est.poles]))
    np.testing.assert_allclose(np.sort_complex(est.closed_loop_poles), expected, atol=1e-6)
    A = closed_loop(discrete_plant(d, output_matrix(rig("acrobot"))), discrete_controller(d, est))
    assert A.shape == (9, 9)


def test_cutoff_must_be_below_nyquist():
    with pytest.raises(RequestError, match=r"below half the loop rate"):
        finite_difference_estimator(rig("acrobot"), design("acrobot"), cutoff_hz=250.0)


def test_effort_noise_defaults_to_none_and_enters_through_the_input_matrix():
    # Without [balance].effort_noise the filter is the acceleration-only one; with it, Q_w gains Bd diag(s^2) Bd'
    # (a held effort moves x[k+1] as the held command does: zero-order hold, common practice), checked against
    # python-control's dlqe on that covariance, and the filter leans more on the readings: a larger gain.
    from dataclasses import replace

    r = rig("acrobot")
    assert r.balance.effort_noise is None and np.all(effort_noise_std(r) == 0)
    d = design("acrobot")
    plain = kalman("acrobot")
    noisy_rig = replace(r, balance=replace(r.balance, effort_noise=(0.2,)))
    noisy = kalman_estimator(noisy_rig, d)
    np.testing.assert_array_equal(noisy.effort_noise_std, [0.2])
    Ad, Bd = d.discrete_plant
    Gamma = process_noise_input(d)
    Qw = Gamma @ np.diag(plain.process_noise_std**2) @ Gamma.T + 0.2**2 * Bd @ Bd.T
    Lp, M, _ = control.dlqe(Ad, np.eye(4), output_matrix(r), Qw, np.diag(plain.measurement_std**2))
    # Same tolerance as the plain dlqe comparison above (Schur solvers, covariances ~1e-7 rad^2).
    np.testing.assert_allclose(noisy.covariance, M, rtol=1e-6, atol=1e-6 * np.abs(M).max())
    assert np.linalg.norm(noisy.gain) > np.linalg.norm(plain.gain)
