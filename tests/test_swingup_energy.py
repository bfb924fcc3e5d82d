"""Energy-based swing-up laws, the batched model terms they use, and the [swingup] rig-file table."""

from __future__ import annotations

import dataclasses
import tomllib

import numpy as np
import pytest
from _swingup_sim import COULOMB_SMOOTHING, plain_rhs, simulate_sampled
from scipy.integrate import solve_ivp

from upswing.errors import RequestError, RigFileError
from upswing.model import batched
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state, state_error, wrap_angle
from upswing.model.rig import PARAMETER_NAMES, load_rig, rig_from_table
from upswing.synthesis.balance import design_balance
from upswing.synthesis.swingup.energy import (
    collocated_input,
    energy_law_params,
    energy_shaping_acceleration,
    energy_swingup_input,
    regulated_energy,
)
from upswing.synthesis.swingup.tracking import handover_rule

SCENARIOS = "scenarios"


def _rig(name: str):
    return load_rig(f"{SCENARIOS}/{name}.toml")


def _zero(rig, suffixes):
    p = rig.parameter_vector()
    p[[i for i, n in enumerate(PARAMETER_NAMES) if n.endswith(suffixes)]] = 0.0
    return rig.with_parameters(p)


# ----------------------------------------------------------------------------------------------------------------
# The closed forms against the casadi model (plain reference beside the fast path)


@pytest.mark.parametrize("name", ["acrobot", "cart-double", "pendubot"])
def test_batched_terms_match_casadi_model(name):
    rig = _rig(name)
    model = model_for(rig)
    p = rig.parameter_vector()
    rng = np.random.default_rng(1)
    X = rng.normal(scale=2.0, size=(8, rig.n_states))
    n_q = rig.n_states // 2
    M = batched.mass_matrix_batch(X, p, rig.base)
    h = batched.bias_batch(X, p, rig.base)
    f = batched.friction_batch(X, p, rig.base)
    E = batched.energy_batch(X, p, rig.base)
    for i, x in enumerate(X):
        # round-off only: both evaluate the same closed-form expressions in double precision
        assert np.allclose(M[i], np.array(model.mass_matrix(x[:n_q], p)), rtol=1e-12, atol=1e-14)
        assert np.allclose(h[i], np.array(model.bias(x[:n_q], x[n_q:], p)).ravel(), rtol=1e-11, atol=1e-12)
        assert np.allclose(f[i], np.array(model.friction(x[n_q:], p)).ravel(), rtol=1e-12, atol=1e-14)
        assert np.allclose(E[i], np.array(model.energy(x, p)).ravel(), rtol=1e-11, atol=1e-12)
    # The test simulator's plain right-hand side is the same model (with the same Coulomb smoothing).
    smooth = model_for(rig, coulomb_smoothing=COULOMB_SMOOTHING)
    rhs = plain_rhs(rig)
    U = rng.normal(size=(8, rig.n_inputs))
    for x, u in zip(X, U, strict=True):
        assert np.allclose(rhs(x, u), smooth.rhs(x, u, p), rtol=1e-10, atol=1e-10)


def test_pendulum_energy_is_total_energy_minus_cart_part():
    # On a cart, T_total = 1/2 M_xx x_dot^2 + x_dot (M_xa w) + 1/2 w' M_aa w, so E_p = E_total - those cart terms.
    rig = _rig("cart-double")
    p = rig.parameter_vector()
    X = np.random.default_rng(2).normal(size=(6, 6))
    M = batched.mass_matrix_batch(X, p, "cart")
    cart_terms = 0.5 * M[:, 0, 0] * X[:, 3] ** 2 + X[:, 3] * np.einsum("ni,ni->n", M[:, 0, 1:], X[:, 4:])
    assert np.allclose(batched.pendulum_energy_batch(X, p, "cart"),
                       batched.energy_batch(X, p, "cart")[:, 2] - cart_terms, rtol=1e-12, atol=1e-12)


# ----------------------------------------------------------------------------------------------------------------
# Cart rig: pivot energy pumping


def test_energy_pumping_raises_link_energy_monotonically_while_unsaturated():
    # Astrom & Furuta (2000), the Lyapunov argument: with a = k (E_d - E_p) H and dE_p/dt = a H,
    # dE_p/dt = k (E_d - E_p) H^2 >= 0 while the acceleration is unsaturated and the joints are frictionless.
    # Continuous-time closed loop integrated by scipy's DOP853 (rtol 1e-10).
    rig = _zero(_rig("cart-double"), ("link1.damping", "link2.damping", "link1.coulomb", "link2.coulomb",
                                      "cart.coulomb"))
    params = dataclasses.replace(energy_law_params(rig), rail_kx=0.0, rail_kv=0.0, accel_limit=1e6,
                                 peak=np.array([1e6]))  # unsaturated; centring off (it adds work of its own)
    rhs = plain_rhs(rig)

    def closed(_t, x):
        return rhs(x, energy_swingup_input(x[None], params)[0])

    x0 = equilibrium_state(rig, "hanging") + np.array([0.0, 0.1, 0.05, 0.0, 0.0, 0.0])
    t = np.linspace(0.0, 6.0, 3001)
    sol = solve_ivp(closed, (0.0, 6.0), x0, method="DOP853", rtol=1e-10, atol=1e-12, t_eval=t)
    energy = regulated_energy(sol.y.T, params)
    below = energy < params.energy_target
    # non-decreasing up to the integrator's error (rtol 1e-10 on a ~1 J quantity: 1e-8 J is ample)
    assert np.all(np.diff(energy[below]) >= -1e-8)
    # and it gets there: at least 90 % of the way in 6 s
    assert energy[-1] > energy[0] + 0.9 * (params.energy_target - energy[0])


def test_cart_law_pumps_demo_rig_to_the_upright_energy_within_the_rail():
    # The demo cart rig with saturation at peak, sampled at 500 Hz, full friction (Coulomb smoothed at 0.05 m/s,
    # rad/s). Measured: 95 % of the upright energy after ~4 s, cart within +-0.25 m. The law does NOT bring two
    # passive links upright (module docstring): we check what it promises, energy and rail, not a catch.
    rig = _rig("cart-double")
    params = energy_law_params(rig)
    x0 = equilibrium_state(rig, "hanging") + np.array([0.0, 0.05, 0.0, 0.0, 0.0, 0.0])
    run = simulate_sampled(rig, lambda k, x: energy_swingup_input(x[None], params)[0], x0, 8.0)
    energy = regulated_energy(run.x, params)
    reach = energy >= params.energy_upright - 0.05 * (params.energy_upright - params.energy_hanging)
    assert reach.any() and run.t[np.argmax(reach)] < 6.0
    assert np.abs(run.x[:, 0]).max() < 0.8 * rig.cart.travel  # 20 % of the rail kept as margin
    assert "whirl" in params.limitation


# ----------------------------------------------------------------------------------------------------------------
# Acrobot and pendubot: collocated partial feedback linearization with energy shaping


@pytest.mark.parametrize("name,joint", [("acrobot", 1), ("pendubot", 0)])
def test_collocated_loop_tracks_its_reference(name, joint):
    # Spong (1995): u = alpha_bar v + beta makes the actuated joint's acceleration exactly v, so with
    # v = r'' + k_d (r' - q') + k_p (r - q) the tracking error obeys e'' + k_d e' + k_p e = 0. Checked against the
    # analytic solution of that linear ODE, with the plant integrated by DOP853 (continuous-time law, Coulomb
    # friction off so the nominal model the law inverts is the plant).
    rig = _zero(_rig(name), (".coulomb",))
    params = energy_law_params(rig)
    kp, kd = 100.0, 12.0  # underdamped: zeta = 0.6, omega_n = 10 rad/s
    A0, w = 0.8, 3.0  # reference r = A0 sin(w t) [rad]
    rhs = plain_rhs(rig)
    x0 = equilibrium_state(rig, "hanging")
    base = x0[joint]  # the reference swings the actuated joint about its hanging value

    def closed(t, x):
        r, rd, rdd = base + A0 * np.sin(w * t), A0 * w * np.cos(w * t), -A0 * w * w * np.sin(w * t)
        v = rdd + kd * (rd - x[2 + joint]) + kp * (r - x[joint])
        return rhs(x, [collocated_input(x[None], np.array([v]), params)[0]])

    x0[joint] += 0.3  # initial error e(0) = r(0) - q(0) = -0.3 rad, e'(0) = A0 w
    t = np.linspace(0.0, 2.0, 401)
    sol = solve_ivp(closed, (0.0, 2.0), x0, method="DOP853", rtol=1e-10, atol=1e-12, t_eval=t)
    error = base + A0 * np.sin(w * t) - sol.y[joint]
    # e = exp(-zeta wn t) (c1 cos(wd t) + c2 sin(wd t)), the textbook underdamped response
    zeta, wn = kd / (2 * np.sqrt(kp)), np.sqrt(kp)
    wd = wn * np.sqrt(1 - zeta**2)
    e0, ed0 = -0.3, A0 * w
    analytic = np.exp(-zeta * wn * t) * (e0 * np.cos(wd * t) + (ed0 + zeta * wn * e0) / wd * np.sin(wd * t))
    passive = 1 - joint
    assert np.ptp(sol.y[passive]) > 0.05  # the passive link is really driven: exactness must hold despite it
    assert np.allclose(error, analytic, atol=1e-7)  # integrator tolerance 1e-10 relative; 1e-7 rad is ample


def test_energy_shaping_lyapunov_function_does_not_increase():
    # Spong (1996) / Fantoni, Lozano & Spong (2000): V = 1/2 k_E E~^2 + 1/2 k_P q_a^2 + 1/2 q_a'^2 has
    # dV/dt = -k_D q_a'^2 <= 0 without friction, without saturation and without the deadband. DOP853 reference.
    rig = _zero(_rig("acrobot"), (".coulomb", ".damping"))
    params = dataclasses.replace(energy_law_params(rig), deadband=0.0, peak=np.array([1e6]))
    rhs = plain_rhs(rig)

    def closed(_t, x):
        return rhs(x, energy_swingup_input(x[None], params)[0])

    x0 = equilibrium_state(rig, "hanging") + np.array([0.05, 0.0, 0.0, 0.0])
    t = np.linspace(0.0, 5.0, 2001)
    sol = solve_ivp(closed, (0.0, 5.0), x0, method="DOP853", rtol=1e-10, atol=1e-12, t_eval=t)
    X = sol.y.T
    e = regulated_energy(X, params) - params.energy_target
    q_a = wrap_angle(X[:, 1])  # the law measures the elbow from straight, wrapped (V is continuous at +-pi)
    V = 0.5 * params.k_energy * e**2 + 0.5 * params.kp * q_a**2 + 0.5 * X[:, 3] ** 2
    assert np.all(np.diff(V) <= 1e-8 * V[0])  # integrator error only
    assert V[-1] < 0.5 * V[0]  # and it does decrease: the energy really is pumped up
    assert np.isfinite(energy_shaping_acceleration(X, params)).all()


def _swing_and_catch(rig, offset, duration, rho):
    """Energy law until the hand-over rule engages, then the discrete balance LQR; returns (catch time, run)."""
    params = energy_law_params(rig)
    rule = handover_rule(rig, rho)
    design = design_balance(rig, delay_samples=0)
    state = {"balancing": np.array([False]), "caught": None}
    rate = rig.balance.sample_rate

    def controller(k, x):
        state["balancing"] = rule.update(x[None], state["balancing"])
        if state["balancing"][0]:
            if state["caught"] is None:
                state["caught"] = k / rate
            return -design.K_discrete @ state_error(rig, x, design.x_eq)
        return energy_swingup_input(x[None], params)[0]

    x0 = equilibrium_state(rig, "hanging")
    x0[0] += offset
    run = simulate_sampled(rig, controller, x0, duration,
                           stop=lambda k, x: state["caught"] is not None and k / rate > state["caught"] + 2.0)
    return state["caught"], run


@pytest.mark.parametrize("offset,within", [(0.05, 12.0), (0.1, 20.0)])
def test_acrobot_law_swings_demo_rig_up_and_hands_over(offset, within):
    # Demo acrobot, 1.9 N m saturation, 500 Hz sample-and-hold, full friction (Coulomb smoothed at 0.05 rad/s),
    # plant integrated by DOP853. Hand-over level rho_in = 2000: a stand-in for the verification engine's
    # region-of-attraction estimate, validated here by requiring the balance loop to hold the links for 2 s after
    # the catch. Measured: caught at 9.2 s (offset 0.05 rad) and 18.8 s (0.1 rad). This is not every start: over
    # 16 random starts in [-0.1, 0.1] rad, benchmarks/energy_swingup.py caught and held 11 within 20 s.
    rig = _rig("acrobot")
    caught, run = _swing_and_catch(rig, offset, within + 2.5, rho=2000.0)
    assert caught is not None and caught < within
    held = state_error(rig, run.x[-250:], equilibrium_state(rig, "upright"))
    assert np.abs(held[:, :2]).max() < 0.3  # rad: still upright 1.5-2 s after the hand-over
    assert np.abs(run.u).max() <= rig.peak_inputs[0] + 1e-12


def test_energy_law_refuses_fully_actuated_arm():
    with pytest.raises(RequestError, match="fully actuated"):
        energy_law_params(_rig("arm-2dof"))


def test_energy_law_output_is_batched_and_saturated():
    rig = _rig("acrobot")
    params = energy_law_params(rig)
    X = np.random.default_rng(5).normal(scale=3.0, size=(50, 4))
    U = energy_swingup_input(X, params)
    assert U.shape == (50, 1) and np.all(np.abs(U) <= rig.peak_inputs[0])
    one_by_one = np.array([energy_swingup_input(x[None], params)[0] for x in X])
    assert np.allclose(U, one_by_one, rtol=1e-13)


# ----------------------------------------------------------------------------------------------------------------
# [swingup] in the rig file


def _table(name):
    with open(f"{SCENARIOS}/{name}.toml", "rb") as fh:
        return tomllib.load(fh)


def test_swingup_table_is_read_and_used():
    table = _table("acrobot")
    table["swingup"] = {"energy_gain": 0.5, "collocated_kp": 12.0, "collocated_kd": 2.0, "handover_level": 900.0}
    rig = rig_from_table(table)
    assert rig.swingup.energy_gain == 0.5 and rig.swingup.handover_level == 900.0
    params = energy_law_params(rig)
    assert params.kp == 12.0 and params.kd == 2.0
    assert params.k_energy == pytest.approx(0.5 * params.k_energy_bound)
    assert handover_rule(rig).rho_in == 900.0


@pytest.mark.parametrize("swingup,match", [
    ({"energy_gain": 1.5}, r"swingup.energy_gain must be in \(0, 1\)"),
    ({"pump_gain": 3.0}, "not used by the acrobot family"),
    ({"energy_gian": 0.5}, 'did you mean "energy_gain"'),
    ({"release_factor": 1.0}, r"swingup.release_factor must be in \(1, 100\]"),
])
def test_swingup_table_bad_input(swingup, match):
    table = _table("acrobot")
    table["swingup"] = swingup
    with pytest.raises(RigFileError, match=match):
        rig_from_table(table)
