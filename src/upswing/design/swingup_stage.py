"""The swing-up stage of a design run: plan the manoeuvre, measure what it asks of the rig, say what is unchecked.

The stage calls :func:`upswing.synthesis.swingup.plan_swingup` (minimum effort from ``hanging`` to ``upright`` at
rest within the rig's limits, Hermite–Simpson collocation with IPOPT) and turns the plan into

* the planned trajectory sampled at the loop rate (the collocation interpolants, :meth:`SwingUpPlan.sample`);
* its budgets (:func:`trajectory_budgets`): peak and RMS effort against ``peak`` and ``continuous``, joint and cart
  speeds against ``max_speed``, rail against ``travel``, base loads against the ``[mount]`` ratings when the rig
  file gives them (:func:`upswing.verification.budgets.base_load_lines`), and, without limits, tip speed and
  kinetic energy. They describe the plan, an open-loop reference; the tracked manoeuvre on the uncertain rig asks more.
  They are judged at the plan's nodes and interval midpoints, the points where the optimizer enforces the equations
  of motion and the limits. Between them the plan is a polynomial interpolant, not a solution of the dynamics, and
  can pass a bound by about the mesh's accuracy: how far it does on the loop-rate samples is reported as a note,
  not judged (the tracked, verified manoeuvre is what will be judged there).

When this build has the tracking synthesis, the stage also designs the time-varying LQR table along the plan
(:func:`upswing.synthesis.swingup.tracking.tvlqr_from_reference`), which the run folder exports for firmware.

A plan that could not be found fails the stage (the rig cannot swing up within its limits as far as the optimizer can
tell: do not power for a swing-up), with the planner's message of what was tried and what to change. A plan that was
found is then *verified* when this build has the manoeuvre check
(:func:`upswing.verification.manoeuvre.verify_swingup`, given this very plan): the plan tracked with its
time-varying LQR table on the uncertain nonlinear model, with sampling, saturation, quantization and delay, handed to
the balance loop, in a nominal run and a Monte Carlo run over the rig's ``[uncertainty]``. Then the stage's budgets
are the tracked ones (worst over the caught rollouts; the planned ones stay in ``planned_budgets``), its success
rate and hand-over times come with it, and ``unverified`` is empty. Without that check the outcome carries
``unverified`` and the verdict cannot be "power". Without the swing-up synthesis at all the stage is missing
(:class:`StageUnavailable`).

The design run gives the swing-up Monte Carlo the same rollout count as the balance Monte Carlo: measured on the
demo rigs, 200 tracked swing-ups with hand-over simulate in 0.9-1.7 s on one core, so the full count costs a few
seconds and the swing-up's success rate is bounded as tightly as the balance loop's.
"""

from __future__ import annotations

import importlib.util
import math
from dataclasses import dataclass, replace
from typing import Any

import casadi as ca
import numpy as np

from upswing.errors import SynthesisError
from upswing.model.dynamics import model_for
from upswing.model.rig import Rig
from upswing.verification.budgets import Budget, base_load_lines
from upswing.verification.hazards import HazardNote, mount_judgement

SWINGUP_MODULE = "upswing.synthesis.swingup"
MANOEUVRE_MODULE = "upswing.verification.manoeuvre"
NOT_JUDGED = ("; not judged: a swing-up rides its input limit by design (upswing.verification.manoeuvre), so time "
              "saturated is reported only")
TRACKING_MODULE = "upswing.synthesis.swingup.tracking"
UNVERIFIED = ("the swing-up was planned but not tracked and verified on the uncertain nonlinear model with the "
              "hand-over to the balance loop (this build has no swing-up tracking controller yet)")
UNVERIFIED_TRACKED = ("the tracking gains along the planned swing-up were designed, but the tracked manoeuvre with "
                      "the hand-over to the balance loop was not verified on the uncertain nonlinear model (this "
                      "build does not verify the whole manoeuvre yet)")


class StageUnavailable(Exception):  # noqa: N818 - a stage state, not an error condition of the user's making
    """A stage this build of upswing cannot run; the message says why (never a user error)."""


@dataclass(frozen=True)
class SwingUpOutcome:
    """What the swing-up stage produced.

    Attributes
    ----------
    plan : SwingUpPlan
        The optimized swing-up (:class:`upswing.synthesis.swingup.SwingUpPlan`).
    t : ndarray, shape (K,)
        Times of the planned trajectory at the loop rate [s].
    X : ndarray, shape (K, n_states)
        Planned states [m, rad, m/s, rad/s].
    U : ndarray, shape (K, n_inputs)
        Planned feed-forward inputs [N or N m].
    tracking : TrackingTable or None
        The time-varying LQR table along the plan at the loop rate (u = u_ff[k] - K[k] (x - x_ref[k])), when this
        build has the tracking synthesis (:mod:`upswing.synthesis.swingup.tracking`).
    budgets : tuple of Budget
        What the plan asks of the rig (:func:`trajectory_budgets` at the nodes and midpoints), names without the
        stage prefix.
    notes : tuple of str
        Where the loop-rate samples of the interpolated plan pass a limit that the nodes meet, and by how much.
    unverified : str
        Empty when the manoeuvre was verified on the nonlinear model; otherwise what was not checked.
    planned_budgets : tuple of Budget
        What the plan asks of the rig at its nodes and midpoints (equal to ``budgets`` when not verified).
    verification : SwingUpVerification or None
        The tracked manoeuvre on the uncertain nonlinear model (:func:`upswing.verification.manoeuvre
        .verify_swingup`): success rate with its 95 % Wilson interval, hand-over times, nominal run, budgets.
    """

    plan: Any
    t: np.ndarray
    X: np.ndarray
    U: np.ndarray
    tracking: Any | None
    budgets: tuple[Budget, ...]
    notes: tuple[str, ...]
    unverified: str
    planned_budgets: tuple[Budget, ...] = ()
    verification: Any | None = None


def swingup_available() -> bool:
    """Whether this build has the swing-up synthesis."""
    return importlib.util.find_spec(SWINGUP_MODULE) is not None


def manoeuvre_check_available() -> bool:
    """Whether this build can verify a tracked swing-up with hand-over on the uncertain nonlinear model."""
    return tracking_available() and importlib.util.find_spec(MANOEUVRE_MODULE) is not None


def verified_budgets(budgets: tuple[Budget, ...]) -> tuple[Budget, ...]:
    """The tracked manoeuvre's budget lines as the design run judges them: every one as the verification judged
    it, except time saturated, which is reported without a limit (:data:`NOT_JUDGED`)."""
    return tuple(Budget(name=b.name, value=b.value, limit=None, unit=b.unit, ok=None, median=b.median,
                        meaning=b.meaning + NOT_JUDGED) if b.name.endswith(".saturation_time") else b
                 for b in budgets)


def tracking_available() -> bool:
    """Whether this build has the swing-up tracking synthesis (time-varying LQR along a plan)."""
    return swingup_available() and importlib.util.find_spec(TRACKING_MODULE) is not None


def _line(name: str, value: float, limit: float | None, unit: str, meaning: str, strict: bool = False) -> Budget:
    ok = None if limit is None else bool(value < limit if strict else value <= limit * (1.0 + 1e-9))
    return Budget(name=name, value=float(value), limit=limit, unit=unit, ok=ok, median=float(value), meaning=meaning)


def trajectory_budgets(rig: Rig, t: np.ndarray, X: np.ndarray, U: np.ndarray) -> tuple[Budget, ...]:
    """Budget lines of one trajectory (named like the verification's, e.g. ``elbow.rms_effort``).

    RMS effort is sqrt( (1 / T) integral u^2 dt ) by the trapezoidal rule over the samples; the 1e-9 relative slack
    on ``<=`` absorbs the optimizer's constraint tolerance at an active bound. Base loads come from the model's
    ``base_load``, kinetic energy from ``energy``, and the tip speed from the tip position's Jacobian (automatic
    differentiation of ``points``) times the joint speeds.
    """
    t, X, U = (np.asarray(a, dtype=float) for a in (t, X, U))
    model = model_for(rig)
    p = rig.parameter_vector()
    n_q = rig.n_states // 2
    duration = float(t[-1] - t[0])
    out = []
    for j, a in enumerate(rig.actuators):
        unit = "N" if a.joint == "cart" else "N m"
        u = U[:, j]
        rms = math.sqrt(float(np.sum(0.5 * (u[1:] ** 2 + u[:-1] ** 2) * np.diff(t))) / duration)
        out.append(_line(f"{a.joint}.peak_effort", np.max(np.abs(u)), a.peak, unit, "largest planned effort"))
        out.append(_line(f"{a.joint}.rms_effort", rms, a.continuous, unit,
                         "RMS of the planned effort over the swing-up, against the continuous rating"))
    coordinates = ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")
    for j, joint in enumerate(coordinates):
        limit = rig.actuator(joint).max_speed if joint in rig.actuated else None
        out.append(_line(f"{joint}.peak_speed", np.max(np.abs(X[:, n_q + j])), limit,
                         "m/s" if joint == "cart" else "rad/s", "largest planned speed"))
    if rig.cart is not None:
        out.append(_line("cart.rail_usage", np.max(np.abs(X[:, 0])), rig.cart.travel, "m",
                         "largest planned distance from the rail's centre (the end stop is at travel)", strict=True))
    n = len(t)
    load = np.array(model.base_load.map(n)(X.T, U.T, p))
    q = ca.SX.sym("q", n_q)
    qd = ca.SX.sym("qd", n_q)
    tip_velocity = ca.Function("tip_velocity", [q, qd], [ca.mtimes(ca.jacobian(model.points(q, p)[:, 4], q), qd)])
    tip = np.array(tip_velocity.map(n)(X[:, :n_q].T, X[:, n_q:].T))
    kinetic = np.array(model.energy.map(n)(X.T, p))[0]
    cart_x = X[:, 0] if rig.cart is not None else np.zeros(n)
    # One trajectory: the line's median is its value, as for every other planned line.
    out += [replace(b, median=b.value) for b in base_load_lines(rig, load[0], load[1], np.hypot(load[0], load[1]),
                                                                 load[2], cart_x)]
    out += [_line("tip.peak_speed", np.max(np.hypot(tip[0], tip[1])), None, "m/s", "speed of link 2's tip"),
            _line("links.peak_kinetic_energy", np.max(kinetic), None, "J", "kinetic energy of the moving parts")]
    return tuple(out)


def swingup_hazards(rig: Rig, budgets: tuple[Budget, ...], *, tracked: bool = False) -> tuple[HazardNote, ...]:
    """What the swing-up means for the people near the rig: tip speed, energy and the loads on the mount, from the
    plan's budgets or, with ``tracked``, the verified ones (worst caught rollout)."""
    by = {b.name: b for b in budgets}
    what = "The tracked swing-up (worst caught run)" if tracked else "The planned swing-up"
    text = (f"{what} moves the tip at up to {by['tip.peak_speed'].value:.2f} m/s with up to "
            f"{by['links.peak_kinetic_energy'].value:.3g} J in the links, and loads the mount with up to "
            f"{by['base.peak_force'].value:.3g} N and {by['base.peak_moment'].value:.3g} N m: more than balancing "
            f"does, and more again when a tracked run misses. {mount_judgement(rig, budgets)} Keep everyone "
            "outside the keep-out boundary, and try the manoeuvre first with reduced limits and the emergency stop "
            "in hand.")
    if rig.cart is not None:
        text += (f" The cart uses {by['cart.rail_usage'].value:.3f} m of its {rig.cart.travel:.3f} m travel in "
                 "the plan; a tracked run can overshoot it.")
    return (HazardNote("swing-up", text, ("ISO 12100", "ISO 13850", "ISO 14120", "ISO 13857")),)


def run_swingup_stage(rig: Rig, *, seed: int, rollouts: int | None = None, required_success: float | None = None,
                      roa_samples: int = 300) -> SwingUpOutcome:
    """Plan the swing-up of ``rig``, measure it and, when this build can, verify it (module docstring).

    Parameters
    ----------
    rig : Rig
    seed : int
        Seed of the planner's restarts and of every random draw of the verification.
    rollouts : int, optional
        Monte Carlo rollouts of the verification; None plans without verifying.
    required_success : float, optional
        Fraction in (0, 1); default the rig file's ``[verification].required_success``.
    roa_samples : int
        Starts of the balance region-of-attraction estimate behind the hand-over level.

    Raises
    ------
    StageUnavailable
        When this build has no swing-up synthesis.
    SynthesisError
        When no swing-up was found within the rig's limits (the message says what was tried and what to change).
    """
    if not swingup_available():
        raise StageUnavailable("this build of upswing has no swing-up synthesis, so how the links get from hanging "
                               "to upright was not designed or checked")
    from upswing.synthesis.swingup import plan_swingup

    plan = plan_swingup(rig, seed=seed)
    if not plan.success:
        raise SynthesisError(f"no usable swing-up within the rig's limits: {plan.message}")
    rate = rig.balance.sample_rate
    t = np.linspace(0.0, plan.duration, max(2, round(plan.duration * rate) + 1))
    X, U = plan.sample(t)
    nodes = np.sort(np.concatenate([plan.t, 0.5 * (plan.t[:-1] + plan.t[1:])]))
    budgets = trajectory_budgets(rig, nodes, *plan.sample(nodes))
    between = {b.name: b for b in trajectory_budgets(rig, t, X, U)}
    notes = tuple(f"between the optimizer's nodes the interpolated plan reaches {between[b.name].value:.4g} "
                  f"{b.unit} for {b.name} against its limit {b.limit:.4g} {b.unit} "
                  f"({100 * (between[b.name].value / b.limit - 1):.2g} % over; {b.value:.4g} {b.unit} at the nodes)"
                  for b in budgets if b.ok and between[b.name].ok is False)
    tracking = None
    if tracking_available():
        from upswing.synthesis.swingup.tracking import tvlqr_from_reference

        tracking = tvlqr_from_reference(rig, plan.sample, plan.duration)
    if rollouts is None or not manoeuvre_check_available():
        return SwingUpOutcome(plan=plan, t=t, X=X, U=U, tracking=tracking, budgets=budgets, notes=notes,
                              unverified=UNVERIFIED if tracking is None else UNVERIFIED_TRACKED,
                              planned_budgets=budgets)
    from upswing.verification.manoeuvre import verify_swingup

    check = verify_swingup(rig, method="optimal", plan=plan, rollouts=rollouts, seed=seed,
                           required_success=required_success, roa_samples=roa_samples)
    return SwingUpOutcome(plan=plan, t=t, X=X, U=U, tracking=check.table, budgets=verified_budgets(check.budgets),
                          notes=notes, unverified="", planned_budgets=budgets, verification=check)
