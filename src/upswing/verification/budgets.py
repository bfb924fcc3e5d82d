"""Budgets: what a run asks of the motor, the rail and the mount, each as value, limit and pass/fail.

Values are the worst over the rollouts that held (the operating envelope: a rollout that fell is counted as a
failure by the success rate, and its drive would be stopped), with the median beside it; when none held, over all
rollouts up to the moment they stopped. Limits come from the rig file: ``peak`` and ``continuous`` per actuator,
``max_speed`` per actuated joint, the cart's ``travel``, and the ``[mount]`` ratings divided by its safety factor.
Time in saturation is judged against a policy of this module, :data:`SATURATION_SHARE` of the horizon. Tip speed
and kinetic energy have no rating in the rig file, nor do base loads when there is no ``[mount]`` table (or that
load's rating is left out): those lines are reported with ``limit = None`` and ``ok = None`` and feed the hazard
notes.

Base loads (:func:`base_load_lines`): the force the rig exerts on its base, horizontal (``base.peak_force_x``,
against ``[mount].horizontal_force``), vertical with the weight (``base.peak_force_y``, against
``vertical_force``) and its magnitude (``base.peak_force``, never rated: the ratings are per direction); the moment
the shoulder passes to the base (``base.peak_moment``, the moment about the shoulder axis, reported) and the moment
about the mount's rated point (``base.peak_mount_moment``, against ``[mount].moment``). With the shoulder axis at
height h above that point and a horizontal distance d from it (``shoulder_height``, ``shoulder_offset``), a cart at
x, and the force (F_x, F_y) and moment M on the base at the shoulder, statics gives the moment there as
M + (d + x) F_y - h F_x for one sign of d; since the direction of d is not in the rig file and the peaks of the
terms need not coincide, the line carries the upper bound

    |M| + h |F_x| + (d + |x|) |F_y|        [N m]

per rollout (each term its own peak), which judges on the safe side and equals the peak of |M| when h = d = 0 on
a fixed base.

Residual motion (``<state>.residual_motion``): the largest |state error| over the final hold window of each held
run. A balance loop with Coulomb friction hunts in a small limit cycle instead of coming to rest, and encoder noise
through the estimator makes the rates jitter; both are findings, not falls (a run whose residual motion leaves the
settling box is counted as "not settled" by the success rate), so these lines too have no limit.

Ranking (:func:`tightest_budget`): the single place that says which budget is closest to its limit. Its *usage* is
value / limit; the peak-effort lines are not ranked, because the actuator clamps the applied effort at its peak,
so reaching 100 % there is saturation (judged by the time spent saturated), not a broken limit.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import Rig
from upswing.verification.simulate import Rollouts

SATURATION_SHARE = 0.1  # a balance loop that saturates more than 10 % of the time is living on its limits
CLAMPED_SUFFIX = ".peak_effort"  # lines the actuator clamps at their limit: reported and judged, never ranked
BASE_LOAD_LINES = ("base.peak_force_x", "base.peak_force_y", "base.peak_force", "base.peak_moment",
                   "base.peak_mount_moment")
# Which [mount] rating limits which base-load line (base.peak_force and base.peak_moment are reported only).
MOUNT_RATING = {"base.peak_force_x": "horizontal_force", "base.peak_force_y": "vertical_force",
                "base.peak_mount_moment": "moment"}
MOUNT_ADVICE = ("the fixing that holds the base is rated for less than this (rating / safety factor in [mount]): "
                "clamp or bolt the base more strongly and enter the new ratings, or lower the efforts and speeds "
                "that load it (peak, the swing-up time, the balance weights)")


@dataclass(frozen=True)
class Budget:
    """One budget line: ``value`` (worst over the rollouts) against ``limit`` in ``unit``; ``ok`` is None when the
    rig file gives no limit. ``median`` is the median over the rollouts; ``meaning`` says what is measured."""

    name: str
    value: float
    limit: float | None
    unit: str
    ok: bool | None
    median: float
    meaning: str


def _line(name: str, values: np.ndarray, limit: float | None, unit: str, meaning: str,
          strict: bool = False) -> Budget:
    worst = float(np.max(values)) if values.size else 0.0
    ok = None if limit is None else (worst < limit if strict else worst <= limit * (1.0 + 1e-12))
    return Budget(name=name, value=worst, limit=limit, unit=unit, ok=ok,
                  median=float(np.median(values)) if values.size else 0.0, meaning=meaning)


def compute_budgets(rig: Rig, results: Rollouts, horizon: float, hold_s: float = 1.0) -> tuple[Budget, ...]:
    """Budget lines for a set of rollouts (see the module docstring); ``hold_s`` is the length of the final window
    the residual motion is taken over [s] (``Settling.hold``)."""
    if results.held.any():
        results = results.subset(results.held)
    out = []
    coordinates = ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")
    for j, a in enumerate(rig.actuators):
        unit = "N" if a.joint == "cart" else "N m"
        out.append(_line(f"{a.joint}.peak_effort", results.peak_input[:, j], a.peak, unit,
                         "largest applied effort (the actuator clamps at peak)"))
        if results.rms_input_window is None:
            out.append(_line(f"{a.joint}.rms_effort", results.rms_input[:, j], a.continuous, unit,
                             "RMS of the applied effort over the run, against the continuous rating"))
        else:
            out.append(_line(f"{a.joint}.rms_effort", results.rms_input_window[:, j], a.continuous, unit,
                             "RMS of the applied effort over the swing-up (to the table's end), against the "
                             "continuous rating"))
        out.append(_line(f"{a.joint}.saturation_time", results.saturated_time[:, j], SATURATION_SHARE * horizon, "s",
                         "time the command was at or beyond the available effort"))
    for j, joint in enumerate(coordinates):
        unit = "m/s" if joint == "cart" else "rad/s"
        limit = rig.actuator(joint).max_speed if joint in rig.actuated else None
        out.append(_line(f"{joint}.peak_speed", results.peak_speed[:, j], limit, unit,
                         "largest joint speed" if joint != "cart" else "largest cart speed"))
    if rig.cart is not None:
        out.append(_line("cart.rail_usage", results.peak_rail, rig.cart.travel, "m",
                         "largest distance from the rail's centre (the end stop is at travel)", strict=True))
    mon = results.peak_monitors
    out += base_load_lines(rig, mon[:, 0], mon[:, 1], results.peak_force, mon[:, 2],
                           results.peak_rail if rig.cart is not None else np.zeros_like(mon[:, 0]))
    out.append(_line("tip.peak_speed", mon[:, 3], None, "m/s", "speed of link 2's tip"))
    out.append(_line("links.peak_kinetic_energy", mon[:, 4], None, "J", "kinetic energy of the moving parts"))
    for j, (state, unit) in enumerate(zip(rig.state_names, rig.state_units, strict=True)):
        out.append(_line(f"{state}.residual_motion", results.hold_error[:, j], None, unit,
                         f"largest |{state} error| in the final {hold_s:g} s (friction hunting, noise jitter)"))
    return tuple(out)


def mount_moment_bound(rig: Rig, force_x: np.ndarray, force_y: np.ndarray, moment: np.ndarray,
                       cart_x: np.ndarray) -> np.ndarray:
    """Upper bound of the moment about the mount's rated point [N m] (module docstring):
    |M| + h |F_x| + (d + |x|) |F_y|, elementwise.

    Parameters
    ----------
    rig : Rig
        Its ``[mount]`` gives h = ``shoulder_height`` and d = ``shoulder_offset`` [m] (both 0 without the table).
    force_x, force_y, moment : ndarray, shape (N,)
        Force on the base [N] and moment at the shoulder [N m], or their peaks per rollout.
    cart_x : ndarray, shape (N,)
        Cart position or its largest |x| per rollout [m]; zeros on a fixed base.
    """
    height = 0.0 if rig.mount is None else rig.mount.shoulder_height
    offset = 0.0 if rig.mount is None else rig.mount.shoulder_offset
    return (np.abs(moment) + height * np.abs(force_x)
            + (offset + np.abs(cart_x)) * np.abs(force_y))


def base_load_lines(rig: Rig, force_x: np.ndarray, force_y: np.ndarray, force: np.ndarray, moment: np.ndarray,
                    cart_x: np.ndarray) -> tuple[Budget, ...]:
    """The base-load budget lines (:data:`BASE_LOAD_LINES`), limited by the ``[mount]`` ratings when given.

    Parameters
    ----------
    rig : Rig
    force_x, force_y, force, moment : ndarray, shape (N,)
        |horizontal force|, |vertical force| (weight included), |force| [N] on the base and |moment| at the
        shoulder [N m]: per-rollout peaks or per-sample values (the line takes the worst and the median).
    cart_x : ndarray, shape (N,)
        Largest |cart position| per rollout, or the cart position per sample [m]; zeros on a fixed base.
    """
    values = {
        "base.peak_force_x": (np.abs(force_x), "N", "horizontal force on the base (mount or rail)"),
        "base.peak_force_y": (np.abs(force_y), "N", "vertical force on the base (weight included)"),
        "base.peak_force": (np.abs(force), "N", "magnitude of the force on the base"),
        "base.peak_moment": (np.abs(moment), "N m", "moment the shoulder passes to the base"),
        "base.peak_mount_moment": (mount_moment_bound(rig, force_x, force_y, moment, cart_x), "N m",
                                   "moment about the mount's rated point, upper bound |M| + h |F_x| + (d + |x|) "
                                   "|F_y| with h, d the [mount] lever arms"),
    }
    out = []
    for name in BASE_LOAD_LINES:
        data, unit, meaning = values[name]
        rating = MOUNT_RATING.get(name)
        limit = None if rig.mount is None or rating is None else rig.mount.limit(rating)
        if limit is not None:
            meaning += f" (limit: [mount].{rating} / safety_factor {rig.mount.safety_factor:g})"
        out.append(_line(name, np.asarray(data, dtype=float), limit, unit, meaning))
    return tuple(out)


# ----------------------------------------------------------------------------------------------------------------
# Ranking: which budget is tightest (the one place; report, design and verification all use it)


def usage(budget: Budget) -> float:
    """value / limit [-] of a budget with a limit (1 means the whole budget is used).

    Raises
    ------
    RequestError
        For a budget without a limit, or with a limit that is not a finite number > 0.
    """
    if budget.limit is None or not (math.isfinite(budget.limit) and budget.limit > 0):
        raise RequestError(f"budget {budget.name!r}: usage needs a finite limit > 0; got {budget.limit!r}")
    return budget.value / budget.limit


def rated(budgets: Sequence[Budget]) -> tuple[Budget, ...]:
    """The budgets that have a limit (those without one are reported, not judged)."""
    return tuple(b for b in budgets if b.limit is not None)


def ranked_budgets(budgets: Sequence[Budget]) -> tuple[Budget, ...]:
    """The budgets that compete for "tightest": every rated one but the clamped peak-effort lines."""
    return tuple(b for b in rated(budgets) if not b.name.endswith(CLAMPED_SUFFIX))


def tightest_budget(budgets: Sequence[Budget]) -> Budget | None:
    """The ranked budget (:func:`ranked_budgets`) with the highest usage, a failed one first when usages tie; None
    when no budget is ranked."""
    return max(ranked_budgets(budgets), key=lambda b: (usage(b), b.ok is False), default=None)
