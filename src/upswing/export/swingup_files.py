"""The swing-up table for firmware: ``swingup.csv``, the same table as ``swingup.json``, and a C header.

``swingup.csv`` (a contract, issue 5): ``#`` comment lines first (the header block of :mod:`upswing.export.header`
that every export shares: rig name and content hash, tool version,
conventions, the law, units, cautions), then one header row and one row per controller sample with the columns

    t, <state names> (the reference x_ref), <input names> (the feed-forward u_ff), K_<input>_<state> ...

where the gains follow K's row-major order (for each input, every state). For the sample that starts at row k the
firmware applies u = u_ff[k] - K[k] (x - x_ref[k]) (angle errors wrapped to (-pi, pi]), holds it until the next
row, saturates it at ``peak``, and after the last row hands over to the balance controller.

The C header ``swingup_table.h`` declares the table as ``const float`` arrays; the data are defined in the one
translation unit that defines ``UPSWING_SWINGUP_TABLE_DEFINE`` before including it. It is written only when the
arrays fit in the stated memory budget (default 64 KiB), since a microcontroller's flash is the limit; otherwise
the result says how many bytes it would need.

With a verified swing-up the writers add what the firmware needs to do exactly what was verified: the hand-over
rule (the balance cost-to-go matrix P, the upright x_eq and the levels rho_in / rho_out: balance engages when
(x - x_eq)' P (x - x_eq) <= rho_in, releases above rho_out, and engages after the last row in any case) and the
stop conditions of :mod:`upswing.verification.supervision` (catch deadline, speed and rail windows and, when the
drop-out study of :mod:`upswing.verification.swingup_dropout` ran, the stale-reading time), in ``swingup.json`` and,
as arrays and macros, in the C header.

These writers put files into a folder the caller provides (the CLI stages it with
:func:`upswing.export.folders.stage_output`, so a run is never half-written and never overwrites another).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from upswing.errors import RequestError
from upswing.export.header import (
    ExportHeader,
    c_comment,
    export_header,
    hash_comment,
    header_json,
    rig_header,
    safety_block,
)
from upswing.export.header import header_lines as export_header_lines
from upswing.export.jsonable import dumps
from upswing.model.rig import INPUT_UNITS, Rig
from upswing.safety import CAUTIONS, GOVERNING
from upswing.synthesis.swingup.tracking import HandoverRule, TrackingTable
from upswing.verification.supervision import Supervision
from upswing.verification.swingup_dropout import SwingUpDropoutStudy

CSV_NAME = "swingup.csv"
JSON_NAME = "swingup.json"
C_HEADER_NAME = "swingup_table.h"
DEFAULT_C_BUDGET_BYTES = 64 * 1024
FLOAT_BYTES = 4  # the C table stores IEEE 754 single precision

LAW_TEXT = ("for the sample starting at row k: u = u_ff[k] - K[k] (x - x_ref[k]), angle errors wrapped to "
            "(-pi, pi]; held until the next row; saturated at |u| <= peak; after the last row the balance "
            "controller takes over")
CONVENTIONS_TEXT = ("theta1 from the upward vertical, theta2 relative to link 1, both counter-clockwise positive; "
                    "cart x positive to the right, 0 at the rail's centre; SI units")


def rate_estimate_text(rig: Rig) -> str:
    """How the verification estimated joint rates while the table ran: what the firmware should do too."""
    return (f"the verification estimated rates as the reference rate of row k plus a first-order low-pass "
            f"({rig.swingup.tracking_rate_cutoff:g} Hz) of the differenced tracking error (reading - x_ref, angles "
            "wrapped); differencing raw readings lags the swing and needs its own verification")


def gain_columns(table: TrackingTable) -> list[str]:
    """``K_<input>_<state>`` for every gain entry, in K's row-major order."""
    return [f"K_{u}_{s}" for u in table.input_names for s in table.state_names]


def csv_columns(table: TrackingTable) -> list[str]:
    """All column names of ``swingup.csv`` in order: t, states, inputs, gains."""
    return ["t", *table.state_names, *table.input_names, *gain_columns(table)]


def _check(rig: Rig, table: TrackingTable) -> None:
    if table.state_names != rig.state_names or table.input_names != rig.input_names:
        raise RequestError(f"the table's states/inputs ({', '.join(table.state_names)} / "
                           f"{', '.join(table.input_names)}) are not the rig's ({', '.join(rig.state_names)} / "
                           f"{', '.join(rig.input_names)}); export the table with the rig it was made for")
    for name, a in (("t", table.t), ("x_ref", table.x_ref), ("u_ff", table.u_ff), ("K", table.K)):
        if not np.all(np.isfinite(a)):
            raise RequestError(f"the table's {name} holds non-finite values; it cannot be exported")


def swingup_header(rig: Rig, table: TrackingTable) -> ExportHeader:
    """The export header (:mod:`upswing.export.header`, the block every export starts with) for this table, with
    the table's own facts as notes: sample rate and size, the law, the peaks, and every caution."""
    peaks = ", ".join(f"{u} {p:g} {INPUT_UNITS[u]}" for u, p in zip(table.input_names, table.peak, strict=True))
    notes = [
        f"rig family: {rig.family}",
        f"sample rate: {table.sample_rate:g} Hz; rows: {table.n_rows}; t from {table.t[0]:g} s; balance takes over "
        f"at t = {table.end_time:g} s",
        f"law: {LAW_TEXT}",
        f"conventions: {CONVENTIONS_TEXT}",
        "units: t s; K_<input>_<state> in input unit per state unit",
        f"peak: {peaks}",
        f"rates: {rate_estimate_text(rig)}",
    ]
    notes += [f"caution: {c}" for c in CAUTIONS if c != GOVERNING]
    return export_header(rig, "swing-up table (time-varying LQR along the reference)", notes=notes)


def header_lines(rig: Rig, table: TrackingTable) -> list[str]:
    """The comment block shared by the CSV and the C header, one string per line (no comment marker): the lines
    of :func:`upswing.export.header.header_lines` for :func:`swingup_header`."""
    return export_header_lines(swingup_header(rig, table))


def csv_text(rig: Rig, table: TrackingTable) -> str:
    """The full text of ``swingup.csv`` (numbers in shortest round-trip form)."""
    _check(rig, table)
    out = [hash_comment(swingup_header(rig, table)).rstrip("\n")]
    out.append(",".join(csv_columns(table)))
    n_gain = table.K.shape[1] * table.K.shape[2]
    data = np.hstack([table.t[:, None], table.x_ref, table.u_ff, table.K.reshape(table.n_rows, n_gain)])
    out += [",".join(repr(float(v)) for v in row) for row in data]
    return "\n".join(out) + "\n"


def handover_json(rule: HandoverRule) -> dict[str, Any]:
    """The hand-over rule as JSON fields (P as a list of rows)."""
    return {"P": rule.P, "x_eq": rule.x_eq, "rho_in": rule.rho_in, "rho_out": rule.rho_out,
            "rule": "balance engages when (x - x_eq)' P (x - x_eq) <= rho_in (angle errors wrapped), releases above "
                    "rho_out (while balancing, x is the balance loop's own estimate), and engages after the table's "
                    "last row in any case"}


def supervision_json(sup: Supervision) -> dict[str, Any]:
    """The stop conditions as JSON fields."""
    return {"catch_level": sup.catch_level, "catch_deadline_s": sup.catch_deadline,
            "speed_limits": {joint: value for joint, value, _ in sup.speed_limits},
            "speed_units": {joint: unit for joint, _, unit in sup.speed_limits},
            "rail_limit_m": sup.rail_limit, "rule": sup.rule, "derived_from_runs": sup.derived_from,
            "checked_on_runs": sup.checked_on, "false_trips": sup.false_trips, "missed_runs": sup.missed,
            "missed_stopped": sup.missed_stopped,
            "stale_reading_ms": sup.stale_reading_ms, "stale_reading_samples": sup.stale_reading_samples,
            "note": "derived from the even-numbered Monte Carlo runs, checked on the odd-numbered ones (the "
                    "stale-reading time from the frozen-reading study: null when it did not run); run these "
                    "checks as a safety function of the drive (ISO 13849-1) and stop with category 0 or 1 "
                    "(IEC 60204-1)"}


def dropout_study_json(study: SwingUpDropoutStudy) -> dict[str, Any]:
    """The frozen-reading study of a verified swing-up as JSON fields (``dropout_study`` of ``upswing swingup
    --json``): moments, one object per (moment, duration), the longest tolerated freeze and the threshold."""
    return {
        "rollouts_each": study.rollouts, "sample_rate": study.sample_rate,
        "required_success": study.required_success, "bar": study.bar,
        "baseline_successes": study.baseline_successes,
        "freeze": "a freeze of n samples starting at sample k0 repeats the reading of sample k0 - 1 at samples "
                  "k0 .. k0 + n - 1; duration_ms = n / sample_rate",
        "tolerated_rule": "a freeze is tolerated when the 95 % Wilson lower bound of its catch rate reaches bar = "
                          "min(required_success, the lower bound of the same runs without a freeze), and so do "
                          "all shorter ones at that moment",
        "moments": [{"name": m.name, "sample": m.sample, "time_s": m.time_s, "meaning": m.meaning}
                    for m in study.moments],
        "cases": [{"moment": c.moment, "samples": c.samples, "duration_ms": c.duration_ms, "successes": c.successes,
                   "rollouts": c.rollouts, "success_rate": c.success_rate, "success_interval": list(c.interval),
                   "lost": c.lost, "gained": c.gained, "tolerated": c.meets} for c in study.cases],
        "longest_tolerated_by_moment": dict(study.longest_tolerated),
        "longest_tolerated_samples": study.longest_tolerated_samples,
        "longest_tolerated_ms": study.longest_tolerated_ms,
        "all_tolerated": study.all_tolerated,
        "stale_reading_samples": study.stale_reading_samples,
        "stale_reading_ms": study.stale_reading_ms,
        "threshold_rule": study.threshold_reason,
        "summary": study.summary,
        "simulate_s": study.simulate_s,
    }


def miss_correlations_json(correlations) -> list[dict[str, Any]]:
    """The parameters the missed catches follow (``SwingUpVerification.correlations``) as JSON fields."""
    return [{"parameter": c.parameter, "r": c.r, "mean_deviation_missed": c.mean_deviation_failed,
             "mean_deviation_caught": c.mean_deviation_held, "notable": bool(c.notable)} for c in correlations]


def json_object(rig: Rig, table: TrackingTable, handover: HandoverRule | None = None,
                supervision: Supervision | None = None) -> dict[str, Any]:
    """The table as one JSON-ready object: the common header, the law, and t, x_ref, u_ff, K as lists; with a
    verified swing-up also ``handover`` and ``supervision`` (module docstring)."""
    _check(rig, table)
    extra: dict[str, Any] = {}
    if handover is not None:
        extra["handover"] = handover_json(handover)
    if supervision is not None:
        extra["supervision"] = supervision_json(supervision)
    return {
        **rig_header(rig),
        "kind": "swingup table",
        "export_header": header_json(swingup_header(rig, table)),
        "law": LAW_TEXT,
        "conventions": CONVENTIONS_TEXT,
        "rate_estimate": rate_estimate_text(rig),
        "sample_rate": table.sample_rate,
        "rows": table.n_rows,
        "end_time": table.end_time,
        "peak": table.peak,
        "columns": csv_columns(table),
        "t": table.t,
        "x_ref": table.x_ref,
        "u_ff": table.u_ff,
        "K": table.K,
        **extra,
        **safety_block(),
    }


def c_table_bytes(table: TrackingTable) -> int:
    """Bytes the C arrays occupy: (N (n + m + m n) + m) single-precision floats."""
    n, m = len(table.state_names), len(table.input_names)
    return FLOAT_BYTES * (table.n_rows * (n + m + m * n) + m)


def _c_float(value: float) -> str:
    """A C single-precision literal that round-trips the float32 value (9 significant digits)."""
    text = f"{float(np.float32(value)):.9g}"
    if not any(c in text for c in ".en"):
        text += ".0"
    return text + "f"


def _c_rows(a: np.ndarray, indent: str) -> str:
    if a.ndim == 1:
        return "{" + ", ".join(_c_float(v) for v in a) + "}"
    inner = (",\n" + indent + " ").join(_c_rows(row, indent + " ") for row in a)
    return "{" + inner + "}"


def _c_catch_parts(handover: HandoverRule | None, supervision: Supervision | None) -> tuple[str, str, str]:
    """Macros, declarations and definitions of the hand-over rule and the stop conditions (empty when not given)."""
    macros, declarations, definitions = [], [], []
    if handover is not None:
        macros += [f"#define UPSWING_HANDOVER_RHO_IN {_c_float(handover.rho_in)}",
                   f"#define UPSWING_HANDOVER_RHO_OUT {_c_float(handover.rho_out)}"]
        declarations += ["extern const float upswing_handover_P[UPSWING_SWINGUP_STATES][UPSWING_SWINGUP_STATES];",
                         "extern const float upswing_handover_x_eq[UPSWING_SWINGUP_STATES];"]
        definitions += ["const float upswing_handover_P[UPSWING_SWINGUP_STATES][UPSWING_SWINGUP_STATES] =",
                        f"{_c_rows(handover.P, '')};",
                        f"const float upswing_handover_x_eq[UPSWING_SWINGUP_STATES] = {_c_rows(handover.x_eq, '')};"]
    if supervision is not None and np.isfinite(supervision.catch_deadline):
        macros.append(f"#define UPSWING_STOP_CATCH_DEADLINE_S {_c_float(supervision.catch_deadline)}")
        for joint, value, _ in supervision.speed_limits:
            macros.append(f"#define UPSWING_STOP_SPEED_{joint.upper()} {_c_float(value)}")
        if supervision.rail_limit is not None:
            macros.append(f"#define UPSWING_STOP_RAIL_M {_c_float(supervision.rail_limit)}")
        if supervision.stale_reading_samples is not None:
            macros += [f"#define UPSWING_STOP_STALE_READING_SAMPLES {int(supervision.stale_reading_samples)}",
                       f"#define UPSWING_STOP_STALE_READING_MS {_c_float(supervision.stale_reading_ms)}"]
    return tuple(("\n" + "\n".join(part)) if part else "" for part in (macros, declarations, definitions))


def c_header_text(rig: Rig, table: TrackingTable, handover: HandoverRule | None = None,
                  supervision: Supervision | None = None) -> str:
    """The C99 header: macros for the sizes and rate, ``extern const float`` declarations, and the definitions
    behind ``#ifdef UPSWING_SWINGUP_TABLE_DEFINE`` (``UPSWING_SWINGUP_RATE_CUTOFF_HZ``: the cut-off of the
    reference-aided rate estimate the verification assumed); with a verified swing-up also the hand-over rule
    (``upswing_handover_P``, ``upswing_handover_x_eq``, ``UPSWING_HANDOVER_RHO_IN``/``_OUT``) and the stop
    conditions (``UPSWING_STOP_CATCH_DEADLINE_S``, ``UPSWING_STOP_SPEED_<JOINT>`` [rad/s or m/s],
    ``UPSWING_STOP_RAIL_M``, ``UPSWING_STOP_STALE_READING_SAMPLES`` [control samples without a fresh encoder
    reading] and ``UPSWING_STOP_STALE_READING_MS``)."""
    _check(rig, table)
    catch_macros, catch_declarations, catch_definitions = _c_catch_parts(handover, supervision)
    comment = c_comment(swingup_header(rig, table))[3:-4].rstrip("\n")  # the lines, inside this file's comment
    n, m = len(table.state_names), len(table.input_names)
    return f"""/*
{comment}
 *
 * State order: {", ".join(table.state_names)}. Input order: {", ".join(table.input_names)}.
 * upswing_swingup_K[k][i][j] is the gain from state j to input i in row k (K_<input>_<state> in swingup.csv).
 * Define UPSWING_SWINGUP_TABLE_DEFINE in exactly one .c file before including this header.
 */
#ifndef UPSWING_SWINGUP_TABLE_H
#define UPSWING_SWINGUP_TABLE_H

#define UPSWING_SWINGUP_ROWS {table.n_rows}
#define UPSWING_SWINGUP_STATES {n}
#define UPSWING_SWINGUP_INPUTS {m}
#define UPSWING_SWINGUP_SAMPLE_RATE_HZ {_c_float(table.sample_rate)}
#define UPSWING_SWINGUP_T0_S {_c_float(table.t[0])}
#define UPSWING_SWINGUP_BYTES {c_table_bytes(table)}
#define UPSWING_SWINGUP_RATE_CUTOFF_HZ {_c_float(rig.swingup.tracking_rate_cutoff)}{catch_macros}

extern const float upswing_swingup_peak[UPSWING_SWINGUP_INPUTS];
extern const float upswing_swingup_x_ref[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_STATES];
extern const float upswing_swingup_u_ff[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_INPUTS];
extern const float upswing_swingup_K[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_INPUTS][UPSWING_SWINGUP_STATES];\
{catch_declarations}

#ifdef UPSWING_SWINGUP_TABLE_DEFINE
const float upswing_swingup_peak[UPSWING_SWINGUP_INPUTS] = {_c_rows(table.peak, "")};
const float upswing_swingup_x_ref[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_STATES] =
{_c_rows(table.x_ref, "")};
const float upswing_swingup_u_ff[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_INPUTS] =
{_c_rows(table.u_ff, "")};
const float upswing_swingup_K[UPSWING_SWINGUP_ROWS][UPSWING_SWINGUP_INPUTS][UPSWING_SWINGUP_STATES] =
{_c_rows(table.K, "")};{catch_definitions}
#endif /* UPSWING_SWINGUP_TABLE_DEFINE */

#endif /* UPSWING_SWINGUP_TABLE_H */
"""


@dataclass(frozen=True)
class SwingUpFiles:
    """What :func:`write_swingup_files` wrote.

    Attributes
    ----------
    csv, json : Path
        ``swingup.csv`` and ``swingup.json``.
    c_header : Path or None
        ``swingup_table.h``, or ``None`` when the table does not fit in the budget.
    c_bytes : int
        Bytes the C arrays need.
    c_budget_bytes : int
        The memory budget the C header was checked against.
    note : str
        Why the C header was or was not written.
    """

    csv: Path
    json: Path
    c_header: Path | None
    c_bytes: int
    c_budget_bytes: int
    note: str


def write_swingup_files(folder: str | Path, rig: Rig, table: TrackingTable, *,
                        c_budget_bytes: int = DEFAULT_C_BUDGET_BYTES, handover: HandoverRule | None = None,
                        supervision: Supervision | None = None) -> SwingUpFiles:
    """Write ``swingup.csv``, ``swingup.json`` and (when it fits) ``swingup_table.h`` into ``folder``.

    Parameters
    ----------
    folder : str or Path
        An existing folder (typically the staging folder of :func:`upswing.export.folders.stage_output`).
    rig : Rig
        The rig the table was made for (its content hash goes into the headers).
    table : TrackingTable
    c_budget_bytes : int
        Memory available for the C table [bytes]; default 64 KiB.
    handover, supervision : optional
        The verified hand-over rule and stop conditions (module docstring), added to the JSON and the C header.

    Raises
    ------
    RequestError
        When the folder does not exist, the budget is not positive, or the table does not belong to the rig.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise RequestError(f"{folder}: export folder does not exist")
    if c_budget_bytes <= 0:
        raise RequestError(f"C table memory budget must be a positive number of bytes; got {c_budget_bytes}")
    csv_path = folder / CSV_NAME
    json_path = folder / JSON_NAME
    csv_path.write_text(csv_text(rig, table), encoding="utf-8")
    json_path.write_text(dumps(json_object(rig, table, handover, supervision)) + "\n", encoding="utf-8")
    need = c_table_bytes(table)
    if need > c_budget_bytes:
        note = (f"C header not written: the table needs {need} bytes of single-precision floats, more than the "
                f"budget of {c_budget_bytes} bytes; raise the budget, lower the rate or shorten the swing-up")
        return SwingUpFiles(csv_path, json_path, None, need, c_budget_bytes, note)
    c_path = folder / C_HEADER_NAME
    c_path.write_text(c_header_text(rig, table, handover, supervision), encoding="utf-8")
    note = f"C header written: {need} bytes of {c_budget_bytes} available"
    return SwingUpFiles(csv_path, json_path, c_path, need, c_budget_bytes, note)
