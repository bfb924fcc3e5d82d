"""Budgets: what a run asks of the motor, the rail and the mount, each as value, limit and pass/fail.

Values are the worst over the rollouts that held (the operating envelope: a rollout that fell is counted as a
failure by the success rate, and its drive would be stopped), with the median beside it; when none held, over all
rollouts up to the moment they stopped. Limits come from the rig file: ``peak`` and ``continuous`` per actuator,
``max_speed`` per actuated joint, the cart's ``travel``. Time in saturation is judged against a policy of this
module, :data:`SATURATION_SHARE` of the horizon. Base loads, tip speed and kinetic energy have no rating in the rig
file: they are reported with ``limit = None`` and ``ok = None`` and feed the hazard notes.

Residual motion (``<state>.residual_motion``): the largest |state error| over the final hold window of each held
run. A balance loop with Coulomb friction hunts in a small limit cycle instead of coming to rest, and encoder noise
through the estimator makes the rates jitter; both are findings, not falls (a run whose residual motion leaves the
settling box is counted as "not settled" by the success rate), so these lines too have no limit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.model.rig import Rig
from upswing.verification.simulate import Rollouts

SATURATION_SHARE = 0.1  # a balance loop that saturates more than 10 % of the time is living on its limits


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
    out.append(_line("base.peak_force_x", mon[:, 0], None, "N", "horizontal force on the base (mount or rail)"))
    out.append(_line("base.peak_force_y", mon[:, 1], None, "N", "vertical force on the base (weight included)"))
    out.append(_line("base.peak_force", results.peak_force, None, "N", "magnitude of the force on the base"))
    out.append(_line("base.peak_moment", mon[:, 2], None, "N m", "moment the shoulder passes to the base"))
    out.append(_line("tip.peak_speed", mon[:, 3], None, "m/s", "speed of link 2's tip"))
    out.append(_line("links.peak_kinetic_energy", mon[:, 4], None, "J", "kinetic energy of the moving parts"))
    for j, (state, unit) in enumerate(zip(rig.state_names, rig.state_units, strict=True)):
        out.append(_line(f"{state}.residual_motion", results.hold_error[:, j], None, unit,
                         f"largest |{state} error| in the final {hold_s:g} s (friction hunting, noise jitter)"))
    return tuple(out)
