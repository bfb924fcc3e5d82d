"""The rig and modes report, end to end, for every demo rig."""

from __future__ import annotations

import base64
import re
from datetime import datetime

import pytest
from report_testkit import MIN_INK, ink_fraction, pixels, scenario_rig
from test_report_html import Page

from upswing.model.derived import keep_out_radius
from upswing.model.modes import analyse_all
from upswing.report.assemble import build_model_report, holding_budgets
from upswing.safety import CAUTIONS, STANDARDS

MADE = datetime(2031, 5, 4, 9, 30)


@pytest.mark.parametrize("name", ["acrobot", "cart-double", "arm-2dof"])  # pendubot: same paths as these
def test_model_report_for_each_demo_rig(name):
    rig = scenario_rig(name)
    text = build_model_report(rig, made=MADE)
    assert len(text.encode()) < 2_000_000  # one file that mails and opens quickly
    page = Page(text)
    assert page.errors == []
    body = page.all_text()
    assert body.index("No verdict yet") < body.index("The rig") < body.index("Hazards and cautions")
    assert rig.name in body and "2031-05-04 09:30" in body
    assert f"{keep_out_radius(rig):.2f} m" in body
    for standard in STANDARDS:
        assert standard in body
    assert all(caution in body for caution in CAUTIONS)
    upright = analyse_all(rig)["upright"]
    assert f"{1000 * min(upright.time_to_double):.0f} ms" in body
    sources = [a["src"] for t, a in page.tags if t == "img"]
    assert len(sources) >= 3
    for src in sources:
        mime, data = re.match(r"data:(image/(?:png|gif));base64,(.*)", src).groups()
        assert ink_fraction(pixels(base64.b64decode(data))) > MIN_INK, mime


def test_holding_budget_is_the_static_gravity_torque():
    rig = scenario_rig("acrobot")
    (budget,) = holding_budgets(rig)
    # Link 2 held horizontal by the elbow: torque m2 g lc2 about the elbow (statics, common practice).
    assert budget.value == pytest.approx(rig.link2.mass * rig.gravity * rig.link2.com, rel=1e-12)
    assert budget.limit == rig.actuator("elbow").peak
    assert holding_budgets(scenario_rig("cart-double")) == ()  # gravity does not load a cart along its rail
