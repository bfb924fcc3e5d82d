"""The figure style: greyscale-distinct series, one type scale, labelled axes, no global side effects."""

from __future__ import annotations

import re

import matplotlib
import numpy as np
import pytest
from matplotlib.colors import to_rgb
from report_testkit import budget, scenario_rig, swing_trajectory

from upswing.report import figures_modes, figures_rig, figures_time, style


def cie_lightness(color: str) -> float:
    """CIE 1976 L* of an sRGB colour: sRGB decoding per IEC 61966-2-1:1999, Y from the Rec. 709 primaries
    (0.2126, 0.7152, 0.0722), L* = 116 f(Y) - 16 per CIE 15:2004."""
    rgb = np.array(to_rgb(color))
    linear = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    y = float(linear @ np.array([0.2126, 0.7152, 0.0722]))
    return 116.0 * np.cbrt(y) - 16.0 if y > (6 / 29) ** 3 else y * (29 / 3) ** 3


def test_series_differ_in_lightness_style_and_marker():
    lightness = [cie_lightness(s.color) for s in style.SERIES]
    # Series must survive a greyscale print: each step at least 9 L* units. A just-noticeable difference is about
    # 1-2.3 units (Sharma, Digital Color Imaging Handbook, 2003; from memory); 9 keeps thin lines apart on paper.
    assert all(b - a >= 9.0 for a, b in zip(lightness, lightness[1:], strict=False)), lightness
    assert len({str(s.linestyle) for s in style.SERIES}) == len(style.SERIES)
    assert len({s.marker for s in style.SERIES}) == len(style.SERIES)


def test_styled_leaves_global_settings_alone():
    before = dict(matplotlib.rcParams)
    figures_time.budget_bars_figure([budget("rail", 0.1, 0.4, "m", True)])
    assert dict(matplotlib.rcParams) == before


def test_png_bytes_are_reproducible():
    rig = scenario_rig("pendubot")
    first = style.png_bytes(figures_rig.rig_figure(rig))
    second = style.png_bytes(figures_rig.rig_figure(rig))
    assert first == second  # no timestamp or version in the file: equal figures, equal bytes
    assert first.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (ISO/IEC 15948:2004, 5.2)


def _all_figures():
    acrobot, cart = scenario_rig("acrobot"), scenario_rig("cart-double")
    t, X, U = swing_trajectory(acrobot)
    tc, Xc, Uc = swing_trajectory(cart)
    x = np.linspace(-1, 1, 21)
    return {
        "rig": figures_rig.rig_figure(cart),
        "eigenvalues": figures_modes.eigenvalue_map_figure(acrobot),
        "mode shapes": figures_modes.mode_shapes_figure(cart),
        "time history": figures_time.time_history_figure(cart, tc, Xc, Uc),
        "torque-speed": figures_time.torque_speed_figure(acrobot, X, U),
        "histogram": figures_time.histogram_figure(np.arange(50.0), quantity="peak torque", unit="N m", limit=40),
        "budgets": figures_time.budget_bars_figure([budget("rail", 0.1, 0.4, "m", True)]),
        "slice": figures_time.slice_map_figure(x, x, np.add.outer(x**2, x**2) < 0.5, x_quantity="theta1 error",
                                               x_unit="rad", y_quantity="theta1_dot", y_unit="rad/s"),
    }


def test_every_labelled_axis_names_its_unit_and_uses_the_type_scale():
    unit = re.compile(r"^.+ \[[^\]]+\]$")  # "quantity [unit]" (style.label)
    for name, fig in _all_figures().items():
        labels = [lab for ax in fig.axes for lab in (ax.get_xlabel(), ax.get_ylabel()) if lab]
        assert labels, f"{name}: no axis labels at all"
        for lab in labels:
            assert unit.match(lab), f"{name}: axis label {lab!r} has no [unit]"
        fig.canvas.draw()
        sizes = {round(t.get_fontsize(), 2) for ax in fig.axes for t in
                 [ax.xaxis.label, ax.yaxis.label, *ax.get_xticklabels(), *ax.get_yticklabels()]
                 if t.get_text()}
        assert sizes <= set(style.FONT_SIZES.values()), f"{name}: font sizes {sizes} outside the type scale"


@pytest.mark.parametrize("quantity, unit, expected", [("time", "s", "time [s]"), ("ratio", "", "ratio [-]")])
def test_label_shape(quantity, unit, expected):
    assert style.label(quantity, unit) == expected
