"""A design run on each demo rig: every file is written, the files agree with each other and with the report's
verdict, a second run never touches the first, and the report passes the real-browser and blank-image checks."""

from __future__ import annotations

import base64
import csv
import hashlib
import html
import io
import json
import re
from pathlib import Path

import numpy as np
import pytest
from browser_kit import CHROMIUM, SKIP_REASON, Browser
from design_kit import DEMO_RIGS, SCENARIOS, TEST_OPTIONS, file_hashes, report_verdict, wilson
from PIL import Image
from report_testkit import MIN_INK, ink_fraction

from upswing.cli import main
from upswing.design.pipeline import STAGES, run_design
from upswing.design.run_folder import DESCRIPTIONS, SWINGUP_TABLE_FILES, write_run_folder
from upswing.design.swingup_stage import tracking_available
from upswing.model.rig import PARAMETER_NAMES


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """One design run per demo rig, made on first use and shared by every test of this module."""
    cache = {}

    def get(name: str):
        if name not in cache:
            parent = tmp_path_factory.mktemp(f"runs-{name}")
            run = run_design(SCENARIOS / f"{name}.toml", TEST_OPTIONS)
            cache[name] = (run, write_run_folder(run, parent), parent)
        return cache[name]

    return get


def _rows(path: Path) -> list[dict[str, str]]:
    lines = [line for line in path.read_text(encoding="utf-8").splitlines() if not line.startswith("#")]
    return list(csv.DictReader(io.StringIO("\n".join(lines))))


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_every_file_is_written(runs, name):
    run, folder, _ = runs(name)
    assert [s.name for s in run.stages] == list(STAGES)
    # No stage may fail on a demo rig; only the swing-up slot may be missing (until this build has it).
    assert all(s.status == "done" or (s.name == "swing-up" and s.status == "missing") for s in run.stages), \
        [(s.name, s.status, s.message) for s in run.stages]
    on_disk = {p.name for p in folder.path.iterdir()}
    assert on_disk == set(folder.summary["files"]) and on_disk <= set(DESCRIPTIONS)
    # Every file but the swing-up table is written on a demo rig; the table needs the tracking synthesis (and its
    # C header a table that fits the memory budget).
    assert set(DESCRIPTIONS) - set(SWINGUP_TABLE_FILES) <= on_disk
    if tracking_available():
        assert {"swingup.csv", "swingup.json"} <= on_disk
    for p in folder.path.iterdir():
        assert p.stat().st_size > 0, p.name
    assert not [p for p in folder.path.parent.iterdir() if p.name.startswith(".")]  # no staging folder left
    # The copy of the rig file is byte for byte the file read; hashlib's SHA-256 of it is the summary's rig_hash.
    original = (SCENARIOS / f"{name}.toml").read_bytes()
    assert (folder.path / "rig.toml").read_bytes() == original
    assert folder.summary["rig_hash"] == hashlib.sha256(original).hexdigest()


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_summary_agrees_with_the_report(runs, name):
    run, folder, _ = runs(name)
    summary = json.loads((folder.path / "summary.json").read_text())
    shown = report_verdict((folder.path / "report.html").read_text(encoding="utf-8"))
    assert summary["verdict"] == shown["status"] == run.verdict.status
    assert summary["verdict_text"] == shown["words"]
    assert summary["headline"] == shown["headline"]
    assert summary["reasons"] == shown["reasons"]
    tight = summary["limited_by"]["tightest_budget"]
    small = summary["limited_by"]["smallest_margin"]
    assert tight is not None and tight["name"] in shown["html"]
    assert small is not None and small["name"] in shown["html"]
    assert summary["run_folder"] == str(folder.path.absolute())
    assert summary["tool_version"] and summary["state"] == list(run.rig.state_names)
    # The swing-up section shows the same catch rate, interval and median hand-over time as summary.json.
    page = html.unescape((folder.path / "report.html").read_text(encoding="utf-8"))
    swing = summary["success_rates"]["swingup"]
    low, high = swing["interval"]
    assert (f"{swing['successes']} caught and held, {swing['rate']:.1%}, 95 % Wilson interval {low:.2%} .. "
            f"{high:.2%}") in page
    if swing["successes"]:
        assert f"after {summary['swingup']['handover_time']['median']:.2f} s (median;" in page


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_summary_numbers_are_consistent(runs, name):
    run, folder, _ = runs(name)
    summary = folder.summary
    for b in summary["budgets"]:
        assert set(b) >= {"name", "value", "limit", "unit", "ok"}
        if b["limit"] is None:
            assert b["ok"] is None
        else:
            assert b["ok"] == (b["value"] <= b["limit"] * (1 + 1e-12))
    # The verdict rule, applied to the summary by hand.
    failed = (any(s["status"] == "failed" for s in summary["stages"]) or any(b["ok"] is False for b in
              summary["budgets"]) or any(not m["ok"] for m in summary["margins"]))
    pending = any(s["status"] in ("missing", "skipped") for s in summary["stages"]) or bool(summary["unchecked"])
    assert summary["verdict"] == ("do-not-power" if failed else "incomplete" if pending else "power")
    # The tightest budget is the rated, non-clamped line with the highest share of its limit.
    ranked = [b for b in summary["budgets"] if b["limit"] and not b["name"].endswith(".peak_effort")]
    best = max(ranked, key=lambda b: b["value"] / b["limit"])
    assert summary["limited_by"]["tightest_budget"]["name"] == best["name"]
    assert summary["limited_by"]["smallest_margin"]["ratio"] == pytest.approx(
        min(m["ratio"] for m in summary["margins"] if m["ratio"] is not None))
    # Success rate and its 95 % Wilson interval, recomputed from the counts (Wilson, 1927); 1e-12: rounding only.
    rate = summary["success_rates"]["balance"]
    low, high = wilson(rate["successes"], rate["rollouts"])
    assert rate["interval"] == pytest.approx([low, high], abs=1e-12)
    assert rate["rollouts"] == TEST_OPTIONS.rollouts
    timing = summary["timing"]
    assert all(s["seconds"] >= 0 for s in summary["stages"])
    assert timing["total_s"] >= sum(timing["stages"].values())
    # The swing-up: verified with the run's rollout count; its catch rate and 95 % Wilson interval recomputed from
    # the counts (Wilson, 1927); 1e-12: rounding only. The catch-rate margin is the interval's lower end.
    swing = summary["success_rates"]["swingup"]
    assert swing is not None and summary["swingup"]["verified"] is True and summary["unchecked"] == []
    assert swing["rollouts"] == TEST_OPTIONS.rollouts and sum(swing["outcomes"].values()) == swing["rollouts"]
    assert swing["interval"] == pytest.approx(list(wilson(swing["successes"], swing["rollouts"])), abs=1e-12)
    catch = next(m for m in summary["margins"] if m["name"].startswith("swing-up catch"))
    assert catch["value"] == pytest.approx(100 * swing["lower_bound"], abs=1e-9)
    assert catch["ok"] == (swing["lower_bound"] >= swing["required"])
    # Hand-over times: ordered statistics of the caught runs, inside the simulated horizon.
    handover = summary["swingup"]["handover_time"]
    if swing["successes"]:
        assert 0 < handover["min"] <= handover["median"] <= handover["p95"] <= handover["max"]
        assert handover["max"] <= summary["swingup"]["horizon_s"]
        # Stop conditions: a deadline after the first catch, speed windows within every actuated max_speed.
        sup = summary["swingup"]["supervision"]
        assert sup["catch_deadline_s"] > handover["min"]
        rig = run.rig
        for joint, value in sup["speed_limits"].items():
            assert value > 0 and (joint not in rig.actuated or value <= rig.actuator(joint).max_speed)
    # The swing-up budgets are the tracked ones (verify_swingup), judged against the rig's limits.
    tracked = {b.name: b for b in run.swingup.verification.budgets}
    for b in summary["budgets"]:
        if b["stage"] == "swingup" and not b["name"].endswith(".saturation_time"):
            assert b["value"] == tracked[b["name"][len("swingup."):]].value


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_exported_tables_agree_with_the_run(runs, name):
    run, folder, _ = runs(name)
    rig, mc = run.rig, run.verification.monte_carlo
    rows = _rows(folder.path / "montecarlo.csv")
    assert len(rows) == mc.rollouts
    assert sum(r["held"] == "1" for r in rows) == folder.summary["success_rates"]["balance"]["successes"]
    # Every drawn parameter lies within the rig file's declared spread around its nominal value: p0 (1 +- s) for
    # uniform draws, p0 (1 +- 3 s) for normal ones (truncated at three standard deviations, as docs/rig-file.md
    # states); 1e-12 relative: rounding of the stored decimal.
    spreads = dict(rig.uncertainty.spreads)
    width = 1.0 if rig.uncertainty.distribution == "uniform" else 3.0
    nominal = dict(zip(PARAMETER_NAMES, rig.parameter_vector(), strict=True))
    for pname, p0 in nominal.items():
        values = np.array([float(r[pname]) for r in rows])
        s = width * spreads.get(pname, 0.0)
        assert np.all(np.abs(values - p0) <= s * abs(p0) * (1 + 1e-12) + 1e-15), pname
    # The swing-up Monte Carlo table: one row per rollout, its catches and hand-over times those of the summary;
    # every drawn parameter within the declared spread (same rule as above).
    swing_rows = _rows(folder.path / "swingup_montecarlo.csv")
    swing = folder.summary["success_rates"]["swingup"]
    assert len(swing_rows) == swing["rollouts"]
    assert sum(r["caught"] == "1" for r in swing_rows) == swing["successes"]
    assert sum(r["outcome"] == "caught and held" for r in swing_rows) == swing["outcomes"]["caught and held"]
    caught_times = np.array([float(r["handover_time"]) for r in swing_rows if r["caught"] == "1"])
    if caught_times.size:
        assert float(np.median(caught_times)) == pytest.approx(folder.summary["swingup"]["handover_time"]["median"],
                                                               rel=1e-12)  # the CSV's decimal rounding only
    for pname, p0 in nominal.items():
        values = np.array([float(r[pname]) for r in swing_rows])
        s = width * spreads.get(pname, 0.0)
        assert np.all(np.abs(values - p0) <= s * abs(p0) * (1 + 1e-12) + 1e-15), pname
    slices = _rows(folder.path / "roa_slices.csv")
    assert len(slices) == sum(np.asarray(p.held).size for p in run.verification.region.slices)
    budgets = _rows(folder.path / "budgets.csv")
    assert [b["name"] for b in budgets] == [b["name"] for b in folder.summary["budgets"]]
    gains = json.loads((folder.path / "balance.json").read_text())["K_discrete"]
    csv_gains = [[float(v) for k, v in r.items() if k not in ("matrix", "input", "input_unit") and v]
                 for r in _rows(folder.path / "balance_gains.csv") if r["matrix"] == "K_discrete"]
    np.testing.assert_array_equal(np.array(csv_gains), np.array(gains))  # both written from the same floats


def test_a_second_run_writes_a_new_folder_and_leaves_the_first_alone(runs, capsys):
    # The second run is the command with no rig file: the bundled demo, which is the acrobot, into the same parent,
    # so the two runs compete for the same folder name.
    _, first, parent = runs("acrobot")
    before = file_hashes(first.path)
    capsys.readouterr()
    code = main(["design", "--out", str(parent), "--rollouts", "100", "--seed", "1", "--json"])
    out, err = capsys.readouterr()
    summary = json.loads(out)  # exactly one JSON object on stdout
    assert summary["bundled_demo"] is True
    assert code == (0 if summary["verdict"] == "power" else 1)
    second = Path(summary["run_folder"])
    assert second != first.path and second.parent == first.path.parent and second.is_dir()
    assert file_hashes(first.path) == before
    assert "below 1000" in err  # the reduced rollout count is called out
    assert "Traceback" not in err


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_every_report_image_is_not_blank(runs, name):
    _, folder, _ = runs(name)
    page = (folder.path / "report.html").read_text(encoding="utf-8")
    assert not re.search(r'(src|href)="(https?:)?//', page)  # nothing to fetch: every image is inline
    images = re.findall(r'src="data:(image/(?:png|gif));base64,([^"]+)"', page)
    assert len(images) >= 9  # rig, eigenvalues, modes, 2 responses, histogram(s), 2 slices, budget bars
    for mime, data in images:
        picture = Image.open(io.BytesIO(base64.b64decode(data)))
        if mime == "image/png":
            assert ink_fraction(np.asarray(picture.convert("RGB"))) > MIN_INK
            continue
        # An animation frame shows only the rig (no axes): measured 3.0-5.3 % ink on the demo rigs, 0 % when empty;
        # 2 % catches an empty frame. It must also move: some frame differs from the first in over 0.5 % of pixels.
        frames = []
        for k in range(picture.n_frames):
            picture.seek(k)
            frames.append(np.asarray(picture.convert("RGB")).astype(int))
        assert min(ink_fraction(f.astype(np.uint8)) for f in frames) > 0.02
        assert max(np.mean(np.abs(f - frames[0]).sum(axis=2) > 24) for f in frames) > 0.005


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    if CHROMIUM is None:
        pytest.skip(SKIP_REASON)
    folder = tmp_path_factory.mktemp("chromium-design")
    session = Browser(folder / "profile", folder / "chromium.log")
    yield session
    session.close()


@pytest.mark.parametrize("name", DEMO_RIGS)
def test_design_report_renders_cleanly_in_chromium(runs, browser, name, tmp_path):
    run, folder, _ = runs(name)
    seen = browser.open(folder.path / "report.html")
    assert seen["errors"] == []
    assert seen["outside"] == []
    checks = seen["checks"]
    assert checks["images"] >= 9 and checks["loaded"] == checks["images"]
    words = {"power": "CLEARED TO POWER", "do-not-power": "DO NOT POWER", "incomplete": "NO VERDICT YET"}
    assert words[run.verdict.status] in checks["status"].upper()
    assert checks["sections"] >= 8
    assert checks["width"] <= checks["viewport"]
    shot = tmp_path / f"design-{name}.png"
    browser.screenshot(shot)
    rgb = np.asarray(Image.open(shot).convert("RGB"))
    assert rgb.shape[0] >= checks["height"] - 1 and ink_fraction(rgb) > 0.05
