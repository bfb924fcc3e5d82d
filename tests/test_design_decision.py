"""The design verdict: the rule itself, an under-powered rig, stages that fail, and bad input."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from design_kit import SCENARIOS, TEST_OPTIONS, report_verdict, wilson

from upswing.cli import EXIT_BAD_INPUT, EXIT_VERDICT, main
from upswing.design import pipeline
from upswing.design.decision import StageRecord, decide, loop_margins, success_margin
from upswing.design.pipeline import DesignOptions, run_design
from upswing.design.run_folder import write_run_folder
from upswing.errors import RequestError, SynthesisError
from upswing.model.rig import load_rig
from upswing.report.verdict import Margin
from upswing.synthesis.study import study_balance
from upswing.verification.budgets import Budget

DONE = tuple(StageRecord(n, "done", 0.1) for n in pipeline.STAGES)


def _budget(name: str, value: float, limit: float | None) -> Budget:
    ok = None if limit is None else value <= limit
    return Budget(name=name, value=value, limit=limit, unit="N m", ok=ok, median=value, meaning="")


def test_rule_power_incomplete_and_do_not_power():
    budgets = (_budget("balance.elbow.rms_effort", 0.3, 0.75), _budget("balance.elbow.peak_effort", 1.9, 1.9),
               _budget("balance.base.peak_force", 20.0, None))
    margins = (Margin("a", 3.0, 2.0, "-", True), Margin("b", 40.0, 30.0, "deg", True))
    verdict = decide(DONE, budgets, margins)
    assert verdict.status == "power" and verdict.reasons == ()
    # The clamped peak-effort line (100 % of peak) is not the tightest: the RMS line at 40 % is.
    assert verdict.tightest.name == "balance.elbow.rms_effort"
    assert verdict.smallest.name == "b"  # 40 / 30 = 1.33 < 3 / 2 = 1.5
    missing = tuple(StageRecord(s.name, "missing", 0.0, "not in this build") if s.name == "swing-up" else s
                    for s in DONE)
    verdict = decide(missing, budgets, margins)
    assert verdict.status == "incomplete" and "swing-up" in verdict.headline
    assert decide(DONE, budgets, margins, unchecked=[("the swing-up", "not verified")]).status == "incomplete"
    over = (*budgets, _budget("swingup.elbow.rms_effort", 0.9, 0.75))
    verdict = decide(missing, over, margins)
    assert verdict.status == "do-not-power"
    assert "swingup.elbow.rms_effort" in verdict.headline
    assert verdict.reasons[0].startswith("budget swingup.elbow.rms_effort = 0.9")  # failures before what did not run
    failed = tuple(StageRecord(s.name, "failed", 0.1, "Riccati failed") if s.name == "balance" else s for s in DONE)
    verdict = decide(failed, budgets, margins)
    assert verdict.status == "do-not-power" and "the balance stage" in verdict.headline
    low = decide(DONE, budgets, (*margins, Margin("c", 1.5, 2.0, "samples", False)), details={"c": "why"})
    assert low.status == "do-not-power" and low.reasons == ("c = 1.5 samples, below the required 2 samples; why",)


def test_success_margin_is_the_wilson_lower_bound():
    # 174 of 200 held: the lower end of the 95 % Wilson interval (Wilson, 1927) is 81.6 %, below 95 %.
    low, _ = wilson(174, 200)
    m = success_margin("balance hold", low, 0.95)
    assert m.value == pytest.approx(100 * low, rel=1e-12) and m.required == pytest.approx(95.0)
    assert not m.ok and m.unit == "%"
    assert success_margin("balance hold", wilson(1000, 1000)[0], 0.99).ok  # 1000 / 1003.84 = 99.6 % >= 99 %


def test_loop_margins_follow_the_classical_rules():
    study = study_balance(load_rig(SCENARIOS / "pendubot.toml"))
    report = study.margins[pipeline.RUNNING_LOOP]
    margins = {m.name.split(" at ")[0]: m for m in loop_margins(report)}
    lm = report.loops[0]
    assert margins["delay margin"].value == pytest.approx(lm.delay_margin_samples)
    assert margins["phase margin"].value == pytest.approx(lm.phase_margin_deg)
    low, high = lm.gain_margin
    # 6 dB each way (common practice): the gain may double, or halve, before the loop goes unstable.
    assert margins["gain margin factor"].value == pytest.approx(min(high, 1.0 / low))
    assert margins["gain margin factor"].required == pytest.approx(10 ** (6.0206 / 20), rel=1e-4)


def _weak_acrobot(tmp_path: Path, peak: float) -> Path:
    """The demo acrobot with its elbow motor shrunk to ``peak`` N m (peak, continuous and stall alike)."""
    text = (SCENARIOS / "acrobot.toml").read_text()
    for key in ("peak", "continuous", "stall"):
        lines = [line for line in text.splitlines() if line.startswith(f"{key} = ")]
        assert len(lines) == 1, key
        text = text.replace(lines[0], f"{key} = {peak}")
    path = tmp_path / "weak-acrobot.toml"
    path.write_text(text)
    return path


def test_an_under_powered_rig_gets_do_not_power_naming_what_fails(tmp_path, capsys):
    # 0.1 N m at the elbow: about a twentieth of the demo's 1.9 N m, below the 0.35 N m that gravity puts on link 2
    # when it is horizontal (m2 g lc2 = 0.21 * 9.81 * 0.171), so neither balancing nor swinging up can work.
    rig_path = _weak_acrobot(tmp_path, 0.1)
    code = main(["design", str(rig_path), "--out", str(tmp_path / "runs"), "--rollouts", "200", "--json"])
    summary = json.loads(capsys.readouterr().out)
    assert code == EXIT_VERDICT
    assert summary["verdict"] == "do-not-power"
    failing = [b["name"] for b in summary["budgets"] if b["ok"] is False]
    failing += [m["name"] for m in summary["margins"] if not m["ok"]]
    failing += [f"the {s['name']} stage" for s in summary["stages"] if s["status"] == "failed"]
    assert failing
    for name in failing:
        assert name in summary["headline"]
    assert "balance hold rate, 95 % lower bound" in failing  # the loop cannot hold the links
    shown = report_verdict((Path(summary["run_folder"]) / "report.html").read_text(encoding="utf-8"))
    assert shown["status"] == "do-not-power" and shown["headline"] == summary["headline"]


def test_a_failing_stage_is_reported_not_raised(tmp_path, monkeypatch):
    def broken(rig, **_):
        raise SynthesisError("the discrete Riccati equation has no stabilizing solution; try a higher loop rate")

    monkeypatch.setattr(pipeline, "study_balance", broken)
    run = run_design(SCENARIOS / "pendubot.toml", DesignOptions(rollouts=50, roa_samples=20))
    status = {s.name: s.status for s in run.stages}
    assert status["balance"] == "failed" and status["verification"] == "skipped"
    assert run.verdict.status == "do-not-power"
    assert "the balance stage" in run.verdict.headline
    assert any("Riccati" in r for r in run.verdict.reasons)
    folder = write_run_folder(run, tmp_path)
    names = {p.name for p in folder.path.iterdir()}
    assert {"report.html", "summary.json", "rig.toml", "budgets.csv"} <= names
    assert "balance.json" not in names and "montecarlo.csv" not in names
    page = (folder.path / "report.html").read_text(encoding="utf-8")
    assert "no stabilizing solution" in page and report_verdict(page)["status"] == "do-not-power"


def test_an_internal_error_in_a_stage_is_named_not_a_traceback(monkeypatch):
    def bug(rig):
        raise ZeroDivisionError("division by zero")

    monkeypatch.delenv("UPSWING_DEBUG", raising=False)
    monkeypatch.setattr(pipeline, "analyse_all", bug)
    monkeypatch.setattr(pipeline, "run_swingup_stage", lambda rig, **_: (_ for _ in ()).throw(RuntimeError("x")))
    monkeypatch.setattr(pipeline, "_verify", lambda *a: (_ for _ in ()).throw(RuntimeError("y")))
    run = run_design(SCENARIOS / "arm-2dof.toml", DesignOptions(rollouts=10, roa_samples=10))
    modes = run.stage("modes")
    assert modes.status == "failed" and "internal error (ZeroDivisionError" in modes.message
    assert run.verdict.status == "do-not-power" and "the modes stage" in run.verdict.headline


@pytest.mark.parametrize("argv, words", [
    (["design", "no-such-rig.toml"], "no-such-rig.toml"),
    (["design", str(SCENARIOS / "acrobot.toml"), "--rollouts", "0"], "--rollouts must be at least 1"),
    (["design", str(SCENARIOS / "acrobot.toml"), "--seed", "-1"], "--seed must be >= 0"),
])
def test_bad_input_is_one_line_and_exit_code_2(tmp_path, capsys, argv, words):
    out_dir = tmp_path / "runs"
    code = main([*argv, "--out", str(out_dir)])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT
    assert words in err and "Traceback" not in err
    assert not out_dir.exists() or not any(out_dir.iterdir())  # nothing written


def test_options_are_checked():
    with pytest.raises(RequestError):
        DesignOptions(rollouts=0)
    with pytest.raises(RequestError):
        DesignOptions(required_success=1.0)
    assert TEST_OPTIONS.rollouts < 1000 and math.isclose(DesignOptions().rollouts, 1000)
