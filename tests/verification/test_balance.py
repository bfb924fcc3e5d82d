"""The balance loop in the batch simulator: holds small offsets, reports big ones as failures, respects limits."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import frictionless, rig

from upswing.errors import RequestError
from upswing.synthesis.balance import design_balance
from upswing.synthesis.estimation import KINDS, design_estimator, kalman_estimator
from upswing.synthesis.loops import discrete_controller
from upswing.verification.controllers import HandOver, balance_controller
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


@pytest.mark.parametrize("kind", KINDS)
def test_synthesis_estimators_track_the_state_in_the_nonlinear_loop(kind):
    # With exact readings (no quantization, no noise, no Coulomb friction) a stable observer's error decays
    # (Luenberger, 1964): after 2 s the loop with either estimator of upswing.synthesis.estimation behaves like
    # exact state feedback. 1e-4 rad is ~15x below one encoder count (1.5e-3 rad at 4096): an estimator bias
    # would show.
    r = frictionless(rig("pendubot"))
    design = design_balance(r)
    x0 = _offsets(r, 4, 0.01, seed=5)
    setup = SimulationSetup(horizon=2.0, quantize=False, noise=False, record=True)
    est = design_estimator(r, design, kind)
    with_estimator = simulate(r, balance_controller(r, design=design, estimator=est), x0, setup=setup)
    exact = simulate(r, balance_controller(r, measurement="state", design=design), x0, setup=setup)
    assert with_estimator.held.all() and exact.held.all()
    assert np.max(np.abs(with_estimator.states[-1])) < 1e-4
    assert np.max(np.abs(exact.states[-1])) < 1e-4


def _firmware_reference(design, est, ys):
    """Plain slow reference: one rollout at a time, the firmware's loop as upswing.synthesis.loops writes it,
    x_hat = Cxi xi + Dy y; u_new = -Kx x_hat - Kp [u[k-d], ..., u[k-1]]; xi+ = F xi + G y + H u[k-d]; started at
    the estimator's fixed point for the first reading (xi = (I - F)^-1 G y[0]). Returns the requests u_new."""
    n = design.A.shape[0]
    m = design.B.shape[1]
    d = design.delay_samples
    Kx, Kp = design.K_discrete[:, :n], design.K_discrete[:, n:]
    out = np.empty((ys.shape[0], ys.shape[1], m))
    for i in range(ys.shape[1]):
        xi = np.linalg.solve(np.eye(est.F.shape[0]) - est.F, est.G @ ys[0, i])
        pending = [np.zeros(m) for _ in range(d)]  # oldest first
        for k in range(ys.shape[0]):
            y = ys[k, i]
            x_hat = est.Cxi @ xi + est.Dy @ y
            u_new = -Kx @ x_hat - (Kp @ np.concatenate(pending) if d else 0.0)
            applied = pending[0] if d else u_new
            xi = est.F @ xi + est.G @ y + est.H @ applied
            if d:
                pending = [*pending[1:], u_new]
            out[k, i] = u_new
    return out


@pytest.mark.parametrize(("kind", "delay"), [("kalman", 0), ("kalman", 2), ("finite-difference", 1)])
def test_runtime_controller_is_the_exported_design(kind, delay):
    # What `upswing verify` runs must be exactly what `upswing balance` designs and exports: the vectorized
    # controller against the plain per-rollout loop above, and its delayed output against the linear controller
    # upswing.synthesis.loops analyses for margins and LQG poles. Readings stay small so no request reaches the
    # peak clamp (the linear system has none). Agreement to 1e-9 of the largest input: the three differ only in
    # the order of floating-point operations over 60 samples.
    r = rig("arm-2dof")
    design = design_balance(r, delay_samples=delay)
    est = design_estimator(r, design, kind)
    controller = balance_controller(r, design=design, estimator=est)
    assert controller.estimator is est and controller.delay == delay
    rng = np.random.default_rng(11)
    ys = np.cumsum(rng.normal(0.0, 2e-5, (60, 3, 2)), axis=0)  # (samples, rollouts, readings) [rad]
    memory = controller.start(ys[0])
    got = np.empty((60, 3, r.n_inputs))
    for k in range(60):
        u, memory = controller.step(k / design.sample_rate, ys[k], memory)
        got[k] = u - design.u_eq
    assert np.max(np.abs(got)) < 0.1 * r.peak_inputs.min()
    reference = _firmware_reference(design, est, ys)
    scale = np.max(np.abs(reference))
    np.testing.assert_allclose(got, reference, rtol=0, atol=1e-9 * scale)
    lti = discrete_controller(design, est)
    for i in range(3):
        c = np.concatenate([np.linalg.solve(np.eye(est.F.shape[0]) - est.F, est.G @ ys[0, i]),
                            np.zeros(delay * r.n_inputs)])
        for k in range(60):
            applied = lti.C @ c + lti.D @ ys[k, i]
            expected = got[k - delay, i] if k >= delay else np.zeros(r.n_inputs)
            np.testing.assert_allclose(applied, expected, rtol=0, atol=1e-9 * scale)
            c = lti.A @ c + lti.B @ ys[k, i]


def test_controller_refuses_mismatched_estimators():
    r = rig("arm-2dof")
    design = design_balance(r)
    other_rate = design_balance(r, sample_rate=250.0)
    with pytest.raises(RequestError, match="designed for 250 Hz but the balance loop runs at 500 Hz"):
        balance_controller(r, design=design, estimator=kalman_estimator(r, other_rate))
    with pytest.raises(RequestError, match="takes no estimator"):
        balance_controller(r, measurement="state", design=design, estimator=kalman_estimator(r, design))
    with pytest.raises(RequestError, match="estimator must be one of kalman, finite-difference"):
        design_estimator(r, design, "luenberger")


def test_delay_is_applied_and_designed_in():
    # A 2-sample computation delay: the first two samples apply zero input; the delay-aware LQR still holds, with
    # exact state feedback and with each estimator on quantized, noisy encoders.
    r = rig("arm-2dof")
    design = design_balance(r, delay_samples=2)
    setup = SimulationSetup(horizon=2.0, delay_samples=2, record=True)
    for controller in (balance_controller(r, measurement="state", design=design),
                       *(balance_controller(r, design=design, estimator=design_estimator(r, design, kind))
                         for kind in KINDS)):
        res = simulate(r, controller, _offsets(r, 8, 0.01), setup=setup)
        assert np.all(res.inputs[:2] == 0.0)
        assert np.any(res.inputs[2] != 0.0)
        assert res.held.all(), controller.measurement


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


def test_verify_runs_the_gains_and_filter_that_balance_exports():
    # The default controller of `upswing verify` against the JSON `upswing balance` writes for firmware: same
    # gain, same Kalman filter matrices, bit for bit (both come from one design; JSON keeps doubles exactly).
    import json

    from upswing.export.balance_files import balance_fields
    from upswing.export.jsonable import dumps
    from upswing.synthesis.study import study_balance

    r = rig("cart-double")
    exported = json.loads(dumps(balance_fields(r, study_balance(r))))
    controller = balance_controller(r)
    assert np.array_equal(np.array(exported["K_discrete"]), controller.K)
    for name in ("F", "G", "H", "Cxi", "Dy"):
        assert np.array_equal(np.array(exported["estimators"]["kalman"][name]), getattr(controller.estimator, name))
