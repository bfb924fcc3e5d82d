"""``upswing balance RIG [--export DIR] [--schedule NAME=LO:HI:COUNT]``: LQR balance gains at the upright for the
rig's loop rate, velocity estimators, margins at every input, and gain tables for firmware."""

from __future__ import annotations

import argparse
import math

import numpy as np

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.errors import RequestError
from upswing.export.balance_files import balance_fields, balance_units, write_balance_files
from upswing.export.folders import stage_output
from upswing.report.balance_text import balance_text
from upswing.synthesis.schedule import SCHEDULE_PARAMETERS
from upswing.synthesis.study import study_balance

NAME = "balance"
HELP = "LQR balance gains at the upright for the loop rate, estimators and margins; export JSON, CSV, C header"
MAX_SCHEDULE_POINTS = 200


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_rig_argument(parser)
    parser.add_argument("--export", metavar="DIR",
                        help="write balance.json, balance_gains.csv, balance_equilibrium.csv and balance_gains.h "
                             "into a fresh folder balance-<date>-<time> under DIR")
    parser.add_argument("--schedule", metavar="NAME=LO:HI:COUNT",
                        help="also design over COUNT values of one parameter from LO to HI, e.g. "
                             "link2.payload=0:0.1:11 (kg at link 2's tip) or link2.com=0.1:0.2:11, and report "
                             "where each gain still stabilizes")


def parse_schedule(text: str) -> tuple[str, np.ndarray]:
    """``NAME=LO:HI:COUNT`` -> (name, grid)."""
    shape = f"--schedule must look like NAME=LO:HI:COUNT (e.g. link2.payload=0:0.1:11); got {text!r}"
    name, sep, spec = text.partition("=")
    parts = spec.split(":")
    if not sep or len(parts) != 3:
        raise RequestError(shape)
    if name not in SCHEDULE_PARAMETERS:
        raise RequestError(f"--schedule parameter must be one of {', '.join(SCHEDULE_PARAMETERS)}; got {name!r}")
    try:
        lo, hi, count = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError:
        raise RequestError(shape) from None
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise RequestError(f"--schedule needs finite LO < HI; got LO = {parts[0]}, HI = {parts[1]}")
    if not 2 <= count <= MAX_SCHEDULE_POINTS:
        raise RequestError(f"--schedule COUNT must be in [2, {MAX_SCHEDULE_POINTS}]; got {count}")
    return name, np.linspace(lo, hi, count)


def run(args: argparse.Namespace) -> Outcome:
    rig = load(args)
    schedule = parse_schedule(args.schedule) if args.schedule else None
    study = study_balance(rig, schedule=schedule)
    header = rig_header(rig)
    data = {**header, **balance_fields(rig, study), **safety_block()}
    data["units"] = {**header["units"], **balance_units(rig)}
    folder = None
    if args.export:
        with stage_output(args.export, "balance") as staged:
            write_balance_files(staged.path, rig, study, data)
        folder = str(staged.final_path)
        data["export_folder"] = folder
    return Outcome(text=balance_text(rig, study, folder), data=data, warnings=study.flags + study.warnings)
