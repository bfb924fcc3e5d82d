"""The casadi equations of motion against an independent sympy Euler-Lagrange derivation.

Reference: sympy (general-purpose computer algebra) applied to the Lagrangian of docs/conventions.md; the
Euler-Lagrange equations d/dt(dL/dq_dot) - dL/dq = Q are the textbook route (Goldstein, Classical Mechanics,
3rd ed., 2002, eq. 1.57).
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from rigs import FAMILIES, random_rig
from sympy_reference import lagrange_equations, numeric_parameters

from upswing.model.dynamics import model_for
from upswing.model.equilibria import EQUILIBRIA, equilibrium_state
from upswing.model.linearize import linearize
from upswing.model.rig import PARAMETER_NAMES

TOL = 1e-9  # both sides are exact closed forms evaluated in double precision; 1e-9 leaves room for rounding


def _reference(rig):
    M, bias, friction, q, qd, P = lagrange_equations(rig.base)
    values = dict(zip(PARAMETER_NAMES, rig.parameter_vector(), strict=True))
    subs = numeric_parameters(P, values)
    return M.subs(subs), bias.subs(subs), friction.subs(subs), q, qd


@pytest.mark.parametrize("family", list(FAMILIES))
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_mass_matrix_and_bias_match_sympy(family, seed):
    rig = random_rig(seed, family)
    model = model_for(rig)
    M, bias, _, q, qd = _reference(rig)
    rng = np.random.default_rng(100 + seed)
    for _ in range(3):
        qv = rng.uniform(-np.pi, np.pi, len(q))
        qdv = rng.uniform(-5, 5, len(q))
        point = dict(zip(q + qd, np.concatenate([qv, qdv]), strict=True))
        M_ref = np.array(M.subs(point).evalf(), dtype=float)
        bias_ref = np.array(bias.subs(point).evalf(), dtype=float).ravel()
        p = rig.parameter_vector()
        np.testing.assert_allclose(np.array(model.mass_matrix(qv, p)), M_ref, rtol=TOL, atol=TOL)
        np.testing.assert_allclose(np.array(model.bias(qv, qdv, p)).ravel(), bias_ref, rtol=TOL, atol=TOL)


@pytest.mark.parametrize("family", list(FAMILIES))
@pytest.mark.parametrize("seed", [4, 5])
def test_linearization_matches_sympy_at_every_equilibrium(family, seed):
    rig = random_rig(seed, family)
    M, bias, friction, q, qd = _reference(rig)
    n = len(q)
    u = sp.symbols(f"u0:{rig.n_inputs}", real=True)
    S = sp.Matrix(model_for(rig).input_map) * sp.Matrix(u)
    qdd = M.LUsolve(S + friction - bias)
    f = sp.Matrix([*qd, *qdd])
    states = sp.Matrix([*q, *qd])
    A_sym = f.jacobian(states)
    B_sym = f.jacobian(sp.Matrix(u))
    for name in EQUILIBRIA:
        x_eq = equilibrium_state(rig, name)
        point = {**dict(zip(list(q) + list(qd), x_eq, strict=True)), **{ui: 0.0 for ui in u}}
        A_ref = np.array(A_sym.subs(point).evalf(), dtype=float)
        B_ref = np.array(B_sym.subs(point).evalf(), dtype=float)
        lin = linearize(rig, name)
        scale = max(1.0, np.abs(A_ref).max())
        np.testing.assert_allclose(lin.A, A_ref, rtol=TOL, atol=TOL * scale, err_msg=name)
        np.testing.assert_allclose(lin.B, B_ref, rtol=TOL, atol=TOL * scale, err_msg=name)
        assert lin.A.shape == (2 * n, 2 * n)
