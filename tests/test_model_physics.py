"""The model against closed-form results of classical mechanics and against scipy's integrators."""

from __future__ import annotations

import math

import numpy as np
import pytest
from rigs import FAMILIES, random_rig, random_rig_table
from scipy.integrate import solve_ivp

from upswing.model.dynamics import model_for
from upswing.model.linearize import linearize
from upswing.model.modes import analyse_equilibrium, controllability, hanging_modes
from upswing.model.rig import rig_from_table

G = 9.80665


def point_mass_table(m1: float, m2: float, l1: float, l2: float) -> dict:
    """Two point masses on massless rods: com = length, inertia = 0."""
    return {"name": "point masses", "base": "fixed", "actuated": ["elbow"], "gravity": G,
            "link1": {"mass": m1, "length": l1, "com": l1, "inertia": 0.0},
            "link2": {"mass": m2, "length": l2, "com": l2, "inertia": 0.0},
            "actuator": {"elbow": {"peak": 1.0, "continuous": 0.5, "max_speed": 10.0}}}


@pytest.mark.parametrize(("m1", "m2", "l1", "l2"), [(1.0, 1.0, 1.0, 1.0), (0.7, 0.3, 0.25, 0.4),
                                                    (2.0, 0.5, 0.6, 0.2)])
def test_point_mass_frequencies_solve_the_characteristic_quartic(m1, m2, l1, l2):
    # Small oscillations of the point-mass double pendulum (e.g. Goldstein, Classical Mechanics, ch. 6; the
    # characteristic equation is from memory): m1 l1 l2 w^4 - (m1 + m2) g (l1 + l2) w^2 + (m1 + m2) g^2 = 0.
    rig = rig_from_table(point_mass_table(m1, m2, l1, l2))
    w2 = np.roots([m1 * l1 * l2, -(m1 + m2) * G * (l1 + l2), (m1 + m2) * G**2])
    expected = np.sort(np.sqrt(w2.real)) / (2 * math.pi)
    got = sorted(m.frequency_hz for m in hanging_modes(rig))
    np.testing.assert_allclose(got, expected, rtol=1e-10)  # both are exact; 1e-10 is rounding headroom


def test_equal_point_masses_give_two_plus_minus_root_two():
    # Equal masses and lengths: w^2 = (2 -+ sqrt 2) g / l, the lower one in phase (textbook result, from memory).
    length = 0.5
    rig = rig_from_table(point_mass_table(0.3, 0.3, length, length))
    modes = hanging_modes(rig)
    w = [2 * math.pi * m.frequency_hz for m in modes]
    expected = [math.sqrt((2 - math.sqrt(2)) * G / length), math.sqrt((2 + math.sqrt(2)) * G / length)]
    np.testing.assert_allclose(w, expected, rtol=1e-10)
    assert [m.kind for m in modes] == ["in-phase", "out-of-phase"]
    # Mode shapes in absolute angles: phi2/phi1 = +sqrt 2 (in phase) and -sqrt 2 (out of phase), from memory.
    ratios = [m.absolute_shape[1] / m.absolute_shape[0] for m in modes]
    np.testing.assert_allclose(ratios, [math.sqrt(2), -math.sqrt(2)], rtol=1e-9)


def test_negligible_second_link_gives_the_physical_pendulum():
    # Physical (compound) pendulum: w = sqrt(m g lc / (I + m lc^2)) (any mechanics textbook; common practice).
    m, lc, inertia = 0.45, 0.17, 0.0031
    table = point_mass_table(m, 1e-9, 0.3, 0.2)
    table["link1"].update(com=lc, inertia=inertia)
    rig = rig_from_table(table)
    expected = math.sqrt(m * G * lc / (inertia + m * lc**2))
    lowest = min(m_.frequency_hz for m_ in hanging_modes(rig)) * 2 * math.pi
    assert lowest == pytest.approx(expected, rel=1e-6)  # the 1e-9 kg second link perturbs at ~1e-8


def test_cart_rig_has_a_rigid_body_mode():
    rig = random_rig(7, "cart")
    kinds = [m.kind for m in hanging_modes(rig)]
    assert kinds == ["rigid-body", "in-phase", "out-of-phase"]


@pytest.mark.parametrize("family", ["acrobot", "cart"])
def test_energy_is_conserved_in_the_chaotic_regime(family):
    # Frictionless, unforced motion conserves T + V (Lagrangian mechanics with no explicit time dependence).
    # Reference integrator: scipy's DOP853 at rtol 1e-10; 20 s from a large start where the motion is chaotic.
    table = random_rig_table(np.random.default_rng(11), family)
    for tag in ("link1", "link2"):
        table[tag]["damping"] = 0.0
    if "cart" in table:
        table["cart"]["damping"] = 0.0
    rig = rig_from_table(table)
    model = model_for(rig)
    p = rig.parameter_vector()
    u = np.zeros(rig.n_inputs)
    x0 = np.zeros(rig.n_states)
    x0[model.n_q - 2:model.n_q] = [2.1, -1.4]  # theta1, theta2 far from any equilibrium
    sol = solve_ivp(lambda t, x: model.rhs(x, u, p), (0.0, 20.0), x0, method="DOP853", rtol=1e-10, atol=1e-12,
                    dense_output=False, t_eval=np.linspace(0, 20, 401))
    assert sol.success
    energy = np.array([float(model.energy(x, p)[2]) for x in sol.y.T])
    scale = float(model.energy(np.r_[np.zeros(model.n_q), sol.y[model.n_q:, :].max(axis=1)], p)[0]) + abs(
        energy[0])
    drift = np.max(np.abs(energy - energy[0])) / scale
    assert drift < 1e-8  # the bound; DOP853 at rtol 1e-10 typically gives ~1e-10
    # The motion really is large: link 2 goes over the top at least once.
    assert np.ptp(sol.y[model.n_q - 1]) > math.pi


@pytest.mark.parametrize("family", list(FAMILIES))
@pytest.mark.parametrize("seed", [21, 22, 23])
def test_every_family_is_controllable_at_upright(family, seed):
    # Acrobot and pendubot are controllable at the upright for generic parameters (Spong, "The swing up control
    # problem for the acrobot", IEEE Control Systems 1995; Spong & Block, pendubot, 1995 — from memory);
    # the cart rig too (common practice); a fully actuated arm trivially so (B has full row rank in q_ddot).
    rig = random_rig(seed, family)
    rep = analyse_equilibrium(rig, "upright")
    assert rep.controllability.rank == rig.n_states
    assert rep.controllability.controllable
    assert rep.observable  # encoders see every angle; velocities follow (common practice)
    assert len(rep.growth_rates) >= 1 and all(s > 0 for s in rep.growth_rates)


def test_a_weightless_second_link_makes_the_acrobot_nearly_uncontrollable():
    # With a vanishing second link the elbow torque cannot move link 1: the scaled PBH margin collapses.
    table = random_rig_table(np.random.default_rng(3), "acrobot")
    healthy = controllability(rig := rig_from_table(table), linearize(rig, "upright"))
    table["link2"].update(mass=1e-6, inertia=1e-10)
    weak_rig = rig_from_table(table)
    weak = controllability(weak_rig, linearize(weak_rig, "upright"))
    assert weak.pbh_margin < 1e-3 * healthy.pbh_margin
    assert weak.warning


def test_pbh_margin_is_zero_for_an_uncontrollable_pair():
    # PBH test (Hautus 1969): (A, B) is uncontrollable iff rank [lambda I - A, B] < n for some eigenvalue.
    rig = random_rig(5, "fully actuated")
    lin = linearize(rig, "upright")
    from dataclasses import replace
    degenerate = replace(lin, B=np.zeros_like(lin.B))
    result = controllability(rig, degenerate)
    assert result.rank == 0 and not result.controllable and result.pbh_margin < 1e-12


def test_unstable_growth_rates_at_upright_match_eigenvalues():
    rig = random_rig(9, "acrobot")
    rep = analyse_equilibrium(rig, "upright")
    eig = np.linalg.eigvals(rep.linear.A)
    assert max(rep.growth_rates) == pytest.approx(eig.real.max(), rel=1e-12)
    assert rep.time_to_double[0] == pytest.approx(math.log(2) / eig.real.max(), rel=1e-12)


@pytest.mark.parametrize("family", ["acrobot", "cart"])
def test_base_load_is_minus_the_rate_of_momentum_plus_weight(family):
    # Newton's second law for the whole moving system (common practice): the force on the base is
    # sum m_i (g_vec - a_i). Check against the momentum of a scipy DOP853 trajectory, differentiated numerically.
    rig = random_rig(13, family)
    model = model_for(rig)
    p = rig.parameter_vector()
    u = np.full(rig.n_inputs, 0.3)
    x0 = np.zeros(rig.n_states)
    x0[model.n_q - 2:model.n_q] = [0.4, -0.9]
    sol = solve_ivp(lambda t, x: model.rhs(x, u, p), (0, 1.0), x0, method="DOP853", rtol=1e-11, atol=1e-12,
                    dense_output=True)
    masses = [rig.link1.mass, rig.link2.mass] + ([rig.cart.mass] if rig.cart else [])
    total = sum(masses)

    def momentum(t: float) -> np.ndarray:
        x = sol.sol(t)
        q, qd = x[:model.n_q], x[model.n_q:]
        h = 1e-7
        pts = (np.array(model.points(q + h * qd, p)) - np.array(model.points(q - h * qd, p))) / (2 * h)
        v = [pts[:, 1], pts[:, 3]] + ([pts[:, 0]] if rig.cart else [])
        return sum(m * vi for m, vi in zip(masses, v, strict=True))

    for t in (0.3, 0.6):
        dt = 1e-4
        dmom = (momentum(t + dt) - momentum(t - dt)) / (2 * dt)
        load = np.array(model.base_load(sol.sol(t), u, p)).ravel()
        expected = np.array([0.0, -total * G]) - dmom
        np.testing.assert_allclose(load[:2], expected, rtol=1e-5, atol=1e-5 * total * G)  # finite differences


def test_base_load_at_rest_is_the_weight():
    rig = random_rig(2, "cart")
    model = model_for(rig)
    load = np.array(model.base_load(np.zeros(6), np.zeros(1), rig.parameter_vector())).ravel()
    weight = (rig.link1.mass + rig.link2.mass + rig.cart.mass) * G
    np.testing.assert_allclose(load, [0.0, -weight, 0.0], atol=1e-12)
