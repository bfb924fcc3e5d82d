"""The balance loop's offset and tap responses, and the planned swing-up's budgets, against outside references."""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from design_kit import SCENARIOS
from rigs import FAMILIES, random_rig
from scipy.integrate import solve_ivp
from sympy_reference import lagrange_equations, numeric_parameters

from upswing.design.responses import TAP_LEVEL, balance_responses, response_sizes, tap_velocity
from upswing.design.swingup_stage import trajectory_budgets
from upswing.model.dynamics import model_for
from upswing.model.rig import PARAMETER_NAMES, load_rig
from upswing.synthesis.balance import design_balance
from upswing.verification.controllers import balance_controller
from upswing.verification.roa import RegionOfAttraction


@pytest.mark.parametrize("family", list(FAMILIES))
def test_tap_follows_the_impulse_momentum_principle(family):
    # Impulse-momentum for rigid bodies (e.g. Greenwood, Principles of Dynamics, 1988, ch. 8): M dq_dot = J' [F, 0].
    # Reference: sympy's Lagrangian mass matrix and the tip Jacobian differentiated from the conventions' geometry,
    # independent of the casadi model; 1e-9: both are closed forms in double precision.
    rig = random_rig(7, family)
    M, _, _, q, _, P = lagrange_equations(rig.base)
    values = numeric_parameters(P, dict(zip(PARAMETER_NAMES, rig.parameter_vector(), strict=True)))
    x = q[0] if rig.base == "cart" else 0
    t1, t2 = q[-2], q[-1]
    tip = sp.Matrix([x - P["l1"] * sp.sin(t1) - P["l2"] * sp.sin(t1 + t2), P["l1"] * sp.cos(t1)
                     + P["l2"] * sp.cos(t1 + t2)])
    upright = dict.fromkeys(q, 0)
    J = np.array(tip.jacobian(q).subs(values).subs(upright), dtype=float)
    Mn = np.array(M.subs(values).subs(upright), dtype=float)
    expected = np.linalg.solve(Mn, J.T @ np.array([0.02, 0.0]))
    np.testing.assert_allclose(tap_velocity(rig, 0.02), expected, rtol=1e-9, atol=1e-12)


def _frictionless(rig):
    p = rig.parameter_vector()
    return rig.with_parameters(np.array([0.0 if n.endswith(".coulomb") else v
                                         for n, v in zip(PARAMETER_NAMES, p, strict=True)]))


def test_responses_sample_by_sample_against_dop853():
    # Each recorded sample is re-integrated from the one before with the recorded (held) input by scipy's DOP853 at
    # rtol 1e-10: states, inputs and times must line up (input k acts from t_k to t_k+1). Coulomb friction is off
    # so the reference has a smooth right-hand side. Tolerance 1e-7: the engine's RK4 step keeps h * Omega <= 0.05,
    # a local error near 3e-9 of the state's scale per step (upswing.verification.simulate.STEP_RULE).
    rig = _frictionless(load_rig(SCENARIOS / "pendubot.toml"))
    design = design_balance(rig)
    controller = balance_controller(rig, measurement="state", design=design)
    n = rig.n_states
    region = RegionOfAttraction(rho=0.5, samples=1, samples_total=1, rho_max=1.0, level_set_extents={},
                                axis_catch={"theta1": (-0.1, 0.08)}, slices=(),
                                P=np.asarray(design.P_discrete)[:n, :n], method="test", simulate_s=0.0)
    out = balance_responses(rig, design, controller, region)
    offset, impulse = response_sizes(rig, region)
    assert offset == pytest.approx(0.04)  # half the smaller side of the catchable range (0.08)
    dx = np.zeros(n)
    dx[n // 2:] = tap_velocity(rig, impulse)
    assert dx @ region.P @ dx == pytest.approx(TAP_LEVEL * region.rho, rel=1e-12)
    model = model_for(rig)
    p = rig.parameter_vector()
    Ts = 1.0 / design.sample_rate
    for r in out.responses:
        assert r.outcome == "held"
        np.testing.assert_allclose(np.diff(r.t), Ts, rtol=1e-9)
        for k in range(0, len(r.t) - 1, 50):
            sol = solve_ivp(lambda _, x, u=r.U[k]: model.rhs(x, u, p), (0.0, Ts), r.X[k], method="DOP853",
                            rtol=1e-10, atol=1e-12)
            np.testing.assert_allclose(sol.y[:, -1], r.X[k + 1], atol=1e-7)
        assert np.max(np.abs(r.U)) <= rig.peak_inputs.max()


def test_trajectory_budgets_against_plain_formulas():
    # A made-up trajectory with closed-form numbers: u = a sin(2 pi t / T) over whole periods has RMS a / sqrt(2)
    # (common practice); the trapezoidal rule on 2001 samples is exact to ~1e-7 relative for a sine.
    rig = random_rig(3, "fully actuated")
    T = 2.0
    t = np.linspace(0.0, T, 2001)
    X = np.zeros((t.size, rig.n_states))
    X[:, 2] = 3.0 * np.sin(np.pi * t / T)  # theta1_dot up to 3 rad/s
    U = np.column_stack([a * np.sin(2 * np.pi * t / T) for a in (1.0, 0.5)])
    by = {b.name: b for b in trajectory_budgets(rig, t, X, U)}
    assert by["shoulder.rms_effort"].value == pytest.approx(1.0 / np.sqrt(2.0), rel=1e-6)
    assert by["elbow.rms_effort"].value == pytest.approx(0.5 / np.sqrt(2.0), rel=1e-6)
    assert by["shoulder.peak_effort"].value == pytest.approx(1.0, rel=1e-6)
    assert by["shoulder.peak_speed"].value == pytest.approx(3.0, rel=1e-6)
    assert by["shoulder.peak_speed"].ok is (rig.actuator("shoulder").max_speed >= 3.0)
    # At rest the base carries the weight: |force_y| = (m1 + m2) g (statics, common practice); theta1_dot != 0
    # adds centripetal load, so compare the sample at t = 0 where everything is at rest and upright.
    rest = trajectory_budgets(rig, t[:2], np.zeros((2, rig.n_states)), np.zeros((2, 2)))
    weight = (rig.link1.mass + rig.link2.mass) * rig.gravity
    assert {b.name: b for b in rest}["base.peak_force_y"].value == pytest.approx(weight, rel=1e-12)
    # Tip speed of the straight rig turning at w about the shoulder: (l1 + l2) w (rigid-body kinematics).
    assert by["tip.peak_speed"].value == pytest.approx((rig.link1.length + rig.link2.length) * 3.0, rel=1e-6)
