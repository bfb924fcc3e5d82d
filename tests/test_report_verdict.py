"""Budgets, margins and the verdict rule."""

from __future__ import annotations

import pytest

from upswing.errors import RequestError
from upswing.report.verdict import (
    Budget,
    Margin,
    budgets_from_records,
    smallest_margin,
    tightest_budget,
    verdict_from,
)

BUDGETS = [Budget("peak torque", 1.5, 1.9, "N m", True), Budget("rail", 0.38, 0.41, "m", True),
           Budget("RMS torque", 0.6, 0.75, "N m", True)]
MARGINS = [Margin("disk margin", 0.45, 0.3, "-", True), Margin("success rate", 0.995, 0.99, "-", True)]


def test_tightest_budget_and_smallest_margin_by_ratio():
    assert tightest_budget(BUDGETS).name == "rail"  # 0.38 / 0.41 = 0.93 beats 0.79 and 0.80
    assert smallest_margin(MARGINS).name == "success rate"  # 1.005 times the minimum beats 1.5
    assert tightest_budget([]) is None and smallest_margin([]) is None


def test_verdict_rule():
    assert verdict_from(BUDGETS, MARGINS).status == "power"
    assert verdict_from(BUDGETS, MARGINS, missing=["swing-up"]).status == "incomplete"
    failing = [*BUDGETS, Budget("elbow RMS torque", 0.81, 0.75, "N m", False)]
    verdict = verdict_from(failing, MARGINS, missing=["swing-up"])
    assert verdict.status == "do-not-power"  # a failure decides even when something is missing
    assert "elbow RMS torque" in verdict.headline
    assert verdict.tightest.name == "elbow RMS torque"


def test_records_round_trip_and_bad_records():
    records = [{"name": b.name, "value": b.value, "limit": b.limit, "unit": b.unit, "ok": b.ok} for b in BUDGETS]
    assert budgets_from_records(records) == tuple(BUDGETS)
    with pytest.raises(RequestError, match="missing \\['ok'\\]"):
        budgets_from_records([{"name": "x", "value": 1.0, "limit": 2.0, "unit": "m"}])
    with pytest.raises(RequestError, match="limit must be a finite number > 0"):
        Budget("x", 1.0, 0.0, "m", True)
    with pytest.raises(RequestError, match="status must be one of"):
        verdict_from(BUDGETS, MARGINS).__class__("maybe", "?")
