"""The balance loop in the batch simulator: holds small offsets, reports big ones as failures, respects limits."""

from __future__ import annotations

import control
import numpy as np
from conftest import frictionless, rig

from upswing.model.modes import measured_states, output_matrix
from upswing.synthesis.balance import design_balance, zero_order_hold
from upswing.verification.controllers import HandOver, LinearObserver, balance_controller
from upswing.verification.simulate import FELL, RUNAWAY, SimulationSetup, simulate


def _offsets(r, n, size, seed=0):
    x0 = np.zeros((n, r.n_states))
    nq = r.n_states // 2
    x0[:, nq - 2:nq] = np.random.default_rng(seed).uniform(-size, size, (n, 2))
    return x0


def test_small_offsets_are_held_on_every_demo_rig(demo_rig):
    # Lyapunov's indirect method (common practice): a stabilizing LQR holds starts close enough to upright, also
    # with quantized encoders and a Kalman filter. 0.01 rad is well inside every demo rig's catch range.
    for measurement in ("state", "encoders"):
        controller = balance_controller(demo_rig, measurement=measurement)
        res = simulate(demo_rig, controller, _offsets(demo_rig, 16, 0.01), setup=SimulationSetup(horizon=3.0))
        assert res.held.all(), (demo_rig.name, measurement, res.status)
        # Residual motion stays small (friction hunting only): below the settling box's angle.
        nq = demo_rig.n_states // 2
        assert np.max(res.hold_error[:, nq - 2:nq]) < 0.15


def test_far_offsets_are_failures_not_crashes(demo_rig):
    controller = balance_controller(demo_rig, measurement="encoders")
    x0 = _offsets(demo_rig, 4, 0.0)
    nq = demo_rig.n_states // 2
    x0[:, nq - 2] = [1.4, -1.4, 1.5, -1.5]  # far outside any catch range, and already falling fast:
    x0[:, -2] = [8.0, -8.0, 8.0, -8.0]
    res = simulate(demo_rig, controller, x0, setup=SimulationSetup(horizon=3.0))
    assert not res.held.any()
    assert np.all((res.status == FELL) | (res.status == RUNAWAY))
    assert np.all(res.end_time < 3.0)  # stopped at the fall, not run to the horizon


def test_applied_input_never_exceeds_peak_or_motor_line():
    # The acrobot has a motor line (stall 2.6 N m, no-load 38 rad/s): driving torque is limited to
    # stall (1 - |w| / no_load) (Actuator docstring); |u| <= peak always.
    r = rig("acrobot")
    controller = balance_controller(r, measurement="state")
    x0 = _offsets(r, 64, 0.3, seed=3)
    x0[:, 3] = np.random.default_rng(4).uniform(-20, 20, 64)
    res = simulate(r, controller, x0, setup=SimulationSetup(horizon=1.0, record=True))
    u = res.inputs[:, :, 0]
    assert np.max(np.abs(u)) <= r.peak_inputs[0]
    assert np.max(res.peak_request) > r.peak_inputs[0]  # the case really saturates
    a = r.actuator("elbow")
    w = res.states[:-1, :, 3]
    running = res.times[:-1, None] + 0.5 / r.balance.sample_rate < res.end_time[None, :]  # later rows repeat
    driving = (u * w > 0) & running
    line = np.maximum(0.0, a.stall * (1 - np.abs(w) / a.no_load_speed))
    assert np.all(np.abs(u[driving]) <= line[driving] + 1e-12)


def _predictor(r, design):
    """A predictor observer built here with python-control: Kalman gain from dlqe (Kalman, 1960), in the general
    form xi[k+1] = F xi + G y + H u, x_hat = Cxi xi + Dy y with xi = x_hat[k|k-1]."""
    Ad, Bd = zero_order_hold(design.A, design.B, 1.0 / design.sample_rate)
    C = output_matrix(r)
    nq = r.n_states // 2
    Gw = np.vstack([np.zeros((nq, nq)), np.eye(nq)])
    L, _, _ = control.dlqe(Ad, Gw, C, np.eye(nq) * 1e-5, np.eye(C.shape[0]) * 1e-7)
    L = np.asarray(L)
    return LinearObserver(F=Ad - L @ C, G=L, H=Bd, Cxi=np.eye(r.n_states), Dy=np.zeros((r.n_states, C.shape[0])),
                          kind="test predictor", sample_rate=design.sample_rate, measured=measured_states(r))


def test_general_observer_runtime_tracks_the_state():
    # With exact readings (no quantization, no noise, no Coulomb friction) a stable observer's error decays
    # (Luenberger, 1964): after 2 s the loop with the predictor behaves like exact state feedback.
    r = frictionless(rig("pendubot"))
    design = design_balance(r)
    x0 = _offsets(r, 4, 0.01, seed=5)
    setup = SimulationSetup(horizon=2.0, quantize=False, noise=False, record=True)
    with_observer = simulate(r, balance_controller(r, measurement="encoders", design=design,
                                                   observer=_predictor(r, design)), x0, setup=setup)
    exact = simulate(r, balance_controller(r, measurement="state", design=design), x0, setup=setup)
    assert with_observer.held.all() and exact.held.all()
    assert np.max(np.abs(with_observer.states[-1])) < 1e-4
    assert np.max(np.abs(exact.states[-1])) < 1e-4


def test_delay_is_applied_and_designed_in():
    # A 2-sample computation delay: the first two samples apply zero input; the delay-aware LQR still holds.
    r = rig("arm-2dof")
    design = design_balance(r, delay_samples=2)
    controller = balance_controller(r, measurement="state", design=design)
    res = simulate(r, controller, _offsets(r, 8, 0.01), setup=SimulationSetup(horizon=2.0, delay_samples=2,
                                                                               record=True))
    assert np.all(res.inputs[:2] == 0.0)
    assert np.any(res.inputs[2] != 0.0)
    assert res.held.all()


def test_hand_over_latches():
    r = rig("arm-2dof")
    lqr = balance_controller(r, measurement="state")

    class Hold:
        measurement, sample_rate = "state", lqr.sample_rate

        def start(self, y):
            return np.zeros((y.shape[0], 0))

        def step(self, t, y, memory):
            return np.zeros((y.shape[0], 2)), memory

    ready = lambda t, y, m: np.full(y.shape[0], t >= 0.1 and t < 0.12)  # noqa: E731 - true only briefly
    res = simulate(r, HandOver(Hold(), lqr, ready), _offsets(r, 4, 0.01),
                   setup=SimulationSetup(horizon=2.5, record=True))
    k = round(0.1 * lqr.sample_rate)
    assert np.all(res.inputs[:k] == 0.0)
    assert np.any(res.inputs[k + 20:k + 30] != 0.0)  # still the LQR long after ready went false again
    assert res.held.all()
