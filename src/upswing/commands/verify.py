"""``upswing verify RIG [--rollouts N] [--seed S] [--scheduler ADDRESS] [--estimator KIND] [--required-success R]
[--json]``: verify the balance controller on the nonlinear model: Monte Carlo success rate, budgets, region of
attraction, hazard notes, and a verdict (rule in :mod:`upswing.verification.verdict`)."""

from __future__ import annotations

import argparse
import sys

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.errors import RequestError
from upswing.export.verification_files import VERIFICATION_UNITS, verification_json
from upswing.report.verification_text import verification_text
from upswing.synthesis.estimation import KINDS
from upswing.verification.controllers import MEASUREMENTS
from upswing.verification.verdict import verify_balance

NAME = "verify"
HELP = "simulate the balance controller on the nonlinear rig: success rate, budgets, region of attraction, hazards"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_rig_argument(parser)
    parser.add_argument("--rollouts", type=int, default=1000, metavar="N",
                        help="Monte Carlo rollouts with parameters drawn from [uncertainty] (default 1000)")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of every random draw; the same seed gives the same numbers (default 0)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the rollouts on a Dask cluster (tcp://host:8786); default: local processes")
    parser.add_argument("--measurement", choices=MEASUREMENTS, default="encoders",
                        help="encoders: quantized, noisy readings and a velocity estimator (default); state: ideal "
                             "full-state feedback, a baseline")
    parser.add_argument("--estimator", choices=KINDS, default="kalman",
                        help="velocity estimator on encoders, as upswing balance exports it: kalman (steady-state "
                             "Kalman filter, default) or finite-difference (filtered backward difference)")
    parser.add_argument("--required-success", type=float, metavar="R",
                        help="success rate to show for a pass, a fraction in (0, 1): the lower end of the 95 %% "
                             "Wilson interval must reach it (default: [verification].required_success, 0.95)")
    parser.add_argument("--horizon", type=float, default=5.0, metavar="SECONDS",
                        help="simulated time per Monte Carlo rollout (default 5 s)")
    parser.add_argument("--roa-samples", type=int, default=1500, metavar="N",
                        help="starts in the first round of the region-of-attraction estimate (default 1500)")


def run(args: argparse.Namespace) -> Outcome:
    rig = load(args)
    if args.rollouts < 1:
        raise RequestError(f"--rollouts must be at least 1; got {args.rollouts}")
    if args.seed < 0:
        raise RequestError(f"--seed must be >= 0; got {args.seed}")
    if args.roa_samples < 10:
        raise RequestError(f"--roa-samples must be at least 10; got {args.roa_samples}")
    if not args.horizon > 1.0:
        raise RequestError(f"--horizon must be more than the 1 s hold window; got {args.horizon:g} s")
    if args.required_success is not None and not 0.0 < args.required_success < 1.0:
        raise RequestError(f"--required-success must be a fraction in (0, 1), e.g. 0.95; got {args.required_success:g}")
    progress = (not args.json) and sys.stderr.isatty()
    v = verify_balance(rig, rollouts=args.rollouts, seed=args.seed, measurement=args.measurement,
                       estimator=args.estimator, required_success=args.required_success, horizon=args.horizon,
                       scheduler=args.scheduler, progress=progress, roa_samples=args.roa_samples)
    data = {**rig_header(rig), **verification_json(v), "units_extra": dict(VERIFICATION_UNITS),
            "warnings": list(rig.warnings), **safety_block()}
    return Outcome(text=verification_text(rig, v), data=data, warnings=rig.warnings,
                   exit_code=0 if v.verdict == "pass" else 1)
