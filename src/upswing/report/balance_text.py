"""Readable terminal text for ``upswing balance``."""

from __future__ import annotations

import math

import numpy as np

from upswing.model.rig import Rig
from upswing.report.text import cautions_text, complex_text, table
from upswing.synthesis.estimation import kalman_setting
from upswing.synthesis.study import BalanceStudy


def _num(x: float, fmt: str = ".3g") -> str:
    return "inf" if math.isinf(x) else ("-" if math.isnan(x) else format(x, fmt))


def _matrix_rows(M: np.ndarray, names: tuple[str, ...], units: tuple[str, ...]) -> list[list[str]]:
    return [[n, u, *[f"{v:+.6g}" for v in row]] for n, u, row in zip(names, units, M, strict=True)]


def balance_text(rig: Rig, study: BalanceStudy, export_folder: str | None = None) -> str:
    """What ``upswing balance`` prints."""
    d = study.design
    out = [f"{rig.name}  ({rig.source})  family: {rig.family}",
           f"balance at upright: u = u_eq - K (x - x_eq), angle errors wrapped to (-pi, pi]; weights: "
           f"{d.weights_source}",
           f"loop rate {d.sample_rate:g} Hz (period {d.sample_period * 1e3:g} ms), computation delay designed in: "
           f"{d.delay_samples} samples",
           "unstable poles at upright [1/s]: " + (", ".join(complex_text(z) for z in d.unstable_poles) or "none"),
           "", "K_discrete (run this one):",
           table(_matrix_rows(d.K_discrete, d.input_names, rig.input_units), ["input", "unit", *d.gain_columns]),
           "", "K (continuous, for reference):",
           table(_matrix_rows(d.K, d.input_names, rig.input_units), ["input", "unit", *d.state_names]),
           "", "closed-loop poles, continuous [1/s]: " + ", ".join(complex_text(z) for z in d.closed_loop_poles),
           "closed-loop poles, discrete |z|: " + ", ".join(f"{abs(z):.4f}" for z in d.closed_loop_poles_discrete),
           f"Riccati residuals (relative): continuous {d.riccati_residual:.1e}, discrete "
           f"{d.riccati_residual_discrete:.1e}", ""]
    rows = []
    for est in (study.kalman, study.finite_difference):
        setting = (kalman_setting(est) if est.kind == "kalman"
                   else f"cut-off {est.cutoff_hz:g} Hz")
        vel = [f"{s}: {e:.3g}" for s, e in zip(d.state_names, est.error_std, strict=True) if s.endswith("_dot")]
        rows.append([est.kind, setting, f"{np.max(np.abs(est.poles)):.4f}",
                     f"{np.max(np.abs(est.closed_loop_poles)):.4f}", ", ".join(vel)])
    out += ["velocity estimators (readings: " + ", ".join(
        f"{s} +-{v:.2g}" for s, v in zip(study.kalman.measured, study.kalman.measurement_std, strict=True)) + "):",
            table(rows, ["estimator", "setting", "max |pole|", "loop max |z|", "velocity error std"]), ""]
    rows = []
    for name, report in study.margins.items():
        for lm in report.loops:
            rows.append([name, lm.input, f"{_num(lm.gain_margin[0])} .. {_num(lm.gain_margin[1])}",
                         _num(lm.phase_margin_deg, ".1f"), _num(lm.delay_margin_s * 1e3),
                         _num(lm.delay_margin_samples, ".2f") + (" !" if lm.flagged else ""),
                         f"{lm.disk_margin:.3f} ({lm.disk_phase_margin_deg:.0f} deg)"])
    out += ["margins (loop broken at each input, others closed; '!' = under 2 samples of delay margin):",
            table(rows, ["design", "input", "gain factor", "phase [deg]", "delay [ms]", "delay [samples]",
                         "disk alpha"])]
    if study.schedule is not None:
        s = study.schedule
        rows = [[f"{v:g}", *[f"{k:+.4g}" for k in K[0]], f"{lo:g} .. {hi:g}" if np.isfinite(lo) else "none"]
                for v, K, (lo, hi) in zip(s.values, s.K_discrete, s.stabilizing_interval, strict=True)]
        out += ["", f"gain schedule over {s.parameter} [{s.unit}] (first input's K_discrete row; the interval "
                    "of grid values each gain stabilizes):",
                table(rows, [s.parameter, *[f"K[{c}]" for c in d.gain_columns], "stabilizes"])]
    if study.flags or study.warnings:
        out += ["", "Warnings:", *[f"  - {w}" for w in (*study.flags, *study.warnings)]]
    if export_folder:
        out += ["", f"exported to {export_folder}"]
    out += ["", cautions_text()]
    return "\n".join(out)
