"""Balance gains as files firmware can use as they are: JSON, CSV and a C header.

Files written by :func:`write_balance_files` (into a folder the caller stages with
:func:`upswing.export.folders.stage_output`):

``balance.json``
    Everything ``upswing balance --json`` prints.
``balance_gains.csv``
    ``# `` header lines, then columns ``matrix,input,input_unit,<gain columns...>``; one row per input for
    ``K_discrete`` (the gain to run) and for ``K`` (continuous, for reference; empty cells in delay columns).
``balance_equilibrium.csv``
    ``# `` header lines, then ``quantity,kind,unit,value``: x_eq (the state error is taken from it), u_eq and the
    actuator peaks.
``balance_gains.h``
    A C99 header: ``static const float`` arrays of the gains, the equilibrium, the peaks and both estimators'
    observer matrices, plus macros for the state and input counts, the loop period and the index of every state
    and input. Compiles with ``gcc -std=c99 -Wall -Wextra -Werror``.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path
from typing import Any

import numpy as np

from upswing.export.header import ExportHeader, c_comment, export_header, hash_comment, header_json
from upswing.export.jsonable import dumps, jsonable
from upswing.model.rig import Rig
from upswing.synthesis.estimation import EstimatorDesign
from upswing.synthesis.margins import MarginReport
from upswing.synthesis.study import BalanceStudy

JSON_NAME = "balance.json"
GAINS_CSV_NAME = "balance_gains.csv"
EQUILIBRIUM_CSV_NAME = "balance_equilibrium.csv"
C_HEADER_NAME = "balance_gains.h"

MARGIN_UNITS = {
    "gain_margin": "factor on the loop gain [-], (low, high); 0 / null mean unbounded",
    "phase_margin_deg": "deg (null: |L| never crosses 1)",
    "delay_margin_s": "s (null: unbounded)",
    "delay_margin_samples": "loop periods (null: unbounded)",
    "disk_margin": "alpha of the symmetric disk margin [-]",
    "disk_gain_margin": "factor [-], (low, high)",
    "disk_phase_margin_deg": "deg",
    "sensitivity_peak": "max |1 / (1 + L)| [-]",
    "gain_crossover_hz": "Hz",
    "phase_crossover_hz": "Hz",
}


# ----------------------------------------------------------------------------------------------------------------
# JSON


def margins_json(reports: dict[str, MarginReport]) -> dict[str, Any]:
    """{design: {input: {margin: value}}}."""
    out: dict[str, Any] = {}
    for name, report in reports.items():
        out[name] = {lm.input: {k: v for k, v in jsonable(lm).items() if k != "input"} for lm in report.loops}
    return out


def estimator_json(est: EstimatorDesign) -> dict[str, Any]:
    """The observer (F, G, H, Cxi, Dy, ...) with the discrete poles also given as s = ln(z) * rate [1/s]."""
    out = jsonable(est)
    out["poles_s"] = jsonable(_as_s(est.poles, est.sample_rate))
    out["closed_loop_poles_s"] = jsonable(_as_s(est.closed_loop_poles, est.sample_rate))
    return out


def _as_s(z: np.ndarray, rate: float) -> np.ndarray:
    """Discrete poles as continuous equivalents s = ln(z) * rate [1/s] (poles at z = 0 have none: omitted)."""
    z = np.asarray(z, dtype=complex)
    z = z[np.abs(z) > 1e-12]
    return np.log(z) * rate


def balance_fields(rig: Rig, study: BalanceStudy) -> dict[str, Any]:
    """The balance-specific part of the JSON object (the caller adds the common rig header and cautions)."""
    d = study.design
    data: dict[str, Any] = {
        "weights_source": d.weights_source,
        "Q": d.Q,
        "R": d.R,
        "K": d.K,
        "K_discrete": d.K_discrete,
        "K_discrete_columns": list(d.gain_columns),
        "sample_rate": d.sample_rate,
        "sample_period": d.sample_period,
        "delay_samples": d.delay_samples,
        "x_eq": d.x_eq,
        "u_eq": d.u_eq,
        "u_peak": rig.peak_inputs,
        "closed_loop_poles": list(d.closed_loop_poles),
        "closed_loop_poles_discrete": list(d.closed_loop_poles_discrete),
        "closed_loop_poles_discrete_s": list(_as_s(d.closed_loop_poles_discrete, d.sample_rate)),
        "unstable_poles": list(d.unstable_poles),
        "riccati_residual": d.riccati_residual,
        "riccati_residual_discrete": d.riccati_residual_discrete,
        "estimators": {"kalman": estimator_json(study.kalman),
                       "finite_difference": estimator_json(study.finite_difference)},
        "margins": margins_json(study.margins),
        "delay_margin_min_samples": 2.0,
        "flags": list(study.flags),
        "warnings": list(study.warnings),
    }
    if study.schedule is not None:
        data["schedule"] = jsonable(study.schedule)
    return data


def balance_units(rig: Rig) -> dict[str, Any]:
    """Units of the balance fields, merged by the caller into the header's ``units``."""
    return {
        "K": "row i, column j: [inputs[i]] per [state[j]] (N m/rad, N m s/rad, N/m, N s/m, ...)",
        "K_discrete": "as K; delay columns [inputs[i]] per [input]",
        "sample_rate": "Hz", "sample_period": "s", "delay_samples": "loop periods",
        "closed_loop_poles": "1/s", "closed_loop_poles_discrete": "dimensionless (z-plane)",
        "closed_loop_poles_discrete_s": "1/s (ln(z) * sample_rate)",
        "x_eq": list(rig.state_units), "u_eq": list(rig.input_units), "u_peak": list(rig.input_units),
        "margins": MARGIN_UNITS,
        "estimators": {"measurement_std": "rad or m (per measured entry)",
                       "process_noise_std": "rad/s^2 or m/s^2 (per coordinate)",
                       "effort_noise_std": "N or N m (per input)",
                       "error_std": "state units", "poles": "dimensionless (z-plane)", "cutoff_hz": "Hz"},
    }


# ----------------------------------------------------------------------------------------------------------------
# CSV


def _header(rig: Rig, study: BalanceStudy, what: str) -> ExportHeader:
    d = study.design
    notes = [f"loop rate {d.sample_rate:g} Hz (period {d.sample_period:g} s), computation delay designed in: "
             f"{d.delay_samples} samples; weights: {d.weights_source}",
             "x_eq = [" + ", ".join(f"{n} = {v:g}" for n, v in zip(d.state_names, d.x_eq, strict=True)) + "]",
             "u_eq = [" + ", ".join(f"{n} = {v:g}" for n, v in zip(d.input_names, d.u_eq, strict=True)) + "]"]
    notes += [f"FLAG: {f}" for f in study.flags]
    return export_header(rig, what, notes=notes)


def gains_csv(rig: Rig, study: BalanceStudy) -> str:
    """``balance_gains.csv``: header lines, then K_discrete and K, one row per input."""
    d = study.design
    buf = io.StringIO()
    buf.write(hash_comment(_header(rig, study, "balance gains (u = u_eq - K (x - x_eq))")))
    w = csv.writer(buf, lineterminator="\n")
    columns = list(d.gain_columns)
    w.writerow(["matrix", "input", "input_unit", *columns])
    for name, M in (("K_discrete", d.K_discrete), ("K", d.K)):
        for i, (u, unit) in enumerate(zip(d.input_names, rig.input_units, strict=True)):
            row = [repr(float(v)) for v in M[i]]
            w.writerow([name, u, unit, *row, *[""] * (len(columns) - len(row))])
    return buf.getvalue()


def equilibrium_csv(rig: Rig, study: BalanceStudy) -> str:
    """``balance_equilibrium.csv``: the equilibrium the error is taken from, u_eq and the actuator peaks."""
    d = study.design
    buf = io.StringIO()
    buf.write(hash_comment(_header(rig, study, "balance equilibrium and limits")))
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["quantity", "kind", "unit", "value"])
    for n, unit, v in zip(d.state_names, rig.state_units, d.x_eq, strict=True):
        w.writerow([n, "x_eq", unit, repr(float(v))])
    for n, unit, v in zip(d.input_names, rig.input_units, d.u_eq, strict=True):
        w.writerow([n, "u_eq", unit, repr(float(v))])
    for n, unit, v in zip(d.input_names, rig.input_units, rig.peak_inputs, strict=True):
        w.writerow([n, "u_peak", unit, repr(float(v))])
    return buf.getvalue()


# ----------------------------------------------------------------------------------------------------------------
# C header

PREFIX = "UPSWING_BALANCE"
LOWER = "upswing_balance"


def c_float(value: float) -> str:
    """A C float literal that round-trips float32 (9 significant digits, always with an exponent)."""
    if not math.isfinite(value):
        raise ValueError(f"cannot write a non-finite value ({value}) into a C header")
    return f"{float(value):.9e}f"


def c_identifier(name: str) -> str:
    """Upper-case C identifier fragment of a state or input name (``theta1_dot`` -> ``THETA1_DOT``)."""
    return re.sub(r"[^A-Za-z0-9]", "_", name).upper()


def _c_array(name: str, M: np.ndarray, dims: tuple[str, ...]) -> str:
    M = np.atleast_1d(np.asarray(M, dtype=float))
    decl = f"static const float {name}" + "".join(f"[{d}]" for d in dims)
    if M.ndim == 1:
        return f"{decl} = {{{', '.join(c_float(v) for v in M)}}};\n"
    rows = ",\n".join("    {" + ", ".join(c_float(v) for v in row) + "}" for row in M)
    return f"{decl} = {{\n{rows}\n}};\n"


def _c_observer(tag: str, est: EstimatorDesign, what: str) -> str:
    T = tag.upper()
    n_xi = est.F.shape[0]
    out = [f"\n/* {what}\n"
           f" * Run once per loop period k, after reading the encoders (y = readings - their x_eq entries, angles\n"
           f" * wrapped) and before computing u:\n"
           f" *   x_hat[k] = Cxi xi[k] + Dy y[k]              (estimate of x - x_eq, state order above)\n"
           f" *   xi[k+1]  = F xi[k] + G y[k] + H (u[k] - u_eq) (u[k]: the input applied over this period)\n"
           f" * Start with xi = 0 with the rig held at rest upright. Poles (|z|): "
           + ", ".join(f"{abs(p):.4f}" for p in sorted(est.poles, key=abs, reverse=True)[:4])
           + (" ..." if len(est.poles) > 4 else "") + ". */\n",
           f"#define {PREFIX}_{T}_N_XI {n_xi}\n"]
    dims_xi = f"{PREFIX}_{T}_N_XI"
    out.append(_c_array(f"{LOWER}_{tag}_F", est.F, (dims_xi, dims_xi)))
    out.append(_c_array(f"{LOWER}_{tag}_G", est.G, (dims_xi, f"{PREFIX}_N_MEASURED")))
    out.append(_c_array(f"{LOWER}_{tag}_H", est.H, (dims_xi, f"{PREFIX}_N_INPUTS")))
    out.append(_c_array(f"{LOWER}_{tag}_Cxi", est.Cxi, (f"{PREFIX}_N_STATES", dims_xi)))
    out.append(_c_array(f"{LOWER}_{tag}_Dy", est.Dy, (f"{PREFIX}_N_STATES", f"{PREFIX}_N_MEASURED")))
    return "".join(out)


def c_header(rig: Rig, study: BalanceStudy) -> str:
    """``balance_gains.h``: see the module docstring."""
    d = study.design
    n, m = len(d.state_names), len(d.input_names)
    measured = study.kalman.measured
    guard = f"{PREFIX}_GAINS_H"
    units = dict(zip(rig.state_names, rig.state_units, strict=True))
    in_units = dict(zip(rig.input_names, rig.input_units, strict=True))
    lines = [c_comment(_header(rig, study, "balance gains, C99 header")),
             f"#ifndef {guard}\n#define {guard}\n\n",
             "/* State order (index: name [unit], equilibrium value x_eq):\n"]
    lines += [f" *   {i}: {s} [{units[s]}], x_eq = {v:g}\n" for i, (s, v) in enumerate(zip(d.state_names, d.x_eq,
                                                                                              strict=True))]
    lines += [" * Input order (index: name [unit], u_eq, peak):\n"]
    lines += [f" *   {i}: {u} [{in_units[u]}], u_eq = {v:g}, peak = {p:g}\n"
              for i, (u, v, p) in enumerate(zip(d.input_names, d.u_eq, rig.peak_inputs, strict=True))]
    lines += [" * Measured (encoder) order: " + ", ".join(f"{i}: {s}" for i, s in enumerate(measured)) + "\n",
              " *\n * Control law, once per loop period:\n"
              " *   e = x - x_eq, angle entries wrapped to (-pi, pi]   (or e = x_hat from an estimator below)\n"
              " *   u[i] = u_eq[i] - sum_j K_discrete[i][j] * z[j], clipped to +-u_peak[i]\n"
              " * where z = e, followed (when DELAY_SAMPLES > 0) by the commands still pending:\n"
              " * u[k-d] - u_eq, ..., u[k-1] - u_eq, oldest first. K_continuous is for reference only. */\n\n"]
    lines += [f"#define {PREFIX}_N_STATES {n}\n", f"#define {PREFIX}_N_INPUTS {m}\n",
              f"#define {PREFIX}_N_MEASURED {len(measured)}\n",
              f"#define {PREFIX}_DELAY_SAMPLES {d.delay_samples}\n",
              f"#define {PREFIX}_N_GAIN_COLUMNS {d.K_discrete.shape[1]} /* states, then pending inputs */\n",
              f"#define {PREFIX}_SAMPLE_RATE_HZ {c_float(d.sample_rate)}\n",
              f"#define {PREFIX}_LOOP_PERIOD_S {c_float(d.sample_period)}\n\n"]
    lines += [f"#define {PREFIX}_STATE_{c_identifier(s)} {i} /* [{units[s]}] */\n"
              for i, s in enumerate(d.state_names)]
    lines += [f"#define {PREFIX}_INPUT_{c_identifier(u)} {i} /* [{in_units[u]}] */\n"
              for i, u in enumerate(d.input_names)]
    lines += [f"#define {PREFIX}_MEASURED_{c_identifier(s)} {i}\n" for i, s in enumerate(measured)]
    lines += ["\n/* The equilibrium the state error is taken from [state units], the input there and the actuator\n"
              " * peaks [input units]. */\n",
              _c_array(f"{LOWER}_x_eq", d.x_eq, (f"{PREFIX}_N_STATES",)),
              _c_array(f"{LOWER}_u_eq", d.u_eq, (f"{PREFIX}_N_INPUTS",)),
              _c_array(f"{LOWER}_u_peak", rig.peak_inputs, (f"{PREFIX}_N_INPUTS",)),
              "\n/* Discrete LQR gain (zero-order hold at SAMPLE_RATE_HZ): the one to run. */\n",
              _c_array(f"{LOWER}_K_discrete", d.K_discrete, (f"{PREFIX}_N_INPUTS", f"{PREFIX}_N_GAIN_COLUMNS")),
              "\n/* Continuous LQR gain, for reference (do not run it in a sampled loop). */\n",
              _c_array(f"{LOWER}_K_continuous", d.K, (f"{PREFIX}_N_INPUTS", f"{PREFIX}_N_STATES")),
              _c_observer("kf", study.kalman, "Steady-state Kalman filter (velocities from encoder readings)."),
              _c_observer("fd", study.finite_difference,
                          f"Filtered finite-difference velocities, first-order low-pass at "
                          f"{study.finite_difference.cutoff_hz:g} Hz."),
              f"\n#endif /* {guard} */\n"]
    return "".join(lines)


# ----------------------------------------------------------------------------------------------------------------
# Writing


def write_balance_files(folder: str | Path, rig: Rig, study: BalanceStudy, data: dict[str, Any]) -> tuple[Path, ...]:
    """Write the four files into ``folder`` (which must exist; stage it with ``stage_output``).

    Parameters
    ----------
    data : dict
        The JSON object to store as ``balance.json`` (what ``upswing balance --json`` prints); the export header
        is added to it under ``export_header``.
    """
    folder = Path(folder)
    files = {
        JSON_NAME: dumps({**data, "export_header": header_json(_header(rig, study, "balance design"))}) + "\n",
        GAINS_CSV_NAME: gains_csv(rig, study),
        EQUILIBRIUM_CSV_NAME: equilibrium_csv(rig, study),
        C_HEADER_NAME: c_header(rig, study),
    }
    paths = []
    for name, text in files.items():
        path = folder / name
        path.write_text(text, encoding="utf-8")
        paths.append(path)
    return tuple(paths)
