"""The swing-up as a report section: the plan's facts, its time histories against the actuator envelope, the
effort-speed plane, a filmstrip of poses and an animation; or a plain statement of why there is none."""

from __future__ import annotations

import numpy as np

from upswing.design.swingup_stage import SwingUpOutcome
from upswing.model.rig import Rig
from upswing.report import figures_rig, figures_time
from upswing.report.html import Image, Notes, Paragraph, Section, Table, figure_image
from upswing.report.sections_verification import budgets_blocks, correlation_table


def plan_table(rig: Rig, outcome: SwingUpOutcome) -> Table:
    plan = outcome.plan
    units = rig.input_units
    rows = (("method", f"{plan.scheme} collocation, {plan.intervals} intervals, IPOPT", ""),
            ("objective", "minimum time" if plan.minimum_time else "minimum effort, integral of (u / peak)^2", ""),
            ("duration", f"{plan.duration:.3f}", "s"),
            ("largest effort used", ", ".join(f"{n} {v:.3g} {u}" for n, v, u in
                                              zip(rig.input_names, plan.peak_input, units, strict=True)), ""),
            ("limit respected", ", ".join(f"{n} {v:.3g} {u}" for n, v, u in
                                          zip(rig.input_names, plan.limit, units, strict=True)), ""),
            ("how it was found", plan.strategy, ""),
            ("solver", f"{plan.solver_status}, {plan.iterations} iterations, {plan.solve_s:.2f} s "
                       f"({plan.total_s:.2f} s with every attempt and mesh check)", ""),
            ("largest interval error (re-integrated)", f"{plan.max_interval_error:.2g} (tolerance "
                                                       f"{plan.mesh_tolerance:.2g})", "rad or m"),
            ("Coulomb friction smoothed over", f"{plan.coulomb_smoothing:g}", "rad/s or m/s"))
    return Table(("quantity", "value", "unit"), rows, "The optimized swing-up from hanging to upright at rest.")


def dropout_table(study) -> Table:
    """Catch rate per freeze length and moment (a :class:`~upswing.verification.swingup_dropout
    .SwingUpDropoutStudy`), with the stale-reading threshold it gives the firmware."""
    by = {(c.moment, c.samples): c for c in study.cases}
    durations = sorted({c.samples for c in study.cases})

    def cell(c) -> str:
        low, high = c.interval
        return (f"{c.successes} of {c.rollouts} ({100 * low:.1f} .. {100 * high:.1f} %)"
                + ("" if c.meets else ", short"))

    rows = tuple((f"{1000.0 * n / study.sample_rate:g}", str(n),
                  *[cell(by[(m.name, n)]) if (m.name, n) in by else "-" for m in study.moments]) for n in durations)
    header = ("frozen for [ms]", "control samples",
              *[f"caught, freeze at the {m.name} point ({m.time_s:.3f} s)" for m in study.moments])
    if not study.shown:
        held = "The swing-up did not show the required catch rate without a freeze, so no freeze counts as tolerated"
    elif study.longest_tolerated_ms is None:
        held = "Even the shortest freeze was not tolerated"
    else:
        held = f"Freezes up to {study.longest_tolerated_ms:g} ms were tolerated at every moment tested"
    plural = "s" if study.stale_reading_samples != 1 else ""
    return Table(header, rows,
                 f"Swing-ups caught with the encoder readings frozen (the verification's first {study.rollouts} "
                 f"runs, same draws; 95 % Wilson interval in brackets; 'short': the lower bound is below "
                 f"{100 * study.bar:.1f} %). {held}: the drive must lose power when no fresh encoder reading has "
                 f"arrived for {study.stale_reading_ms:g} ms ({study.stale_reading_samples} control sample{plural} "
                 f"at {study.sample_rate:g} Hz; {study.threshold_reason}). swingup.json and the C header carry it "
                 "(UPSWING_STOP_STALE_READING_SAMPLES); run the check as a safety function (ISO 13849-1).")


def verified_blocks(rig: Rig, check) -> list:
    """The tracked manoeuvre on the uncertain model (a :class:`~upswing.verification.manoeuvre.SwingUpVerification`):
    success rate with its interval, outcomes, hand-over times, the nominal run against the envelope, budgets."""
    low, high = check.success_interval
    spreads = ", ".join(f"{name} ±{100 * s:.0f} %" for name, s in rig.uncertainty.spreads if s > 0) or "none"
    hs = check.handover_summary
    caught_text = (f"The balance loop took over after {hs['median']:.2f} s (median; {hs['min']:.2f} .. "
                   f"{hs['max']:.2f} s, 95th percentile {hs['p95']:.2f} s) in the caught runs."
                   if np.isfinite(hs["median"]) else "No run was caught.")
    nominal = (f"caught, hand-over at {check.nominal.handover_time:.2f} s" if check.nominal.caught
               else f"not caught ({check.nominal.status})")
    blocks: list = [
        Paragraph(f"Verified on the nonlinear model: {check.law}, handed to the balance loop at x'Px <= "
                  f"{check.rho_in:.4g} ({check.rho_source}; released above {check.rho_out:.4g}), with "
                  f"{check.measurement}, sampling, saturation and the loop's delay. {check.rollouts} Monte Carlo runs "
                  f"of {check.horizon_s:.3g} s ({rig.uncertainty.distribution} spreads: {spreads}; seed "
                  f"{check.seed}): {check.successes} caught and held, {check.success_rate:.1%}, 95 % Wilson interval "
                  f"{low:.2%} .. {high:.2%}; the verdict asks the lower end to reach {check.required_success:.1%}. "
                  f"{caught_text} Nominal run: {nominal}. Manoeuvre check: {check.verdict.upper()}"
                  + (" (" + "; ".join(check.reasons) + ")." if check.reasons else ".")),
        Table(("outcome", "runs", "share"),
              tuple((k, str(n), f"{100 * n / check.rollouts:.1f} %") for k, n in check.outcomes.items()),
              "How the tracked swing-ups ended ('caught and held': the balance loop engaged and held the links in "
              "the settling box for the final second)."),
    ]
    sup = check.supervision
    if sup is not None and np.isfinite(sup.catch_deadline):
        rows = [("balance cost-to-go must reach", f"{sup.catch_level:.4g}", "-"),
                ("... by, after the start", f"{sup.catch_deadline:.3f}", "s")]
        rows += [(f"{joint} speed must stay below", f"{value:.3g}", unit) for joint, value, unit in sup.speed_limits]
        if sup.rail_limit is not None:
            rows.append(("cart distance from centre must stay below", f"{sup.rail_limit:.3g}", "m"))
        blocks.append(Table(
            ("stop the drive unless", "value", "unit"), tuple(rows),
            f"Stop conditions for the drive's supervision, derived from {sup.derived_from} caught runs and checked "
            f"on {sup.checked_on} others: {sup.false_trips} nuisance stops, {sup.missed_stopped} of {sup.missed} "
            "missed catches stopped. Run them as a safety function (ISO 13849-1) with stop category 0 or 1 "
            "(IEC 60204-1); swingup.json and the C header carry them."))
    study = check.dropout_study
    if study is not None:
        blocks.append(dropout_table(study))
    table = correlation_table(check.correlations, ("missed", "caught"),
                              "Parameters the missed catches follow (point-biserial correlation; |r| above 2/sqrt(N) "
                              "is unlikely by chance): measure these better first.")
    if table is not None:
        blocks.append(table)
    caught = check.handover_times[check.caught] if check.caught is not None else check.handover_times
    if np.isfinite(caught).any():
        blocks.append(figure_image(
            figures_time.histogram_figure(caught, quantity="hand-over time", unit="s"),
            "When the balance loop took over, in each caught Monte Carlo run.",
            alt="Histogram of the swing-up hand-over times"))
    n = check.nominal
    blocks.append(figure_image(
        figures_time.time_history_figure(rig, n.times[:-1], n.states[:-1], n.inputs,
                                         title="Tracked swing-up, nominal rig"),
        "The nominal tracked run (nominal parameters, encoders with quantization and noise, delay, saturation; the "
        "balance loop after the hand-over) against the actuator envelope: peak (hatched beyond), continuous rating "
        "(dashed, against the running RMS) and motor line where given.",
        alt="Time histories of the tracked swing-up on the nominal rig"))
    blocks += budgets_blocks(tuple(check.budgets), "Swing-up budgets (tracked, caught runs)",
                             source="the worst caught run")
    return blocks


def swingup_section(rig: Rig, outcome: SwingUpOutcome | None, message: str) -> Section:
    """The swing-up section; ``message`` says why there is no outcome."""
    if outcome is None:
        return Section("Swing-up", (
            Paragraph(f"{message.rstrip('.')}. Without a swing-up this run cannot say whether {rig.name}'s actuators "
                      "can bring the links from hanging to upright and hand them to the balance loop, so the verdict "
                      "cannot clear the rig. The balance loop is verified on its own below: it catches the links "
                      "only inside the region of attraction shown there, and nobody may bring the links there by "
                      "hand with the drive enabled."),
        ), key="swingup")
    t, X, U = outcome.t, outcome.X, outcome.U
    blocks: list = [
        Paragraph(f"An optimized swing-up from hanging to upright at rest in {outcome.plan.duration:.2f} s. It is an "
                  "open-loop reference: on the rig it must be tracked with feedback and handed to the balance loop. "
                  + (outcome.unverified[0].upper() + outcome.unverified[1:] + ", so its figures below are what the "
                     "plan asks of the rig, not a verified manoeuvre." if outcome.unverified else
                     "The tracked manoeuvre was verified (below); the plan's own figures follow it.")),
        plan_table(rig, outcome),
        figure_image(figures_time.time_history_figure(rig, t, X, U, title="Planned swing-up"),
                     "The planned swing-up against the actuator envelope: angles, speeds"
                     + (", cart position and speed" if rig.cart is not None else "")
                     + " and each input's effort with its peak (hatched beyond), continuous rating (dashed, against "
                       "the running RMS) and motor line where the rig file gives one.",
                     alt="Time histories of the planned swing-up"),
        figure_image(figures_time.torque_speed_figure(rig, X, U),
                     "Each input's operating points in the effort-speed plane: quadrants I and III drive the joint, "
                     "II and IV brake it.", alt="Effort against speed along the planned swing-up"),
        figure_image(figures_rig.filmstrip_figure(rig, t, X),
                     "Poses along the planned swing-up, drawn to scale.", alt="Filmstrip of the planned swing-up"),
        Image(figures_rig.animation_gif(rig, t, X), "image/gif",
              "The planned swing-up in real time (loops; the last pose holds for a second).",
              alt="Animation of the planned swing-up"),
    ]
    if outcome.tracking is not None:
        table = outcome.tracking
        gains = np.abs(np.asarray(table.K))
        blocks.append(Paragraph(
            f"Tracking gains: a time-varying LQR table of {table.n_rows} rows at {table.sample_rate:g} Hz along the "
            f"plan (u = u_ff[k] - K[k] (x - x_ref[k]), angle errors wrapped, saturated at peak; the balance loop "
            f"takes over after the last row, at {table.end_time:.2f} s). Largest gain entry "
            f"{gains.max():.3g}; exported as swingup.csv and swingup.json (and a C header when it fits)."))
    if outcome.verification is not None:
        blocks += verified_blocks(rig, outcome.verification)
    blocks += budgets_blocks(outcome.planned_budgets or outcome.budgets, "Swing-up budgets (planned)",
                             source="the plan at its nodes and midpoints", single=True)
    blocks.append(Notes((
        "The plan's budgets are judged at its nodes and interval midpoints, where the optimizer enforces the "
        "equations of motion and the limits; between them the plan is an interpolant and can pass a bound by about "
        "the mesh's accuracy.", *outcome.notes)))
    return Section("Swing-up", tuple(blocks), key="swingup")
