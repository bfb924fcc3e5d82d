"""``upswing verify RIG [--rollouts N] [--seed S] [--scheduler ADDRESS] [--estimator KIND] [--required-success R]
[--json]``: verify the balance controller on the nonlinear model: Monte Carlo success rate, budgets, region of
attraction, hazard notes, and a verdict (rule in :mod:`upswing.verification.verdict`)."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.errors import RequestError
from upswing.report.verification_text import verification_text
from upswing.synthesis.estimation import KINDS
from upswing.verification.controllers import MEASUREMENTS
from upswing.verification.verdict import VERDICT_RULE, Verification, verify_balance

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


def verification_json(v: Verification) -> dict[str, Any]:
    """The JSON fields of ``upswing verify`` (names fixed by the issue; more may be added, none renamed)."""
    mc, roa = v.monte_carlo, v.region
    return {
        "verdict": v.verdict,
        "reasons": list(v.reasons),
        "verdict_rule": VERDICT_RULE,
        "required_success": v.decision.required_success,
        "success_lower_bound": v.decision.success_lower_bound,
        "limited_by": list(v.decision.limited_by),
        "controller": v.controller,
        "measurement": v.measurement,
        "estimator": v.estimator,
        "estimator_kind": v.estimator_kind,
        "rollouts": mc.rollouts,
        "seed": mc.seed,
        "success_rate": mc.success_rate,
        "success_interval": list(mc.success_interval),
        "success_interval_method": "Wilson score interval, 95 %",
        "outcomes": mc.outcomes,
        "failure_correlations": [
            {"parameter": c.parameter, "r": c.r, "mean_deviation_failed": c.mean_deviation_failed,
             "mean_deviation_held": c.mean_deviation_held, "notable": c.notable} for c in mc.correlations],
        "uncertainty": {"distribution": mc.distribution, "clipped_draws": mc.clipped},
        "initial_offsets": {"angle": mc.offsets.angle, "rate": mc.offsets.rate, "cart": mc.offsets.cart,
                            "cart_rate": mc.offsets.cart_rate, "distribution": "uniform"},
        "budgets": [{"name": b.name, "value": b.value, "limit": b.limit, "unit": b.unit, "ok": b.ok,
                     "median": b.median, "meaning": b.meaning} for b in v.budgets],
        "region_of_attraction": {
            "rho": roa.rho, "samples": roa.samples, "samples_total": roa.samples_total, "rho_max": roa.rho_max,
            "level_set_extents": roa.level_set_extents,
            "axis_catch": {k: list(val) for k, val in roa.axis_catch.items()},
            "P": roa.P, "method": roa.method,
            "slices": [{"x_state": s.x_state, "y_state": s.y_state, "x_values": s.x_values, "y_values": s.y_values,
                        "held": s.held} for s in roa.slices]},
        "dropout": {"durations_ms": list(v.dropout.durations_ms), "held_fraction": list(v.dropout.held_fraction),
                    "longest_held_ms": v.dropout.longest_held_ms, "rollouts_each": v.dropout.rollouts_each},
        "hazards": [{"topic": h.topic, "text": h.text, "standards": list(h.standards)} for h in v.hazards],
        "integration": {"method": "classical RK4, fixed step, zero-order hold between samples",
                        "substeps": v.integration.substeps, "step_s": v.integration.step,
                        "error_estimate": v.integration.error_estimate, "tolerance": v.integration.tolerance,
                        "coulomb_sensitivity": v.integration.coulomb_sensitivity,
                        "error_units": "rad or m (angles and cart position)"},
        "timing": {"simulate_s": mc.simulate_s, "rollouts": mc.rollouts, "horizon_s": mc.horizon_s,
                   "region_s": roa.simulate_s, "total_s": v.total_s},
    }


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
    data = {**rig_header(rig), **verification_json(v),
            "units_extra": {"budgets": "each line's unit", "rho": "cost-to-go (dimensionless mix of state units)",
                            "timing": "s", "success_rate": "fraction", "required_success": "fraction"},
            "warnings": list(rig.warnings), **safety_block()}
    return Outcome(text=verification_text(rig, v), data=data, warnings=rig.warnings,
                   exit_code=0 if v.verdict == "pass" else 1)
