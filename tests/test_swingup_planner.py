"""Planned swing-ups on the demo rigs, checked against scipy's DOP853 and the rigs' own limits.

The re-integration reference here is deliberately plain: one ``solve_ivp`` per interval with the model's own
right-hand side and the input interpolant written out from Kelly 2017 (*SIAM Review* 59(4), sec. 4.4), beside the
planner's batched check in :mod:`upswing.synthesis.swingup.mesh`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from upswing.errors import RequestError, SynthesisError
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import PARAMETER_NAMES, load_rig
from upswing.synthesis.swingup import plan_swingup
from upswing.synthesis.swingup.guesses import energy_pumping_law
from upswing.synthesis.swingup.sizing import used_factor

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
# IPOPT relaxes bounds by bound_relax_factor = 1e-8 (relative) and stops at constr_viol_tol = 1e-8 on the scaled
# constraints: 1e-6 relative is a safe margin for "the bound holds".
BOUND_SLACK = 1e-6


def _rig(name):
    return load_rig(SCENARIOS / f"{name}.toml")


@pytest.fixture(scope="module")
def acrobot():
    rig = _rig("acrobot")
    return rig, plan_swingup(rig)


@pytest.fixture(scope="module")
def cart():
    rig = _rig("cart-double")
    return rig, plan_swingup(rig, intervals=80)


def _reintegrate_each_interval(rig, plan):
    """Plain reference: integrate every interval from x_k with DOP853 under the scheme's input; end-state errors."""
    model = model_for(rig, coulomb_smoothing=plan.coulomb_smoothing)
    p = rig.parameter_vector()
    errors = []
    for k in range(plan.intervals):
        t0, t1 = plan.t[k], plan.t[k + 1]
        u0, uc, u1 = plan.u[k], plan.u_mid[k], plan.u[k + 1]

        def u_of(t, t0=t0, t1=t1, u0=u0, uc=uc, u1=u1):
            s = (t - t0) / (t1 - t0)
            if plan.scheme == "hermite-simpson":  # quadratic through u_k, u_c,k, u_{k+1}
                return (1 - s) * (1 - 2 * s) * u0 + 4 * s * (1 - s) * uc + s * (2 * s - 1) * u1
            return (1 - s) * u0 + s * u1

        sol = solve_ivp(lambda t, x, u_of=u_of: model.rhs(x, u_of(t), p), (t0, t1), plan.x[k], method="DOP853",
                        rtol=1e-11, atol=1e-12)
        errors.append(sol.y[:, -1] - plan.x[k + 1])
    return np.array(errors)


def _check_reintegration(rig, plan):
    errors = _reintegrate_each_interval(rig, plan)
    n_q = rig.n_states // 2
    weighted = np.max(np.abs(errors) * np.r_[np.ones(n_q), np.full(n_q, 0.1)], axis=1)
    # The mesh was refined until every interval met the tolerance; the two DOP853 runs (rtol 1e-10 batched,
    # 1e-11 here) agree to far better than 1e-7, which is 1/10000 of the tolerance.
    assert np.all(weighted <= plan.mesh_tolerance + 1e-7)
    np.testing.assert_allclose(weighted, plan.interval_errors, atol=1e-7)
    assert plan.max_interval_error <= plan.mesh_tolerance


def _check_limits(rig, plan):
    n_q = rig.n_states // 2
    joints = ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")
    x_mid, _ = plan.sample(0.5 * (plan.t[:-1] + plan.t[1:]))
    for i, a in enumerate(rig.actuators):
        u = np.concatenate([plan.u[:, i], plan.u_mid[:, i]])
        assert np.all(np.abs(u) <= plan.limit[i] * (1 + BOUND_SLACK))
        w = plan.x[:, n_q + joints.index(a.joint)]
        assert np.all(np.abs(w) <= a.max_speed * (1 + BOUND_SLACK))
        if a.stall is not None:  # motor line: -stall (1 + w/w0) <= u <= stall (1 - w/w0), at nodes and midpoints
            stall = a.stall * plan.limit[i] / a.peak
            w_all = np.concatenate([w, x_mid[:, n_q + joints.index(a.joint)]])
            assert np.all(u <= stall * (1 - w_all / a.no_load_speed) + BOUND_SLACK * a.peak)
            assert np.all(u >= -stall * (1 + w_all / a.no_load_speed) - BOUND_SLACK * a.peak)
    if rig.cart is not None:
        assert np.all(np.abs(plan.x[:, 0]) <= (rig.cart.travel - 0.05) * (1 + BOUND_SLACK))


def test_acrobot_plan_succeeds_from_hanging_to_upright(acrobot):
    rig, plan = acrobot
    assert plan.success, plan.message
    assert plan.status == "solved"
    np.testing.assert_allclose(plan.x[0], equilibrium_state(rig, "hanging"), atol=1e-9)
    np.testing.assert_allclose(plan.x[-1], equilibrium_state(rig, "upright"), atol=1e-9)
    assert plan.x.shape == (plan.intervals + 1, 4) and plan.u.shape == (plan.intervals + 1, 1)
    assert plan.state_names == rig.state_names and plan.input_names == ("elbow",)
    assert plan.iterations > 0 and plan.solve_s > 0 and plan.build_s > 0
    assert plan.constraint_violation < 1e-6
    assert any("ISO 13850" in c for c in plan.cautions)


def test_acrobot_plan_reintegrates_within_the_mesh_tolerance(acrobot):
    _check_reintegration(*acrobot)


def test_acrobot_plan_respects_every_limit(acrobot):
    _check_limits(*acrobot)


def test_sample_reproduces_nodes_and_slopes(acrobot):
    rig, plan = acrobot
    x_nodes, u_nodes = plan.sample(plan.t)
    np.testing.assert_allclose(x_nodes[:-1], plan.x[:-1], atol=1e-12)
    np.testing.assert_allclose(u_nodes, plan.u, atol=1e-12)
    _, u_mid = plan.sample(0.5 * (plan.t[:-1] + plan.t[1:]))
    np.testing.assert_allclose(u_mid, plan.u_mid, atol=1e-12)
    # The Hermite state interpolant is C1 with slope f(x_k, u_k) at every node (Kelly 2017 sec. 4.4), but its second
    # derivative jumps at nodes where the input bends (a central difference across the node would see eps/4 times
    # that jump). So each side is checked with its own one-sided three-point difference (error ~ eps^2 * x''' ~ 1e-8,
    # rounding ~ 1e-16 / 1e-6 = 1e-10 relative).
    model = model_for(rig, coulomb_smoothing=plan.coulomb_smoothing)
    eps = 1e-6
    for k in range(1, plan.intervals, 7):
        f_k = model.rhs(plan.x[k], plan.u[k], rig.parameter_vector())
        for side in (1.0, -1.0):
            x0, x1, x2 = (plan.sample(plan.t[k] + side * j * eps)[0] for j in (0, 1, 2))
            slope = side * (-3 * x0 + 4 * x1 - x2) / (2 * eps)
            np.testing.assert_allclose(slope, f_k, rtol=1e-5, atol=1e-5)


def test_used_factor_is_tight_for_the_motor_line(acrobot):
    rig, plan = acrobot
    factor = used_factor(plan, rig)
    assert factor <= plan.limit[0] / rig.peak_inputs[0] * (1 + BOUND_SLACK)
    a = rig.actuators[0]
    x_mid, _ = plan.sample(0.5 * (plan.t[:-1] + plan.t[1:]))
    w = np.concatenate([plan.x[:, 3], x_mid[:, 3]]) / a.no_load_speed
    u = np.concatenate([plan.u[:, 0], plan.u_mid[:, 0]])

    def holds(f):
        return (np.all(np.abs(u) <= f * a.peak * (1 + 1e-12)) and np.all(u <= f * a.stall * (1 - w) + 1e-12)
                and np.all(u >= -f * a.stall * (1 + w) - 1e-12))

    assert holds(factor) and not holds(0.999 * factor)


def test_cart_plan_keeps_off_the_end_stops_and_reintegrates(cart):
    rig, plan = cart
    assert plan.success, plan.message
    _check_limits(rig, plan)
    _check_reintegration(rig, plan)


def test_trapezoidal_pendubot_plan_passes_the_same_checks():
    rig = _rig("pendubot")
    # Second order: more intervals, and a tolerance of 2e-3 rad (the default is one count of this rig's
    # 8192-count encoder, 7.7e-4 rad, which the trapezoidal scheme reaches only past 300 intervals).
    plan = plan_swingup(rig, scheme="trapezoidal", intervals=120, mesh_tolerance=2e-3)
    assert plan.success, plan.message
    assert plan.scheme == "trapezoidal"
    np.testing.assert_allclose(plan.u_mid, 0.5 * (plan.u[:-1] + plan.u[1:]))
    _check_limits(rig, plan)
    _check_reintegration(rig, plan)


def test_a_hopeless_limit_is_a_result_with_advice_not_a_traceback():
    rig = _rig("pendubot")
    plan = plan_swingup(rig, intervals=20, peak=0.005, strategies=("cold",), max_refinements=0)
    assert not plan.success
    assert plan.status == "no swing-up found"
    assert "Tried 1 solve" in plan.message and "longer duration" in plan.message
    with pytest.raises(SynthesisError, match="higher limit"):
        plan.require_success()


@pytest.mark.parametrize("kwargs, fragment", [
    ({"scheme": "euler"}, "scheme must be one of"),
    ({"intervals": 2}, "intervals must be an integer >= 4"),
    ({"duration": -1.0}, "duration must be > 0"),
    ({"peak": 0.0}, "peak must be a positive number"),
    ({"peak": [1.0, 2.0]}, "one per input"),
    ({"start": "sideways"}, "start must be one of"),
    ({"start": [0.0, 1.0]}, "4 finite numbers"),
    ({"strategies": ("guess",)}, "strategies must be"),
    ({"coulomb_smoothing": 0.0}, "coulomb_smoothing must be > 0"),
    ({"strategies": ("warm",)}, "'warm' needs initial_plan"),
])
def test_impossible_requests_are_request_errors(kwargs, fragment):
    with pytest.raises(RequestError, match=fragment):
        plan_swingup(_rig("acrobot"), **kwargs)


def test_cart_start_off_the_rail_is_refused():
    rig = _rig("cart-double")
    start = equilibrium_state(rig, "hanging")
    start[0] = 0.40  # within travel 0.41 but not within travel - margin 0.36
    with pytest.raises(RequestError, match="within the rail"):
        plan_swingup(rig, start=start)


def test_energy_pumping_law_raises_energy_monotonically_without_friction():
    # Passivity: with friction removed dE/dt = u w with u = sat(k (E* - E) w), which has the sign of (E* - E) w,
    # so E rises while E < E*, saturated or not (Åström & Furuta 2000, Automatica 36(2); Spong 1995, IEEE Control
    # Systems 15(1)). DOP853 at rtol = atol = 1e-11 keeps the energy error near 1e-10 J over this run, so a drop
    # of more than 1e-8 J between samples would be the law's, not the integrator's.
    rig = _rig("acrobot")
    p = rig.parameter_vector().copy()
    for i, name in enumerate(PARAMETER_NAMES):
        if name.endswith((".damping", ".coulomb")):
            p[i] = 0.0
    model = model_for(rig)
    start = equilibrium_state(rig, "hanging")
    goal = equilibrium_state(rig, "upright")
    limit = rig.peak_inputs
    law = energy_pumping_law(model, p, start, goal, limit, (3,))
    assert law is not None
    x0 = start + np.array([0.0, 0.0, 0.0, 0.5])  # off the rest state, and started after the 0.1 s push window

    def f(t, x):
        return model.rhs(x, np.clip(law(t, x), -limit, limit), p)

    times = np.linspace(0.2, 1.0, 801)
    sol = solve_ivp(f, (times[0], times[-1]), x0, method="DOP853", t_eval=times, rtol=1e-11, atol=1e-11)
    assert sol.success
    energies = np.array([float(np.asarray(model.energy(x, p))[2, 0]) for x in sol.y.T])
    target = float(np.asarray(model.energy(goal, p))[2, 0])
    below = energies[:-1] < target
    assert np.all(np.diff(energies)[below] >= -1e-8)
    assert energies[-1] > energies[0] + 1.0  # it did pump: more than a joule in 0.8 s


def test_no_built_in_pumping_law_on_a_cart():
    # Pumping total energy through the cart force mostly speeds the cart up: the planner says so (None) instead of
    # rolling out a law that does not suit the family.
    rig = _rig("cart-double")
    law = energy_pumping_law(model_for(rig), rig.parameter_vector(), equilibrium_state(rig, "hanging"),
                             equilibrium_state(rig, "upright"), rig.peak_inputs, (3,))
    assert law is None


def test_headroom_keeps_the_plan_within_its_share_of_peak_and_max_speed(acrobot):
    # A plan with headroom h must keep |u| <= h peak and |w| <= h max_speed for every actuated joint (the option's
    # contract; leaving feedback authority is common practice), and still meet the equations of motion: the same
    # DOP853 re-integration check as the full-limit plan. The tightest limits are checked against the rig file's
    # own numbers, not the plan's stored limit, with the solver's bound slack (BOUND_SLACK, above).
    rig, default = acrobot
    # the default plan keeps to the rig file's [swingup].plan_speed_share of max_speed (0.9 unless given)
    share = rig.swingup.plan_speed_share
    assert share < 1.0
    assert np.max(np.abs(default.x[:, rig.n_states // 2 + 1])) <= share * rig.actuator("elbow").max_speed * (
        1 + BOUND_SLACK)
    full = plan_swingup(rig, headroom=1.0, speed_headroom=1.0)
    headroom = 0.85
    plan = plan_swingup(rig, headroom=headroom, speed_headroom=headroom)
    assert plan.success, plan.message
    np.testing.assert_allclose(plan.limit, headroom * rig.peak_inputs, rtol=1e-12)
    n_q = rig.n_states // 2
    a = rig.actuator("elbow")
    u = np.concatenate([plan.u[:, 0], plan.u_mid[:, 0]])
    assert np.max(np.abs(u)) <= headroom * a.peak * (1 + BOUND_SLACK)
    assert np.max(np.abs(plan.x[:, n_q + 1])) <= headroom * a.max_speed * (1 + BOUND_SLACK)
    # The full-limit plan of the same rig uses speed beyond that share (so the bound is active, not vacuous).
    assert np.max(np.abs(full.x[:, n_q + 1])) > headroom * a.max_speed
    _check_reintegration(rig, plan)
    with pytest.raises(RequestError, match="headroom"):
        plan_swingup(rig, headroom=1.5)
    with pytest.raises(RequestError, match="speed_headroom"):
        plan_swingup(rig, speed_headroom=0.0)
