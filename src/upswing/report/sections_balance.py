"""The balance design as a report section: gains, closed-loop poles, margins, estimators and the responses of the
loop on the nonlinear model."""

from __future__ import annotations

import math

import numpy as np

from upswing.design.responses import BalanceResponses
from upswing.model.rig import Rig
from upswing.report import figures_time
from upswing.report.html import Notes, Paragraph, Section, Table, figure_image
from upswing.synthesis.estimation import kalman_setting
from upswing.synthesis.study import BalanceStudy

DESIGN_WORDS = {"continuous": "continuous (reference)", "discrete": "discrete, exact state",
                "discrete_kalman": "discrete + Kalman filter (runs)",
                "discrete_finite_difference": "discrete + filtered difference"}


def _n(value: float, fmt: str = ".3g") -> str:
    if math.isinf(value):
        return "unbounded"
    return "-" if math.isnan(value) else format(value, fmt)


def gains_table(rig: Rig, study: BalanceStudy) -> Table:
    """K_discrete, one row per input; each column's heading carries the state unit a gain entry is "per"."""
    d = study.design
    units = dict(zip(rig.state_names, rig.state_units, strict=True))
    header = tuple(f"{c} [per {units[c]}]" if c in units else f"{c} [-]" for c in d.gain_columns)
    rows = tuple((u, unit, *(f"{v:+.5g}" for v in row))
                 for u, unit, row in zip(d.input_names, rig.input_units, d.K_discrete, strict=True))
    return Table(("input", "effort unit", *header), rows,
                 f"K_discrete, the gain to run at {d.sample_rate:g} Hz: u = u_eq - K_discrete (x - x_eq), angle errors "
                 "wrapped; an entry is effort (row's unit) per unit of its column's state"
                 + ("; the last columns act on the commands still pending (dimensionless)." if d.delay_samples
                    else "."))


def poles_table(study: BalanceStudy) -> Table:
    d = study.design
    z = np.asarray(d.closed_loop_poles_discrete, dtype=complex)
    z_sorted = z[np.argsort(-np.abs(z))]
    rows = []
    for k, zk in enumerate(z_sorted, start=1):
        s = np.log(zk) * d.sample_rate if abs(zk) > 1e-12 else complex("nan")
        rows.append((str(k), f"{zk.real:+.4f} {zk.imag:+.4f}j", f"{abs(zk):.4f}",
                     "-" if np.isnan(s.real) else f"{s.real:+.3g} {s.imag:+.3g}j",
                     "-" if np.isnan(s.real) or s.real >= 0 else f"{-1000.0 / s.real:.0f}"))
    return Table(("pole", "z", "|z|", "s = ln(z) fs [1/s]", "time constant [ms]"), tuple(rows),
                 "Closed-loop poles of the discrete design (exact state), slowest first. All inside the unit "
                 "circle: the sampled linear loop is stable.")


def margins_table(study: BalanceStudy) -> Table:
    rows = []
    for name, report in study.margins.items():
        for lm in report.loops:
            low, high = lm.gain_margin
            rows.append((DESIGN_WORDS.get(name, name), lm.input, f"{_n(low)} .. {_n(high)}",
                         _n(lm.phase_margin_deg, ".1f"), _n(lm.delay_margin_s * 1e3),
                         _n(lm.delay_margin_samples, ".2f") + (" !" if lm.flagged else ""),
                         f"{lm.disk_margin:.3f}", "yes" if lm.stable else "NO"))
    return Table(("loop", "broken at", "gain factor range", "phase [deg]", "delay [ms]", "delay [samples]",
                  "disk margin alpha", "stable"), tuple(rows),
                 "Margins at each input, the loop broken there and the others closed. '!' marks a delay margin under "
                 "two samples. The row marked 'runs' is the loop the verification simulates and the verdict judges.")


def estimator_table(rig: Rig, study: BalanceStudy) -> Table:
    rows = []
    for est in (study.kalman, study.finite_difference):
        setting = (kalman_setting(est) if est.kind == "kalman"
                   else f"low-pass at {est.cutoff_hz:g} Hz")
        errors = ", ".join(f"{s} {e:.2g}" for s, e in zip(study.design.state_names, est.error_std, strict=True)
                           if s.endswith("_dot"))
        rows.append((est.kind, setting, f"{np.max(np.abs(est.poles)):.4f}", errors))
    return Table(("velocity estimator", "setting", "slowest pole |z|", "velocity error std [rad/s, m/s]"),
                 tuple(rows), "Velocities are estimated from the encoder readings (" + ", ".join(
                     f"{s} ±{v:.2g}" for s, v in zip(study.kalman.measured, study.kalman.measurement_std,
                                                     strict=True)) + " one-sigma reading error).")


def balance_section(rig: Rig, study: BalanceStudy | None, responses: BalanceResponses | None,
                    failure: str = "") -> Section:
    """The balance design section; ``failure`` explains a missing design."""
    if study is None:
        return Section("Balance design", (Paragraph(
            "No balance design was made, so nothing below the rig and modes can be judged. " + failure),),
            key="balance")
    d = study.design
    blocks: list = [
        Paragraph(f"LQR at upright with {d.weights_source} weights, discretized by zero-order hold at "
                  f"{d.sample_rate:g} Hz (period {1000 * d.sample_period:g} ms), computation delay designed in: "
                  f"{d.delay_samples} sample(s). Sign convention: u = u_eq - K (x - x_eq), angles counter-clockwise "
                  "positive, theta1 from the upward vertical, theta2 relative to link 1. Riccati residuals "
                  f"(relative): {d.riccati_residual:.1e} continuous, {d.riccati_residual_discrete:.1e} discrete."),
        gains_table(rig, study),
        poles_table(study),
        margins_table(study),
        estimator_table(rig, study),
    ]
    if responses is not None:
        sensing = ("quantized, noisy encoder readings and the Kalman filter" if responses.measurement == "encoders"
                   else "exact state feedback")
        blocks.append(Paragraph(
            "The loop as it will run (" + sensing + ", saturation, delay and friction), simulated on the nonlinear "
            "model at the nominal parameters. Each disturbance is sized from the region of attraction found in the "
            "verification, so these show the loop working well inside what it can catch."))
        for r in responses.responses:
            title = "Released offset" if r.name == "offset" else "Tap on the tip"
            blocks.append(figure_image(
                figures_time.time_history_figure(rig, r.t, r.X, r.U, title=title),
                f"{title}: {r.description}. Outcome: {r.outcome}; last outside the settling box at "
                f"{r.settle_time:.2f} s; peak effort "
                + ", ".join(f"{v:.3g} {u}" for v, u in zip(r.peak_input, rig.input_units, strict=True)) + ".",
                alt=f"Time history of the balance loop after {r.description}"))
    if study.flags or study.warnings:
        blocks += [Paragraph("The balance design raised these points:"), Notes(tuple(study.flags + study.warnings))]
    return Section("Balance design", tuple(blocks), key="balance")
