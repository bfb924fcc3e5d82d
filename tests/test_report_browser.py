"""Open a report in real headless Chromium: it renders, logs no errors, requests nothing outside the file.

The browser is driven over the Chrome DevTools Protocol (:mod:`browser_kit`). A control page with a deliberate
console error and an outside request proves that the watch would catch both.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

import pytest
from browser_kit import CHROMIUM, SKIP_REASON, Browser
from report_testkit import ink_fraction, pixels, scenario_rig, swing_trajectory

from upswing.report import figures_rig, figures_time
from upswing.report.assemble import model_document
from upswing.report.html import Image, Section, figure_image, render

pytestmark = pytest.mark.skipif(CHROMIUM is None, reason=SKIP_REASON)


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    folder = tmp_path_factory.mktemp("chromium")
    session = Browser(folder / "profile", folder / "chromium.log")
    yield session
    session.close()


def report_with_motion(name: str) -> str:
    """The rig and modes report plus a section of made-up motion, so animated and time-history images load too."""
    rig = scenario_rig(name)
    t, X, U = swing_trajectory(rig)
    base = model_document(rig)
    motion = Section("Motion (made-up test data)", (
        Image(figures_rig.animation_gif(rig, t, X), "image/gif", "Animation of the test trajectory."),
        figure_image(figures_time.time_history_figure(rig, t, X, U), "Time history of the test trajectory.")))
    return render(dataclasses.replace(base, sections=(*base.sections, motion)))


def test_report_renders_cleanly_in_chromium(browser, tmp_path):
    page = tmp_path / "report.html"
    page.write_text(report_with_motion("acrobot"), encoding="utf-8")
    seen = browser.open(page)
    assert seen["errors"] == []
    assert seen["outside"] == []
    checks = seen["checks"]
    assert checks["images"] >= 5 and checks["loaded"] == checks["images"]  # every inline PNG and GIF decoded
    assert checks["status"].strip().upper().endswith("NO VERDICT YET")
    assert checks["sections"] >= 5
    assert checks["width"] <= checks["viewport"]  # nothing wider than the window: no sideways scrolling
    shot = Path(os.environ.get("UPSWING_SCREENSHOT", tmp_path / "report.png"))
    browser.screenshot(shot)
    rgb = pixels(shot.read_bytes())
    assert rgb.shape[0] >= checks["height"] - 1 and ink_fraction(rgb) > 0.05  # the whole page, and not blank


def test_the_watch_catches_errors_and_outside_requests(browser, tmp_path):
    control = tmp_path / "control.html"
    # 127.0.0.1 port 9 (discard) keeps the deliberate outside request on this machine.
    control.write_text('<!DOCTYPE html><html><head><title>control</title></head><body>'
                       '<img src="http://127.0.0.1:9/probe.png" alt="probe">'
                       '<script>console.error("deliberate control error")</script></body></html>')
    seen = browser.open(control)
    assert "deliberate control error" in seen["errors"]
    assert "http://127.0.0.1:9/probe.png" in seen["outside"]
