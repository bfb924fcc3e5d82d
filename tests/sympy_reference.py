"""A slow, obvious reference model: the Euler-Lagrange equations written out with sympy.

This is deliberately a different route from upswing's casadi derivation (which forms M from velocity Jacobians and
c from d(M q_dot)/dq): here the Lagrangian L = T - V is written from the geometry in docs/conventions.md and the
equations d/dt(dL/dq_dot) - dL/dq = Q are formed term by term with sympy (a general-purpose reference library).
"""

from __future__ import annotations

from functools import lru_cache

import sympy as sp


@lru_cache(maxsize=4)
def lagrange_equations(base: str):
    """Symbolic (M, bias, friction, q, qd, params) for a base kind.

    Returns
    -------
    M : sympy.Matrix
        Mass matrix d2T/dq_dot2.
    bias : sympy.Matrix
        Euler-Lagrange left-hand side with q_ddot = 0 (Coriolis, centrifugal and gravity terms).
    friction : sympy.Matrix
        Viscous generalized friction forces -b v (Coulomb left out: tests use smooth cases).
    q, qd : list of sympy.Symbol
    params : dict of str -> sympy.Symbol
    """
    names = ["m1", "l1", "c1", "I1", "b1", "m2", "l2", "c2", "I2", "b2", "mc", "bc", "g"]
    P = {n: sp.Symbol(n, real=True) for n in names}
    on_cart = base == "cart"
    if on_cart:
        x, t1, t2 = sp.symbols("x t1 t2", real=True)
        xd, t1d, t2d = sp.symbols("xd t1d t2d", real=True)
        q, qd = [x, t1, t2], [xd, t1d, t2d]
    else:
        t1, t2 = sp.symbols("t1 t2", real=True)
        t1d, t2d = sp.symbols("t1d t2d", real=True)
        x, xd = sp.Integer(0), sp.Integer(0)
        q, qd = [t1, t2], [t1d, t2d]
    # Positions (docs/conventions.md) and their velocities by the chain rule.
    p1 = sp.Matrix([x - P["c1"] * sp.sin(t1), P["c1"] * sp.cos(t1)])
    p2 = sp.Matrix([x - P["l1"] * sp.sin(t1) - P["c2"] * sp.sin(t1 + t2),
                    P["l1"] * sp.cos(t1) + P["c2"] * sp.cos(t1 + t2)])

    def rate(expr):
        return sum((sp.diff(expr, qi) * qdi for qi, qdi in zip(q, qd, strict=True)), sp.Integer(0))

    v1 = p1.applyfunc(rate)
    v2 = p2.applyfunc(rate)
    T = (sp.Rational(1, 2) * P["m1"] * (v1.T * v1)[0] + sp.Rational(1, 2) * P["m2"] * (v2.T * v2)[0]
         + sp.Rational(1, 2) * P["I1"] * t1d**2 + sp.Rational(1, 2) * P["I2"] * (t1d + t2d) ** 2)
    if on_cart:
        T += sp.Rational(1, 2) * P["mc"] * xd**2
    V = P["g"] * (P["m1"] * p1[1] + P["m2"] * p2[1])
    L = T - V
    n = len(q)
    M = sp.Matrix(n, n, lambda i, j: sp.diff(T, qd[i], qd[j]))
    # d/dt(dL/dqd_i) with q_ddot = 0 is the q-derivative part only.
    bias = sp.Matrix([rate(sp.diff(L, qd[i])) - sp.diff(L, q[i]) for i in range(n)])
    damping = ([P["bc"]] if on_cart else []) + [P["b1"], P["b2"]]
    friction = sp.Matrix([-damping[i] * qd[i] for i in range(n)])
    return M, bias, friction, q, qd, P


def numeric_parameters(P: dict, values: dict) -> dict:
    """Map the reference's parameter symbols to numbers from an upswing parameter dict."""
    key = {"m1": "link1.mass", "l1": "link1.length", "c1": "link1.com", "I1": "link1.inertia",
           "b1": "link1.damping", "m2": "link2.mass", "l2": "link2.length", "c2": "link2.com",
           "I2": "link2.inertia", "b2": "link2.damping", "mc": "cart.mass", "bc": "cart.damping",
           "g": "gravity"}
    return {P[k]: values[v] for k, v in key.items()}
