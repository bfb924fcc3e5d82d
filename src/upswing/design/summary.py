"""``summary.json``: the design run in one machine-readable object (also what ``upswing design --json`` prints).

Fields (names are a contract: more may be added, none renamed):

``verdict``
    ``"power"``, ``"do-not-power"`` or ``"incomplete"`` (the same verdict the report leads with); ``verdict_text``
    its words, ``headline`` one sentence, ``reasons`` one sentence per thing that failed or did not run.
``limited_by``
    ``tightest_budget`` (a budget object, or null) and ``smallest_margin`` (``name``, ``value``, ``required``,
    ``unit``, ``ok``, ``ratio``, or null).
``budgets``
    Every budget: ``name``, ``value``, ``limit``, ``unit``, ``ok`` (null without a limit), plus ``stage``,
    ``median`` and ``meaning``.
``unchecked``
    Results a stage produced but could not check (``what``, ``why``), e.g. a swing-up planned but not verified on
    the nonlinear model: like a missing stage they leave the verdict without a decision.
``margins``
    Every judged margin: ``name``, ``value``, ``required``, ``unit``, ``ok``, ``ratio``.
``success_rates``
    Per verified manoeuvre (``balance``; ``swingup``, null when the swing-up was not verified): ``rate``,
    ``interval`` (95 % Wilson), ``lower_bound``, ``required``, ``rollouts``, ``successes``, ``outcomes``.
``swingup``
    Null without a planned swing-up; else ``verified`` (bool), ``duration_s`` (the plan), and when verified
    ``handover_time`` (``min``, ``median``, ``p95``, ``max`` over the caught rollouts [s], null when none was
    caught), ``nominal_handover_time`` [s] (null if the nominal run never handed over), ``nominal_caught``,
    ``handover_level`` (rho_in, rho_out and their source), ``verdict`` and ``reasons`` of the manoeuvre check,
    ``supervision`` (the stop conditions for the drive, as in ``swingup.json``; null when none was derived) and
    ``miss_correlations`` (the parameters the missed catches follow, strongest first).
``stages``, ``timing``
    Each stage's ``name``, ``status``, ``seconds`` and ``message``; ``timing`` has ``stages`` (name -> s),
    ``report_s``, ``files_s`` and ``total_s``.
``run_folder``, ``rig_hash``, ``tool_version``, ``options``, ``files``, ``hazards``, ``cautions``, ``standards``
    Where the run was written, the rig file's SHA-256, upswing's version, the run's settings, the files written,
    the hazard notes and the cautions that travel with every result; ``export_notes`` says what an export left out
    and why (e.g. a swing-up C header larger than its memory budget).

Plus the common header of every upswing JSON object (``tool``, ``rig``, ``state``, ``inputs``, ``units``,
``sign_convention``).
"""

from __future__ import annotations

import math
from typing import Any

from upswing import __version__
from upswing.design.decision import DESIGN_RULE
from upswing.design.pipeline import DesignRun
from upswing.export.header import rig_header, safety_block
from upswing.export.swingup_files import miss_correlations_json, supervision_json
from upswing.report.html import STATUS_WORDS
from upswing.report.verdict import Margin
from upswing.verification.budgets import Budget


def budget_json(budget: Budget) -> dict[str, Any]:
    stage, _, _ = budget.name.partition(".")
    return {"name": budget.name, "value": budget.value, "limit": budget.limit, "unit": budget.unit, "ok": budget.ok,
            "stage": stage, "median": budget.median, "meaning": budget.meaning}


def margin_json(margin: Margin) -> dict[str, Any]:
    return {"name": margin.name, "value": float(margin.value), "required": margin.required, "unit": margin.unit,
            "ok": bool(margin.ok), "ratio": float(margin.ratio) if math.isfinite(margin.ratio) else None}


def success_json(run: DesignRun) -> dict[str, Any]:
    out: dict[str, Any] = {"balance": None, "swingup": None}
    if run.verification is not None:
        mc = run.verification.monte_carlo
        out["balance"] = {"rate": mc.success_rate, "interval": list(mc.success_interval),
                          "lower_bound": mc.success_interval[0], "required": run.required_success,
                          "rollouts": mc.rollouts, "successes": mc.successes, "outcomes": dict(mc.outcomes),
                          "method": "Wilson score interval, 95 %"}
    check = None if run.swingup is None else run.swingup.verification
    if check is not None:
        out["swingup"] = {"rate": check.success_rate, "interval": list(check.success_interval),
                          "lower_bound": check.success_interval[0], "required": check.required_success,
                          "rollouts": check.rollouts, "successes": check.successes, "outcomes": dict(check.outcomes),
                          "method": "Wilson score interval, 95 %"}
    return out


def _finite(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def swingup_json(run: DesignRun) -> dict[str, Any] | None:
    """The ``swingup`` field (module docstring)."""
    s = run.swingup
    if s is None:
        return None
    out: dict[str, Any] = {"verified": not s.unverified, "duration_s": float(s.plan.duration)}
    check = s.verification
    if check is not None:
        summary = {k: _finite(v) for k, v in check.handover_summary.items()}
        out.update(handover_time=None if summary["median"] is None else summary,
                   nominal_handover_time=_finite(check.nominal.handover_time), nominal_caught=check.nominal.caught,
                   handover_level={"rho_in": check.rho_in, "rho_out": check.rho_out, "source": check.rho_source},
                   verdict=check.verdict, reasons=list(check.reasons), horizon_s=check.horizon_s,
                   supervision=None if check.supervision is None else supervision_json(check.supervision),
                   miss_correlations=miss_correlations_json(check.correlations))
    return out


def summary_fields(run: DesignRun, *, run_folder: str | None, files: list[str], report_s: float | None,
                   files_s: float | None, export_notes: list[str] | None = None) -> dict[str, Any]:
    """The summary object of ``run`` (module docstring)."""
    v = run.verdict
    o = run.options
    header = rig_header(run.rig)
    return {
        **header,
        "verdict": v.status,
        "verdict_text": STATUS_WORDS[v.status],
        "headline": v.headline,
        "reasons": list(v.reasons),
        "verdict_rule": DESIGN_RULE,
        "limited_by": {"tightest_budget": None if v.tightest is None else budget_json(v.tightest),
                       "smallest_margin": None if v.smallest is None else margin_json(v.smallest)},
        "budgets": [budget_json(b) for b in run.budgets],
        "unchecked": [{"what": what, "why": why} for what, why in run.unchecked],
        "margins": [margin_json(m) for m in run.margins],
        "success_rates": success_json(run),
        "swingup": swingup_json(run),
        "stages": [{"name": s.name, "status": s.status, "seconds": s.seconds, "message": s.message}
                   for s in run.stages],
        "timing": {"stages": {s.name: s.seconds for s in run.stages}, "report_s": report_s, "files_s": files_s,
                   "total_s": run.total_s + (report_s or 0.0) + (files_s or 0.0)},
        "run_folder": run_folder,
        "rig_hash": run.rig.content_hash,
        "tool_version": __version__,
        "options": {"rollouts": o.rollouts, "seed": o.seed, "roa_samples": o.roa_samples, "horizon_s": o.horizon,
                    "required_success": run.required_success},
        "files": files,
        "export_notes": list(export_notes or []),
        "hazards": [{"topic": h.topic, "text": h.text, "standards": list(h.standards)} for h in run.hazards],
        "warnings": list(run.rig.warnings),
        "units_extra": {"timing": "s", "success_rates": "fraction", "budgets": "each line's unit",
                        "margins": "each line's unit", "swingup": "s (times), - (hand-over levels)"},
        **safety_block(),
    }
