"""Margins, budget usage and the verdict rule."""

from __future__ import annotations

import pytest
from report_testkit import budget

from upswing.errors import RequestError
from upswing.report.verdict import Margin, Verdict, budgets_from_records, smallest_margin, verdict_from
from upswing.verification.budgets import rated, tightest_budget, usage

BUDGETS = [budget("peak torque", 1.5, 1.9, "N m", True), budget("rail", 0.38, 0.41, "m", True),
           budget("RMS torque", 0.6, 0.75, "N m", True), budget("tip speed", 9.0, None, "m/s", None)]
MARGINS = [Margin("disk margin", 0.45, 0.3, "-", True), Margin("success rate", 0.995, 0.99, "-", True)]


def test_tightest_budget_and_smallest_margin_by_ratio():
    assert tightest_budget(BUDGETS).name == "rail"  # 0.38 / 0.41 = 0.93 beats 0.79 and 0.80
    assert smallest_margin(MARGINS).name == "success rate"  # 1.005 times the minimum beats 1.5
    assert tightest_budget([]) is None and smallest_margin([]) is None
    assert [b.name for b in rated(BUDGETS)] == ["peak torque", "rail", "RMS torque"]  # unrated: reported only
    assert tightest_budget(BUDGETS[3:]) is None
    with pytest.raises(RequestError, match="needs a finite limit"):
        usage(BUDGETS[3])


def test_verdict_rule():
    assert verdict_from(BUDGETS, MARGINS).status == "power"
    assert verdict_from(BUDGETS, MARGINS, missing=["swing-up"]).status == "incomplete"
    failing = [*BUDGETS, budget("elbow RMS torque", 0.81, 0.75, "N m", False)]
    verdict = verdict_from(failing, MARGINS, missing=["swing-up"])
    assert verdict.status == "do-not-power"  # a failure decides even when something is missing
    assert "elbow RMS torque" in verdict.headline
    assert verdict.tightest.name == "elbow RMS torque"
    assert verdict_from(BUDGETS, [Margin("disk margin", 0.2, 0.3, "-", False)]).status == "do-not-power"


def test_records_round_trip_and_bad_records():
    records = [{"name": b.name, "value": b.value, "limit": b.limit, "unit": b.unit, "ok": b.ok} for b in BUDGETS]
    assert budgets_from_records(records) == tuple(BUDGETS)
    with pytest.raises(RequestError, match="missing \\['ok'\\]"):
        budgets_from_records([{"name": "x", "value": 1.0, "limit": 2.0, "unit": "m"}])
    with pytest.raises(RequestError, match="unexpected \\['colour'\\]"):
        budgets_from_records([{**records[0], "colour": "red"}])
    with pytest.raises(RequestError, match="required must be a finite number > 0"):
        Margin("x", 1.0, 0.0, "-", True)
    with pytest.raises(RequestError, match="status must be one of"):
        Verdict("maybe", "?")
