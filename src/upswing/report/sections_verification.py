"""The nonlinear verification as report sections: Monte Carlo, region of attraction with its slice maps, budgets
against limits, drop-outs, and the table of every judged margin."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from upswing.model.rig import Rig
from upswing.report import figures_time
from upswing.report.figures_time import Curve, ellipse_curve
from upswing.report.html import Block, Notes, Paragraph, Section, Table, figure_image
from upswing.report.verdict import Margin
from upswing.verification.budgets import Budget
from upswing.verification.montecarlo import Correlation
from upswing.verification.roa import RegionOfAttraction, Slice
from upswing.verification.verdict import Verification

ANGLES = ("theta1", "theta2")


def correlation_table(correlations: Sequence[Correlation], outcomes: tuple[str, str], caption: str) -> Table | None:
    """The notable entries of ``correlations`` (:class:`upswing.verification.montecarlo.Correlation`) as a table, or
    None when there are none; ``outcomes`` names the two groups, e.g. ("failed", "held")."""
    notable = [c for c in correlations if c.notable]
    if not notable:
        return None
    return Table(("parameter", "correlation r", f"mean deviation, {outcomes[0]}", f"mean deviation, {outcomes[1]}"),
                 tuple((c.parameter, f"{c.r:+.2f}", f"{100 * c.mean_deviation_failed:+.1f} %",
                        f"{100 * c.mean_deviation_held:+.1f} %") for c in notable), caption)


def _axis(state: str, rig: Rig) -> tuple[str, str, float]:
    """Label, unit and scale from SI for one state on a map: angles in degrees (easier to picture), the rest SI."""
    if state in ANGLES:
        return state, "deg", 180.0 / math.pi
    return state, rig.state_units[rig.state_names.index(state)], 1.0


def handover_curve(rig: Rig, region: RegionOfAttraction, piece: Slice, label: str) -> Curve | None:
    """The verified level set x'Px = rho cut by the slice (other states at upright), in the map's units."""
    if region.rho <= 0:
        return None
    i, j = rig.state_names.index(piece.x_state), rig.state_names.index(piece.y_state)
    P2 = np.asarray(region.P)[np.ix_([i, j], [i, j])]
    curve = ellipse_curve(label, P2, region.rho)
    sx, sy = _axis(piece.x_state, rig)[2], _axis(piece.y_state, rig)[2]
    return Curve(curve.label, curve.x * sx, curve.y * sy)


def monte_carlo_blocks(rig: Rig, v: Verification, required: float) -> list[Block]:
    mc = v.monte_carlo
    low, high = mc.success_interval
    spreads = ", ".join(f"{name} ±{100 * s:.0f} %" for name, s in rig.uncertainty.spreads if s > 0) or "none"
    blocks: list[Block] = [
        Paragraph(f"{mc.rollouts} closed-loop rollouts of {mc.horizon_s:g} s each on the nonlinear model, each with "
                  f"its own parameters ({mc.distribution} spreads: {spreads}) and its own small start offset from "
                  f"upright (angles within ±{mc.offsets.angle:g} rad, rates ±{mc.offsets.rate:g} rad/s), with "
                  f"{v.measurement} ({v.estimator}), saturation, the loop's delay and friction; seed {mc.seed}. "
                  f"{mc.successes} held: {mc.success_rate:.1%}, 95 % Wilson interval {low:.2%} .. {high:.2%}. The "
                  f"verdict asks the lower end to reach {required:.1%}."),
        Table(("outcome", "rollouts", "share"),
              tuple((k, str(n), f"{100 * n / mc.rollouts:.1f} %") for k, n in mc.outcomes.items()),
              "How the Monte Carlo rollouts ended ('held': inside the settling box for the final second)."),
    ]
    table = correlation_table(mc.correlations, ("failed", "held"),
                              "Parameters the failures follow (point-biserial correlation; |r| above 2/sqrt(N) is "
                              "unlikely by chance).")
    if table is not None:
        blocks.append(table)
    results = mc.results.subset(mc.results.held) if mc.results.held.any() else mc.results
    for j, a in enumerate(rig.actuators):
        unit = "N" if a.joint == "cart" else "N m"
        blocks.append(figure_image(
            figures_time.histogram_figure(results.rms_input[:, j], quantity=f"{a.joint} RMS effort", unit=unit,
                                          limit=a.continuous),
            f"RMS effort of the {a.joint} actuator in each {'held ' if mc.results.held.any() else ''}rollout "
            f"against its continuous rating ({a.continuous:g} {unit}).",
            alt=f"Histogram of the {a.joint} RMS effort over the Monte Carlo rollouts"))
    return blocks


def level_curve(rig: Rig, P: np.ndarray, level: float, piece: Slice, label: str) -> Curve:
    """The level set x'Px = level (P over the state, n x n) cut by the slice (other states at upright), in the
    map's units."""
    i, j = rig.state_names.index(piece.x_state), rig.state_names.index(piece.y_state)
    curve = ellipse_curve(label, np.asarray(P)[np.ix_([i, j], [i, j])], level)
    sx, sy = _axis(piece.x_state, rig)[2], _axis(piece.y_state, rig)[2]
    return Curve(curve.label, curve.x * sx, curve.y * sy)


def region_blocks(rig: Rig, v: Verification, handover_label: str,
                  handover: tuple[np.ndarray, float] | None = None) -> list[Block]:
    roa = v.region
    rows = tuple((s, f"{roa.level_set_extents[s]:.3g}", f"{lo:+.3g}", f"{hi:+.3g}", unit)
                 for (s, (lo, hi)), unit in zip(roa.axis_catch.items(), rig.state_units, strict=True))
    blocks: list[Block] = [
        Paragraph(f"Region of attraction: {roa.method}. Largest verified level set rho = {roa.rho:.4g} with "
                  f"{roa.samples} held starts inside it ({roa.samples_total} starts simulated in all)."
                  + (" No level set held: even the smallest sampled offsets fell." if roa.rho <= 0 else "")),
        Table(("state", "level-set half-width", "caught from", "caught to", "unit"), rows,
              "How far the loop catches an offset along each state axis alone (others at upright), and the "
              "half-width of the verified level set along it."),
    ]
    for piece in roa.slices:
        xq, xu, xs = _axis(piece.x_state, rig)
        yq, yu, ys = _axis(piece.y_state, rig)
        curve = handover_curve(rig, roa, piece, "verified level set")
        curves = () if curve is None else (curve,)
        if handover is not None:
            curves += (level_curve(rig, handover[0], handover[1], piece, "swing-up hand-over"),)
        blocks.append(figure_image(
            figures_time.slice_map_figure(np.asarray(piece.x_values) * xs, np.asarray(piece.y_values) * ys,
                                          np.asarray(piece.held, dtype=bool), x_quantity=xq, x_unit=xu,
                                          y_quantity=yq, y_unit=yu, curves=curves, target=(0.0, 0.0)),
            f"Starts in the {piece.x_state} x {piece.y_state} plane (other states at upright) that the balance loop "
            f"catches, nominal parameters; the first curve is {handover_label}"
            + (f"; the second is the swing-up's hand-over boundary x'Px = rho_in = {handover[1]:.4g} (the balance "
               "cost-to-go of the delay-free design), inside which the tracked swing-up hands over"
               if handover is not None else "") + ".",
            alt=f"Region-of-attraction slice {piece.x_state} by {piece.y_state}"))
    return blocks


def budgets_blocks(budgets: Sequence[Budget], title: str, *, source: str = "the worst rollout that held",
                   single: bool = False) -> list[Block]:
    """Bars of the rated budgets against their limits, and a table of every line; ``source`` says whose values;
    ``single`` for one trajectory (no median column)."""
    blocks: list[Block] = []
    if any(b.limit is not None for b in budgets):
        blocks.append(figure_image(figures_time.budget_bars_figure(budgets),
                                   f"{title}: share of each limit used by {source} (100 % = the limit).",
                                   alt=f"{title} as bars against their limits"))
    head = ("budget", "value", "limit", "unit", "met") if single else ("budget", "worst", "median", "limit", "unit",
                                                                      "met")
    blocks.append(Table(
        head,
        tuple((b.name, f"{b.value:.4g}", *(() if single else (f"{b.median:.4g}",)),
               "-" if b.limit is None else f"{b.limit:.4g}", b.unit,
               "-" if b.ok is None else ("yes" if b.ok else "NO")) for b in budgets),
        f"{title}. Lines without a limit (tip speed, energy, and base loads unless the rig file has a [mount] table) "
        "have no rating in the rig file; they feed the hazard notes."))
    return blocks


def verification_section(rig: Rig, v: Verification | None, required: float, *, handover_label: str,
                         failure: str = "", handover: tuple[np.ndarray, float] | None = None) -> Section:
    """Monte Carlo, region of attraction, balance budgets, drop-outs and the integration check."""
    if v is None:
        return Section("Verification on the nonlinear model", (Paragraph(
            "The balance loop was not verified on the nonlinear model, so the rig cannot be cleared. " + failure),),
            key="verification")
    d, i = v.dropout, v.integration
    blocks = [Paragraph(f"Controller: {v.controller}; {v.measurement} with {v.estimator}.")]
    blocks += monte_carlo_blocks(rig, v, required)
    blocks += region_blocks(rig, v, handover_label, handover)
    blocks += budgets_blocks(tuple(v.budgets), "Balance budgets")
    blocks.append(Table(("reading frozen for [ms]", "held"),
                        tuple((f"{ms:g}", f"{100 * f:.0f} %") for ms, f in zip(d.durations_ms, d.held_fraction,
                                                                                 strict=True)),
                        f"Sensor drop-out: the encoder reading freezes at t = 1 s ({d.rollouts_each} rollouts from "
                        "small offsets each). The firmware must cut the drive within the longest duration held."))
    blocks.append(Notes((
        f"Integration: classical RK4, {i.substeps} steps per sample (h = {1000 * i.step:.3g} ms); step-doubling "
        f"error estimate {i.error_estimate:.2g} rad against a tolerance of {i.tolerance:g} (without Coulomb "
        f"friction), {i.coulomb_sensitivity:.2g} rad with Coulomb friction's switching.",
        f"Simulation time: {v.monte_carlo.simulate_s:.1f} s for the Monte Carlo rollouts, "
        f"{v.region.simulate_s:.1f} s for the region of attraction, {v.total_s:.1f} s for the whole verification.")))
    return Section("Verification on the nonlinear model", tuple(blocks), key="verification")


def margins_section(margins: Sequence[Margin], budgets: Sequence[Budget]) -> Section:
    """Every judged margin and the count of budgets, in one table: what the verdict weighs."""
    rows = tuple((m.name, "unbounded" if math.isinf(m.value) else f"{m.value:.4g}", f"{m.required:.4g}",
                  m.unit, "unbounded" if math.isinf(m.ratio) else f"{m.ratio:.3g}", "yes" if m.ok else "NO")
                 for m in margins)
    rated = [b for b in budgets if b.limit is not None]
    over = [b for b in rated if b.ok is False]
    blocks: list[Block] = [
        Paragraph(f"The verdict weighs {len(margins)} margins (below) and {len(rated)} budgets with a limit "
                  f"({len(over)} exceeded; see the budget tables). A margin must reach its required value; a "
                  "budget must stay within its limit."),
        Table(("margin", "value", "required", "unit", "ratio", "met"), rows,
              "Margins judged by the verdict, with the requirement each must reach (delay margin: the balance "
              "design's own two-sample rule; gain and phase: common practice, 6 dB and 30 deg; success rate: the "
              "lower end of the 95 % Wilson interval).")]
    return Section("Margins", tuple(blocks), key="margins")
