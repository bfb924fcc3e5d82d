"""Modes figures: the plotted eigenvalues and mode shapes against independent computations."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import scipy.linalg
from report_testkit import scenario_rig

from upswing.model.equilibria import EQUILIBRIA
from upswing.model.linearize import linearize
from upswing.report import figures_modes


def plotted_eigenvalues(ax) -> np.ndarray:
    points = [x + 1j * y for ln in ax.get_lines() if ln.get_linestyle() == "None" and ln.get_marker() in ("o", "^")
              for x, y in zip(*ln.get_data(), strict=True)]
    return np.sort_complex(np.array(points))


@pytest.mark.parametrize("name", ["acrobot", "cart-double"])
def test_eigenvalue_map_plots_exactly_the_eigenvalues_of_each_linear_model(name):
    rig = scenario_rig(name)
    fig = figures_modes.eigenvalue_map_figure(rig)
    panels = [ax for ax in fig.axes if ax.get_title(loc="left")]
    assert [ax.get_title(loc="left").split(":")[0] for ax in panels] == list(EQUILIBRIA)
    for ax, equilibrium in zip(panels, EQUILIBRIA, strict=True):
        reference = np.sort_complex(scipy.linalg.eigvals(linearize(rig, equilibrium).A))  # LAPACK via scipy
        # numpy and scipy call the same LAPACK routine on the same matrix: agreement to ~1e-12 relative; 1e-9
        # leaves room for a different eigenvalue ordering of near-repeated roots.
        np.testing.assert_allclose(plotted_eigenvalues(ax), reference, rtol=1e-9, atol=1e-9)
        unstable = reference[reference.real > 1e-9]
        labels = [t.get_text() for t in ax.texts if t.get_text().startswith("doubles in")]
        expected = sorted(f"doubles in {1000 * math.log(2) / z.real:.0f} ms" for z in unstable)
        assert sorted(labels) == expected  # doubling time ln 2 / Re(lambda) (exponential growth, common practice)


def compound_pendulum_modes(rig) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies [Hz] and absolute-angle mode shapes of a fixed-base double compound pendulum about hanging.

    Linearizing the Lagrangian in absolute angles phi1, phi2 measured from hanging gives (standard derivation,
    e.g. Meirovitch, Elements of Vibration Analysis, 2nd ed., 1986, double pendulum example; from memory)
        M = [[I1 + m1 lc1^2 + m2 l1^2, m2 l1 lc2], [m2 l1 lc2, I2 + m2 lc2^2]],
        K = g diag(m1 lc1 + m2 l1, m2 lc2),
    and K v = w^2 M v.
    """
    a, b, g = rig.link1, rig.link2, rig.gravity
    M = np.array([[a.inertia + a.mass * a.com**2 + b.mass * a.length**2, b.mass * a.length * b.com],
                  [b.mass * a.length * b.com, b.inertia + b.mass * b.com**2]])
    K = g * np.diag([a.mass * a.com + b.mass * a.length, b.mass * b.com])
    w2, V = scipy.linalg.eigh(K, M)
    return np.sqrt(w2) / (2 * math.pi), V


@pytest.mark.parametrize("name", ["acrobot", "pendubot", "arm-2dof"])
def test_mode_shapes_are_drawn_with_the_textbook_frequencies_and_swing_ratios(name):
    rig = scenario_rig(name)
    freq, V = compound_pendulum_modes(rig)
    fig = figures_modes.mode_shapes_figure(rig)
    panels = [ax for ax in fig.axes if ax.get_title(loc="left")]
    assert len(panels) == 2
    for k, ax in enumerate(panels):
        shown = float(re.search(r"([0-9.]+) Hz", ax.get_title(loc="left")).group(1))
        assert shown == pytest.approx(freq[k], rel=5e-3)  # title rounds to 3 significant digits
        link = {ln.get_label(): np.column_stack(ln.get_data()) for ln in ax.get_lines()}
        # Deviation of each drawn link from straight down: atan2(dx, -dy).
        dev = [math.atan2(*(seg[1] - seg[0]) * np.array([1.0, -1.0])) for seg in (link["link 1"], link["link 2"])]
        # Pose drawn = hanging + scaled shape, so the ratio of link deviations is the shape's ratio exactly;
        # 1e-6 covers the two eigen-solvers' rounding.
        assert dev[1] / dev[0] == pytest.approx(V[1, k] / V[0, k], rel=1e-6)
        assert max(abs(d) for d in dev) == pytest.approx(figures_modes.DISPLAY_ANGLE, rel=1e-9)


def test_cart_rig_shows_the_free_rolling_mode():
    fig = figures_modes.mode_shapes_figure(scenario_rig("cart-double"))
    titles = [ax.get_title(loc="left") for ax in fig.axes if ax.get_title(loc="left")]
    assert len(titles) == 3  # a free cart adds a rigid-body mode at 0 Hz to the two pendulum modes
    assert "0 Hz" in titles[0]
