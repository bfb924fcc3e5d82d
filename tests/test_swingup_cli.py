"""``upswing swingup`` on the command line: the JSON contract, the export folder, an infeasible limit, sizing, and
bad input. Each call plans (1-3 s) and verifies with few rollouts; the rates themselves are checked in
test_swingup_verify.py."""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from rigs import ROOT

from upswing.cli import EXIT_BAD_INPUT, EXIT_VERDICT, main

ACROBOT = ROOT / "scenarios" / "acrobot.toml"
CART = ROOT / "scenarios" / "cart-double.toml"
# Fields the issue names for --json (a contract: add, never rename).
CONTRACT = ("status", "duration", "peak_input", "solve_s", "iterations", "success_rate", "handover_time", "state",
            "inputs", "units", "cautions")


def _run(capsys, *argv):
    code = main(["swingup", *map(str, argv)])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_contract_and_export(tmp_path, capsys):
    # 80 rollouts: a pass needs the Wilson lower end at 0.95, which takes at least 73 rollouts all held.
    code, out, err = _run(capsys, CART, "--rollouts", 80, "--json", "--export", tmp_path)
    data = json.loads(out)  # exactly one JSON object on stdout
    assert code == 0 and data["verdict"] == "pass", data["reasons"]
    assert all(key in data for key in CONTRACT)
    assert data["status"] == "solved" and data["state"] == ["x", "theta1", "theta2", "x_dot", "theta1_dot",
                                                            "theta2_dot"]
    assert 0.0 < data["handover_time"] <= data["duration"] + 1e-9
    assert data["success_rate"] == data["outcomes"]["caught and held"] / 80
    assert any("Local codes" in c for c in data["cautions"])
    folders = list(tmp_path.iterdir())
    assert [str(f) for f in folders] == [data["export_folder"]]
    names = sorted(p.name for p in folders[0].iterdir())
    assert "swingup.csv" in names and "swingup.json" in names and "verification.json" in names
    # The C header is written only when the table fits the 64 KiB budget, and the result says which.
    assert ("swingup_table.h" in names) == ("written" in data["export_note"] and "not" not in data["export_note"])
    text = (folders[0] / "swingup.csv").read_text()
    body = [ln for ln in text.splitlines() if not ln.startswith("#")]
    table = np.loadtxt(io.StringIO("\n".join(body[1:])), delimiter=",", ndmin=2)
    assert table.shape[0] == data["table"]["rows"]
    assert text.startswith("# upswing ")  # the shared export header block (upswing.export.header)
    # The frozen-reading study (upswing.verification.swingup_dropout): its field, and the threshold it gives the
    # drive's supervision in the JSON, in swingup.json and in the C header.
    study = data["dropout_study"]
    for key in ("rollouts_each", "sample_rate", "moments", "cases", "longest_tolerated_ms", "stale_reading_ms",
                "stale_reading_samples", "threshold_rule", "summary"):
        assert key in study
    assert [m["name"] for m in study["moments"]] == ["fastest", "hand-over"]
    assert study["rollouts_each"] == 80  # all of them: fewer than one block of 128
    assert all(c["rollouts"] == 80 and len(c["success_interval"]) == 2 for c in study["cases"])
    assert data["supervision"]["stale_reading_ms"] == study["stale_reading_ms"]
    assert study["stale_reading_ms"] == pytest.approx(1000.0 * study["stale_reading_samples"] / 500.0)
    exported = json.loads((folders[0] / "swingup.json").read_text())
    assert exported["supervision"]["stale_reading_samples"] == study["stale_reading_samples"]
    if "swingup_table.h" in names:
        header = (folders[0] / "swingup_table.h").read_text()
        assert f"#define UPSWING_STOP_STALE_READING_SAMPLES {study['stale_reading_samples']}\n" in header
    assert any(f"{study['stale_reading_ms']:g} ms" in h["text"] for h in data["hazards"]
               if h["topic"] == "sensor fault during swing-up")


def test_text_summary_names_verdict_handover_and_budgets(capsys):
    code, out, _ = _run(capsys, CART, "--rollouts", 80)
    assert code == 0
    for phrase in ("VERDICT: PASS", "hand-over", "cart.rail_usage", "hazard notes", "Local codes",
                   "frozen encoder readings", "no fresh encoder reading"):
        assert phrase in out


def test_limit_below_the_sized_minimum_is_reported_infeasible(tmp_path, capsys):
    # `upswing swingup scenarios/acrobot.toml --size` measured 0.472 N m as the smallest elbow peak for the default
    # 3.02 s (every strategy failed at 0.465 N m); 0.15 N m in 2.5 s is far below it.
    text = ACROBOT.read_text().replace("peak = 1.9 ", "peak = 0.15 ").replace("continuous = 0.75 ", "continuous = 0.1 ")
    rig = tmp_path / "weak.toml"
    rig.write_text(text)
    code, out, err = _run(capsys, rig, "--time", 2.5)
    assert code == EXIT_VERDICT
    assert "NO SWING-UP FOUND" in out and "longer --time" in out and "Traceback" not in out + err


def test_size_reports_minimum_peak_and_a_monotone_tradeoff(tmp_path, capsys):
    code, out, _ = _run(capsys, ACROBOT, "--size", "--json", "--export", tmp_path)
    data = json.loads(out)
    assert code == 0 and data["status"] == "sized"
    peak = data["minimum_peak"][0]
    assert data["infeasible_below_factor"] * data["rig_peak"][0] < peak <= data["rig_peak"][0]
    times = np.array(data["tradeoff"]["minimum_time"])
    limits = np.array(data["tradeoff"]["limits"])[:, 0]
    # Issue 5: minimum-time solutions become shorter as the limit grows (a higher limit keeps every lower-limit
    # plan feasible, so the true minimum time is non-increasing; 1e-3 s absorbs the mesh's time resolution).
    assert np.all(np.diff(limits) > 0) and np.all(np.diff(times) <= 1e-3)
    assert (tmp_path / data["export_folder"].split("/")[-1] / "tradeoff.png").stat().st_size > 1000


@pytest.mark.parametrize("argv, needle", [
    (("--time", "-1"), "--time"),
    (("--rollouts", "0"), "--rollouts"),
    (("--seed", "-3"), "--seed"),
    (("--method", "energy", "--export", "out"), "energy law has"),
    (("--method", "energy", "--time", "3"), "--method optimal"),
    (("--size", "--min-time"), "--min-time"),
])
def test_bad_input_is_a_clear_error(capsys, argv, needle):
    code, out, err = _run(capsys, ACROBOT, *argv)
    assert code == EXIT_BAD_INPUT and needle in err and "Traceback" not in err


def test_energy_on_a_fully_actuated_arm_says_why_not(capsys):
    code, _, err = _run(capsys, ROOT / "scenarios" / "arm-2dof.toml", "--method", "energy")
    assert code == EXIT_BAD_INPUT and "optimal" in err


def test_missing_rig_file(tmp_path, capsys):
    code, _, err = _run(capsys, tmp_path / "nope.toml")
    assert code == EXIT_BAD_INPUT and "nope.toml" in err


def test_energy_method_reports_the_contract_fields(capsys):
    # 16 rollouts: the field layout is under test here, the energy law's rates in test_swingup_verify.py.
    code, out, _ = _run(capsys, ACROBOT, "--method", "energy", "--rollouts", 16, "--json")
    data = json.loads(out)
    assert all(key in data for key in CONTRACT)
    assert data["method"] == "energy" and data["status"].startswith("energy law")
    assert data["solve_s"] is None and data["iterations"] is None and data["table"] is None
    assert data["dropout_study"] is None  # not run for the energy law (25 s horizons: see verify_swingup)
    # Exit code follows the verdict: 0 only on a pass (the demo acrobot's energy law is not a reliable swing-up).
    assert code == (0 if data["verdict"] == "pass" else EXIT_VERDICT)
