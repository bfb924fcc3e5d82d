"""The result of a swing-up optimization and the interpolants that turn its nodes into a continuous reference.

Between the nodes t_k and t_{k+1} (h = t_{k+1} - t_k, s = (t - t_k) / h in [0, 1]) a plan is read as the collocation
scheme itself defines it (Kelly 2017, *SIAM Review* 59(4), sec. 3.4 and 4.4):

Hermite–Simpson
    state: the cubic Hermite polynomial through x_k, x_{k+1} with slopes f_k, f_{k+1}::

        x(s) = (2s^3 - 3s^2 + 1) x_k + (s^3 - 2s^2 + s) h f_k + (-2s^3 + 3s^2) x_{k+1} + (s^3 - s^2) h f_{k+1}

    input: the quadratic through u_k (s = 0), u_c,k (s = 1/2) and u_{k+1} (s = 1)::

        u(s) = (1 - s)(1 - 2s) u_k + 4 s (1 - s) u_c,k + s (2s - 1) u_{k+1}

trapezoidal
    state: the quadratic with x(0) = x_k and slopes f_k, f_{k+1} at the ends::

        x(s) = x_k + s h f_k + s^2 h / 2 (f_{k+1} - f_k)

    input: linear from u_k to u_{k+1}.

Here f_k = f(x_k, u_k) is the model's state derivative at node k (``SwingUpPlan.x_dot``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from upswing.errors import SynthesisError
from upswing.safety import CAUTIONS

PLAN_CAUTIONS: tuple[str, ...] = (
    "A swing-up trajectory is an open-loop reference: never play its feed-forward alone on the rig; track it with "
    "feedback and hand over to the balance controller, and verify that on the uncertain model first.",
    "The optimizer drives the input to its limit for long stretches: make sure the drive's own current limit and "
    "a hardware torque (force) limit sit at or below the limit used here, and that the links' swept circle and "
    "the rail's ends are guarded (ISO 14120, ISO 13857).",
    *CAUTIONS,
)


@dataclass(frozen=True)
class Attempt:
    """One IPOPT run made while looking for a plan.

    Attributes
    ----------
    strategy : str
        How its initial guess was made (``cold``, ``restart 2``, ``energy rollout``, ``continuation from 3.8``,
        ``warm start``, ``mesh refinement 1``, ...).
    limit : ndarray, shape (n_inputs,)
        Input limit of that run [N m or N].
    intervals : int
        Mesh size N.
    success : bool
        Whether IPOPT converged (before any mesh check).
    solver_status : str
        IPOPT's return status.
    iterations : int
    build_s, solve_s, cpu_s : float
        Wall time to build the problem (including creating the solver on its first solve), IPOPT's wall time and
        IPOPT's processor time [s].
    constraint_violation : float
        Largest constraint violation in the problem's scaled units (see :mod:`.collocation`).
    cost : float
        Objective value reached: effort [s] or duration [s].
    """

    strategy: str
    limit: np.ndarray
    intervals: int
    success: bool
    solver_status: str
    iterations: int
    build_s: float
    solve_s: float
    cpu_s: float
    constraint_violation: float
    cost: float


@dataclass(frozen=True)
class SwingUpPlan:
    """An optimized swing-up from a start state to ``upright`` at rest.

    Attributes
    ----------
    t : ndarray, shape (N+1,)
        Node times [s], from 0 to ``duration``.
    x : ndarray, shape (N+1, n_states)
        States at the nodes, in ``state_names`` order [rad, m, rad/s, m/s].
    u : ndarray, shape (N+1, n_inputs)
        Inputs at the nodes [N m or N]; between nodes see :meth:`sample` and the module docstring.
    u_mid : ndarray, shape (N, n_inputs)
        Inputs at the interval midpoints [N m or N] (Hermite–Simpson decision variables; for trapezoidal, the
        average of the two nodes).
    x_dot : ndarray, shape (N+1, n_states)
        The model's state derivative f(x_k, u_k) at the nodes (slopes of the state interpolant).
    scheme : str
        ``"hermite-simpson"`` or ``"trapezoidal"``.
    success : bool
        True when IPOPT converged and every interval passed the re-integration check (``max_interval_error`` at or
        below ``mesh_tolerance``). Only then is the plan fit to track.
    status : str
        ``"solved"``, ``"mesh error above tolerance"``, or ``"no swing-up found"`` (every strategy failed).
    solver_status : str
        IPOPT's return status of the last solve.
    message : str
        One paragraph for a person: what was found or why not, and what to try.
    iterations : int
        IPOPT iterations of the solve that produced this plan (see ``attempts`` for every run).
    solve_s, build_s, cpu_s : float
        IPOPT wall time, problem build time, and IPOPT processor time of that solve [s].
    total_s : float
        Wall time of the whole call, all attempts and mesh checks included [s].
    constraint_violation : float
        Largest constraint violation of that solve, in the scaled units of :mod:`.collocation`.
    max_interval_error : float
        Largest per-interval re-integration error (see :mod:`.mesh`): the state reached by integrating each
        interval from x_k with DOP853 under the interpolated input, against x_{k+1}; speeds weighted by 0.1 s
        [rad or m].
    interval_errors : ndarray, shape (N,)
        That error for every interval.
    mesh_tolerance : float
        The bound the mesh was refined to meet [rad or m].
    coulomb_smoothing : float
        v_s of the smoothed Coulomb law the plan was optimized and checked with [rad/s or m/s]: use
        ``model_for(rig, coulomb_smoothing=plan.coulomb_smoothing)`` to reproduce it.
    refinements : int
        Mesh refinement rounds made.
    cost : float
        Effort integral of sum_i (u_i / peak_i)^2 over the plan [s] (with ``peak`` from the rig file), or the
        duration [s] for minimum time.
    effort : float
        The effort integral [s], also for minimum time.
    duration : float
        T [s].
    minimum_time : bool
        Whether T was minimized.
    peak_input : ndarray, shape (n_inputs,)
        Largest |u| over the nodes and midpoints [N m or N].
    limit : ndarray, shape (n_inputs,)
        The input limit the plan respects [N m or N] (the rig's ``peak`` unless overridden).
    start, goal : ndarray, shape (n_states,)
        Boundary states (the goal is ``upright`` at rest, angles possibly shifted by whole turns).
    strategy : str
        How the solution was found (``cold``, ``restart 2``, ``continuation from 3.8 -> 1.9``, ...).
    attempts : tuple of Attempt
        Every IPOPT run made, in order: the evidence behind a failure.
    state_names, input_names : tuple of str
    cautions : tuple of str
        Safety notes that travel with the plan.
    """

    t: np.ndarray
    x: np.ndarray
    u: np.ndarray
    u_mid: np.ndarray
    x_dot: np.ndarray
    scheme: str
    success: bool
    status: str
    solver_status: str
    message: str
    iterations: int
    solve_s: float
    build_s: float
    cpu_s: float
    total_s: float
    constraint_violation: float
    max_interval_error: float
    interval_errors: np.ndarray
    mesh_tolerance: float
    coulomb_smoothing: float
    refinements: int
    cost: float
    effort: float
    duration: float
    minimum_time: bool
    peak_input: np.ndarray
    limit: np.ndarray
    start: np.ndarray
    goal: np.ndarray
    strategy: str
    attempts: tuple[Attempt, ...]
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]
    cautions: tuple[str, ...] = field(default=PLAN_CAUTIONS)

    @property
    def intervals(self) -> int:
        """Number of mesh intervals N."""
        return len(self.t) - 1

    def sample(self, t_query: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Reference state and feed-forward input at arbitrary times, from the collocation interpolants.

        Parameters
        ----------
        t_query : float or ndarray, shape (K,)
            Times [s]; values outside [0, duration] are clamped to the ends.

        Returns
        -------
        x_ref : ndarray, shape (n_states,) or (K, n_states)
        u_ff : ndarray, shape (n_inputs,) or (K, n_inputs)
            Shapes follow ``t_query`` (scalar in, one row out).
        """
        return interpolate(self.scheme, self.t, self.x, self.x_dot, self.u, self.u_mid, t_query)

    def require_success(self) -> SwingUpPlan:
        """Return the plan if it succeeded; raise :class:`~upswing.errors.SynthesisError` with its message if not."""
        if not self.success:
            raise SynthesisError(self.message)
        return self


def interpolate(scheme: str, t: np.ndarray, x: np.ndarray, x_dot: np.ndarray, u: np.ndarray, u_mid: np.ndarray,
                t_query: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Evaluate the collocation interpolants (module docstring) at ``t_query``; see :meth:`SwingUpPlan.sample`."""
    scalar = np.ndim(t_query) == 0
    tq = np.clip(np.atleast_1d(np.asarray(t_query, dtype=float)), t[0], t[-1])
    k = np.clip(np.searchsorted(t, tq, side="right") - 1, 0, len(t) - 2)
    h = (t[k + 1] - t[k])[:, None]
    s = (tq - t[k])[:, None] / h
    if scheme == "hermite-simpson":
        h00, h10 = 2 * s**3 - 3 * s**2 + 1, s**3 - 2 * s**2 + s
        h01, h11 = -2 * s**3 + 3 * s**2, s**3 - s**2
        xs = h00 * x[k] + h10 * h * x_dot[k] + h01 * x[k + 1] + h11 * h * x_dot[k + 1]
        us = (1 - s) * (1 - 2 * s) * u[k] + 4 * s * (1 - s) * u_mid[k] + s * (2 * s - 1) * u[k + 1]
    elif scheme == "trapezoidal":
        xs = x[k] + s * h * x_dot[k] + s**2 * h / 2 * (x_dot[k + 1] - x_dot[k])
        us = (1 - s) * u[k] + s * u[k + 1]
    else:
        raise ValueError(f"unknown scheme {scheme!r}")
    if scalar:
        return xs[0], us[0]
    return xs, us
