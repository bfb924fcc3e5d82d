"""Reports put together from what the pipeline has computed.

Today: the rig and its linear models (:func:`build_model_report`). The parts are separate functions so the design
command can reuse them and add its balance, swing-up and verification sections after them.
"""

from __future__ import annotations

import math
from datetime import datetime

from upswing import __version__
from upswing.model.derived import derived_quantities, keep_out_radius
from upswing.model.modes import WEAK_CONTROL, EquilibriumReport, analyse_all
from upswing.model.rig import Rig
from upswing.report import figures_modes, figures_rig, figures_time
from upswing.report.html import (
    Document,
    Notes,
    Paragraph,
    Section,
    Table,
    figure_image,
    render,
)
from upswing.report.verdict import Margin, Verdict, smallest_margin
from upswing.verification.budgets import Budget, tightest_budget
from upswing.verification.hazards import HazardNote, fall_energy, fall_tip_speed, swept_zone_note

NOT_YET_RUN = ("balance design", "swing-up", "verification on the nonlinear model")


def _unit(joint: str) -> str:
    return "N" if joint == "cart" else "N m"


def facts(rig: Rig, made: datetime) -> tuple[tuple[str, str], ...]:
    """The label/value lines under a report's title."""
    return (("rig file", rig.source), ("content hash", rig.content_hash or "-"),
            ("family", f"{rig.family} ({rig.base} base; powered: {', '.join(rig.actuated)})"),
            ("made", f"{made:%Y-%m-%d %H:%M} by upswing {__version__}"))


def holding_budgets(rig: Rig) -> tuple[Budget, ...]:
    """Static budgets: the gravity torque each powered joint meets holding the links beyond it horizontal and
    straight, against its peak. Informative only (a swing-up need not hold that pose); a cart carries no gravity
    load along the rail."""
    link2 = rig.link2
    load = {"shoulder": derived_quantities(rig).holding_torque, "elbow": rig.gravity * link2.mass * link2.com}
    return tuple(Budget(name=f"{a.joint} holding links horizontal (static)", value=load[a.joint], limit=a.peak,
                        unit="N m", ok=load[a.joint] <= a.peak, median=load[a.joint],
                        meaning="gravity torque with the links beyond the joint horizontal and straight")
                 for a in rig.actuators if a.joint in load)


def control_margins(rig: Rig, reports: dict[str, EquilibriumReport]) -> tuple[Margin, ...]:
    """The scaled PBH controllability margin at upright, against :data:`~upswing.model.modes.WEAK_CONTROL`."""
    pbh = reports["upright"].controllability.pbh_margin
    return (Margin("controllability at upright (scaled PBH margin)", pbh, WEAK_CONTROL, "-", pbh >= WEAK_CONTROL),)


def rig_section(rig: Rig) -> Section:
    """The rig drawn to scale, its derived sizes and its actuators."""
    d = derived_quantities(rig)
    rows = [("total mass", f"{d.total_mass:.4g}", "kg"), ("moving mass (links)", f"{d.moving_mass:.4g}", "kg"),
            ("inertia about the shoulder, straight", f"{d.inertia_about_pivot:.4g}", "kg m^2"),
            ("reach (l1 + l2)", f"{d.reach:.4g}", "m"),
            ("swept region half-width from rail centre" if rig.cart else "swept circle radius",
             f"{d.keep_out_half_width:.4g}", "m"),
            ("keep-out distance (swept + 0.5 m clearance)", f"{keep_out_radius(rig):.4g}", "m"),
            ("gravity torque at shoulder, links horizontal", f"{d.holding_torque:.4g}", "N m")]
    actuators = tuple(
        (a.joint, f"{a.peak:g}", f"{a.continuous:g}", f"{a.max_speed:g}",
         "-" if a.stall is None else f"{a.stall:g} at stall, 0 at {a.no_load_speed:g}", _unit(a.joint))
        for a in rig.actuators)
    blocks: list = [
        Paragraph(f"{rig.name}: {rig.description or rig.family}. Links are drawn to scale from the rig file; "
                  "the drawing shows the balance target (upright) with the hanging pose faint behind it."),
        figure_image(figures_rig.rig_figure(rig),
                     "The rig to scale. Left: the links over the region they can sweep, with their lengths; "
                     "right: the keep-out boundary, the swept region grown by a 0.5 m clearance "
                     "(use the distances of ISO 13857 for the real guard layout).",
                     alt=f"Drawing of {rig.name} to scale with its swept region and keep-out boundary"),
        Table(("quantity", "value", "unit"), tuple(rows), "Sizes and loads derived from the rig file."),
        Table(("powered joint", "peak", "continuous (RMS)", "max speed", "motor line", "effort unit"), actuators,
              "Actuator limits from the rig file (speeds in rad/s, or m/s for the cart)."),
    ]
    if rig.warnings:
        blocks += [Paragraph("The rig file check raised these warnings:"), Notes(tuple(rig.warnings))]
    return Section("The rig", tuple(blocks), key="rig")


def modes_section(rig: Rig, reports: dict[str, EquilibriumReport]) -> Section:
    """Eigenvalues at the four equilibria and the oscillation modes about hanging."""
    rows = []
    for name, rep in reports.items():
        c = rep.controllability
        fastest = f"{1000 * math.log(2) / max(rep.growth_rates):.0f}" if rep.growth_rates else "-"
        rows.append((name, str(len(rep.growth_rates)), fastest, "yes" if c.controllable else "NO",
                     f"{c.pbh_margin:.3g}", "yes" if rep.observable else "NO"))
    mode_rows = tuple((str(k + 1), m.kind, f"{m.frequency_hz:.4g}",
                       "-" if m.frequency_hz == 0 else f"{1 / m.frequency_hz:.4g}",
                       f"{m.absolute_shape[0]:+.3f}", f"{m.absolute_shape[1]:+.3f}")
                      for k, m in enumerate(reports["hanging"].modes))
    upright = reports["upright"]
    text = (f"Upright, the links fall away with the fastest doubling time of "
            f"{1000 * min(upright.time_to_double):.0f} ms: that is how quickly the balance controller must act, "
            "and how little time a person has if it stops." if upright.growth_rates else
            "The upright equilibrium has no unstable eigenvalue with these parameters; check the rig file.")
    blocks: list = [
        Paragraph(text),
        figure_image(figures_modes.eigenvalue_map_figure(rig, reports),
                     "Eigenvalues of the linear model at each equilibrium (the small drawing shows the pose). "
                     "Triangles in the hatched half-plane grow; the label gives their doubling time.",
                     alt="Eigenvalue maps at the four equilibria"),
        Table(("equilibrium", "unstable eigenvalues", "fastest doubling [ms]", f"controllable with "
               f"{', '.join(rig.input_names)}", "PBH margin [-]", "observable from encoders"), tuple(rows),
              f"Stability, controllability (scaled PBH margin; below {WEAK_CONTROL:g} a mode needs very large "
              "inputs) and observability at the four equilibria."),
        figure_image(figures_modes.mode_shapes_figure(rig, reports["hanging"].modes),
                     "Small-oscillation modes about hanging, each drawn at both extremes of its swing (swing "
                     "exaggerated; a mode fixes only the ratio of the link motions).",
                     alt="Mode shapes about the hanging pose"),
        Table(("mode", "kind", "frequency [Hz]", "period [s]", "link 1 swing [-]", "link 2 swing [-]"), mode_rows,
              "Modes about hanging: absolute link angles, scaled so the largest generalized entry is 1."),
    ]
    warnings = [rep.controllability.warning for rep in reports.values() if rep.controllability.warning]
    if warnings:
        blocks.append(Notes(tuple(warnings)))
    return Section("Equilibria and modes", tuple(blocks), key="modes")


def model_hazards(rig: Rig, reports: dict[str, EquilibriumReport]) -> tuple[HazardNote, ...]:
    """Hazards that follow from the rig and its linear models alone (the design run adds those of its runs)."""
    notes = [swept_zone_note(rig)]
    upright = reports["upright"]
    if upright.growth_rates:
        notes.append(HazardNote(
            "falling from upright",
            f"If the controller stops or saturates at upright the links fall, doubling their angle every "
            f"{1000 * min(upright.time_to_double):.0f} ms, and release up to {fall_energy(rig):.3g} J; the tip can "
            f"pass {fall_tip_speed(rig):.1f} m/s at the bottom. A stop must remove drive power safely without "
            "relying on the balance loop, and the emergency stop must be within reach.",
            ("ISO 13850", "IEC 60204-1", "ISO 13849-1")))
    if rig.cart is not None:
        notes.append(HazardNote(
            "end stops",
            f"The cart reaches the end stops at ±{rig.cart.travel:.2f} m. Fit energy-absorbing stops and limit "
            "switches that cut the drive before impact.", ("ISO 12100", "IEC 60204-1")))
    return tuple(notes)


def model_document(rig: Rig, *, made: datetime | None = None) -> Document:
    """The rig and modes report as a :class:`~upswing.report.html.Document` (to render, or to extend)."""
    made = made or datetime.now()
    reports = analyse_all(rig)
    budgets = holding_budgets(rig)
    margins = control_margins(rig, reports)
    failing = [b.name for b in budgets if not b.ok] + [m.name for m in margins if not m.ok]
    reasons = tuple(f"not run yet: {m}" for m in NOT_YET_RUN) + tuple(f"already failing: {f}" for f in failing)
    verdict = Verdict("incomplete", "This report covers the rig and its linear models only; the balance design, "
                      "swing-up and nonlinear verification that a decision needs are not run yet.",
                      tightest_budget(budgets), smallest_margin(margins), reasons)
    sections = [rig_section(rig), modes_section(rig, reports)]
    if budgets:
        sections.append(Section("Static budgets", (
            Paragraph("What each powered joint needs to hold the links beyond it horizontal and straight, against "
                      "its peak. A swing-up need not hold that pose; a joint that cannot is a warning sign, not a "
                      "failure."),
            figure_image(figures_time.budget_bars_figure(budgets), "Share of each limit used (100 % = the limit).",
                         alt="Budget bars"),
            Table(("budget", "value", "limit", "unit", "met"),
                  tuple((b.name, f"{b.value:.3g}", f"{b.limit:.3g}", b.unit, "yes" if b.ok else "NO")
                        for b in budgets), "Static budgets."),
        ), key="budgets"))
    sections.append(Section("Not in this report yet", (Notes(tuple(
        f"{m}: added by the design run" for m in NOT_YET_RUN)),), key="pending"))
    return Document(title=rig.name, kind="upswing rig and modes report", facts=facts(rig, made),
                    verdict=verdict, sections=tuple(sections), hazards=model_hazards(rig, reports))


def build_model_report(rig: Rig, *, made: datetime | None = None) -> str:
    """A self-contained HTML report of the rig and its linear models (see :func:`model_document`)."""
    return render(model_document(rig, made=made))

