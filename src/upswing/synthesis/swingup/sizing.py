"""Motor sizing: the smallest peak effort that admits a swing-up in a given time, and the limit–time trade-off.

Sizing keeps the shape of the rig's actuator set and scales it: a factor f multiplies every input's ``peak`` (and
the stall effort of a motor line, the no-load speed kept), and the question is the smallest f for which the
planner finds a swing-up of the given duration. Feasibility is monotone in f (a plan within a limit is within
every higher one), so bisection applies; each trial is warm-started from the plan at the nearest feasible factor
(continuation), with the planner's other strategies behind it, and every feasible plan lowers the upper bound to
the effort it actually uses. A trial only counts as infeasible after all strategies failed; the answer is local
(the optimizer finds local optima), which the result says.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import Rig
from upswing.synthesis.swingup.plan import PLAN_CAUTIONS, SwingUpPlan
from upswing.synthesis.swingup.planner import STRATEGIES, plan_swingup

# With a neighbouring plan at hand: jump to the new limit from it, then step there from it, then the rest.
SIZING_STRATEGIES = ("warm", "continuation", "cold", "restarts")


@dataclass(frozen=True)
class Trial:
    """One feasibility trial of a sizing run: the factor on ``peak``, the verdict and how it was reached."""

    factor: float
    feasible: bool
    strategy: str
    solves: int
    peak_used: np.ndarray


@dataclass(frozen=True)
class SizingResult:
    """The smallest limit found to admit a swing-up within ``duration``.

    Attributes
    ----------
    found : bool
        Whether any factor up to ``max_factor`` admitted a swing-up.
    minimum_factor : float
        Smallest factor on the rig's ``peak`` with a verified plan [-] (``nan`` when none was found).
    minimum_peak : ndarray, shape (n_inputs,)
        ``minimum_factor`` times the rig's ``peak`` [N m or N]: the peak effort to buy, before any margin.
    infeasible_below : float
        Largest factor at which every strategy failed [-] (0 when none failed): the answer lies between it and
        ``minimum_factor``.
    duration : float
        The swing-up time asked for [s].
    plan : SwingUpPlan or None
        The plan at ``minimum_factor``.
    trials : tuple of Trial
        Every factor tried, in order.
    message : str
        The answer in words, with its caveats.
    input_names : tuple of str
    cautions : tuple of str
    """

    found: bool
    minimum_factor: float
    minimum_peak: np.ndarray
    infeasible_below: float
    duration: float
    plan: SwingUpPlan | None
    trials: tuple[Trial, ...]
    message: str
    input_names: tuple[str, ...]
    cautions: tuple[str, ...] = field(default=PLAN_CAUTIONS)


@dataclass(frozen=True)
class TradeoffCurve:
    """Minimum swing-up time against the input limit.

    Attributes
    ----------
    limits : ndarray, shape (K, n_inputs)
        Input limits [N m or N], increasing.
    minimum_time : ndarray, shape (K,)
        Shortest swing-up found at each limit [s] (``nan`` where none was found).
    success : ndarray of bool, shape (K,)
    plans : tuple of SwingUpPlan
    input_names, input_units : tuple of str
    cautions : tuple of str
    """

    limits: np.ndarray
    minimum_time: np.ndarray
    success: np.ndarray
    plans: tuple[SwingUpPlan, ...]
    input_names: tuple[str, ...]
    input_units: tuple[str, ...]
    cautions: tuple[str, ...] = field(default=PLAN_CAUTIONS)


# Sizing plans to the full peak and max_speed (not the rig file's plan shares): it answers what the limits admit.
FULL_LIMITS = {"headroom": 1.0, "speed_headroom": 1.0}


def used_factor(plan: SwingUpPlan, rig: Rig) -> float:
    """The smallest factor on ``peak`` whose limits (and scaled motor lines) the plan's nodes and midpoints respect.

    For the motor line -f s (1 + w / w0) <= u <= f s (1 - w / w0) at every point: f >= u / (s (1 - w / w0)) where
    u > 0, f >= -u / (s (1 + w / w0)) where u < 0.
    """
    peaks = rig.peak_inputs
    needed = float(np.max(plan.peak_input / peaks))
    n_q = rig.n_states // 2
    joints = ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")
    x_mid, _ = plan.sample(0.5 * (plan.t[:-1] + plan.t[1:]))
    states = np.vstack([plan.x, x_mid])
    inputs = np.vstack([plan.u, plan.u_mid])
    for i, a in enumerate(rig.actuators):
        if a.stall is None:
            continue
        w = states[:, n_q + joints.index(a.joint)] / a.no_load_speed
        u = inputs[:, i]
        with np.errstate(divide="ignore", invalid="ignore"):
            up = np.where(u > 0, u / (a.stall * (1 - w)), 0.0)
            down = np.where(u < 0, -u / (a.stall * (1 + w)), 0.0)
        line = np.concatenate([up, down])
        line = np.where(line < 0, np.inf, line)  # beyond the no-load speed in the driving direction: no factor helps
        needed = max(needed, float(np.max(line)))
    return needed


def size_motor(rig: Rig, *, duration: float, scheme: str = "hermite-simpson", intervals: int = 60,
               start: str | np.ndarray = "hanging", relative_tolerance: float = 0.02, max_factor: float = 16.0,
               max_trials: int = 16, seed: int = 0, **plan_options) -> SizingResult:
    """The smallest factor on the rig's ``peak`` that admits a swing-up within ``duration``, by bisection.

    Parameters
    ----------
    rig : Rig
    duration : float
        Swing-up time [s].
    scheme, intervals, start, seed
        As :func:`~upswing.synthesis.swingup.planner.plan_swingup`.
    relative_tolerance : float
        Stop when the feasible and infeasible factors are within this ratio of each other [-].
    max_factor : float
        Largest factor tried before declaring that no swing-up was found [-].
    max_trials : int
        Largest number of feasibility trials.
    **plan_options
        Passed to ``plan_swingup`` (e.g. ``restarts``, ``max_wall_time``).

    Returns
    -------
    SizingResult
    """
    if not np.isfinite(duration) or duration <= 0:
        raise RequestError(f"duration must be > 0 s; got {duration}")
    if not 0 < relative_tolerance < 1:
        raise RequestError(f"relative_tolerance must be in (0, 1); got {relative_tolerance}")
    if max_factor <= 0:
        raise RequestError(f"max_factor must be > 0; got {max_factor}")
    _check_options(plan_options, ("duration", "peak", "initial_plan", "strategies", "minimum_time"))
    plan_options = {**FULL_LIMITS, **plan_options}  # sizing asks what the limits admit: plan to them
    peaks = rig.peak_inputs
    trials: list[Trial] = []

    def trial(factor: float, warm: SwingUpPlan | None) -> SwingUpPlan:
        plan = plan_swingup(rig, duration=duration, scheme=scheme, intervals=intervals, start=start, seed=seed,
                            peak=factor * peaks, initial_plan=warm,
                            strategies=SIZING_STRATEGIES if warm is not None else STRATEGIES,
                            **plan_options)
        trials.append(Trial(factor=factor, feasible=plan.success, strategy=plan.strategy,
                            solves=len(plan.attempts), peak_used=plan.peak_input))
        return plan

    # An upper bound: the rig's own peak, doubled until a swing-up appears.
    best: SwingUpPlan | None = None
    high = 1.0
    low = 0.0
    while best is None and high <= max_factor and len(trials) < max_trials:
        plan = trial(high, None)
        if plan.success:
            best = plan
        else:
            low = high
            high *= 2.0
    if best is None:
        return SizingResult(found=False, minimum_factor=math.nan, minimum_peak=np.full(len(peaks), np.nan),
                            infeasible_below=low, duration=duration, plan=None, trials=tuple(trials),
                            message=(f"No swing-up within {duration:.3g} s was found up to {low:g} times the rig's "
                                     "peak; try a longer time."), input_names=rig.input_names)
    high = min(high, used_factor(best, rig))
    # Bisection (geometric mean: the factor spans orders of magnitude), each trial warm-started from the best plan.
    while len(trials) < max_trials:
        if low > 0 and high / low - 1.0 <= relative_tolerance:
            break
        middle = math.sqrt(low * high) if low > 0 else 0.6 * high
        plan = trial(middle, best)
        if plan.success:
            best = plan
            high = min(middle, used_factor(plan, rig))
        else:
            low = middle
    minimum_peak = high * peaks
    names = ", ".join(f"{n} {v:.4g} {u}" for n, v, u in zip(rig.input_names, minimum_peak, rig.input_units,
                                                              strict=True))
    bracket = (f"every strategy failed at {low:.4g} times the rig's peak" if low > 0
               else "no infeasible limit was reached within the trial budget")
    origin = start if isinstance(start, str) else "the given state"
    message = (f"A swing-up from {origin} to upright in {duration:.3g} s needs a peak effort of about {names} "
               f"({high:.4g} times the rig's peak); {bracket}. This is the smallest limit the optimizer found (a "
               "local answer): buy margin above it for friction, model error and the tracking controller's own "
               "effort, typically 30 % or more, and respect the motor's continuous rating too.")
    return SizingResult(found=True, minimum_factor=high, minimum_peak=minimum_peak, infeasible_below=low,
                        duration=duration, plan=best, trials=tuple(trials), message=message,
                        input_names=rig.input_names)


def tradeoff_curve(rig: Rig, limits: Sequence[float] | np.ndarray, *, scheme: str = "hermite-simpson",
                   intervals: int = 60, start: str | np.ndarray = "hanging", duration: float | None = None,
                   seed: int = 0, **plan_options) -> TradeoffCurve:
    """Minimum swing-up time at each limit, solved in increasing order of limit with warm starts.

    A plan within one limit is feasible within every higher limit, so each minimum-time solve starts from the
    previous limit's plan, a feasible point with that plan's time: the solver then shortens it, which keeps the
    curve non-increasing in practice even though every point is a local optimum. A limit whose warm start fails is
    retried from a minimum-effort plan at the previous time.

    Parameters
    ----------
    rig : Rig
    limits : sequence of float, or array (K, n_inputs)
        Input limits [N m or N]: one number per limit (applied to every input) or one row per limit.
    duration : float, optional
        Where the first (lowest-limit) search starts [s]; default ``plan_swingup``'s.
    scheme, intervals, start, seed, **plan_options
        As :func:`~upswing.synthesis.swingup.planner.plan_swingup`.

    Returns
    -------
    TradeoffCurve
    """
    _check_options(plan_options, ("peak", "initial_plan", "minimum_time"))
    plan_options = {**FULL_LIMITS, **plan_options}  # sizing asks what the limits admit: plan to them
    table = np.asarray(limits, dtype=float)
    if table.ndim == 1:
        table = np.repeat(table[:, None], rig.n_inputs, axis=1)
    if table.ndim != 2 or table.shape[1] != rig.n_inputs or len(table) == 0:
        raise RequestError(f"limits must be numbers or rows of {rig.n_inputs} numbers "
                           f"({', '.join(rig.input_names)}); got shape {np.shape(limits)}")
    if np.any(~np.isfinite(table)) or np.any(table <= 0):
        raise RequestError("limits must be positive and finite")
    order = np.argsort(table.max(axis=1), kind="stable")
    table = table[order]
    plans: list[SwingUpPlan] = []
    previous: SwingUpPlan | None = None
    for row in table:
        plan = plan_swingup(rig, minimum_time=True, scheme=scheme, intervals=intervals, start=start, seed=seed,
                            duration=duration, peak=row, initial_plan=previous, **plan_options)
        if not plan.success and previous is not None:
            # A warm start that fails is retried cold, from the minimum-effort plan at the previous time.
            plan = plan_swingup(rig, minimum_time=True, scheme=scheme, intervals=intervals, start=start, seed=seed,
                                duration=previous.duration, peak=row, **plan_options)
        plans.append(plan)
        if plan.success:
            previous = plan
    times = np.array([p.duration if p.success else np.nan for p in plans])
    return TradeoffCurve(limits=table, minimum_time=times, success=np.array([p.success for p in plans]),
                         plans=tuple(plans), input_names=rig.input_names, input_units=rig.input_units)


def _check_options(options: dict, reserved: tuple[str, ...]) -> None:
    taken = sorted(set(options) & set(reserved))
    if taken:
        raise RequestError(f"{', '.join(taken)} cannot be passed through here: the sizing sets "
                           f"{', '.join(reserved)} itself")


def plot_tradeoff(curve: TradeoffCurve, ax=None):
    """Plot the minimum swing-up time against the limit (first input's limit on the x axis).

    Parameters
    ----------
    curve : TradeoffCurve
    ax : matplotlib.axes.Axes, optional
        Drawn into when given; otherwise a new figure is made.

    Returns
    -------
    matplotlib.axes.Axes
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(5.0, 3.5))
    x = curve.limits[:, 0]
    ok = curve.success
    ax.plot(x[ok], curve.minimum_time[ok], "o-", label="swing-up found")
    if np.any(~ok):
        ax.plot(x[~ok], np.zeros(int(np.sum(~ok))), "x", color="tab:red", label="none found")
    ax.set_xlabel(f"peak {curve.input_names[0]} limit [{curve.input_units[0]}]")
    ax.set_ylabel("minimum swing-up time [s]")
    ax.grid(True, alpha=0.3)
    ax.legend()
    return ax
