"""``upswing swingup RIG [--method optimal|energy] [--time T | --min-time] [--rollouts N] [--seed S] [--size]
[--json] [--export DIR]``: plan a swing-up from hanging, track it with a time-varying LQR table, hand over to the
balance controller, and verify the whole manoeuvre on the uncertain nonlinear rig; or (``--size``) find the
smallest peak effort for a swing-up within T and the trade-off of peak effort against minimum swing-up time.

Exit codes: 0 verified; 1 (``cli.EXIT_VERDICT``) when no swing-up is found or the verification's verdict is "fail";
2 for bad input (the CLI's error line).
"""

from __future__ import annotations

import argparse
import math
from typing import Any

import numpy as np

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.errors import RequestError
from upswing.export.folders import stage_output
from upswing.export.jsonable import dumps
from upswing.export.swingup_files import (
    dropout_study_json,
    handover_json,
    miss_correlations_json,
    supervision_json,
    write_swingup_files,
)
from upswing.model.rig import Rig
from upswing.synthesis.swingup import SizingResult, TradeoffCurve, plan_swingup, size_motor, tradeoff_curve
from upswing.synthesis.swingup.energy import unsuited_reason
from upswing.synthesis.swingup.problem import default_duration
from upswing.verification.manoeuvre import METHODS, SwingUpVerification, verify_swingup

NAME = "swingup"
HELP = ("plan a swing-up from hanging, track it with time-varying LQR, hand over to balance, verify the manoeuvre; "
        "or size the motor (--size)")
EXIT_VERDICT = 1  # as upswing.cli.EXIT_VERDICT (not imported: cli imports the commands)
MAX_TIME = 60.0
TRADEOFF_FACTORS = (1.1, 1.25, 1.5, 2.0, 2.5, 3.0)  # multiples of the sized minimum peak on the trade-off table


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_rig_argument(parser)
    parser.add_argument("--method", choices=METHODS, default="optimal",
                        help="optimal: optimized trajectory tracked by time-varying LQR (default); energy: the "
                             "family's energy-based law (acrobot, pendubot, cart rig), no table")
    when = parser.add_mutually_exclusive_group()
    when.add_argument("--time", type=float, metavar="T",
                      help="swing-up time in seconds (default: from the rig's slowest pendulum period)")
    when.add_argument("--min-time", action="store_true", help="find the shortest swing-up within the limits")
    parser.add_argument("--rollouts", type=int, default=200, metavar="N",
                        help="Monte Carlo rollouts with parameters drawn from [uncertainty] (default 200)")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of every random draw; the same seed gives the same numbers (default 0)")
    parser.add_argument("--size", action="store_true",
                        help="motor sizing instead: the smallest peak effort for a swing-up within --time, and "
                             "peak effort against minimum swing-up time (a PNG plot with --export)")
    parser.add_argument("--export", metavar="DIR",
                        help="write swingup.csv, swingup.json and swingup_table.h (or, with --size, sizing.json "
                             "and tradeoff.png) into a fresh folder swingup-<date>-<time> under DIR")


def _check(args: argparse.Namespace, rig: Rig) -> None:
    if args.time is not None and not (math.isfinite(args.time) and 0.0 < args.time <= MAX_TIME):
        raise RequestError(f"--time must be a swing-up time in (0, {MAX_TIME:g}] s; got {args.time:g}")
    if args.rollouts < 1:
        raise RequestError(f"--rollouts must be at least 1; got {args.rollouts}")
    if args.seed < 0:
        raise RequestError(f"--seed must be >= 0; got {args.seed}")
    if args.method == "energy":
        if args.size or args.min_time or args.time is not None:
            raise RequestError("--size, --time and --min-time belong to the optimized swing-up (--method optimal); "
                               "the energy law has no planned time")
        if args.export:
            raise RequestError("--export writes the tracking table of an optimized swing-up; the energy law has "
                               "none (use --method optimal)")
        reason = unsuited_reason(rig)
        if reason:
            raise RequestError(f"{rig.source}: no energy-based swing-up for a {rig.family} rig: {reason}")
    if args.size and args.min_time:
        raise RequestError("--size finds the smallest peak for a swing-up within --time; --min-time does not apply")


def run(args: argparse.Namespace) -> Outcome:
    rig = load(args)
    _check(args, rig)
    if args.size:
        return _run_sizing(args, rig)
    header = rig_header(rig)
    plan = None
    if args.method == "optimal":
        plan = plan_swingup(rig, duration=args.time, minimum_time=args.min_time, seed=args.seed)
        if not plan.success:
            data = {**header, **_plan_fields(plan), "success_rate": None, "handover_time": None,
                    "verdict": "no swing-up found", "message": plan.message, **safety_block()}
            text = (f"upswing swingup: {rig.name} ({rig.source})\nNO SWING-UP FOUND: {plan.message}\nWhat to try: a "
                    "longer --time, or a motor with a higher peak (upswing swingup RIG --size --time T says how "
                    "much).")
            return Outcome(text=text, data=data, warnings=rig.warnings, exit_code=EXIT_VERDICT)
    v = verify_swingup(rig, method=args.method, plan=plan, rollouts=args.rollouts, seed=args.seed)
    data = {**header, **swingup_fields(v), "warnings": list(rig.warnings), **safety_block(),
            "cautions": list(v.cautions)}
    folder = None
    if args.export:
        with stage_output(args.export, "swingup") as staged:
            files = write_swingup_files(staged.path, rig, v.table, handover=v.rule, supervision=v.supervision)
            (staged.path / "verification.json").write_text(dumps(data) + "\n", encoding="utf-8")
        folder = str(staged.final_path)
        data["export_folder"] = folder
        data["export_note"] = files.note
    text = swingup_text(rig, v, folder) + (f"\n{data['export_note']}" if folder else "")
    return Outcome(text=text, data=data, warnings=rig.warnings,
                   exit_code=0 if v.verdict == "pass" else EXIT_VERDICT)


def _plan_fields(plan) -> dict[str, Any]:
    return {
        "status": plan.status, "duration": plan.duration, "peak_input": plan.peak_input, "solve_s": plan.solve_s,
        "iterations": plan.iterations, "build_s": plan.build_s, "total_plan_s": plan.total_s,
        "solver_status": plan.solver_status, "constraint_violation": plan.constraint_violation,
        "max_interval_error": plan.max_interval_error, "mesh_tolerance": plan.mesh_tolerance,
        "intervals": plan.intervals, "scheme": plan.scheme, "minimum_time": plan.minimum_time,
        "strategy": plan.strategy, "attempts": len(plan.attempts), "effort": plan.effort,
        "limit": plan.limit,
    }


def swingup_fields(v: SwingUpVerification) -> dict[str, Any]:
    """The JSON fields of ``upswing swingup`` (names are a contract: add, never rename)."""
    if v.plan is not None:
        plan = _plan_fields(v.plan)
    else:  # the energy law: nothing is optimized; the swing-up lasts until the nominal catch
        nominal_peak = np.max(np.abs(v.nominal.inputs), axis=0)
        plan = {"status": "energy law (not optimized)", "duration": v.nominal.handover_time,
                "peak_input": nominal_peak, "solve_s": None, "iterations": None}
    return {
        **plan,
        "method": v.method,
        "law": v.law,
        "success_rate": v.success_rate,
        "success_interval": list(v.success_interval),
        "success_interval_method": "Wilson score interval, 95 %",
        "success_definition": "caught by the balance controller and held in the settling box for the final 1 s",
        "rollouts": v.rollouts,
        "seed": v.seed,
        "outcomes": v.outcomes,
        "miss_correlations": miss_correlations_json(v.correlations),
        "handover_time": v.nominal.handover_time,
        "nominal": {"status": v.nominal.status, "caught": v.nominal.caught,
                    "handover_time": v.nominal.handover_time},
        "handover": {"rho_in": v.rho_in, "rho_out": v.rho_out, "source": v.rho_source,
                     "times": v.handover_summary,
                     "rule": "balance engages when (x - x_eq)' P (x - x_eq) <= rho_in and releases above rho_out",
                     **({} if v.rule is None else {k: val for k, val in handover_json(v.rule).items()
                                                   if k in ("P", "x_eq")})},
        "supervision": None if v.supervision is None else supervision_json(v.supervision),
        "dropout_study": None if v.dropout_study is None else dropout_study_json(v.dropout_study),
        "verdict": v.verdict,
        "reasons": list(v.reasons),
        "required_success": v.required_success,
        "success_lower_bound": v.decision.success_lower_bound,
        "limited_by": list(v.decision.limited_by),
        "measurement": v.measurement,
        "horizon_s": v.horizon_s,
        "budgets": [{"name": b.name, "value": b.value, "limit": b.limit, "unit": b.unit, "ok": b.ok,
                     "median": b.median, "meaning": b.meaning} for b in v.budgets],
        "hazards": [{"topic": h.topic, "text": h.text, "standards": list(h.standards)} for h in v.hazards],
        "table": None if v.table is None else {"rows": v.table.n_rows, "sample_rate": v.table.sample_rate,
                                               "end_time": v.table.end_time},
        "timing": {"simulate_s": v.simulate_s, "total_s": v.total_s, "rollouts": v.rollouts,
                   "horizon_s": v.horizon_s},
        "units_extra": {"duration": "s", "handover_time": "s", "solve_s": "s", "peak_input": "input units",
                        "success_rate": "fraction", "rho": "cost-to-go (dimensionless)",
                        "dropout_study": "ms (duration_ms, stale_reading_ms), control samples (samples), s (time_s)"},
    }


def _fmt(x: float, unit: str = "s") -> str:
    return "never" if x is None or not math.isfinite(x) else f"{x:.3f} {unit}"


def _supervision_lines(v: SwingUpVerification) -> list[str]:
    s = v.supervision
    if s is None:
        return []
    if not math.isfinite(s.catch_deadline):
        return [f"stop conditions for the drive: {s.rule}"]
    return [f"stop conditions for the drive (run them as a safety function, ISO 13849-1): {s.rule}; checked on "
            f"{s.checked_on} runs they were not derived from: {s.false_trips} nuisance stops, {s.missed_stopped} "
            f"of {s.missed} missed catches stopped"]


def _dropout_lines(v: SwingUpVerification) -> list[str]:
    s = v.dropout_study
    if s is None:
        return []
    rates = "; ".join(f"{m.name} point {m.time_s:.3f} s: " + ", ".join(
        f"{c.duration_ms:g} ms {c.successes}/{c.rollouts}" for c in s.cases if c.moment == m.name and c.samples > 0)
        for m in s.moments)
    return [f"frozen encoder readings: {s.summary}", f"  caught per freeze: {rates}"]


def _miss_lines(v: SwingUpVerification) -> list[str]:
    notable = [c for c in v.correlations if c.notable]
    if not notable:
        return []
    parts = [f"{c.parameter} (r = {c.r:+.2f}; missed runs {c.mean_deviation_failed:+.1%} on average, caught "
             f"{c.mean_deviation_held:+.1%})" for c in notable[:3]]
    return [f"the misses follow: {'; '.join(parts)}: measure these better first"]


def swingup_text(rig: Rig, v: SwingUpVerification, folder: str | None) -> str:
    """The readable summary: plan, verdict, hand-over, budgets, hazard notes and cautions."""
    units = dict(zip(rig.input_names, rig.input_units, strict=True))
    lines = [f"upswing swingup: {rig.name} ({rig.source})", f"method: {v.method}: {v.law}"]
    if v.plan is not None:
        p = v.plan
        peaks = ", ".join(f"{n} {val:.3g} {units[n]}" for n, val in zip(rig.input_names, p.peak_input, strict=True))
        lines += [f"plan: {p.status}, {p.duration:.3f} s{' (minimum time)' if p.minimum_time else ''}, peak {peaks}; "
                  f"{p.intervals} intervals ({p.scheme}), {p.iterations} IPOPT iterations, solve {p.solve_s:.2f} s, "
                  f"build {p.build_s:.2f} s, found by: {p.strategy}"]
    lines += [
        f"VERDICT: {v.verdict.upper()}: {v.successes} of {v.rollouts} Monte Carlo rollouts caught and held "
        f"({v.success_rate:.1%}; 95 % Wilson interval {v.success_interval[0]:.1%} .. {v.success_interval[1]:.1%}; "
        f"required {v.required_success:.0%})",
        *[f"  - {r}" for r in v.reasons],
        f"outcomes: {', '.join(f'{k}: {n}' for k, n in v.outcomes.items())}",
        *_miss_lines(v),
        *_supervision_lines(v),
        *_dropout_lines(v),
        f"nominal run: {v.nominal.status}, hand-over at {_fmt(v.nominal.handover_time)}",
        f"hand-over: x'Px <= {v.rho_in:.4g} engages balance, above {v.rho_out:.4g} releases ({v.rho_source}); "
        f"times over caught rollouts: min {_fmt(v.handover_summary['min'])}, median "
        f"{_fmt(v.handover_summary['median'])}, 95th percentile {_fmt(v.handover_summary['p95'])}",
        "budgets (worst over caught rollouts; limit; ok):",
    ]
    for b in v.budgets:
        if b.name.endswith(".residual_motion"):
            continue
        limit = "-" if b.limit is None else f"{b.limit:.4g}"
        ok = "-" if b.ok is None else ("ok" if b.ok else "OVER")
        note = " (reported, not judged: a swing-up rides its limit)" if b.name.endswith(".saturation_time") else ""
        lines.append(f"  {b.name:<28} {b.value:>10.4g} {b.unit:<6} limit {limit:>8}  {ok}{note}")
    lines.append("hazard notes:")
    lines += [f"  [{h.topic}] {h.text}" + (f" ({', '.join(h.standards)})" if h.standards else "") for h in v.hazards]
    lines.append("cautions:")
    lines += [f"  - {c}" for c in v.cautions]
    if folder:
        lines.append(f"exported to: {folder}")
    return "\n".join(lines)


# ------------------------------------------------------------------------------------------------------------------
# motor sizing


def _run_sizing(args: argparse.Namespace, rig: Rig) -> Outcome:
    duration = default_duration(rig) if args.time is None else float(args.time)
    sizing = size_motor(rig, duration=duration, seed=args.seed)
    curve = None
    if sizing.found:
        curve = tradeoff_curve(rig, [f * sizing.minimum_peak for f in TRADEOFF_FACTORS], seed=args.seed)
    data = {**rig_header(rig), **sizing_fields(rig, sizing, curve), **safety_block()}
    folder = None
    if args.export and curve is not None:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        from upswing.synthesis.swingup import plot_tradeoff

        with stage_output(args.export, "swingup-sizing") as staged:
            ax = plot_tradeoff(curve)
            ax.figure.savefig(staged.path / "tradeoff.png", dpi=120, bbox_inches="tight")
            plt.close(ax.figure)
            (staged.path / "sizing.json").write_text(dumps(data) + "\n", encoding="utf-8")
        folder = str(staged.final_path)
        data["export_folder"] = folder
    return Outcome(text=sizing_text(rig, sizing, curve, folder), data=data, warnings=rig.warnings,
                   exit_code=0 if sizing.found else EXIT_VERDICT)


def sizing_fields(rig: Rig, s: SizingResult, curve: TradeoffCurve | None) -> dict[str, Any]:
    """The JSON fields of ``upswing swingup --size``."""
    return {
        "status": "sized" if s.found else "no swing-up found",
        "duration": s.duration,
        "minimum_peak": s.minimum_peak,
        "minimum_factor": s.minimum_factor,
        "infeasible_below_factor": s.infeasible_below,
        "rig_peak": rig.peak_inputs,
        "message": s.message,
        "trials": [{"factor": t.factor, "feasible": t.feasible, "strategy": t.strategy, "solves": t.solves}
                   for t in s.trials],
        "tradeoff": None if curve is None else {
            "limits": curve.limits, "minimum_time": curve.minimum_time, "success": curve.success,
            "meaning": "shortest swing-up found at each peak limit (local optima, warm-started in increasing limit)"},
        "units_extra": {"duration": "s", "minimum_peak": "input units", "minimum_time": "s", "limits": "input units"},
    }


def sizing_text(rig: Rig, s: SizingResult, curve: TradeoffCurve | None, folder: str | None) -> str:
    units = dict(zip(rig.input_names, rig.input_units, strict=True))
    lines = [f"upswing swingup --size: {rig.name} ({rig.source})"]
    if s.found:
        peaks = ", ".join(f"{n} {p:.3g} {units[n]}" for n, p in zip(rig.input_names, s.minimum_peak, strict=True))
        have = ", ".join(f"{n} {p:.3g} {units[n]}" for n, p in zip(rig.input_names, rig.peak_inputs, strict=True))
        lines.append(f"smallest peak effort for a swing-up within {s.duration:.3f} s: {peaks} (rig file: {have}); "
                     "add a margin for tracking feedback and model error before choosing a motor")
    else:
        lines.append(f"NO SWING-UP FOUND within {s.duration:.3f} s (up to {s.trials[-1].factor:g} times the rig's "
                     "peak); try a longer --time" if s.trials else f"NO SWING-UP FOUND within {s.duration:.3f} s")
    lines.append(s.message)
    if curve is not None:
        lines.append("peak effort vs minimum swing-up time:")
        lines.append(f"  {'peak ' + rig.input_names[0] + ' [' + units[rig.input_names[0]] + ']':>22}  min time [s]")
        for limit, t, ok in zip(curve.limits[:, 0], curve.minimum_time, curve.success, strict=True):
            lines.append(f"  {limit:>22.4g}  {t:.3f}" if ok else f"  {limit:>22.4g}  none found")
    lines.append("cautions:")
    lines += [f"  - {c}" for c in s.cautions]
    if folder:
        lines.append(f"exported to: {folder}")
    return "\n".join(lines)
