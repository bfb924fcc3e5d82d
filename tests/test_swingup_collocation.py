"""The collocation problem (direct collocation), its interpolants and the optimizer's compact equations of motion.

External references:
- Kelly 2017, "An introduction to trajectory optimization: how to do your own direct collocation", SIAM Review
  59(4): the block-move problem (sec. 2) and the Hermite–Simpson / trapezoidal interpolants (secs. 3.4, 4.4).
- The trapezoidal rule's error term, integral - trapezoid = -h^3 / 12 g''(xi) (Burden & Faires, *Numerical
  Analysis*, sec. 4.3; common practice).
- The model's own equations (``upswing.model.dynamics``) as the plain reference for the compact closed form.
"""

from __future__ import annotations

from pathlib import Path

import casadi as ca
import numpy as np
import pytest
from rigs import FAMILIES, random_rig

from upswing.model.dynamics import model_for
from upswing.model.rig import load_rig
from upswing.synthesis.swingup.collocation import Collocation, Guess, Layout, Values
from upswing.synthesis.swingup.compact import compact_dynamics
from upswing.synthesis.swingup.mesh import refine
from upswing.synthesis.swingup.plan import interpolate

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")


def _double_integrator(scheme: str, intervals: int) -> tuple[Collocation, Values]:
    x = ca.SX.sym("x", 2)
    u = ca.SX.sym("u", 1)
    f = ca.Function("f", [x, u], [ca.vertcat(x[1], u)])
    layout = Layout(n_states=2, n_inputs=1, scheme=scheme, minimum_time=False, speed_index=(1,), max_speed=(1e3,),
                    motor_line=(False,), no_load_speed=(1.0,), cart_travel=None, state_scale=(1.0, 1.0),
                    input_scale=(1.0,))
    col = Collocation(f, layout, np.linspace(0.0, 1.0, intervals + 1))
    values = Values(limit=np.array([100.0]), stall=np.zeros(1), duration=1.0, duration_bounds=(0.1, 3.0),
                    start=np.array([0.0, 0.0]), goal=np.array([1.0, 0.0]), time_effort_weight=0.0)
    return col, values


def _block_move(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Kelly 2017, sec. 2: min integral u^2 on [0, 1], x'' = u, rest-to-rest from 0 to 1: x = 3t^2 - 2t^3."""
    x = np.column_stack([3 * t**2 - 2 * t**3, 6 * t - 6 * t**2])
    u = (6 - 12 * t)[:, None]
    return x, u


def _exact_guess(intervals: int) -> Guess:
    t = np.linspace(0.0, 1.0, intervals + 1)
    tm = 0.5 * (t[:-1] + t[1:])
    x, u = _block_move(t)
    xm, um = _block_move(tm)
    return Guess(x=x, u=u, u_mid=um, duration=1.0, x_mid=xm)


def test_hermite_simpson_defects_vanish_on_the_block_move():
    # Hermite–Simpson is exact for cubic states with linear inputs (Simpson's rule integrates cubics exactly),
    # so the closed-form solution leaves zero defects; 1e-13 is a few roundoffs of O(1) numbers.
    col, values = _double_integrator("hermite-simpson", 10)
    defects = col.defects(values, _exact_guess(10))
    assert defects.shape == (10, 2)
    assert np.max(np.abs(defects)) < 1e-13


def test_trapezoidal_defects_equal_the_rule_error_on_the_block_move():
    # Position defect = integral of v minus its trapezoid = -h^3/12 v'' with v'' = x''' = -12: exactly h^3.
    # The speed row integrates the linear u, which the trapezoidal rule does exactly.
    N = 10
    col, values = _double_integrator("trapezoidal", N)
    defects = col.defects(values, _exact_guess(N))
    h = 1.0 / N
    np.testing.assert_allclose(defects[:, 0], h**3, rtol=1e-10)
    assert np.max(np.abs(defects[:, 1])) < 1e-13


def test_hermite_simpson_solution_reproduces_the_closed_form_block_move():
    # The optimum (cost 12 = integral of (6 - 12 t)^2) is representable exactly by the scheme, so IPOPT must land
    # on it to its tolerance (1e-8 on the scaled KKT conditions): 1e-7 leaves room for that.
    col, values = _double_integrator("hermite-simpson", 10)
    start = Guess(x=np.zeros((11, 2)), u=np.zeros((11, 1)), u_mid=np.zeros((10, 1)), duration=1.0)
    raw = col.solve(values, start)
    assert raw.success, raw.status
    exact = _exact_guess(10)
    assert raw.cost == pytest.approx(12.0, rel=1e-7)
    np.testing.assert_allclose(raw.x, exact.x, atol=1e-7)
    np.testing.assert_allclose(raw.u, exact.u, atol=1e-7)
    np.testing.assert_allclose(raw.u_mid, exact.u_mid, atol=1e-7)


def test_interpolants_are_the_schemes_polynomials():
    # On the block move the Hermite–Simpson interpolants (cubic state, quadratic input; Kelly 2017 sec. 4.4) are
    # exact everywhere, not only at the nodes; the trapezoidal ones (quadratic state, linear input; sec. 3.4)
    # reproduce the nodes and the linear u exactly, except at the very end: read from the last interval at s = 1,
    # x_{N-1} + h/2 (f_{N-1} + f_N) misses x_N by that interval's trapezoidal defect, h^3 in position (the block
    # move is not a trapezoidal solution).
    N = 7
    t = np.linspace(0.0, 1.0, N + 1)
    exact = _exact_guess(N)
    x_dot = np.column_stack([exact.x[:, 1], exact.u[:, 0]])
    tq = np.linspace(0.0, 1.0, 101)
    xq, uq = interpolate("hermite-simpson", t, exact.x, x_dot, exact.u, exact.u_mid, tq)
    x_ref, u_ref = _block_move(tq)
    np.testing.assert_allclose(xq, x_ref, atol=1e-13)
    np.testing.assert_allclose(uq, u_ref, atol=1e-13)
    xt, ut = interpolate("trapezoidal", t, exact.x, x_dot, exact.u, exact.u_mid, t)
    np.testing.assert_allclose(xt[:-1], exact.x[:-1], atol=1e-13)
    np.testing.assert_allclose(xt[-1] - exact.x[-1], [-(1.0 / N) ** 3, 0.0], atol=1e-13)
    np.testing.assert_allclose(interpolate("trapezoidal", t, exact.x, x_dot, exact.u, exact.u_mid, tq)[1], u_ref,
                               atol=1e-13)
    # A scalar time gives one row; times past the end are clamped.
    x_end, u_end = interpolate("hermite-simpson", t, exact.x, x_dot, exact.u, exact.u_mid, 5.0)
    assert x_end.shape == (2,) and u_end.shape == (1,)
    np.testing.assert_allclose(x_end, exact.x[-1], atol=1e-13)


@pytest.mark.parametrize("name", RIGS)
def test_compact_dynamics_match_the_model(name):
    # Two derivations of the same Lagrangian equations; they may differ only by rounding. Relative 1e-10: the
    # expressions run to a few hundred operations on numbers of order 1-100.
    rig = load_rig(SCENARIOS / f"{name}.toml")
    model = model_for(rig, coulomb_smoothing=0.2)
    f = compact_dynamics(rig, model)
    p = rig.parameter_vector()
    rng = np.random.default_rng(7)
    n_q = rig.n_states // 2
    for _ in range(50):
        x = np.concatenate([rng.uniform(-7, 7, n_q), rng.uniform(-30, 30, n_q)])
        if rig.base == "cart":
            x[0] = rng.uniform(-0.4, 0.4)
        u = rng.uniform(-1, 1, rig.n_inputs) * rig.peak_inputs
        reference = model.rhs(x, u, p)
        compact = np.asarray(f(x, u)).ravel()
        np.testing.assert_allclose(compact, reference, rtol=1e-10, atol=1e-10 * np.max(np.abs(reference)))


@pytest.mark.parametrize("family", sorted(FAMILIES))
@pytest.mark.parametrize("seed", range(3))
def test_compact_dynamics_match_the_model_on_random_rigs(family, seed):
    # Same comparison on random bench-sized rigs of every family (tests/rigs.py), so no demo value hides a term.
    rig = random_rig(seed, family)
    model = model_for(rig, coulomb_smoothing=0.2)
    f = compact_dynamics(rig, model)
    rng = np.random.default_rng(100 + seed)
    for _ in range(10):
        x = rng.uniform(-6, 6, rig.n_states)
        u = rng.uniform(-1, 1, rig.n_inputs) * rig.peak_inputs
        reference = model.rhs(x, u, rig.parameter_vector())
        np.testing.assert_allclose(np.asarray(f(x, u)).ravel(), reference, rtol=1e-10,
                                   atol=1e-10 * np.max(np.abs(reference)))


def test_refine_splits_bad_intervals_and_their_neighbours():
    mesh = np.linspace(0.0, 1.0, 11)
    errors = np.full(10, 1e-5)
    errors[4] = 9e-3  # (9e-3 / 1e-3)^(1/2) = 3 pieces
    new = refine(mesh, errors, 1e-3, max_intervals=40)
    assert new[0] == 0.0 and new[-1] == 1.0 and np.all(np.diff(new) > 0)
    assert len(new) - 1 == 10 + 2 + 1 + 1  # 3 pieces, and each neighbour halved
    np.testing.assert_allclose(np.diff(new)[3:8], [0.05, 0.05, 1 / 30, 1 / 30, 1 / 30])
    assert len(refine(mesh, errors, 1e-2, max_intervals=40)) == len(mesh)  # nothing above tolerance
    assert len(refine(mesh, errors, 1e-3, max_intervals=11)) == 12  # budget: one more interval only
    assert len(refine(mesh, errors, 1e-3, max_intervals=40, everywhere=True)) - 1 == 20
