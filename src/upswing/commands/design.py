"""``upswing design [RIG] [--out DIR] [--rollouts N] [--seed S] [--json]``: the whole job in one command.

Runs every stage (validate, modes, balance, swing-up, verification, budgets and hazards) on the rig file, or on the
bundled demo rig when none is given, and writes a fresh run folder with the report, the exports, the verification
results, a copy of the rig file and ``summary.json`` (:mod:`upswing.design.run_folder`). Exit code 0 when the
verdict is to power (at reduced limits first), 1 (:data:`upswing.cli.EXIT_VERDICT`) when it is not (do not power,
or no decision because a stage is missing), 2 for bad input.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
from importlib.resources import as_file, files
from pathlib import Path

from upswing.commands.common import Outcome
from upswing.design.decision import StageRecord
from upswing.design.pipeline import STAGES, DesignOptions, DesignRun, run_design
from upswing.design.run_folder import RunFolder, write_run_folder
from upswing.errors import RequestError
from upswing.report.html import STATUS_WORDS
from upswing.report.text import cautions_text, table

NAME = "design"
HELP = ("run every stage on a rig file (or the bundled demo) and write a run folder with an HTML report, exports "
        "and a verdict")
DEFAULT_OUT = Path("upswing-runs")
DEMO = "demo/acrobot.toml"
MIN_ROLLOUTS_FOR_DECISION = 1000
LONG_STAGES = ("swing-up", "verification")  # stages that take long enough to announce when they start


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("rig", type=Path, metavar="RIG", nargs="?",
                        help="the rig file (TOML); without it the bundled demo acrobot is used")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, metavar="DIR",
                        help=f"parent folder of the run folder (default ./{DEFAULT_OUT}); each run gets a new "
                             "folder <rig>-<date>-<time> and never overwrites an earlier one")
    parser.add_argument("--rollouts", type=int, default=MIN_ROLLOUTS_FOR_DECISION, metavar="N",
                        help=f"Monte Carlo rollouts of the verification (default {MIN_ROLLOUTS_FOR_DECISION})")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of every random draw; the same seed gives the same numbers (default 0)")


def _progress_printer(enabled: bool):
    if not enabled:
        return None
    count = len(STAGES)

    def show(name: str, record: StageRecord | None) -> None:
        k = STAGES.index(name) + 1 if name in STAGES else 0
        if record is None:
            if name in LONG_STAGES:
                print(f"[{k}/{count}] {name} ...", file=sys.stderr, flush=True)
            return
        note = "" if record.done else f": {record.message}"
        print(f"[{k}/{count}] {name}: {record.status} ({record.seconds:.2f} s){note}", file=sys.stderr, flush=True)

    return show


def design_text(run: DesignRun, folder: RunFolder, demo: bool) -> str:
    """What ``upswing design`` prints: the verdict, what limits it, the stages, the cautions, then the folder."""
    rig, v = run.rig, run.verdict
    out = []
    if demo:
        out.append("No rig file given: this run used the bundled demo rig (an invented acrobot), as a tour of what "
                   "upswing makes. Give your own rig file to design for your rig.")
    out += [f"{rig.name}  ({rig.source})  family: {rig.family}", "",
            f"VERDICT: {STATUS_WORDS[v.status].upper()}", f"  {v.headline}"]
    out += [f"  - {r}" for r in v.reasons]
    if v.tightest is not None:
        b = v.tightest
        out.append(f"tightest budget: {b.name} = {b.value:.4g} of {b.limit:.4g} {b.unit} "
                   f"({100 * b.value / b.limit:.0f} % used)")
    if v.smallest is not None:
        m = v.smallest
        unit = "" if m.unit in ("", "-") else f" {m.unit}"
        out.append(f"smallest margin: {m.name} = {m.value:.4g}{unit}, required {m.required:.4g}{unit} "
                   f"({m.ratio:.3g} times the minimum)")
    rows = [[s.name, s.status, f"{s.seconds:.2f}"] for s in run.stages]
    rows.append(["report and files", "done", f"{folder.report_s + folder.files_s:.2f}"])
    out += ["", table(rows, ["stage", "status", "wall time [s]"]), "", cautions_text(), "",
            f"Run folder: {folder.path}",
            f"  open {folder.path / 'report.html'} in a browser; summary.json holds the verdict for scripts."]
    return "\n".join(out)


def run(args: argparse.Namespace) -> Outcome:
    if args.rollouts < 1:
        raise RequestError(f"--rollouts must be at least 1; got {args.rollouts}")
    if args.seed < 0:
        raise RequestError(f"--seed must be >= 0; got {args.seed}")
    if args.out.exists() and not args.out.is_dir():
        raise RequestError(f"--out {args.out}: exists and is not a folder")
    demo = args.rig is None
    interactive = not args.json
    progress_bar = interactive and sys.stderr.isatty()
    options = DesignOptions(rollouts=args.rollouts, seed=args.seed, progress=progress_bar)
    with contextlib.ExitStack() as stack:
        path = stack.enter_context(as_file(files("upswing").joinpath(DEMO))) if demo else args.rig
        if demo and interactive:
            print(f"upswing design: no rig file given; running the bundled demo rig ({path})", file=sys.stderr)
        design = run_design(path, options, progress=_progress_printer(interactive))
        folder = write_run_folder(design, args.out)
    warnings = list(design.rig.warnings)
    if args.rollouts < MIN_ROLLOUTS_FOR_DECISION:
        warnings.append(f"--rollouts {args.rollouts} is below {MIN_ROLLOUTS_FOR_DECISION}: the success rates are "
                        "rough; use at least that many before deciding to power the rig")
    data = {**folder.summary, "bundled_demo": demo}
    return Outcome(text=design_text(design, folder, demo), data=data, warnings=tuple(warnings),
                   exit_code=0 if design.verdict.status == "power" else 1)
