"""Hazard notes generated from a verification's figures, with pointers to the standards that govern.

The notes are prompts for the rig owner's risk assessment (ISO 12100), not a risk assessment: they turn the
simulated figures into statements a person can act on (keep-out distance, what a falling link carries, what the
clamps must hold, what saturation and a sensor drop-out lead to). Local codes and licensed practice govern.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from upswing.model.derived import derived_quantities, keep_out_origin, keep_out_radius
from upswing.model.rig import RATINGS, Rig
from upswing.safety import GOVERNING
from upswing.verification.budgets import MOUNT_RATING, Budget

MOUNT_STANDARDS = ("ISO 12100", "ISO 14120")  # risk assessment; guards that must contain a rig that comes loose
FALL_SHARE = 1.0  # all the potential energy between upright and hanging can become kinetic energy in a fall


@dataclass(frozen=True)
class HazardNote:
    """One note: a short ``topic``, the ``text`` with figures, and the ``standards`` it points to."""

    topic: str
    text: str
    standards: tuple[str, ...]


def fall_energy(rig: Rig) -> float:
    """Potential energy released when both links fall from upright to hanging [J]:
    2 g (m1 lc1 + m2 (l1 + lc2))."""
    l1, l2 = rig.link1, rig.link2
    return 2.0 * rig.gravity * (l1.mass * l1.com + l2.mass * (l1.length + l2.com))


def fall_tip_speed(rig: Rig) -> float:
    """Upper-bound tip speed of a straight rig swinging down from upright [m/s]: all the fall energy as rotation
    of the straight rig about the shoulder, v = reach sqrt(2 E / I_pivot)."""
    d = derived_quantities(rig)
    return d.reach * math.sqrt(2.0 * fall_energy(rig) / d.inertia_about_pivot)


def swept_zone_note(rig: Rig) -> HazardNote:
    """The keep-out note every result carries: the swept circle, the rail, and the keep-out distance and origin."""
    d = derived_quantities(rig)
    return HazardNote(
        "swept zone",
        f"The links sweep a circle of radius {d.swept_radius:.2f} m about the shoulder"
        + (f", anywhere along {2 * rig.cart.travel:.2f} m of rail" if rig.cart else "")
        + f". Keep people at least {keep_out_radius(rig):.2f} m from {keep_out_origin(rig)} while the drive is "
          "enabled and guard the zone (fixed or interlocked guards).",
        ("ISO 12100", "ISO 14120", "ISO 13857"))


def hazard_notes(rig: Rig, budgets: tuple[Budget, ...], *, rho_summary: str, success_rate: float,
                 dropout_ms: float | None, dropout_tested_ms: tuple[float, ...]) -> tuple[HazardNote, ...]:
    """Notes from the budgets, the region-of-attraction summary and the drop-out study."""
    by = {b.name: b for b in budgets}
    notes = [swept_zone_note(rig)]
    tip = by["tip.peak_speed"].value
    ke = by["links.peak_kinetic_energy"].value
    notes.append(HazardNote(
        "tip speed and energy",
        f"While balancing, the tip reached {tip:.2f} m/s and the links carried up to {ke:.3g} J in the simulated "
        f"runs. If the controller lets go, the links fall with up to {fall_energy(rig):.3g} J and the tip can pass "
        f"{fall_tip_speed(rig):.1f} m/s at the bottom: enough to hurt fingers and faces. Start with reduced "
        "limits and keep the emergency stop within reach.",
        ("ISO 12100", "ISO 13850", "ISO 14120")))
    notes.append(base_load_note(rig, budgets))
    saturation = [b for b in budgets if b.name.endswith(".saturation_time")]
    worst_sat = max(saturation, key=lambda b: b.value)
    notes.append(HazardNote(
        "saturation",
        f"The command was at the actuator limit for up to {worst_sat.value:.3g} s ({worst_sat.name.split('.')[0]}). "
        f"A saturated balance loop loses its margin: starts outside the region of attraction ({rho_summary}) fall. "
        f"{success_rate:.1%} of the Monte Carlo runs held. Falls are a normal event on this rig: the drive must "
        "stop safely (stop category 0 or 1) when an angle leaves its window.",
        ("IEC 60204-1", "ISO 13850")))
    residual = _residual_motion_text(rig, by)
    if residual:
        notes.append(HazardNote(
            "residual motion",
            f"In the final second of the held runs {residual}: a small limit cycle from Coulomb friction and encoder "
            "noise (hunting), not a fall. Expect the rig to keep moving a little while it balances; do not read it "
            "as settled or reach in because it looks still. Friction compensation or integral action in the "
            "firmware reduce it.",
            ("ISO 12100",)))
    tested = ", ".join(f"{t:g}" for t in dropout_tested_ms)
    if dropout_ms is None:
        held_text = f"even the shortest frozen-encoder interval tested ({tested} ms) made some runs fall"
    elif dropout_ms >= max(dropout_tested_ms):
        held_text = (f"a frozen encoder reading for up to {dropout_ms:g} ms was survived (tested: {tested} ms); "
                     "longer ones were not tested")
    else:
        held_text = (f"a frozen encoder reading for up to {dropout_ms:g} ms was survived (tested: {tested} ms); "
                     "longer ones made some runs fall")
    notes.append(HazardNote(
        "sensor drop-out",
        f"In simulation {held_text}. The firmware must detect stale or implausible encoder data and remove drive "
        "power within that time; treat that check as a safety function and rate it.",
        ("IEC 60204-1", "ISO 13849-1")))
    if rig.cart is not None and "cart.rail_usage" in by:
        mass = rig.cart.mass + rig.link1.mass + rig.link2.mass
        vmax = rig.actuator("cart").max_speed if "cart" in rig.actuated else 1.0
        notes.append(HazardNote(
            "rail end stops",
            f"The cart used up to {by['cart.rail_usage'].value:.3f} m of its {rig.cart.travel:.3f} m travel. At "
            f"its speed limit ({vmax:g} m/s) the moving mass carries {0.5 * mass * vmax ** 2:.3g} J into an end "
            "stop: fit energy-absorbing stops and limit switches that cut the drive.",
            ("ISO 12100", "IEC 60204-1")))
    notes.append(HazardNote("governing", GOVERNING, ()))
    return tuple(notes)


def _residual_motion_text(rig: Rig, by: dict[str, Budget]) -> str:
    """'the links still moved by up to ...' from the ``<state>.residual_motion`` budget lines ('' without them)."""
    def worst(states: tuple[str, ...]) -> float:
        return max(by[f"{s}.residual_motion"].value for s in states)

    if "theta1.residual_motion" not in by:
        return ""
    text = (f"the links still moved by up to {worst(('theta1', 'theta2')):.3g} rad, at up to "
            f"{worst(('theta1_dot', 'theta2_dot')):.3g} rad/s")
    if rig.cart is not None:
        text += (f", and the cart by up to {worst(('x',)):.3g} m from the rail's centre at up to "
                 f"{worst(('x_dot',)):.3g} m/s")
    return text


def mount_judgement(rig: Rig, budgets: tuple[Budget, ...]) -> str:
    """One or two sentences: whether the base loads in ``budgets`` were judged against the ``[mount]`` ratings,
    which exceed their limit, and which ratings are missing (what to add to the rig file)."""
    by = {b.name: b for b in budgets}
    if rig.mount is None:
        return ("These base loads were not judged: the rig file has no [mount] table, so upswing does not know what "
                "the clamps or bolts can take. Add [mount] with the fixing's ratings (horizontal_force, "
                "vertical_force, moment, and the safety_factor your practice requires; docs/rig-file.md, "
                "docs/user-guide.md section 7.1) to have them judged.")
    judged = [by[name] for name in MOUNT_RATING if name in by and by[name].limit is not None]
    over = [b for b in judged if b.ok is False]
    parts = [f"{b.name} {b.value:.3g} of {b.limit:.3g} {b.unit}" for b in judged]
    text = (f"Judged against the [mount] ratings divided by the safety factor {rig.mount.safety_factor:g}: "
            + "; ".join(parts) + ". ")
    if over:
        text += ("EXCEEDED: " + ", ".join(b.name for b in over) + ". The fixing is rated for less than this rig "
                 "asks of it: do not run it until the base is held more strongly (and the new ratings entered). ")
    else:
        text += "Each is within its limit. "
    missing = [r for r in RATINGS if getattr(rig.mount, r) is None]
    if missing:
        text += ("Not judged, no rating given: " + ", ".join(f"[mount].{r}" for r in missing)
                 + "; add it to have that load judged. ")
    return text.rstrip()


def base_load_note(rig: Rig, budgets: tuple[Budget, ...], *, where: str = "in these runs") -> HazardNote:
    """The base-load hazard note: the worst force and moment on the base ``where`` (e.g. "in these runs"), and
    whether they were judged against the ``[mount]`` ratings (:func:`mount_judgement`)."""
    by = {b.name: b for b in budgets}
    lever = ""
    if "base.peak_mount_moment" in by and rig.mount is not None and (
            rig.mount.shoulder_height or rig.mount.shoulder_offset or rig.cart is not None):
        lever = f", {by['base.peak_mount_moment'].value:.3g} N m about the mount's rated point (upper bound)"
    return HazardNote(
        "base loads",
        f"The mount must hold a force of {by['base.peak_force'].value:.3g} N (horizontal "
        f"{by['base.peak_force_x'].value:.3g} N, vertical {by['base.peak_force_y'].value:.3g} N incl. the weight) "
        f"and a moment of {by['base.peak_moment'].value:.3g} N m at the shoulder{lever} {where}; a fall, a "
        f"runaway or a missed swing-up catch can load it more. {mount_judgement(rig, budgets)} Loads that reverse "
        "at every swing loosen clamps and bolts: check the fixing before each session, and guard the zone so that a "
        "rig that comes loose stays contained.",
        MOUNT_STANDARDS)
