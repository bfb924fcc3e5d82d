"""Compact closed-form equations of motion for the swing-up optimizer, checked against the model.

The optimizer evaluates the dynamics and their second derivatives at every collocation point in every IPOPT
iteration, so the size of the expression graph sets the solve time. :func:`upswing.model.dynamics.build_model`
derives the equations generically from Jacobians with the parameters symbolic; with the parameters fixed, the same
equations have a much smaller closed form (the acrobot's state derivative shrinks from about 300 operations to
about 70, its Lagrangian Hessian from about 3100 to about 300). This module writes that closed form from the
geometry of ``docs/conventions.md``:

    M(q) q_ddot + c(q, q_dot) + g(q) = S u + Q_f(q_dot),

with the closed-form mass matrix of a double pendulum on an (optionally moving) pivot (``docs/theory.md`` sec. 1;
Spong, Hutchinson & Vidyasagar 2006, *Robot Modeling and Control*), the Coriolis and centrifugal terms
c = (dM/dt) q_dot - d(1/2 q_dot' M q_dot)/dq obtained by automatic differentiation of that small M, the gravity
terms g = dV/dq, and the friction Q_f and input map S taken from the model itself.

Because this is a second derivation of the same physics, :func:`compact_dynamics` evaluates it against
``model_for(rig).dynamics`` at a handful of states before returning, and refuses (``SynthesisError``) if the two
disagree; the tests compare them on many random states.
"""

from __future__ import annotations

import casadi as ca
import numpy as np

from upswing.errors import SynthesisError
from upswing.model.dynamics import RigModel
from upswing.model.rig import Rig

# Relative agreement demanded between the compact form and the model: both are exact in exact arithmetic, so only
# rounding separates them (about 1e-15 relative per operation over a few hundred operations).
AGREEMENT = 1e-9


def compact_dynamics(rig: Rig, model: RigModel) -> ca.Function:
    """The rig's state derivative x_dot = f(x, u) as a compact casadi Function, parameters fixed.

    Parameters
    ----------
    rig : Rig
        Supplies the parameter values (masses [kg], lengths [m], inertias [kg m^2], gravity [m/s^2]).
    model : RigModel
        The model of the rig's base and actuator set (its friction law, smoothing and input map are reused).

    Returns
    -------
    casadi.Function
        ``f(x[n_states], u[n_inputs]) -> x_dot[n_states]``, SX, with common subexpressions merged.

    Raises
    ------
    SynthesisError
        If the compact form disagrees with ``model.dynamics`` (a sign that the model gained physics this module
        does not know about).
    """
    n_q = model.n_q
    on_cart = rig.base == "cart"
    x = ca.SX.sym("x", 2 * n_q)
    u = ca.SX.sym("u", model.n_inputs)
    q, qd = x[:n_q], x[n_q:]
    th1 = q[1] if on_cart else q[0]
    th2 = q[2] if on_cart else q[1]
    l1, lc1, lc2 = rig.link1.length, rig.link1.com, rig.link2.com
    m1, m2 = rig.link1.mass, rig.link2.mass
    I1, I2, g = rig.link1.inertia, rig.link2.inertia, rig.gravity
    c1, c12, c2 = ca.cos(th1), ca.cos(th1 + th2), ca.cos(th2)

    # Lumped mass matrix of the two links about the shoulder (kinetic energy of docs/conventions.md).
    m11 = I1 + I2 + m1 * lc1**2 + m2 * (l1**2 + lc2**2) + 2.0 * m2 * l1 * lc2 * c2
    m12 = I2 + m2 * lc2**2 + m2 * l1 * lc2 * c2
    m22 = I2 + m2 * lc2**2
    if on_cart:
        mxx = rig.cart.mass + m1 + m2
        mx1 = -(m1 * lc1 + m2 * l1) * c1 - m2 * lc2 * c12
        mx2 = -m2 * lc2 * c12
        M = ca.vertcat(ca.horzcat(mxx, mx1, mx2), ca.horzcat(mx1, m11, m12), ca.horzcat(mx2, m12, m22))
    else:
        M = ca.vertcat(ca.horzcat(m11, m12), ca.horzcat(m12, m22))
    potential = g * ((m1 * lc1 + m2 * l1) * c1 + m2 * lc2 * c12)

    # Coriolis and centrifugal terms: d/dt(dT/dq_dot) - dT/dq without the M q_ddot part.
    kinetic = 0.5 * ca.dot(qd, M @ qd)
    coriolis = ca.jacobian(M @ qd, q) @ qd - ca.gradient(kinetic, q)
    gravity = ca.gradient(potential, q)
    friction = model.friction(qd, rig.parameter_vector())
    force = ca.DM(model.input_map) @ u + friction - coriolis - gravity
    acceleration = _solve_small(M, force)
    f = ca.Function("compact_dynamics", [x, u], [ca.vertcat(qd, acceleration)], ["x", "u"], ["x_dot"],
                    {"cse": True})
    _check_against_model(rig, model, f)
    return f


def _solve_small(M: ca.SX, b: ca.SX) -> ca.SX:
    """M^-1 b for a symmetric 2x2 or 3x3 M by the adjugate (short, branch-free expressions)."""
    if M.shape[0] == 2:
        det = M[0, 0] * M[1, 1] - M[0, 1] * M[1, 0]
        return ca.vertcat(M[1, 1] * b[0] - M[0, 1] * b[1], -M[1, 0] * b[0] + M[0, 0] * b[1]) / det
    a, b_, c = M[0, 0], M[0, 1], M[0, 2]
    d, e, f = M[1, 0], M[1, 1], M[1, 2]
    g, h, i = M[2, 0], M[2, 1], M[2, 2]
    adj = ca.vertcat(
        ca.horzcat(e * i - f * h, c * h - b_ * i, b_ * f - c * e),
        ca.horzcat(f * g - d * i, a * i - c * g, c * d - a * f),
        ca.horzcat(d * h - e * g, b_ * g - a * h, a * e - b_ * d),
    )
    det = a * (e * i - f * h) - b_ * (d * i - f * g) + c * (d * h - e * g)
    return (adj @ b) / det


def _check_against_model(rig: Rig, model: RigModel, f: ca.Function) -> None:
    rng = np.random.default_rng(20240601)
    n, m = model.n_states, model.n_inputs
    p = rig.parameter_vector()
    scale = np.where(np.arange(n) < model.n_q, 3.0, 5.0)
    worst = 0.0
    for _ in range(6):
        xv = rng.uniform(-1.0, 1.0, n) * scale
        uv = rng.uniform(-1.0, 1.0, m) * rig.peak_inputs
        reference = model.rhs(xv, uv, p)
        compact = np.asarray(f(xv, uv)).ravel()
        worst = max(worst, float(np.max(np.abs(compact - reference)) / (1.0 + np.max(np.abs(reference)))))
    if worst > AGREEMENT:
        raise SynthesisError(
            f"the optimizer's compact equations of motion disagree with the rig model by {worst:.2e} (relative; "
            f"allowed {AGREEMENT:.0e}); the model has physics synthesis/swingup/compact.py does not know about. "
            "Extend compact.py to match upswing.model.dynamics.")
