"""Motor sizing and the limit–time trade-off.

Facts used (common practice in optimal control): a trajectory within an input limit is within every higher limit,
so the minimum swing-up time cannot grow with the limit, and feasibility at a fixed time is monotone in the limit
(what makes bisection valid).
"""

from __future__ import annotations

from pathlib import Path

import matplotlib
import numpy as np
import pytest

from upswing.errors import RequestError
from upswing.model.rig import load_rig
from upswing.synthesis.swingup import plan_swingup, plot_tradeoff, size_motor, tradeoff_curve

matplotlib.use("Agg")

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def _rig(name):
    return load_rig(SCENARIOS / f"{name}.toml")


@pytest.fixture(scope="module")
def curve():
    return tradeoff_curve(_rig("acrobot"), [0.6, 1.9, 1.0], intervals=40)


def test_minimum_time_shrinks_as_the_limit_grows(curve):
    assert np.all(curve.success)
    np.testing.assert_allclose(curve.limits[:, 0], [0.6, 1.0, 1.9])  # sorted by limit
    # Non-increasing by the fact above; strictly decreasing here because every plan uses its full limit
    # (minimum time is bang-bang at the limit), so extra effort buys time. A 1 % step is far above the
    # solver's tolerance on T.
    assert np.all(np.diff(curve.minimum_time) < -0.01 * curve.minimum_time[:-1])
    for plan, row in zip(curve.plans, curve.limits, strict=True):
        assert plan.minimum_time and plan.duration == pytest.approx(plan.cost)
        assert plan.peak_input[0] == pytest.approx(row[0], rel=1e-3)  # it does use the whole limit


def test_tradeoff_plot_shows_the_numbers(curve):
    ax = plot_tradeoff(curve)
    x, y = ax.lines[0].get_data()
    np.testing.assert_allclose(x, curve.limits[:, 0])
    np.testing.assert_allclose(y, curve.minimum_time)
    assert "elbow" in ax.get_xlabel() and "[s]" in ax.get_ylabel()


def test_a_limit_below_the_sized_minimum_is_reported_infeasible():
    rig = _rig("pendubot")
    duration, intervals = 2.0, 30
    sizing = size_motor(rig, duration=duration, intervals=intervals, relative_tolerance=0.1, restarts=1)
    assert sizing.found
    assert sizing.plan is not None and sizing.plan.success
    assert 0 < sizing.infeasible_below < sizing.minimum_factor <= sizing.infeasible_below * 1.1
    np.testing.assert_allclose(sizing.minimum_peak, sizing.minimum_factor * rig.peak_inputs)
    assert np.all(sizing.plan.peak_input <= sizing.minimum_peak * (1 + 1e-6))
    # The sized plan really is a swing-up in that time within that peak.
    assert sizing.plan.duration == pytest.approx(duration)
    below = plan_swingup(rig, duration=duration, intervals=intervals, peak=0.8 * sizing.minimum_peak, restarts=1)
    assert not below.success
    assert below.status == "no swing-up found"
    tried = {a.strategy.split(" ")[0] for a in below.attempts}
    assert {"cold", "restart", "energy", "continuation"} <= tried  # every strategy, listed as evidence
    assert "Tried" in below.message


def test_sizing_refuses_impossible_requests():
    with pytest.raises(RequestError, match="duration must be > 0"):
        size_motor(_rig("acrobot"), duration=0.0)
    with pytest.raises(RequestError, match="limits must be"):
        tradeoff_curve(_rig("acrobot"), [[1.0, 2.0]])
    with pytest.raises(RequestError, match="peak cannot be passed"):
        size_motor(_rig("acrobot"), duration=2.0, peak=1.0)
