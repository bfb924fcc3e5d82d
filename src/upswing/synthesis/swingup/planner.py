"""Plan a swing-up: set up the collocation problem for a rig, try guesses until IPOPT converges, check the mesh.

The search, in the order of ``strategies`` (each only while nothing has succeeded yet):

``warm``
    from ``initial_plan`` (explicit warm start: sizing and trade-off sweeps pass their neighbour's plan);
``cold``
    from the interpolation guess;
``restarts``
    from ``restarts`` random smooth guesses drawn from ``numpy.random.default_rng(seed)``;
``rollout``
    from a simulation of an energy-pumping law (``guess_law``, or :func:`.guesses.energy_pumping_law` on a fixed
    base);
``continuation``
    solve at a higher limit (1.5, 2.25, 3.4, 5 times the target, cold) and step the limit back down, each step
    warm-started from the last solution, halving the step after a failure.

A converged solution is then re-integrated interval by interval (:mod:`.mesh`) and re-solved on a refined mesh
until every interval passes. IPOPT saying "infeasible" is not taken as a fact about the rig: a plan reports
"no swing-up found" only after every strategy failed, and lists them.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import replace

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import Rig
from upswing.synthesis.swingup import guesses
from upswing.synthesis.swingup.collocation import Collocation, Guess, RawSolution
from upswing.synthesis.swingup.mesh import interval_errors, refine
from upswing.synthesis.swingup.plan import Attempt, SwingUpPlan
from upswing.synthesis.swingup.problem import Problem

STRATEGIES = ("warm", "cold", "restarts", "rollout", "continuation")
CONTINUATION_FACTORS = (1.5, 2.25, 3.4, 5.0)
CONTINUATION_MAX_SOLVES = 14
MIN_CONTINUATION_STEP = 0.01  # smallest step in log limit worth a solve
SOLVED = "solved"
MESH_FAILED = "mesh error above tolerance"
NOT_FOUND = "no swing-up found"


def plan_swingup(
    rig: Rig,
    *,
    duration: float | None = None,
    minimum_time: bool = False,
    scheme: str = "hermite-simpson",
    intervals: int = 100,
    start: str | np.ndarray = "hanging",
    seed: int = 0,
    peak: float | Sequence[float] | np.ndarray | None = None,
    initial_plan: SwingUpPlan | None = None,
    guess_law: Callable[[float, np.ndarray], np.ndarray] | None = None,
    strategies: Sequence[str] = STRATEGIES,
    restarts: int = 3,
    travel_margin: float = 0.05,
    coulomb_smoothing: float = 0.2,
    mesh_tolerance: float | None = None,
    max_refinements: int = 5,
    max_iterations: int = 500,
    max_wall_time: float = 10.0,
    time_effort_weight: float = 1e-2,
    ipopt_options: dict | None = None,
    headroom: float | None = None,
    speed_headroom: float | None = None,
) -> SwingUpPlan:
    """Optimize a swing-up from ``start`` to ``upright`` at rest by direct collocation with IPOPT.

    Minimizes the effort integral of sum_i (u_i / peak_i)^2 dt over a fixed duration, or the duration itself,
    subject to the rig's equations of motion, |u_i| <= limit_i at every node and midpoint, the motor line
    -stall (1 + w / w0) <= u <= stall (1 - w / w0) where the rig file gives one (scaled with the limit when
    ``peak`` overrides it), |w_j| <= ``max_speed`` for every actuated joint and |x| <= travel - ``travel_margin``
    on a cart rig, at every node.

    Parameters
    ----------
    rig : Rig
    duration : float, optional
        T [s]. Default: :func:`.problem.default_duration`. With ``minimum_time`` it is where the search starts, and T is
        kept within [T / 10, 3 T].
    minimum_time : bool
        Minimize T (with ``time_effort_weight`` times the effort added to regularize bang-bang inputs).
    scheme : {"hermite-simpson", "trapezoidal"}
    intervals : int
        Initial number of mesh intervals N (refinement may add up to 3 N more).
    start : str or ndarray, shape (n_states,)
        An equilibrium name or a state; default ``"hanging"``.
    seed : int
        Seed of the random restarts.
    peak : float or array, optional
        Input limit(s) [N m or N] instead of the rig file's ``peak``; a float applies to every input.
    initial_plan : SwingUpPlan, optional
        Warm start (strategy ``warm``), read on the new mesh and stretched to the new duration.
    guess_law : callable, optional
        ``u = law(t, x)`` for the rollout guess (e.g. an energy-based swing-up law).
    strategies : sequence of str
        Subset and order of ``warm``, ``cold``, ``restarts``, ``rollout``, ``continuation``.
    restarts : int
        Number of random restarts.
    travel_margin : float
        Distance kept from each end stop [m] (cart rigs).
    coulomb_smoothing : float
        v_s of the smoothed Coulomb law f tanh(v / v_s) [rad/s or m/s]. The optimizer needs a smooth model; the
        default 0.2 rad/s changes the friction torque only while a joint turns slower than about 0.5 rad/s, and a
        sharper law leaves large re-integration errors wherever a joint reverses.
    mesh_tolerance : float, optional
        Bound on the per-interval re-integration error [rad or m] (speeds weighted by 0.1 s; see :mod:`.mesh`).
        Default: one count of the rig's angle encoder, at most 2e-3 rad: an error the rig cannot even see.
    max_refinements : int
        Mesh refinement rounds allowed.
    max_iterations, max_wall_time : int, float
        IPOPT limits for every single solve [-, s]. Cold starts on the demo acrobot took 80 to 420 iterations
        between 3 and 1.5 times the smallest feasible limit; failing solves near that limit run to the limit.
    time_effort_weight : float
        Effort weight in minimum time [-].
    ipopt_options : dict, optional
        Extra IPOPT options.
    headroom : float, optional
        Fraction in (0, 1] of the input limit (``peak`` or the rig's, and the motor line with it) the plan may
        use; default the rig file's ``[swingup].plan_effort_share`` (1). Below 1 it leaves the tracking feedback
        effort of its own. Measured on the demo acrobot (200 tracked runs, seed 0, session-1 tracking): 0.85 raised
        the RMS effort (0.91 against 0.81 N m) and did not raise the catch rate (0.76 against 0.79).
    speed_headroom : float, optional
        Fraction in (0, 1] of every actuated joint's ``max_speed`` the plan may use; default the rig file's
        ``[swingup].plan_speed_share`` (0.9). A tracked run on an uncertain rig departs from its plan and
        overshoots the planned speeds by a few per cent (demo acrobot: 26.5 to 27 rad/s against a plan at its
        26 rad/s bound), so a plan that rides max_speed leaves the tracked run over it (common practice: keep a
        margin between the planned and the rated speed). Motor sizing plans to the full limits (1 and 1).
    Returns
    -------
    SwingUpPlan
        Always returned; ``success`` is false with a ``message`` saying what was tried and what to try next when
        no swing-up was found. Call :meth:`SwingUpPlan.require_success` to raise instead.

    Raises
    ------
    RequestError
        For impossible requests (unknown scheme, too few intervals, non-positive duration or limit, a start
        state outside the rail, ...).
    """
    started = time.perf_counter()
    problem = Problem.create(rig, scheme=scheme, intervals=intervals, start=start, peak=peak, duration=duration,
                              travel_margin=travel_margin, coulomb_smoothing=coulomb_smoothing,
                              mesh_tolerance=mesh_tolerance, max_iterations=max_iterations,
                              max_wall_time=max_wall_time, time_effort_weight=time_effort_weight,
                              ipopt_options=ipopt_options,
                              headroom=rig.swingup.plan_effort_share if headroom is None else headroom,
                              speed_headroom=rig.swingup.plan_speed_share if speed_headroom is None
                              else speed_headroom)
    unknown = [s for s in strategies if s not in STRATEGIES]
    if unknown or not strategies:
        raise RequestError(f"strategies must be a non-empty subset of {', '.join(STRATEGIES)}; got {list(strategies)}")
    if restarts < 0:
        raise RequestError(f"restarts must be >= 0; got {restarts}")
    search = _Search(problem, seed=seed, restarts=restarts, guess_law=guess_law)
    if minimum_time:
        found = search.minimum_time(strategies, initial_plan)
    else:
        found = search.fixed_duration(strategies, initial_plan, problem.duration)
    if found is None and not search.attempts:
        raise RequestError(f"none of the strategies {list(strategies)} could run: 'warm' needs initial_plan, "
                           "'rollout' needs guess_law on a cart rig")
    if found is None:
        return search.failure_plan(minimum_time, started)
    raw, strategy, mesh = found
    return search.refine_and_finish(raw, strategy, mesh, minimum_time, max_refinements, started)


# ----------------------------------------------------------------------------------------------------------------
# Search


class _Search:
    """Runs the strategies for one problem and keeps the evidence (every attempt)."""

    def __init__(self, problem: Problem, *, seed: int, restarts: int,
                 guess_law: Callable[[float, np.ndarray], np.ndarray] | None) -> None:
        self.problem = problem
        self.seed = seed
        self.restarts = restarts
        self.guess_law = guess_law
        self.attempts: list[Attempt] = []
        self._built: dict[tuple, Collocation] = {}
        self.mesh = np.linspace(0.0, 1.0, problem.intervals + 1)
        self.last: RawSolution | None = None
        self.last_goal = problem.goal

    # -- one solve ---------------------------------------------------------------------------------------------

    def collocation(self, mesh: np.ndarray, minimum_time: bool) -> tuple[Collocation, float]:
        key = (tuple(mesh), minimum_time)
        if key in self._built:
            return self._built[key], 0.0
        pr = self.problem
        col = Collocation(pr.dynamics, pr.layout(minimum_time), mesh, max_iterations=pr.max_iterations,
                          max_wall_time=pr.max_wall_time, ipopt_options=pr.ipopt_options)
        self._built = {key: col}  # keep one problem alive: a new mesh or mode replaces it
        return col, col.build_s

    def solve(self, strategy: str, guess: Guess, *, mesh: np.ndarray, minimum_time: bool, duration: float,
              limit: np.ndarray | None = None, goal: np.ndarray | None = None) -> RawSolution:
        col, build_s = self.collocation(mesh, minimum_time)
        values = self.problem.values(duration, limit, goal)
        raw = col.solve(values, guess)
        self.attempts.append(Attempt(
            strategy=strategy, limit=values.limit.copy(), intervals=col.intervals, success=raw.success,
            solver_status=raw.status, iterations=raw.iterations, build_s=build_s + raw.overhead_s,
            solve_s=raw.solve_s, cpu_s=raw.cpu_s, constraint_violation=raw.constraint_violation, cost=raw.cost))
        self.last = raw
        self.last_goal = values.goal
        return raw

    # -- strategies --------------------------------------------------------------------------------------------

    def fixed_duration(self, strategies: Sequence[str], initial_plan: SwingUpPlan | None, duration: float,
                       *, minimum_time: bool = False) -> tuple[RawSolution, str, np.ndarray] | None:
        pr = self.problem
        mesh = self.mesh
        for strategy in strategies:
            if strategy == "warm" and initial_plan is not None:
                raw = self.solve("warm start", guesses.resampled_guess(initial_plan, mesh, duration), mesh=mesh,
                                 minimum_time=minimum_time, duration=duration)
                if raw.success:
                    return raw, "warm start", mesh
            elif strategy == "cold":
                guess = guesses.interpolation_guess(mesh, duration, pr.start, pr.goal, pr.rig.n_inputs)
                raw = self.solve("cold", guess, mesh=mesh, minimum_time=minimum_time, duration=duration)
                if raw.success:
                    return raw, "cold", mesh
            elif strategy == "restarts":
                rng = np.random.default_rng(self.seed)
                n_q = pr.rig.n_states // 2
                scale = np.where(np.arange(n_q) < n_q - 2, 0.3 * (pr.travel or 0.0), 1.0)
                for k in range(1, self.restarts + 1):
                    guess = guesses.random_guess(rng, mesh, duration, pr.start, pr.goal, pr.limit, scale)
                    raw = self.solve(f"restart {k}", guess, mesh=mesh, minimum_time=minimum_time, duration=duration)
                    if raw.success:
                        return raw, f"restart {k} (seed {self.seed})", mesh
            elif strategy == "rollout":
                law = self.guess_law or guesses.energy_pumping_law(pr.model, pr.p, pr.start, pr.goal, pr.limit,
                                                                   pr.speed_index)
                if law is None:
                    continue
                guess = guesses.rollout_guess(pr.model, pr.p, law, mesh, duration, pr.start, pr.goal, pr.limit)
                raw = self.solve("energy rollout", guess, mesh=mesh, minimum_time=minimum_time, duration=duration,
                                 goal=guess.x[-1])
                if raw.success:
                    return raw, "energy rollout", mesh
            elif strategy == "continuation":
                found = self.continuation(mesh, duration, minimum_time, initial_plan)
                if found is not None:
                    return found[0], found[1], mesh
        return None

    def continuation(self, mesh: np.ndarray, duration: float, minimum_time: bool,
                     initial_plan: SwingUpPlan | None) -> tuple[RawSolution, str] | None:
        """Solve at a higher limit, then step the limit down to the target with warm starts.

        The anchor is ``initial_plan`` when it holds a limit above the target (its direct jump was the ``warm``
        strategy, so the first step here goes half way), else a cold solve at 1.5, 2.25, 3.4 or 5 times the target.
        After a failed step the step (in log limit) is halved, after a success doubled; it gives up when a step
        would change the limit by less than 1 % (near the feasibility boundary such solves run to the iteration
        limit) or after 14 solves.
        """
        pr = self.problem
        target = pr.limit
        solves = 0
        anchor = None
        step = 1.0  # fraction of the remaining distance (in log limit) taken next
        if initial_plan is not None and initial_plan.success:
            factor0 = float(np.max(initial_plan.limit / target))
            if factor0 > 1.0:
                anchor = (factor0, guesses.resampled_guess(initial_plan, mesh, duration), "the given plan")
                step = 0.5
        if anchor is None:
            for factor in CONTINUATION_FACTORS:
                guess = guesses.interpolation_guess(mesh, duration, pr.start, pr.goal, pr.rig.n_inputs)
                raw = self.solve(f"continuation anchor at {factor:g}x", guess, mesh=mesh, minimum_time=minimum_time,
                                 duration=duration, limit=target * factor)
                solves += 1
                if raw.success:
                    anchor = (factor, _as_guess(raw), f"{factor:g}x the limit")
                    break
        if anchor is None:
            return None
        factor, current, origin = anchor
        steps = 0
        while solves < CONTINUATION_MAX_SOLVES:
            next_factor = factor ** (1.0 - step)
            raw = self.solve(f"continuation {factor:.3g}x -> {next_factor:.3g}x", current, mesh=mesh,
                             minimum_time=minimum_time, duration=duration, limit=target * next_factor)
            solves += 1
            if raw.success:
                factor, current, steps = next_factor, _as_guess(raw), steps + 1
                if step == 1.0:
                    return raw, f"continuation from {origin} in {steps} step{'s' if steps > 1 else ''}"
                step = min(1.0, 2.0 * step)
            else:
                step /= 2.0
                if abs(math.log(factor)) * step < MIN_CONTINUATION_STEP:
                    return None
        return None

    def minimum_time(self, strategies: Sequence[str],
                     initial_plan: SwingUpPlan | None) -> tuple[RawSolution, str, np.ndarray] | None:
        """Minimum time: warm-start from ``initial_plan``, or from a minimum-effort solution at the duration."""
        pr = self.problem
        mesh = self.mesh
        if initial_plan is not None and "warm" in strategies:
            guess = guesses.resampled_guess(initial_plan, mesh)
            raw = self.solve("warm start", guess, mesh=mesh, minimum_time=True, duration=initial_plan.duration)
            if raw.success:
                return raw, "warm start", mesh
        others = [s for s in strategies if s != "warm"]
        found = self.fixed_duration(others, None, pr.duration) if others else None
        if found is None:
            return None
        effort, how, _ = found
        raw = self.solve("minimum time from minimum effort", _as_guess(effort), mesh=mesh, minimum_time=True,
                         duration=pr.duration, goal=self.last_goal)
        if raw.success:
            return raw, f"minimum time from a minimum-effort plan ({how})", mesh
        return None

    # -- mesh check and the plan -------------------------------------------------------------------------------

    def errors(self, raw: RawSolution, mesh: np.ndarray) -> np.ndarray:
        pr = self.problem
        return interval_errors(pr.model, pr.p, pr.scheme, mesh * raw.duration, raw.x, raw.u, raw.u_mid)

    def refine_and_finish(self, raw: RawSolution, strategy: str, mesh: np.ndarray, minimum_time: bool,
                          max_refinements: int, started: float) -> SwingUpPlan:
        pr = self.problem
        goal = self.last_goal
        errors = self.errors(raw, mesh)
        refinements = 0
        previous = np.inf
        while errors.max() > pr.mesh_tolerance and refinements < max_refinements:
            # Local splitting first; when a round did not halve the largest error (the optimizer moved the hard
            # stretch elsewhere), halve every interval instead.
            everywhere = errors.max() > 0.5 * previous
            new_mesh = refine(mesh, errors, pr.mesh_tolerance, max_intervals=4 * pr.intervals, everywhere=everywhere)
            if len(new_mesh) == len(mesh):
                break
            previous = errors.max()
            plan = self.assemble(raw, mesh, errors, strategy, minimum_time, refinements, goal, started)
            guess = guesses.resampled_guess(plan, new_mesh)
            refined = self.solve(f"mesh refinement {refinements + 1}", guess, mesh=new_mesh,
                                 minimum_time=minimum_time, duration=raw.duration if minimum_time else pr.duration,
                                 goal=goal)
            if not refined.success:
                break
            raw, mesh, refinements = refined, new_mesh, refinements + 1
            errors = self.errors(raw, mesh)
        return self.assemble(raw, mesh, errors, strategy, minimum_time, refinements, goal, started)

    def assemble(self, raw: RawSolution, mesh: np.ndarray, errors: np.ndarray, strategy: str, minimum_time: bool,
                 refinements: int, goal: np.ndarray, started: float, *, found: bool = True) -> SwingUpPlan:
        pr = self.problem
        rig = pr.rig
        t = mesh * raw.duration
        x_dot = pr.model.rhs_batch(raw.x, raw.u, pr.p)
        peaks = rig.peak_inputs
        node = np.sum((raw.u / peaks) ** 2, axis=1)
        mid = np.sum((raw.u_mid / peaks) ** 2, axis=1)
        h = np.diff(t)
        effort = float(np.sum(h / 6 * (node[:-1] + 4 * mid + node[1:]))) if pr.scheme == "hermite-simpson" else \
            float(np.sum(h / 2 * (node[:-1] + node[1:])))
        peak_input = np.max(np.abs(np.vstack([raw.u, raw.u_mid])), axis=0)
        max_error = float(errors.max()) if errors.size else np.inf
        mesh_ok = max_error <= pr.mesh_tolerance
        success = found and raw.success and mesh_ok
        status = SOLVED if success else (MESH_FAILED if found and raw.success else NOT_FOUND)
        if refinements:
            strategy = f"{strategy}, then {refinements} mesh refinement{'s' if refinements > 1 else ''}"
        plan = SwingUpPlan(
            t=t, x=raw.x, u=raw.u, u_mid=raw.u_mid, x_dot=x_dot, scheme=pr.scheme, success=success, status=status,
            solver_status=raw.status, message="", iterations=sum(a.iterations for a in self.attempts),
            solve_s=sum(a.solve_s for a in self.attempts), build_s=sum(a.build_s for a in self.attempts),
            cpu_s=sum(a.cpu_s for a in self.attempts), total_s=time.perf_counter() - started,
            constraint_violation=raw.constraint_violation, max_interval_error=max_error, interval_errors=errors,
            mesh_tolerance=pr.mesh_tolerance, coulomb_smoothing=pr.model.coulomb_smoothing, refinements=refinements,
            cost=raw.duration if minimum_time else effort, effort=effort, duration=raw.duration,
            minimum_time=minimum_time, peak_input=peak_input, limit=pr.limit.copy(), start=pr.start.copy(),
            goal=np.asarray(goal, dtype=float).copy(), strategy=strategy if found else "none succeeded",
            attempts=tuple(self.attempts), state_names=rig.state_names, input_names=rig.input_names,
        )
        return replace(plan, message=_message(plan, pr))

    def failure_plan(self, minimum_time: bool, started: float) -> SwingUpPlan:
        """The plan of a failed search: the last iterate, flagged, with the evidence in ``attempts``."""
        raw = self.last
        mesh = np.linspace(0.0, 1.0, len(raw.x))
        errors = np.full(len(mesh) - 1, np.inf)
        return self.assemble(raw, mesh, errors, "", minimum_time, 0, self.last_goal, started, found=False)


def _as_guess(raw: RawSolution) -> Guess:
    return Guess(x=raw.x, u=raw.u, u_mid=raw.u_mid, duration=raw.duration, x_mid=raw.x_mid)


def _limit_text(limit: np.ndarray, pr: Problem) -> str:
    return ", ".join(f"{name} {value:.4g} {unit}" for name, value, unit in
                     zip(pr.rig.input_names, limit, pr.rig.input_units, strict=True))


def _message(plan: SwingUpPlan, pr: Problem) -> str:
    what = "minimum-time" if plan.minimum_time else "minimum-effort"
    where = f"from {pr.start_name} to upright at rest"
    if plan.success:
        return (f"Found a {what} swing-up {where} in {plan.duration:.3g} s within |u| <= {_limit_text(plan.limit, pr)} "
                f"(largest |u| used: {_limit_text(plan.peak_input, pr)}); strategy: {plan.strategy}; IPOPT "
                f"{plan.solver_status}, {plan.iterations} iterations in {len(plan.attempts)} solve(s); largest "
                f"interval error {plan.max_interval_error:.1e} <= {plan.mesh_tolerance:.1e}. Track it with feedback; "
                "never play the feed-forward alone.")
    if plan.status == MESH_FAILED:
        return (f"A {what} swing-up {where} converged (IPOPT {plan.solver_status}) but its largest interval error "
                f"{plan.max_interval_error:.1e} stays above the tolerance {plan.mesh_tolerance:.1e} after "
                f"{plan.refinements} refinement(s): the optimizer may be exploiting discretization error. Try more "
                "intervals, more refinements, or a looser mesh_tolerance if that accuracy is not needed.")
    tried = "; ".join(f"{a.strategy}: {a.solver_status} after {a.iterations} iterations" for a in plan.attempts)
    duration = "a minimum time" if plan.minimum_time else f"{pr.duration:.3g} s"
    return (f"No swing-up {where} in {duration} within |u| <= {_limit_text(pr.limit, pr)} was found. Tried "
            f"{len(plan.attempts)} solve(s): {tried}. IPOPT reporting 'infeasible' from one guess is not proof; "
            "every strategy failing is strong evidence that this limit and duration do not admit a swing-up. Try: "
            "a longer duration, a higher limit (size_motor tells how much is needed), more restarts, or more "
            "intervals.")
