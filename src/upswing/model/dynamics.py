"""The rig's equations of motion, derived once from the Lagrangian with casadi.

One derivation serves both base kinds (the families are presets of it). With generalized coordinates q
(``[theta1, theta2]`` on a fixed base, ``[x, theta1, theta2]`` on a cart) the model is

    M(q) q_ddot + c(q, q_dot) + g(q) = S u + Q_f(q_dot),

where M is the mass matrix (from the kinetic energy T = 1/2 q_dot' M q_dot), c the Coriolis and centrifugal terms
(c = d(M q_dot)/dq q_dot - dT/dq), g = dV/dq the gravity terms, S the 0/1 input map of the actuated joints and
Q_f the viscous and Coulomb friction at each joint (see ``docs/conventions.md`` for the geometry).

Every function takes its arguments in the fixed order ``(x, u, p)`` where ``p`` is the parameter vector of
:data:`upswing.model.rig.PARAMETER_NAMES`, so one compiled model serves every rig of the same base and actuator
set, and Monte Carlo runs only swap ``p``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import casadi as ca
import numpy as np

from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.model.schema import JOINTS

POINT_NAMES = ("pivot", "com1", "elbow", "com2", "tip")
LOAD_NAMES = ("force_x", "force_y", "moment")


@dataclass(frozen=True)
class RigModel:
    """Compiled equations of motion for one base kind and actuator set.

    Attributes
    ----------
    base : str
        ``"fixed"`` or ``"cart"``.
    actuated : tuple of str
        Actuated joints in input order.
    n_q : int
        Number of generalized coordinates (2 or 3); the state has 2 * n_q entries.
    coulomb_smoothing : float
        Velocity scale v_s [rad/s or m/s] of the smoothed Coulomb law f * tanh(v / v_s); 0 means the exact
        f * sgn(v) with sgn(0) = 0.
    dynamics : casadi.Function
        ``x_dot = dynamics(x, u, p)``.
    mass_matrix : casadi.Function
        ``M = mass_matrix(q, p)``, shape (n_q, n_q) [kg, kg m, kg m^2].
    bias : casadi.Function
        ``c + g = bias(q, q_dot, p)``: Coriolis, centrifugal and gravity terms [N or N m].
    gravity_terms : casadi.Function
        ``g = gravity_terms(q, p)`` [N or N m].
    friction : casadi.Function
        ``Q_f = friction(q_dot, p)``, generalized friction forces [N or N m] (acting on the rig).
    input_map : numpy.ndarray
        S, shape (n_q, n_inputs): which generalized force each input drives.
    energy : casadi.Function
        ``[kinetic, potential, total] = energy(x, p)`` [J]; potential is zero at the shoulder pivot's height.
    points : casadi.Function
        ``P = points(q, p)``, shape (2, 5): columns pivot, com1, elbow, com2, tip as (x, y) [m].
    base_load : casadi.Function
        ``[force_x, force_y, moment] = base_load(x, u, p)``: force [N] the rig exerts on its base (the fixed mount
        or the rail), y up, so a rig at rest pushes with force_y = -(total mass) * g; and the moment [N m] the
        shoulder joint passes to the base (minus the net shoulder joint torque, counter-clockwise positive).
    jacobians : casadi.Function
        ``A, B = jacobians(x, u, p)``: df/dx and df/du by automatic differentiation.
    """

    base: str
    actuated: tuple[str, ...]
    n_q: int
    coulomb_smoothing: float
    dynamics: ca.Function
    mass_matrix: ca.Function
    bias: ca.Function
    gravity_terms: ca.Function
    friction: ca.Function
    input_map: np.ndarray
    energy: ca.Function
    points: ca.Function
    base_load: ca.Function
    jacobians: ca.Function

    @property
    def n_states(self) -> int:
        return 2 * self.n_q

    @property
    def n_inputs(self) -> int:
        return len(self.actuated)

    def rhs(self, x: np.ndarray, u: np.ndarray, p: np.ndarray) -> np.ndarray:
        """Evaluate x_dot = f(x, u, p) for one state, as a flat numpy array."""
        return np.asarray(self.dynamics(x, u, p)).ravel()

    def rhs_batch(self, X: np.ndarray, U: np.ndarray, P: np.ndarray) -> np.ndarray:
        """Evaluate f for many states at once.

        Parameters
        ----------
        X : ndarray, shape (N, n_states)
        U : ndarray, shape (N, n_inputs)
        P : ndarray, shape (N, n_parameters) or (n_parameters,)

        Returns
        -------
        ndarray, shape (N, n_states)
        """
        X = np.atleast_2d(X)
        N = X.shape[0]
        U = np.broadcast_to(np.asarray(U, dtype=float).reshape(-1, self.n_inputs), (N, self.n_inputs))
        P = np.broadcast_to(np.asarray(P, dtype=float).reshape(-1, len(PARAMETER_NAMES)),
                            (N, len(PARAMETER_NAMES)))
        out = _mapped(self.dynamics, N)(X.T, U.T, P.T)
        return np.asarray(out).T


@lru_cache(maxsize=64)
def _mapped(function: ca.Function, n: int) -> ca.Function:
    return function.map(n)


def model_for(rig: Rig, *, coulomb_smoothing: float = 0.0) -> RigModel:
    """The compiled model for a rig's base kind and actuator set (cached: built once per process)."""
    return build_model(rig.base, rig.actuated, coulomb_smoothing=coulomb_smoothing)


@lru_cache(maxsize=32)
def build_model(base: str, actuated: tuple[str, ...], *, coulomb_smoothing: float = 0.0) -> RigModel:
    """Derive the equations of motion symbolically and compile them to casadi Functions.

    Parameters
    ----------
    base : {"fixed", "cart"}
    actuated : tuple of str
        Actuated joints, a subset of ("cart", "shoulder", "elbow") in that order.
    coulomb_smoothing : float, optional
        v_s of the smoothed Coulomb law (see :class:`RigModel`); 0 (default) keeps sgn(v).

    Returns
    -------
    RigModel
    """
    if base not in ("fixed", "cart"):
        raise ValueError(f'base must be "fixed" or "cart"; got {base!r}')
    on_cart = base == "cart"
    n_q = 3 if on_cart else 2
    p = ca.SX.sym("p", len(PARAMETER_NAMES))
    P = {name: p[i] for i, name in enumerate(PARAMETER_NAMES)}
    q = ca.SX.sym("q", n_q)
    qd = ca.SX.sym("qd", n_q)
    qdd = ca.SX.sym("qdd", n_q)

    # Geometry (docs/conventions.md): angles from the upward vertical, theta2 relative to link 1.
    cart_x = q[0] if on_cart else ca.SX(0)
    th1 = q[1] if on_cart else q[0]
    th2 = q[2] if on_cart else q[1]
    phi2 = th1 + th2
    l1, lc1, lc2, l2 = P["link1.length"], P["link1.com"], P["link2.com"], P["link2.length"]
    pivot = ca.vertcat(cart_x, 0)
    com1 = pivot + ca.vertcat(-lc1 * ca.sin(th1), lc1 * ca.cos(th1))
    elbow = pivot + ca.vertcat(-l1 * ca.sin(th1), l1 * ca.cos(th1))
    com2 = elbow + ca.vertcat(-lc2 * ca.sin(phi2), lc2 * ca.cos(phi2))
    tip = elbow + ca.vertcat(-l2 * ca.sin(phi2), l2 * ca.cos(phi2))

    # Mass matrix from the velocity Jacobians: M = sum m J_v' J_v + I J_w' J_w.
    J1, J2, Jp = ca.jacobian(com1, q), ca.jacobian(com2, q), ca.jacobian(pivot, q)
    Jw1, Jw2 = ca.jacobian(th1, q), ca.jacobian(phi2, q)
    m1, m2, mc = P["link1.mass"], P["link2.mass"], P["cart.mass"]
    M = (m1 * J1.T @ J1 + m2 * J2.T @ J2 + P["link1.inertia"] * Jw1.T @ Jw1
         + P["link2.inertia"] * Jw2.T @ Jw2)
    if on_cart:
        M = M + mc * Jp.T @ Jp
    M = ca.simplify(M)

    kinetic = 0.5 * qd.T @ M @ qd
    g = P["gravity"]
    potential = g * (m1 * com1[1] + m2 * com2[1])
    coriolis = ca.jacobian(M @ qd, q) @ qd - ca.gradient(kinetic, q)
    gravity = ca.gradient(potential, q)

    # Joint friction: viscous b * v plus Coulomb f * sgn(v) (optionally smoothed), opposing each joint's motion.
    joint_speed = {"cart": qd[0], "shoulder": qd[1], "elbow": qd[2]} if on_cart else {
        "shoulder": qd[0], "elbow": qd[1]}
    coeff = {"cart": ("cart.damping", "cart.coulomb"), "shoulder": ("link1.damping", "link1.coulomb"),
             "elbow": ("link2.damping", "link2.coulomb")}

    def sgn(v: ca.SX) -> ca.SX:
        return ca.tanh(v / coulomb_smoothing) if coulomb_smoothing > 0 else ca.sign(v)

    friction = ca.vertcat(*[
        -P[coeff[j][0]] * v - P[coeff[j][1]] * sgn(v) for j, v in joint_speed.items()])

    joints_here = [j for j in JOINTS if j in joint_speed]  # generalized coordinate order
    S = np.zeros((n_q, len(actuated)))
    for col, joint in enumerate(actuated):
        S[joints_here.index(joint), col] = 1.0
    u = ca.SX.sym("u", len(actuated))

    generalized_force = ca.DM(S) @ u + friction - coriolis - gravity
    acceleration = ca.solve(M, generalized_force)
    x = ca.vertcat(q, qd)
    xdot = ca.vertcat(qd, acceleration)

    # Base load: Newton for the whole moving system. The base supplies F_support, and the moving bodies'
    # momentum rate is sum m a = F_support + sum m g_vec, so the force on the base is sum m (g_vec - a).
    def accel(point: ca.SX) -> ca.SX:
        Jq = ca.jacobian(point, q)
        return Jq @ qdd + ca.jacobian(Jq @ qd, q) @ qd

    g_vec = ca.vertcat(0, -g)
    force = m1 * (g_vec - accel(com1)) + m2 * (g_vec - accel(com2))
    if on_cart:
        force = force + mc * (g_vec - accel(pivot))
    force = ca.substitute(force, qdd, acceleration)
    shoulder_torque = (ca.DM(S) @ u + friction)[joints_here.index("shoulder")]
    load = ca.vertcat(force, -shoulder_torque)

    return RigModel(
        base=base,
        actuated=tuple(actuated),
        n_q=n_q,
        coulomb_smoothing=coulomb_smoothing,
        dynamics=ca.Function("dynamics", [x, u, p], [xdot], ["x", "u", "p"], ["x_dot"]),
        mass_matrix=ca.Function("mass_matrix", [q, p], [M], ["q", "p"], ["M"]),
        bias=ca.Function("bias", [q, qd, p], [coriolis + gravity], ["q", "q_dot", "p"], ["bias"]),
        gravity_terms=ca.Function("gravity_terms", [q, p], [gravity], ["q", "p"], ["g"]),
        friction=ca.Function("friction", [qd, p], [friction], ["q_dot", "p"], ["Q_f"]),
        input_map=S,
        energy=ca.Function("energy", [x, p], [ca.vertcat(kinetic, potential, kinetic + potential)],
                           ["x", "p"], ["energy"]),
        points=ca.Function("points", [q, p], [ca.horzcat(pivot, com1, elbow, com2, tip)], ["q", "p"],
                           ["points"]),
        base_load=ca.Function("base_load", [x, u, p], [load], ["x", "u", "p"], ["load"]),
        jacobians=ca.Function("jacobians", [x, u, p], [ca.jacobian(xdot, x), ca.jacobian(xdot, u)],
                              ["x", "u", "p"], ["A", "B"]),
    )
