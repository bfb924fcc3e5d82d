"""Time histories, envelopes, histograms, budget bars and slice maps against reference computations."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from matplotlib.patches import Rectangle
from report_testkit import budget, scenario_rig, swing_trajectory
from scipy.integrate import cumulative_trapezoid

from upswing.errors import RequestError
from upswing.model.rig import Actuator
from upswing.report import figures_time


def test_running_rms_of_a_sine_is_its_amplitude_over_root_two():
    t = np.linspace(0.0, 2.0, 4001)  # four whole periods of a 2 Hz sine
    u = 1.7 * np.sin(2 * math.pi * 2.0 * t)
    # RMS of A sin over whole periods = A / sqrt(2) (textbook). Trapezoid error with h = 5e-4 s is ~1e-7; 1e-6.
    assert figures_time.running_rms(t, u)[-1] == pytest.approx(1.7 / math.sqrt(2), rel=1e-6)


def test_running_rms_matches_scipy_cumulative_trapezoid():
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.uniform(0.001, 0.01, 300))
    u = rng.normal(size=300)
    reference = np.sqrt(cumulative_trapezoid(u**2, t) / (t[1:] - t[0]))  # scipy as the reference integrator
    np.testing.assert_allclose(figures_time.running_rms(t, u)[1:], reference, rtol=1e-12)  # same sums: rounding


def test_motor_limits_follow_the_linear_torque_speed_line():
    # A DC motor's available torque falls linearly from stall at rest to zero at no-load speed when driving
    # (e.g. Hughes & Drury, Electric Motors and Drives, 4th ed., 2013, ch. 3; from memory); the drive's current
    # limit caps it at peak.
    a = Actuator("elbow", peak=1.9, continuous=0.75, max_speed=26.0, stall=2.6, no_load_speed=38.0)
    low, high = figures_time.motor_limits(a, np.array([0.0, 19.0, 38.0, 50.0, -19.0]))
    np.testing.assert_allclose(high, [1.9, 1.3, 0.0, 0.0, 1.9], atol=1e-12)  # 2.6 (1 - 19/38) = 1.3
    np.testing.assert_allclose(low, [-1.9, -1.9, -1.9, -1.9, -1.3], atol=1e-12)  # mirror image when reversing
    plain = Actuator("cart", peak=30.0, continuous=12.0, max_speed=3.0)
    low, high = figures_time.motor_limits(plain, np.array([0.0, 2.9]))
    np.testing.assert_array_equal(high, [30.0, 30.0])
    np.testing.assert_array_equal(low, [-30.0, -30.0])


@pytest.mark.parametrize("name", ["acrobot", "cart-double", "arm-2dof"])
def test_time_history_draws_the_data_and_the_envelope(name):
    rig = scenario_rig(name)
    t, X, U = swing_trajectory(rig)
    fig = figures_time.time_history_figure(rig, t, X, U)
    axes = [ax for ax in fig.axes if ax.get_ylabel()]
    assert len(axes) == 2 + 2 * (rig.cart is not None) + rig.n_inputs
    angles = {ln.get_label(): ln.get_ydata() for ln in axes[0].get_lines()}
    np.testing.assert_allclose(angles["theta1"], np.degrees(X[:, rig.state_names.index("theta1")]), rtol=1e-15)
    for ax, actuator, u in zip(axes[-rig.n_inputs:], rig.actuators, U.T, strict=True):
        levels = {round(float(ln.get_ydata()[0]), 12) for ln in ax.get_lines() if len(set(ln.get_ydata())) == 1}
        assert {actuator.peak, -actuator.peak, actuator.continuous, -actuator.continuous} <= levels
        rms = math.sqrt(np.trapezoid(u**2, t) / (t[-1] - t[0]))  # numpy's trapezoid as the reference
        note = next(tx.get_text() for tx in ax.texts if tx.get_text().startswith("RMS over the run"))
        assert float(re.search(r"run ([0-9.e+-]+)", note).group(1)) == pytest.approx(rms, rel=5e-3)  # 3 digits


def test_time_history_refuses_mismatched_arrays():
    rig = scenario_rig("acrobot")
    t, X, U = swing_trajectory(rig)
    with pytest.raises(RequestError, match=r"X \(N, 4\)"):
        figures_time.time_history_figure(rig, t, X[:-1], U)


def test_histogram_counts_match_numpy():
    rng = np.random.default_rng(11)
    values = rng.gamma(4.0, 0.3, 500)
    fig = figures_time.histogram_figure(values, quantity="peak torque", unit="N m", limit=1.9, bins=20)
    ax = fig.axes[0]
    bars = [p for p in ax.patches if isinstance(p, Rectangle) and p.get_height() > 0 and p.get_hatch() is None]
    counts, _ = np.histogram(values, bins=20)  # numpy as the reference counter
    assert sorted(round(b.get_height()) for b in bars) == sorted(int(c) for c in counts if c > 0)
    note = next(t.get_text() for t in ax.texts if t.get_text().startswith("n = "))
    assert f"{int(np.sum(values > 1.9))} beyond the limit" in note


def test_budget_bars_show_usage_and_mark_failures_in_words_and_hatching():
    budgets = [budget("peak torque", 1.62, 1.9, "N m", True), budget("RMS torque", 0.81, 0.75, "N m", False)]
    fig = figures_time.budget_bars_figure(budgets)
    ax = fig.axes[0]
    bars = sorted((p for p in ax.patches if isinstance(p, Rectangle) and p.get_height() == pytest.approx(0.62)),
                  key=lambda p: -p.get_y())
    np.testing.assert_allclose([b.get_width() for b in bars], [100 * 1.62 / 1.9, 100 * 0.81 / 0.75], rtol=1e-12)
    assert bars[0].get_hatch() is None and bars[1].get_hatch() == "xx"
    assert sum("FAILS" in t.get_text() for t in ax.texts) == 1


def test_slice_map_boundary_follows_a_known_disc():
    x = np.linspace(-1.0, 1.0, 81)
    y = np.linspace(-1.0, 1.0, 81)
    radius = 0.6
    inside = np.add.outer(y**2, x**2) < radius**2
    fig = figures_time.slice_map_figure(x, y, inside, x_quantity="a", x_unit="rad", y_quantity="b", y_unit="rad/s")
    ax = fig.axes[0]
    boundary = [c for c in ax.collections if len(c.get_paths()) and c.get_linewidth()[0] == pytest.approx(1.6)]
    vertices = np.vstack([p.vertices for c in boundary for p in c.get_paths()])
    # The 50 % contour of a sampled disc indicator lies within one grid step (0.025) of the true circle.
    np.testing.assert_allclose(np.hypot(vertices[:, 0], vertices[:, 1]), radius, atol=x[1] - x[0])


def test_ellipse_curve_lies_on_the_level_set():
    P = np.array([[2.0, 0.3], [0.3, 0.5]])
    curve = figures_time.ellipse_curve("hand-over", P, 0.7, center=(0.1, -0.2))
    z = np.column_stack([curve.x - 0.1, curve.y + 0.2])
    np.testing.assert_allclose(np.einsum("ni,ij,nj->n", z, P, z), 0.7, rtol=1e-12)  # definition of the level set
    with pytest.raises(RequestError, match="positive definite"):
        figures_time.ellipse_curve("bad", np.array([[1.0, 0.0], [0.0, -1.0]]), 1.0)
