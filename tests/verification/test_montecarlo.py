"""Monte Carlo: Wilson intervals, seeded reproducibility across pool and Dask, bad requests, physical draws."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import SCENARIOS, rig

from upswing.cli import main
from upswing.errors import RequestError, RigFileError
from upswing.model.rig import PARAMETER_NAMES, load_rig, rig_from_table
from upswing.verification.controllers import balance_controller
from upswing.verification.montecarlo import run_monte_carlo, sample_parameters
from upswing.verification.parallel import BLOCK
from upswing.verification.simulate import SimulationSetup
from upswing.verification.stats import wilson_interval


@pytest.mark.parametrize(("successes", "trials", "low", "high"), [
    # From memory: Newcombe (1998), Stat. Med. 17:857, Table I (Wilson score interval, 95 %), four decimals.
    (81, 263, 0.2553, 0.3662), (15, 148, 0.0624, 0.1605), (0, 20, 0.0, 0.1611), (1, 29, 0.0061, 0.1718)])
def test_wilson_interval_published_values(successes, trials, low, high):
    lo, hi = wilson_interval(successes, trials)
    assert lo == pytest.approx(low, abs=5e-5) and hi == pytest.approx(high, abs=5e-5)  # table rounding


def test_wilson_interval_formula():
    # Wilson (1927), J. Am. Stat. Assoc. 22:209, the score interval written out with z = 1.959963984540054
    # (the 97.5 % normal quantile, Abramowitz & Stegun 1964, Table 26.1).
    z = 1.959963984540054
    for s, n in ((0, 1), (7, 9), (999, 1000), (500, 1000), (3, 100000)):
        p = s / n
        centre = (p + z * z / (2 * n)) / (1 + z * z / n)
        half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
        assert wilson_interval(s, n) == pytest.approx((max(0, centre - half), min(1, centre + half)), abs=1e-12)


def test_impossible_requests_are_clear_errors():
    r = rig("pendubot")
    c = balance_controller(r, measurement="state")
    with pytest.raises(RequestError, match="rollouts must be a whole number >= 1; got 0"):
        run_monte_carlo(r, c, 0)
    with pytest.raises(RequestError, match="seed must be a whole number >= 0"):
        run_monte_carlo(r, c, 10, seed=-1)
    with pytest.raises(RequestError, match="at least one trial"):
        wilson_interval(0, 0)


def _table(path):
    import tomllib

    with open(path, "rb") as f:
        return tomllib.load(f)


def test_bad_uncertainty_tables_name_file_and_key():
    t = _table(SCENARIOS / "pendubot.toml")
    t["uncertainty"]["link1"]["mass"] = -0.1
    with pytest.raises(RigFileError, match=r"pendubot.toml: uncertainty\.link1\.mass:? must be in \[0, 0\.9\].*-0\.1"):
        rig_from_table(t, source="pendubot.toml")
    t = _table(SCENARIOS / "pendubot.toml")
    t["uncertainty"]["distribution"] = "gaussian"
    with pytest.raises(RigFileError, match="uncertainty.distribution"):
        rig_from_table(t, source="pendubot.toml")
    t = _table(SCENARIOS / "pendubot.toml")
    t["uncertainty"]["link1"]["mas"] = 0.1
    with pytest.raises(RigFileError, match='did you mean "mass"'):
        rig_from_table(t, source="pendubot.toml")
    # A rig built in code bypasses the loader: sampling still refuses a negative spread.
    from dataclasses import replace

    from upswing.model.rig import Uncertainty

    r = replace(rig("pendubot"), uncertainty=Uncertainty("uniform", (("link1.mass", -0.2),)))
    with pytest.raises(RequestError, match=r"uncertainty.link1.mass must be a relative spread in \[0, 1\)"):
        sample_parameters(r, 10, np.random.default_rng(0))


def test_cli_rejects_zero_rollouts(capsys):
    assert main(["verify", str(SCENARIOS / "pendubot.toml"), "--rollouts", "0"]) == 2
    assert "--rollouts must be at least 1; got 0" in capsys.readouterr().err


def test_draws_stay_physical():
    # A normal spread of 0.9 reaches zero and beyond within 3 sigma: draws must be clipped, com <= length.
    r = rig("pendubot")
    from dataclasses import replace

    from upswing.model.rig import Uncertainty

    wide = tuple((n, 0.9) for n in PARAMETER_NAMES if n.startswith("link"))
    r = replace(r, uncertainty=Uncertainty("normal", wide))
    P, clipped = sample_parameters(r, 5000, np.random.default_rng(1))
    i = {n: k for k, n in enumerate(PARAMETER_NAMES)}
    for link in ("link1", "link2"):
        assert np.all(P[:, i[f"{link}.mass"]] > 0) and np.all(P[:, i[f"{link}.length"]] > 0)
        assert np.all(P[:, i[f"{link}.com"]] <= P[:, i[f"{link}.length"]])
        assert np.all(P[:, i[f"{link}.com"]] > 0) and np.all(P[:, i[f"{link}.inertia"]] >= 0)
    assert clipped  # the clipping really happened, and was counted


def _results_equal(a, b):
    for name in ("ids", "status", "end_time", "settle_time", "final_error", "peak_input", "rms_input",
                 "saturated_time", "peak_speed", "peak_monitors", "hold_error"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name


def test_seeded_runs_are_bit_identical_serial_pool_and_dask():
    # Two blocks (BLOCK + 40 rollouts), short horizon, noisy encoders: serial, a 2-process pool and a Dask
    # LocalCluster must give the very same bits.
    distributed = pytest.importorskip("dask.distributed")
    r = rig("cart-double")
    c = balance_controller(r, measurement="encoders")
    setup = SimulationSetup(horizon=0.3, substeps=1)
    n = BLOCK + 40
    serial = run_monte_carlo(r, c, n, seed=7, setup=setup, workers=1)
    again = run_monte_carlo(r, c, n, seed=7, setup=setup, workers=1)
    pool = run_monte_carlo(r, c, n, seed=7, setup=setup, workers=2)
    _results_equal(serial.results, again.results)
    _results_equal(serial.results, pool.results)
    assert np.array_equal(serial.parameters, pool.parameters)
    other = run_monte_carlo(r, c, n, seed=8, setup=setup, workers=1)
    assert not np.array_equal(serial.results.final_error, other.results.final_error)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) \
            as cluster:
        cluster_run = run_monte_carlo(r, c, n, seed=7, setup=setup, scheduler=cluster.scheduler_address)
    _results_equal(serial.results, cluster_run.results)


def test_cli_json_fields(capsys):
    code = main(["verify", str(SCENARIOS / "arm-2dof.toml"), "--rollouts", "40", "--seed", "3", "--horizon", "2",
                 "--roa-samples", "60", "--json"])
    data = json.loads(capsys.readouterr().out)
    for key in ("rollouts", "seed", "success_rate", "success_interval", "budgets", "region_of_attraction",
                "hazards", "timing", "state", "inputs", "units", "verdict", "reasons", "verdict_rule",
                "required_success", "success_lower_bound", "limited_by", "estimator", "estimator_kind"):
        assert key in data
    # 40 rollouts cannot show the default 95 %: even all held, the Wilson lower end is 40 / (40 + z^2) = 0.912
    # (Wilson, 1927, at p = 1), so the verdict fails on the success-rate bound and says how many runs it takes.
    assert code == 1 and data["verdict"] == "fail" and data["required_success"] == 0.95
    assert "success-rate bound" in data["limited_by"] and "run at least 73" in data["reasons"][0]
    assert data["success_lower_bound"] == data["success_interval"][0] <= 40 / (40 + 1.959963984540054**2) + 1e-12
    assert data["estimator_kind"] == "kalman"
    assert data["rollouts"] == 40 and data["seed"] == 3
    assert set(data["timing"]) >= {"simulate_s", "rollouts", "horizon_s"} and data["timing"]["horizon_s"] == 2.0
    assert all(set(b) >= {"name", "value", "limit", "unit", "ok"} for b in data["budgets"])
    roa = data["region_of_attraction"]
    assert roa["rho"] > 0 and roa["samples"] > 0 and set(roa["axis_catch"]) == set(data["state"])
    low, high = data["success_interval"]
    assert low <= data["success_rate"] <= high
    assert any("ISO 13850" in h["standards"] for h in data["hazards"])
    assert load_rig(SCENARIOS / "arm-2dof.toml").n_states == len(roa["level_set_extents"])


def test_cli_verifies_a_delayed_loop_with_either_estimator_and_the_rig_files_required_success(tmp_path, capsys):
    # A one-sample computation delay designed in, [verification].required_success from the rig file, and the
    # finite-difference estimator on request; --required-success overrides the file.
    text = (SCENARIOS / "arm-2dof.toml").read_text()
    text = text.replace("sample_rate = 500.0", "sample_rate = 500.0\ndelay_samples = 1")
    text += "\n[verification]\nrequired_success = 0.9\n"
    path = tmp_path / "arm-delay.toml"
    path.write_text(text)
    common = ["--rollouts", "30", "--horizon", "2", "--roa-samples", "30", "--json"]
    assert main(["verify", str(path), "--estimator", "finite-difference", *common]) in (0, 1)
    data = json.loads(capsys.readouterr().out)
    assert data["estimator_kind"] == "finite-difference" and "delay 1 samples" in data["controller"]
    assert data["required_success"] == 0.9
    assert data["success_rate"] == 1.0  # small offsets on a delay-aware design: every run holds
    # 30 of 30 shows at most 30 / (30 + z^2) = 0.886 < 0.9: a fail on the bound; at 0.85 the same runs pass.
    assert data["verdict"] == "fail"
    assert main(["verify", str(path), "--required-success", "0.85", *common]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["verdict"] == "pass" and data["required_success"] == 0.85 and data["estimator_kind"] == "kalman"
    assert main(["verify", str(path), "--required-success", "1", *common]) == 2
    assert "--required-success must be a fraction in (0, 1)" in capsys.readouterr().err
