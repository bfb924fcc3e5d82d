"""Rig drawings: to scale, with the right swept region, along a trajectory, and as an animated GIF."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest
from matplotlib.lines import Line2D
from PIL import Image
from report_testkit import ink_fraction, scenario_rig, swing_trajectory
from scipy.interpolate import interp1d

from upswing.errors import RequestError
from upswing.model.derived import keep_out_radius
from upswing.report import figures_rig


def textbook_points(rig, q):
    """Elbow and tip by hand from the geometry in docs/conventions.md (theta1 from the upward vertical,
    counter-clockwise positive, theta2 relative to link 1; shoulder at (x, 0))."""
    x, th1, th2 = (q if rig.cart is not None else (0.0, *q))
    l1, l2 = rig.link1.length, rig.link2.length
    elbow = np.array([x - l1 * math.sin(th1), l1 * math.cos(th1)])
    tip = elbow + np.array([-l2 * math.sin(th1 + th2), l2 * math.cos(th1 + th2)])
    return np.array([x, 0.0]), elbow, tip


def drawn_links(ax):
    lines = {ln.get_label(): ln for ln in ax.get_lines() if isinstance(ln, Line2D)}
    return (np.column_stack(lines["link 1"].get_data()), np.column_stack(lines["link 2"].get_data()))


@pytest.mark.parametrize("name, q", [("acrobot", (0.4, -1.1)), ("cart-double", (0.12, 2.5, 0.7)),
                                     ("pendubot", (-2.9, 0.3))])
def test_links_are_drawn_where_the_geometry_puts_them(name, q):
    rig = scenario_rig(name)
    fig = figures_rig.rig_figure(rig, np.array(q))
    pivot, elbow, tip = textbook_points(rig, q)
    for ax in fig.axes[:2]:
        link1, link2 = drawn_links(ax)
        # Same formulas evaluated two ways (casadi vs numpy): agreement to rounding, 1e-12 m.
        np.testing.assert_allclose(link1, [pivot, elbow], atol=1e-12)
        np.testing.assert_allclose(link2, [elbow, tip], atol=1e-12)
        assert ax.get_aspect() == 1.0  # to scale: one metre is as long across as up


def distance_to_shoulder_path(rig, points):
    """Distance [m] from each point (n, 2) to the segment the shoulder can occupy (|x| <= travel, y = 0)."""
    travel = rig.cart.travel if rig.cart is not None else 0.0
    nearest = np.column_stack([np.clip(points[:, 0], -travel, travel), np.zeros(len(points))])
    return np.linalg.norm(points - nearest, axis=1)


@pytest.mark.parametrize("name", ["acrobot", "cart-double"])
def test_swept_outline_is_the_edge_of_the_reachable_region(name):
    rig = scenario_rig(name)
    reach = rig.link1.length + rig.link2.length
    outline = figures_rig.swept_outline(rig, reach).T
    # The workspace of a planar two-link arm with unlimited joints is the disc of radius l1 + l2 about the
    # shoulder (Craig, Introduction to Robotics, 3rd ed., 2005, ch. 4; from memory); on a rail, that disc slid
    # along |x| <= travel. Every drawn vertex lies on that edge (1e-12 m: rounding) ...
    np.testing.assert_allclose(distance_to_shoulder_path(rig, outline), reach, atol=1e-12)
    step = np.linalg.norm(np.diff(outline, axis=0), axis=1)
    straight = np.isclose(np.abs(outline[:-1, 1]), reach) & np.isclose(np.abs(outline[1:, 1]), reach)
    assert straight.sum() == (1 if rig.cart is not None else 0)  # a rail adds one straight edge (plus the closing)
    assert step[~straight].max() < 0.02 * reach  # ... arcs dense enough to look round (chords < 2 % of radius) ...
    # ... and random poses confirm the region: no tip beyond it, and some within 2 % of its edge.
    rng = np.random.default_rng(7)
    n = 3000
    th = rng.uniform(-math.pi, math.pi, (n, 2))
    travel = rig.cart.travel if rig.cart is not None else 0.0
    x = rng.uniform(-travel, travel, n)
    tips = np.array([textbook_points(rig, (x[k], *th[k]) if rig.cart is not None else tuple(th[k]))[2]
                     for k in range(n)])
    far = distance_to_shoulder_path(rig, tips)
    assert far.max() <= reach + 1e-12
    assert far.max() >= 0.98 * reach


def test_keep_out_boundary_matches_the_derived_distance():
    rig = scenario_rig("cart-double")
    fig = figures_rig.rig_figure(rig)
    dashed = [p for p in fig.axes[1].patches if p.get_label() == "keep-out boundary"]
    assert len(dashed) == 1
    xy = dashed[0].get_xy()
    assert np.abs(xy[:, 0]).max() == pytest.approx(keep_out_radius(rig), rel=1e-12)


def test_filmstrip_panels_show_the_trajectory_at_evenly_spaced_times():
    rig = scenario_rig("acrobot")
    t, X, _ = swing_trajectory(rig, duration=2.0)
    frames = 6
    fig = figures_rig.filmstrip_figure(rig, t, X, frames=frames, columns=3)
    panels = [ax for ax in fig.axes if any(ln.get_label() == "link 1" for ln in ax.get_lines())]
    assert len(panels) == frames
    reference = interp1d(t, X, axis=0)  # scipy's linear interpolation as the reference
    for ax, time in zip(panels, np.linspace(t[0], t[-1], frames), strict=True):
        q = reference(time)[:2]
        _, elbow, tip = textbook_points(rig, q)
        link1, link2 = drawn_links(ax)
        np.testing.assert_allclose(link1[1], elbow, atol=1e-12)
        np.testing.assert_allclose(link2[1], tip, atol=1e-12)


def test_gif_is_real_time_small_and_moving():
    rig = scenario_rig("acrobot")
    duration = 2.0
    t, X, _ = swing_trajectory(rig, duration=duration)
    data = figures_rig.animation_gif(rig, t, X, hold_end=0.5)
    assert data[:6] == b"GIF89a"  # GIF89a header (GIF89a specification, 1990, section 17)
    assert len(data) < 250_000  # small enough to inline several in one report
    gif = Image.open(io.BytesIO(data))
    assert gif.info.get("loop") == 0  # loops forever
    durations, frames = [], []
    for k in range(gif.n_frames):
        gif.seek(k)
        durations.append(gif.info["duration"])
        frames.append(np.asarray(gif.convert("RGB")))
    # GIF delays are whole hundredths of a second (GIF89a, section 23): the run plus the hold, to one frame.
    assert sum(durations) / 1000.0 == pytest.approx(duration + 0.5, abs=max(durations) / 1000.0 + 1e-9)
    assert all(ink_fraction(f) > 0.02 for f in frames)  # every frame shows the rig (outline alone is ~2.5 %)
    assert np.abs(frames[0].astype(int) - frames[len(frames) // 2]).sum() > 0  # it moves
    background = np.unique(frames[0].reshape(-1, 3), axis=0, return_counts=True)
    assert tuple(background[0][np.argmax(background[1])]) == (255, 255, 255)  # paper white, like the PNG figures


def test_bad_trajectories_are_refused():
    rig = scenario_rig("acrobot")
    t, X, _ = swing_trajectory(rig)
    with pytest.raises(RequestError, match=r"need shape \(N, 4\)"):
        figures_rig.filmstrip_figure(rig, t, X[:, :3])
    with pytest.raises(RequestError, match="N >= 2"):
        figures_rig.animation_gif(rig, t[:5], X)
    with pytest.raises(RequestError, match="increasing"):
        figures_rig.filmstrip_figure(rig, t[::-1], X)
    with pytest.raises(RequestError, match="at least 2 frames"):
        figures_rig.filmstrip_figure(rig, t, X, frames=1)
    with pytest.raises(RequestError, match="needs 2 coordinates"):
        figures_rig.pose_points(rig, np.zeros(3))
