"""``upswing balance``: the JSON contract, fresh export folders, and clear errors for bad [balance] tables."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from balance_helpers import design, rig_text

from upswing.cli import main

CONTRACT = ("K", "K_discrete", "sample_rate", "closed_loop_poles", "margins", "state", "inputs", "units")


def _rig_file(tmp_path, name: str, replace: tuple[str, str] | None = None, balance_extra: str = ""):
    text = rig_text(name)
    if replace is not None:
        assert replace[0] in text
        text = text.replace(replace[0], replace[1])
    if balance_extra:
        text = text.replace("[balance]\n", f"[balance]\n{balance_extra}\n")
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return path


def _run(capsys, *argv):
    code = main(["balance", *map(str, argv)])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_contract(tmp_path, capsys):
    code, out, err = _run(capsys, _rig_file(tmp_path, "pendubot"), "--json")
    assert code == 0
    data = json.loads(out)  # exactly one JSON object on stdout
    for key in CONTRACT:
        assert key in data
    d = design("pendubot")
    np.testing.assert_allclose(data["K"], d.K, rtol=1e-12)
    np.testing.assert_allclose(data["K_discrete"], d.K_discrete, rtol=1e-12)
    assert data["sample_rate"] == 1000.0
    assert data["state"] == ["theta1", "theta2", "theta1_dot", "theta2_dot"] and data["inputs"] == ["shoulder"]
    assert data["units"]["state"] == ["rad", "rad", "rad/s", "rad/s"] and data["units"]["closed_loop_poles"] == "1/s"
    # Complex numbers as [re, im], also when every pole happens to be real (the finite-difference estimator's).
    for poles in (data["closed_loop_poles"], data["closed_loop_poles_discrete"], data["unstable_poles"],
                  data["estimators"]["kalman"]["poles"], data["estimators"]["finite_difference"]["poles"],
                  data["estimators"]["finite_difference"]["closed_loop_poles"]):
        assert poles and all(isinstance(p, list) and len(p) == 2 for p in poles)
    assert set(data["margins"]) == {"continuous", "discrete", "discrete_kalman", "discrete_finite_difference"}
    loop = data["margins"]["discrete_kalman"]["shoulder"]
    for key in ("gain_margin", "phase_margin_deg", "delay_margin_s", "delay_margin_samples", "disk_margin"):
        assert key in loop
    assert data["margins"]["continuous"]["shoulder"]["gain_margin"][1] is None  # unbounded, strict JSON
    for key in ("F", "G", "H", "Cxi", "Dy", "kind", "sample_rate", "poles", "measured"):
        assert key in data["estimators"]["kalman"] and key in data["estimators"]["finite_difference"]
    assert data["cautions"] and "ISO 13850" in data["standards"]
    # The finite-difference loop of this rig keeps under two samples of delay margin: flagged, on stderr too.
    assert any("under 2 samples" in f for f in data["flags"]) and "under 2 samples" in err


def test_export_writes_a_fresh_folder_each_time(tmp_path, capsys):
    rig_path = _rig_file(tmp_path, "cart-double")
    folders = []
    for _ in range(2):
        code, out, _ = _run(capsys, rig_path, "--json", "--export", tmp_path / "out")
        assert code == 0
        folders.append(json.loads(out)["export_folder"])
    assert folders[0] != folders[1]
    for f in folders:
        names = sorted(p.name for p in (tmp_path / "out").joinpath(f.rsplit("/", 1)[-1]).iterdir())
        assert names == ["balance.json", "balance_equilibrium.csv", "balance_gains.csv", "balance_gains.h"]
    assert not [p for p in (tmp_path / "out").iterdir() if p.name.startswith(".")]  # no staging left behind
    code, out, _ = _run(capsys, rig_path, "--export", tmp_path / "out")
    assert code == 0 and "exported to" in out and "Cautions" in out


def test_schedule_option(tmp_path, capsys):
    code, out, _ = _run(capsys, _rig_file(tmp_path, "acrobot"), "--json", "--schedule", "link2.payload=0:0.05:3")
    assert code == 0
    s = json.loads(out)["schedule"]
    assert s["parameter"] == "link2.payload" and s["values"] == [0.0, 0.025, 0.05]
    assert len(s["stabilizing_interval"]) == 3


@pytest.mark.parametrize(("argument", "message"), [
    ("link2.payload=0:0.05", "NAME=LO:HI:COUNT"),
    ("link9.mass=0:1:3", "must be one of"),
    ("link2.mass=0.3:0.1:3", "LO < HI"),
    ("link2.mass=0.1:0.3:1", r"COUNT must be in \[2, 200\]"),
])
def test_bad_schedule_option(tmp_path, capsys, argument, message):
    code, out, err = _run(capsys, _rig_file(tmp_path, "acrobot"), "--schedule", argument)
    assert code == 2 and out == ""
    assert re.search(message, err) and "Traceback" not in err


# Bad [balance] tables: each gets one line naming the file, the key, what is allowed and what was found, exit 2.
BAD_BALANCE = [
    ("wrong q length", ("q = [40.0, 12.0, 1.2, 0.6]", "q = [40.0, 12.0, 1.2]"), "balance.q",
     r"one weight per state \(4 states\); got 3"),
    ("wrong r length", ("r = [2.5]", "r = [2.5, 1.0]"), "balance.r", r"one weight per input \(1 inputs\); got 2"),
    ("negative weight", ("q = [40.0, 12.0, 1.2, 0.6]", "q = [40.0, -12.0, 1.2, 0.6]"), "balance.q[1]",
     r"must be in \[0, inf\) -; got -12"),
    ("r = 0", ("r = [2.5]", "r = [0.0]"), "balance.r[0]", r"must be in \(0, inf\) -; got 0"),
    ("q without r", ("r = [2.5]\n", ""), "balance", "needs both q and r"),
    ("unweighted unstable modes", ("q = [40.0, 12.0, 1.2, 0.6]", "q = [0.0, 0.0, 0.0, 0.0]"), "balance.q",
     "gives zero weight to every state that sees the mode"),
    # Fastest unstable pole 9.29 1/s = 1.48 Hz-equivalent: 2.5 Hz is under the 2x floor (2.96 Hz).
    ("rate below the floor", ("sample_rate = 500.0", "sample_rate = 2.5"), "balance.sample_rate",
     r"at least 2x the fastest unstable pole's rate .* got 2.5 Hz"),
    ("cut-off above Nyquist", ("sample_rate = 500.0", "sample_rate = 500.0\nvelocity_cutoff = 300.0"),
     "balance.velocity_cutoff", r"below half the loop rate, \(0, 250\) Hz; got 300"),
    ("negative process noise", ("sample_rate = 500.0", "sample_rate = 500.0\nprocess_noise = -1.0"),
     "balance.process_noise", r"must be in \(0, inf\) rad/s\^2; got -1"),
    ("cart noise on a fixed base", ("sample_rate = 500.0", "sample_rate = 500.0\ncart_process_noise = 1.0"),
     "balance.cart_process_noise", "has no cart"),
    ("wrong effort noise length", ("sample_rate = 500.0", "sample_rate = 500.0\neffort_noise = [0.1, 0.1]"),
     "balance.effort_noise", r"one value per input \(1 inputs\); got 2"),
    ("negative effort noise", ("sample_rate = 500.0", "sample_rate = 500.0\neffort_noise = [-0.1]"),
     "balance.effort_noise[0]", r"must be in \[0, inf\) N \| N m; got -0.1"),
    ("typo", ("sample_rate = 500.0", "sample_rte = 500.0"), "balance.sample_rte", 'did you mean "sample_rate"'),
]


@pytest.mark.parametrize(("label", "edit", "key", "message"), BAD_BALANCE, ids=[b[0] for b in BAD_BALANCE])
def test_bad_balance_tables(tmp_path, capsys, label, edit, key, message):
    path = _rig_file(tmp_path, "acrobot", replace=edit)
    code, out, err = _run(capsys, path, "--json")
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert f"{path}: {key} " in lines[0]
    assert re.search(message, lines[0]), lines[0]


def test_low_loop_rate_warns(tmp_path, capsys):
    # 10 Hz is above the 2x floor (2.96 Hz) but under the 10x rule of thumb (14.8 Hz; common practice): a warning.
    path = _rig_file(tmp_path, "acrobot", replace=("sample_rate = 500.0", "sample_rate = 10.0"))
    code, out, err = _run(capsys, path, "--json")
    assert code == 0
    data = json.loads(out)
    assert any("below 10x the fastest unstable pole" in w for w in data["warnings"])
    assert "below 10x the fastest unstable pole" in err
    code, out, err = _run(capsys, _rig_file(tmp_path, "acrobot"), "--json")
    assert not any("unstable pole" in w for w in json.loads(out)["warnings"])
