"""Every plot turned into pixels is not blank; the check itself fails on an empty axes frame."""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image
from report_testkit import MIN_INK, budget, ink_fraction, pixels, scenario_rig, swing_trajectory

from upswing.report import figures_modes, figures_rig, figures_time, style


@style.styled
def _empty_axes():
    fig = style.new_figure(7.2, 2.9)
    ax = fig.add_subplot()
    ax.set_xlabel(style.label("time", "s"))
    ax.set_ylabel(style.label("angle", "deg"))
    ax.set_title("nothing plotted")
    return fig


def test_the_blank_check_can_fail():
    assert ink_fraction(pixels(style.png_bytes(_empty_axes()))) < MIN_INK
    assert ink_fraction(np.full((50, 80, 3), 255, dtype=np.uint8)) == 0.0


def _builders():
    acrobot, cart = scenario_rig("acrobot"), scenario_rig("cart-double")
    grid = np.linspace(-1.0, 1.0, 31)
    return {
        "rig (fixed)": lambda: figures_rig.rig_figure(acrobot),
        "rig (cart)": lambda: figures_rig.rig_figure(cart),
        "filmstrip": lambda: figures_rig.filmstrip_figure(cart, *swing_trajectory(cart)[:2]),
        "eigenvalue map": lambda: figures_modes.eigenvalue_map_figure(acrobot),
        "mode shapes": lambda: figures_modes.mode_shapes_figure(cart),
        "time history": lambda: figures_time.time_history_figure(acrobot, *swing_trajectory(acrobot)),
        "torque-speed": lambda: figures_time.torque_speed_figure(acrobot, *swing_trajectory(acrobot)[1:]),
        "histogram": lambda: figures_time.histogram_figure(np.random.default_rng(0).normal(1.0, 0.2, 400),
                                                           quantity="peak torque", unit="N m", limit=1.5),
        "budget bars": lambda: figures_time.budget_bars_figure([budget("rail", 0.3, 0.41, "m", True),
                                                                budget("RMS", 0.8, 0.75, "N m", False)]),
        "slice map": lambda: figures_time.slice_map_figure(grid, grid, np.add.outer(grid**2, grid**2) < 0.4,
                                                           x_quantity="a", x_unit="rad", y_quantity="b",
                                                           y_unit="rad/s"),
    }


@pytest.mark.parametrize("name", list(_builders()))
def test_figure_is_not_blank(name):
    rgb = pixels(style.png_bytes(_builders()[name]()))
    assert rgb.shape[0] > 150 and rgb.shape[1] > 500  # report-sized at style.DPI (7.2 in wide, most)
    assert ink_fraction(rgb) > MIN_INK, name


def test_every_gif_frame_is_not_blank():
    rig = scenario_rig("cart-double")
    t, X, _ = swing_trajectory(rig, duration=1.0)
    gif = Image.open(io.BytesIO(figures_rig.animation_gif(rig, t, X, hold_end=0.0)))
    for k in range(gif.n_frames):
        gif.seek(k)
        # A GIF frame has no axes or labels, only the rig: the rail and swept outline alone cover ~3 %.
        assert ink_fraction(np.asarray(gif.convert("RGB"))) > 0.03, k
