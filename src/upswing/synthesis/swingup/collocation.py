"""Direct collocation of the swing-up as a casadi Opti problem solved by IPOPT.

The trajectory on [0, T] is cut into intervals at the mesh fractions 0 = tau_0 < ... < tau_N = 1 (t_k = T tau_k,
h_k = T (tau_{k+1} - tau_k)). Decision variables are the states x_k and inputs u_k at the nodes, the inputs at the
interval midpoints u_c,k (Hermite–Simpson only) and, for minimum time, T itself. With f_k = f(x_k, u_k):

Hermite–Simpson in separated form, the midpoint state x_c,k a decision variable too (Betts 2010, *Practical
Methods for Optimal Control and Estimation Using Nonlinear Programming*, 2nd ed., sec. 4.6.6; Kelly 2017,
*SIAM Review* 59(4), sec. 4.3)::

    0 = x_c,k - (x_k + x_{k+1}) / 2 - h_k / 8 (f_k - f_{k+1})
    0 = x_{k+1} - x_k - h_k / 6 (f_k + 4 f(x_c,k, u_c,k) + f_{k+1})

trapezoidal::

    0     = x_{k+1} - x_k - h_k / 2 (f_k + f_{k+1})

Between the nodes the state is the cubic Hermite interpolant through (x_k, f_k), (x_{k+1}, f_{k+1}) and the input
the quadratic through u_k, u_c,k, u_{k+1} (Hermite–Simpson); the state is the quadratic with slopes f_k, f_{k+1} and
the input linear (trapezoidal). :meth:`upswing.synthesis.swingup.plan.SwingUpPlan.sample` evaluates them.

Objective: minimum effort, J = integral of sum_i (u_i / peak_i)^2 dt [s] with the rig file's ``peak`` (Simpson's
rule for Hermite–Simpson, the trapezoidal rule otherwise); or minimum time, J = T + w * effort with a small
regularizing weight w.

The dynamics enter as one casadi Function mapped over all nodes and one over all midpoints, not as one inlined
graph: the problem builds in milliseconds, and because every dynamics call sees only its own point's variables
(the separated form), the Lagrangian Hessian is block diagonal and cheap. The compressed form (x_c,k substituted)
has fewer variables but couples f_c,k to both nodes through f_k, f_{k+1}; measured here it took about twice as long
per solve. Inputs are posed as fractions of the limit, so |u| <= limit is a simple bound on a variable (no slack),
and a new limit only changes a parameter.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import casadi as ca
import numpy as np

SCHEMES = ("hermite-simpson", "trapezoidal")


@dataclass(frozen=True)
class Layout:
    """Which constraints a problem has (fixed when the problem is built).

    Attributes
    ----------
    n_states, n_inputs : int
    scheme : str
        ``"hermite-simpson"`` or ``"trapezoidal"``.
    minimum_time : bool
        T is a decision variable when true; otherwise a parameter.
    speed_index : tuple of int
        For each input, the index in the state of the speed of the joint it drives.
    max_speed : tuple of float
        Speed bound of each actuated joint [rad/s or m/s].
    motor_line : tuple of bool
        Whether each input has a speed-dependent motor line (``stall`` and ``no_load_speed``).
    no_load_speed : tuple of float
        The line's zero-torque speed [rad/s or m/s] (ignored where ``motor_line`` is false).
    cart_travel : float or None
        Bound on |x| [m] (travel less the margin) for a cart rig; ``None`` on a fixed base.
    state_scale : tuple of float
        Typical size of each state [rad, m, rad/s, m/s]: the NLP works in x / scale.
    input_scale : tuple of float
        Typical size of each input [N m or N]: the rig's ``peak``; also the effort weights.
    """

    n_states: int
    n_inputs: int
    scheme: str
    minimum_time: bool
    speed_index: tuple[int, ...]
    max_speed: tuple[float, ...]
    motor_line: tuple[bool, ...]
    no_load_speed: tuple[float, ...]
    cart_travel: float | None
    state_scale: tuple[float, ...]
    input_scale: tuple[float, ...]


@dataclass(frozen=True)
class Values:
    """Parameter values of one solve: what continuation and restarts change without rebuilding.

    Attributes
    ----------
    limit : ndarray, shape (n_inputs,)
        |u_i| <= limit_i [N m or N].
    stall : ndarray, shape (n_inputs,)
        Motor line: -stall (1 + w / w0) <= u <= stall (1 - w / w0) [N m or N] (unused where there is no line).
    duration : float
        T [s] for a fixed final time; the initial value of T for minimum time.
    duration_bounds : tuple of float
        (lowest, highest) T [s] allowed in minimum time.
    start, goal : ndarray, shape (n_states,)
        Boundary states, both at rest for a swing-up.
    time_effort_weight : float
        w in J = T + w * effort [-] (minimum time only).
    """

    limit: np.ndarray
    stall: np.ndarray
    duration: float
    duration_bounds: tuple[float, float]
    start: np.ndarray
    goal: np.ndarray
    time_effort_weight: float


@dataclass(frozen=True)
class Guess:
    """An initial guess on the problem's own mesh.

    Attributes
    ----------
    x : ndarray, shape (N+1, n_states)
    u : ndarray, shape (N+1, n_inputs)
    u_mid : ndarray, shape (N, n_inputs)
    duration : float
        [s]
    x_mid : ndarray, shape (N, n_states), optional
        Midpoint states (a previous solution's); when absent they are the averages of neighbouring nodes.
    """

    x: np.ndarray
    u: np.ndarray
    u_mid: np.ndarray
    duration: float
    x_mid: np.ndarray | None = None


@dataclass(frozen=True)
class RawSolution:
    """What one IPOPT run returned (the last iterate, also when it failed).

    ``constraint_violation`` is the largest violation of any constraint in the scaled units the problem is posed in
    (defects divided by the state scales, inputs as fractions of the limit); ``solve_s`` is IPOPT's own wall time,
    ``cpu_s`` its processor time (the better measure on a shared machine) and ``overhead_s`` the wall time of the
    call outside IPOPT (creating the solver on a first call).
    """

    x: np.ndarray
    u: np.ndarray
    u_mid: np.ndarray
    x_mid: np.ndarray
    duration: float
    cost: float
    success: bool
    status: str
    iterations: int
    solve_s: float
    cpu_s: float
    overhead_s: float
    constraint_violation: float


class Collocation:
    """The swing-up NLP on one mesh, built once and solved for any :class:`Values` and :class:`Guess`.

    Parameters
    ----------
    dynamics : casadi.Function
        ``x_dot = f(x, u)`` with the parameters fixed (see :mod:`upswing.synthesis.swingup.compact`).
    layout : Layout
    mesh : ndarray, shape (N+1,)
        Strictly increasing fractions of the duration, from 0 to 1.
    max_iterations : int
        IPOPT's iteration limit.
    max_wall_time : float
        IPOPT's wall-time limit [s]; both limits are always set, since a failing solve can slow down many-fold.
    ipopt_options : dict, optional
        Extra IPOPT options (``{"mu_init": 1e-3}``), applied last.
    """

    def __init__(self, dynamics: ca.Function, layout: Layout, mesh: np.ndarray, *, max_iterations: int = 500,
                 max_wall_time: float = 10.0, ipopt_options: dict | None = None) -> None:
        started = time.perf_counter()
        self.layout = layout
        self.mesh = np.asarray(mesh, dtype=float)
        n, m, N = layout.n_states, layout.n_inputs, len(self.mesh) - 1
        hermite = layout.scheme == "hermite-simpson"
        sx = ca.DM(layout.state_scale)
        su = ca.DM(layout.input_scale)
        opti = ca.Opti()
        self.opti = opti

        # -- parameters ------------------------------------------------------------------------------------------
        self.p_limit = opti.parameter(m)     # |u_i| <= limit_i [N m or N]
        self.p_stall = opti.parameter(m)     # motor line's stall effort at this limit [N m or N]
        self.p_start = opti.parameter(n)
        self.p_goal = opti.parameter(n)
        self.p_weight = opti.parameter()     # effort weight in minimum time
        self.p_duration = opti.parameter()   # T [s] (minimum time: the scale of T)
        self.p_t_low = opti.parameter()      # bounds on T [s] in minimum time
        self.p_t_high = opti.parameter()

        # -- decision variables (scaled to order one) ------------------------------------------------------------
        self.X = opti.variable(n, N + 1)                     # x / state_scale at the nodes
        self.U = opti.variable(m, N + 1)                     # u / limit at the nodes
        self.Xc = opti.variable(n, N) if hermite else None   # x / state_scale at the midpoints
        self.Uc = opti.variable(m, N) if hermite else None   # u / limit at the midpoints
        self.T_scaled = opti.variable() if layout.minimum_time else None  # T / p_duration
        X = self.X * ca.repmat(sx, 1, N + 1)
        U = self.U * ca.repmat(self.p_limit, 1, N + 1)
        T = self.T_scaled * self.p_duration if layout.minimum_time else self.p_duration
        h = T * ca.DM(np.diff(self.mesh)).T  # (1, N) interval lengths [s]
        Hn = ca.repmat(h, n, 1)

        # -- dynamics --------------------------------------------------------------------------------------------
        F = dynamics.map(N + 1)(X, U)
        if hermite:
            Xc = self.Xc * ca.repmat(sx, 1, N)
            Uc = self.Uc * ca.repmat(self.p_limit, 1, N)
            Fc = dynamics.map(N)(Xc, Uc)
            interpolation = Xc - 0.5 * (X[:, :-1] + X[:, 1:]) - Hn / 8 * (F[:, :-1] - F[:, 1:])
            opti.subject_to(interpolation / ca.repmat(sx, 1, N) == 0)
            defect = X[:, 1:] - X[:, :-1] - Hn / 6 * (F[:, :-1] + 4 * Fc + F[:, 1:])
        else:
            defect = X[:, 1:] - X[:, :-1] - Hn / 2 * (F[:, :-1] + F[:, 1:])
        opti.subject_to(defect / ca.repmat(sx, 1, N) == 0)
        self._defect = defect

        # -- objective -------------------------------------------------------------------------------------------
        weights = ca.DM(1.0 / np.asarray(layout.input_scale) ** 2).T
        node_effort = weights @ (U**2)  # (1, N+1): sum_i (u_i / peak_i)^2
        if hermite:
            effort = ca.sum2(h / 6 * (node_effort[:-1] + 4 * (weights @ (Uc**2)) + node_effort[1:]))
        else:
            effort = ca.sum2(h / 2 * (node_effort[:-1] + node_effort[1:]))
        if layout.minimum_time:
            self.cost = T
            opti.minimize(self.T_scaled + self.p_weight * effort / self.p_duration)
        else:
            self.cost = effort
            opti.minimize(effort / self.p_duration)  # mean normalized effort: of order one

        # -- path constraints ------------------------------------------------------------------------------------
        opti.subject_to(opti.bounded(-1.0, self.U, 1.0))
        if hermite:
            opti.subject_to(opti.bounded(-1.0, self.Uc, 1.0))
        for i, index in enumerate(layout.speed_index):
            top = layout.max_speed[i] / layout.state_scale[index]
            opti.subject_to(opti.bounded(-top, self.X[index, :], top))
            if hermite:  # the midpoints are states the rig passes through too: bound them as the nodes
                opti.subject_to(opti.bounded(-top, self.Xc[index, :], top))
            if layout.motor_line[i]:
                # -stall (1 + w / w0) <= u <= stall (1 - w / w0)  <=>  -stall <= u + stall w / w0 <= stall
                stall = self.p_stall[i] / su[i]
                slope = self.p_stall[i] / layout.no_load_speed[i] / su[i]
                opti.subject_to(opti.bounded(-stall, U[i, :] / su[i] + slope * X[index, :], stall))
                if hermite:
                    opti.subject_to(opti.bounded(-stall, Uc[i, :] / su[i] + slope * Xc[index, :], stall))
        if layout.cart_travel is not None:
            top = layout.cart_travel / layout.state_scale[0]
            opti.subject_to(opti.bounded(-top, self.X[0, :], top))
            if hermite:
                opti.subject_to(opti.bounded(-top, self.Xc[0, :], top))
        if layout.minimum_time:
            opti.subject_to(opti.bounded(self.p_t_low / self.p_duration, self.T_scaled,
                                         self.p_t_high / self.p_duration))

        # -- boundary conditions ---------------------------------------------------------------------------------
        opti.subject_to(self.X[:, 0] == self.p_start / sx)
        opti.subject_to(self.X[:, -1] == self.p_goal / sx)

        # -- solver (the initial guess is set per solve) ---------------------------------------------------------
        options = {
            "print_time": False, "record_time": True, "detect_simple_bounds": True,
            "ipopt.print_level": 0, "ipopt.sb": "yes",
            "ipopt.max_iter": int(max_iterations), "ipopt.max_wall_time": float(max_wall_time),
            "ipopt.tol": 1e-8, "ipopt.constr_viol_tol": 1e-8,
        }
        options.update({f"ipopt.{k}": v for k, v in (ipopt_options or {}).items()})
        opti.solver("ipopt", options)
        self.build_s = time.perf_counter() - started

    @property
    def intervals(self) -> int:
        return len(self.mesh) - 1

    def defects(self, values: Values, guess: Guess) -> np.ndarray:
        """The collocation defects at the point ``guess`` (no solve), in state units [rad, m, rad/s, m/s].

        Returns
        -------
        ndarray, shape (N, n_states)
            Row k: x_{k+1} - x_k - h_k / 6 (f_k + 4 f_c,k + f_{k+1}) (Hermite–Simpson, with the guess's midpoint
            states) or x_{k+1} - x_k - h_k / 2 (f_k + f_{k+1}) (trapezoidal).
        """
        self._set(values, guess)
        return np.asarray(self.opti.value(self._defect, self.opti.initial()), dtype=float).T

    def solve(self, values: Values, guess: Guess) -> RawSolution:
        """Run IPOPT from ``guess`` with the parameters of ``values``; never raises on a failed solve."""
        lay = self.layout
        opti = self.opti
        sx = np.asarray(lay.state_scale)[:, None]
        limit = np.asarray(values.limit, dtype=float)[:, None]
        self._set(values, guess)

        # -- solve -----------------------------------------------------------------------------------------------
        started = time.perf_counter()
        try:
            solution = opti.solve_limited()
            value, stats = solution.value, solution.stats()
        except RuntimeError:  # IPOPT stopped with a failure status ("infeasible", "restoration failed", ...)
            value, stats = opti.debug.value, opti.stats()
        wall = time.perf_counter() - started
        solve_s = float(stats.get("t_wall_total", wall))
        x = _rows(value(self.X), lay.n_states) * sx.T
        u = _rows(value(self.U), lay.n_inputs) * limit.T
        if self.Xc is not None:
            x_mid = _rows(value(self.Xc), lay.n_states) * sx.T
            u_mid = _rows(value(self.Uc), lay.n_inputs) * limit.T
        else:
            x_mid, u_mid = 0.5 * (x[:-1] + x[1:]), 0.5 * (u[:-1] + u[1:])
        duration = float(value(self.T_scaled)) * values.duration if self.T_scaled is not None else values.duration
        g = np.asarray(value(opti.g), dtype=float).ravel()
        lbg = np.asarray(value(opti.lbg), dtype=float).ravel()
        ubg = np.asarray(value(opti.ubg), dtype=float).ravel()
        violation = float(np.max(np.concatenate([[0.0], lbg - g, g - ubg])))
        return RawSolution(
            x=x, u=u, u_mid=u_mid, x_mid=x_mid, duration=duration, cost=float(value(self.cost)),
            success=bool(stats.get("success", False)), status=str(stats.get("return_status", "unknown")),
            iterations=int(stats.get("iter_count", 0)), solve_s=solve_s,
            cpu_s=float(stats.get("t_proc_total", solve_s)), overhead_s=max(wall - solve_s, 0.0),
            constraint_violation=violation,
        )

    def _set(self, values: Values, guess: Guess) -> None:
        """Parameter values and the initial guess (scaled as the decision variables are)."""
        lay = self.layout
        opti = self.opti
        sx = np.asarray(lay.state_scale)[:, None]
        limit = np.asarray(values.limit, dtype=float)[:, None]
        opti.set_value(self.p_limit, values.limit)
        opti.set_value(self.p_stall, values.stall)
        opti.set_value(self.p_start, values.start)
        opti.set_value(self.p_goal, values.goal)
        opti.set_value(self.p_weight, values.time_effort_weight)
        opti.set_value(self.p_duration, values.duration)
        opti.set_value(self.p_t_low, values.duration_bounds[0])
        opti.set_value(self.p_t_high, values.duration_bounds[1])
        x_guess = np.asarray(guess.x, dtype=float)
        opti.set_initial(self.X, x_guess.T / sx)
        opti.set_initial(self.U, np.clip(np.asarray(guess.u, dtype=float).T / limit, -1.0, 1.0))
        if self.Xc is not None:
            x_mid = 0.5 * (x_guess[:-1] + x_guess[1:]) if guess.x_mid is None else np.asarray(guess.x_mid, dtype=float)
            opti.set_initial(self.Xc, x_mid.T / sx)
            opti.set_initial(self.Uc, np.clip(np.asarray(guess.u_mid, dtype=float).T / limit, -1.0, 1.0))
        if self.T_scaled is not None:
            opti.set_initial(self.T_scaled, guess.duration / values.duration)


def _rows(value: object, n_rows: int) -> np.ndarray:
    """A casadi matrix value (n_rows, k) as a numpy array (k, n_rows)."""
    return np.asarray(value, dtype=float).reshape(n_rows, -1).T
