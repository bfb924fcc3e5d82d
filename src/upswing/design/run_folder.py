"""Write a design run into a fresh run folder: report, exports, verification results, the rig file, the summary.

The folder is ``<parent>/<rig file stem>-<YYYYmmdd-HHMMSS>[-n]``, staged and published in one rename by
:func:`upswing.export.folders.stage_output`: it never overwrites an earlier run and is never seen half-written.
``summary.json`` is written last, inside the staging folder, once the final path is known (it carries it as
``run_folder``).

Contents (:data:`DESCRIPTIONS`; a file appears when the stage behind it finished):

=========================  ===============================================================================
``report.html``            the report: one self-contained file (inline images, no network)
``summary.json``           verdict, what limits it, every budget and margin, success rates, stage timings
``rig.toml``               the rig file, byte for byte (its SHA-256 is ``rig_hash`` in the summary)
``balance.json`` ...       the balance exports of ``upswing balance`` (JSON, two CSV, a C header)
``balance_responses.csv``  offset and tap responses of the balance loop on the nonlinear model
``verification.json``      everything ``upswing verify --json`` prints for the balance loop
``montecarlo.csv``         one row per Monte Carlo rollout: parameters, start, outcome, peaks
``roa_slices.csv``         the region-of-attraction slice maps, one row per start
``budgets.csv``            every budget of the run
``trajectory.csv``         the planned swing-up at the loop rate (reference states, feed-forward inputs)
``swingup_montecarlo.csv`` one row per tracked swing-up rollout: parameters, outcome, hand-over time, peaks
                           (when the swing-up was verified)
``swingup.csv`` ...        the swing-up table for firmware (CSV, JSON, C header when it fits), in builds with
                           the tracking synthesis (:mod:`upswing.export.swingup_files`)
=========================  ===============================================================================
"""

from __future__ import annotations

import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from upswing.design.pipeline import DesignRun
from upswing.design.summary import summary_fields
from upswing.export import verification_files as vf
from upswing.export.balance_files import balance_fields, balance_units, write_balance_files
from upswing.export.folders import stage_output
from upswing.export.header import rig_header, safety_block
from upswing.export.jsonable import dumps
from upswing.report.design_report import build_design_report

REPORT = "report.html"
SUMMARY = "summary.json"
RIG_COPY = "rig.toml"
VERIFICATION_JSON = "verification.json"

DESCRIPTIONS = {
    REPORT: "the report: verdict, rig, modes, balance, swing-up, verification, hazards (self-contained HTML)",
    SUMMARY: "machine-readable summary: verdict, what limits it, budgets, margins, success rates, stage timings",
    RIG_COPY: "the rig file this run read, byte for byte",
    "balance.json": "balance design: gains, poles, estimators, margins (as upswing balance --json)",
    "balance_gains.csv": "balance gains K_discrete and K, one row per input",
    "balance_equilibrium.csv": "the equilibrium the state error is taken from, u_eq and the actuator peaks",
    "balance_gains.h": "balance gains and estimators as a C99 header",
    vf.RESPONSES_CSV: "offset and tap responses of the balance loop on the nonlinear model",
    VERIFICATION_JSON: "verification of the balance loop (as upswing verify --json)",
    vf.MONTE_CARLO_CSV: "one row per Monte Carlo rollout: start, parameters, outcome, peaks",
    vf.ROA_SLICES_CSV: "region-of-attraction slice maps, one row per start",
    vf.BUDGETS_CSV: "every budget of the run: value, limit, unit, met",
    vf.TRAJECTORY_CSV: "the planned swing-up at the loop rate: reference states and feed-forward inputs",
    vf.SWINGUP_MONTE_CARLO_CSV: "one row per tracked swing-up rollout: parameters, outcome, hand-over time, peaks",
    "swingup.csv": "swing-up table for firmware: reference, feed-forward and tracking gains per loop period",
    "swingup.json": "the swing-up table as JSON",
    "swingup_table.h": "the swing-up table as a C header (when it fits the memory budget)",
}
SWINGUP_TABLE_FILES = ("swingup.csv", "swingup.json", "swingup_table.h")  # need the tracking synthesis


@dataclass(frozen=True)
class RunFolder:
    """A written run folder.

    Attributes
    ----------
    path : Path
        The published folder.
    files : tuple of str
        File names written, in order.
    summary : dict
        The object stored as ``summary.json``.
    report_s, files_s : float
        Wall time to build the report, and to write every other file [s].
    """

    path: Path
    files: tuple[str, ...]
    summary: dict[str, Any]
    report_s: float
    files_s: float


def folder_stem(run: DesignRun) -> str:
    """The run folder's stem: the rig file's stem in letters, digits, dots, hyphens and underscores."""
    return re.sub(r"[^A-Za-z0-9._-]+", "-", run.rig_path.stem).strip("-.") or "rig"


def _verification_json(run: DesignRun) -> dict[str, Any]:
    """What ``upswing verify --json`` prints for the same verification."""
    return {**rig_header(run.rig), **vf.verification_json(run.verification), "units_extra": dict(vf.VERIFICATION_UNITS),
            "warnings": list(run.rig.warnings), **safety_block()}


def _swingup_table_files(folder: Path, rig, table, check=None) -> tuple[list[str], str]:
    """The swing-up exports of ``upswing.export.swingup_files`` (present in builds with the tracking synthesis):
    the file names written and the note on the C header (written, or why not). With the verification ``check``
    the hand-over rule and the stop conditions it verified go in too."""
    from upswing.export.swingup_files import write_swingup_files

    files = write_swingup_files(folder, rig, table, handover=None if check is None else check.rule,
                                supervision=None if check is None else check.supervision)
    return [Path(p).name for p in (files.csv, files.json, files.c_header) if p is not None], files.note


def write_run_folder(run: DesignRun, parent: str | Path) -> RunFolder:
    """Write ``run`` into a fresh folder under ``parent`` (module docstring) and return where and what.

    Raises
    ------
    RequestError
        When ``parent`` cannot hold a new folder.
    """
    start = time.perf_counter()
    report = build_design_report(run)
    report_s = time.perf_counter() - start
    start = time.perf_counter()
    rig = run.rig
    written: list[str] = []
    export_notes: list[str] = []
    result: dict[str, Any] = {}

    def put(folder: Path, name: str, text: str) -> None:
        (folder / name).write_text(text, encoding="utf-8")
        written.append(name)

    def finish(staging: Path, final: Path) -> None:
        files_s = time.perf_counter() - start
        summary = summary_fields(run, run_folder=str(final.absolute()), files=[*written, SUMMARY],
                                 report_s=report_s, files_s=files_s, export_notes=export_notes)
        put(staging, SUMMARY, dumps(summary) + "\n")
        result.update(summary=summary, files_s=files_s)

    with stage_output(parent, folder_stem(run), finalize=finish) as staged:
        folder = staged.path
        put(folder, REPORT, report)
        (folder / RIG_COPY).write_bytes(run.rig_bytes)
        written.append(RIG_COPY)
        if run.balance is not None:
            header = rig_header(rig)
            data = {**header, **balance_fields(rig, run.balance), **safety_block()}
            data["units"] = {**header["units"], **balance_units(rig)}
            written += [p.name for p in write_balance_files(folder, rig, run.balance, data)]
        if run.responses is not None:
            put(folder, vf.RESPONSES_CSV, vf.responses_csv(rig, run.responses.responses))
        if run.verification is not None:
            put(folder, VERIFICATION_JSON, dumps(_verification_json(run)) + "\n")
            put(folder, vf.MONTE_CARLO_CSV, vf.montecarlo_csv(rig, run.verification.monte_carlo))
            put(folder, vf.ROA_SLICES_CSV, vf.roa_slices_csv(rig, run.verification.region))
        put(folder, vf.BUDGETS_CSV, vf.budgets_csv(rig, run.budgets))
        if run.swingup is not None:
            s = run.swingup
            notes = [f"plan: {s.plan.message}", *s.notes,
                     "an open-loop reference: track it with feedback and hand over to the balance loop; never play "
                     "the feed-forward alone"]
            if s.unverified:
                notes.append(f"UNCHECKED: {s.unverified}")
            put(folder, vf.TRAJECTORY_CSV, vf.trajectory_csv(rig, s.t, s.X, s.U, notes))
            if s.verification is not None:
                put(folder, vf.SWINGUP_MONTE_CARLO_CSV, vf.swingup_montecarlo_csv(rig, s.verification))
            if s.tracking is not None:
                names, note = _swingup_table_files(folder, rig, s.tracking, s.verification)
                written += names
                export_notes.append(f"swing-up table: {note}")
    return RunFolder(path=staged.final_path, files=tuple(written), summary=result["summary"], report_s=report_s,
                     files_s=result["files_s"])
