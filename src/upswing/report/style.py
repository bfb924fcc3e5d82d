"""upswing's visual language for figures: plain, printable, readable in greyscale.

Rules every figure follows (the report's CSS uses the same inks):

* Series are told apart by line style, marker and lightness together, never by hue alone, so a greyscale print
  or a reader with a colour-vision deficiency loses nothing. :data:`SERIES` is ordered from darkest to lightest.
* Every axis is labelled with a quantity and its unit in square brackets (:func:`label`).
* One type scale (:data:`FONT_SIZES`) and one font family for every figure.
* Limits are drawn the same way everywhere: a hard limit (peak, end stop, max speed) is a solid mid-grey line with
  the forbidden side hatched; a rating (continuous RMS) is a dashed line; a model line (motor line) is dotted.
* Figures are built on :class:`matplotlib.figure.Figure` with the Agg canvas: no display, no pyplot state.

Every public figure function is wrapped in :func:`styled`, which applies :data:`RC` for the duration of the call,
so no global matplotlib setting is changed.
"""

from __future__ import annotations

import functools
import io
from collections.abc import Callable
from dataclasses import dataclass
from typing import ParamSpec, TypeVar

import matplotlib
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

# Inks (sRGB). The CIE L* lightness of each is noted because that, not the hue, is what survives a greyscale print.
INK = "#1e2126"        # text, axes, link 1 (L* ~ 13)
SLATE = "#24506b"      # second series, link 2 (L* ~ 32)
OCHRE = "#c98a3d"      # third series, cautions (L* ~ 62)
MIST = "#b4bcc5"       # fourth series, reference poses (L* ~ 76)
RULE = "#5c6470"       # limit lines, rails, axes edges (L* ~ 42)
PAPER = "#ffffff"
GRID = "#e4e7eb"
SAND = "#f1e8d8"       # swept / keep-out regions (L* ~ 92)
SHADE = "#dde1e6"      # forbidden regions behind a limit (L* ~ 89)
FAIL = "#7a2e1f"       # failing budget bars, failure cells (L* ~ 28; also hatched, never colour alone)

FONT_FAMILY = "DejaVu Sans"
FONT_SIZES = {"base": 9.0, "small": 8.0, "title": 9.5}
DPI = 110  # raster resolution of report figures: sharp on screen, a few hundred kB per figure at most


@dataclass(frozen=True)
class SeriesStyle:
    """How one data series is drawn: ink, line style, marker (sparse) and line width [pt]."""

    color: str
    linestyle: str | tuple[float, tuple[float, ...]]
    marker: str
    linewidth: float

    def kwargs(self) -> dict[str, object]:
        """Keyword arguments for :meth:`matplotlib.axes.Axes.plot` (markers every ~1/12 of the line)."""
        return {"color": self.color, "linestyle": self.linestyle, "marker": self.marker, "linewidth": self.linewidth,
                "markevery": 0.083, "markersize": 4.0, "markerfacecolor": PAPER, "markeredgewidth": 1.0}


SERIES: tuple[SeriesStyle, ...] = (
    SeriesStyle(INK, "-", "", 1.6),
    SeriesStyle(SLATE, (0, (5.0, 2.0)), "o", 1.5),
    SeriesStyle(OCHRE, (0, (6.0, 1.5, 1.5, 1.5)), "s", 1.6),
    SeriesStyle(MIST, (0, (1.2, 1.2)), "^", 1.8),
)

HARD_LIMIT = {"color": RULE, "linestyle": "-", "linewidth": 1.1}
RATING = {"color": RULE, "linestyle": (0, (4.0, 2.5)), "linewidth": 1.1}
MODEL_LINE = {"color": RULE, "linestyle": (0, (1.0, 1.5)), "linewidth": 1.4}
FORBIDDEN = {"facecolor": SHADE, "edgecolor": "#b9bfc7", "hatch": "////", "linewidth": 0.0}

RC: dict[str, object] = {
    "font.family": FONT_FAMILY,
    "font.size": FONT_SIZES["base"],
    "axes.titlesize": FONT_SIZES["title"],
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": FONT_SIZES["base"],
    "axes.labelcolor": INK,
    "axes.edgecolor": RULE,
    "axes.linewidth": 0.8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "axes.axisbelow": True,
    "axes.facecolor": PAPER,
    "grid.color": GRID,
    "grid.linewidth": 0.7,
    "xtick.labelsize": FONT_SIZES["small"],
    "ytick.labelsize": FONT_SIZES["small"],
    "xtick.color": RULE,
    "ytick.color": RULE,
    "xtick.labelcolor": INK,
    "ytick.labelcolor": INK,
    "legend.fontsize": FONT_SIZES["small"],
    "legend.frameon": False,
    "legend.handlelength": 2.8,
    "figure.facecolor": PAPER,
    "figure.dpi": DPI,
    "figure.titlesize": FONT_SIZES["title"],
    "figure.titleweight": "bold",
    "figure.constrained_layout.use": True,
    "savefig.facecolor": PAPER,
    "hatch.linewidth": 0.6,
    "hatch.color": "#aab1ba",
    "lines.solid_capstyle": "round",
    "text.color": INK,
    "mathtext.default": "regular",
}

P = ParamSpec("P")
R = TypeVar("R")


def styled(function: Callable[P, R]) -> Callable[P, R]:
    """Run ``function`` with :data:`RC` applied (matplotlib reads most settings when an artist is created)."""

    @functools.wraps(function)
    def wrapper(*args: P.args, **kwargs: P.kwargs) -> R:
        with matplotlib.rc_context(RC):
            return function(*args, **kwargs)

    return wrapper


def new_figure(width: float, height: float) -> Figure:
    """A blank figure of ``width`` x ``height`` inches on the Agg canvas (no display needed).

    Call it inside a :func:`styled` function so the figure picks up :data:`RC`.
    """
    figure = Figure(figsize=(width, height))
    FigureCanvasAgg(figure)
    return figure


def label(quantity: str, unit: str = "") -> str:
    """Axis label of the one shape used everywhere: ``"quantity [unit]"`` (``"quantity [-]"`` when unitless)."""
    return f"{quantity} [{unit or '-'}]"


def series(index: int) -> dict[str, object]:
    """Plot keyword arguments of series ``index`` (wraps around after :data:`SERIES` is used up)."""
    return SERIES[index % len(SERIES)].kwargs()


def shade_beyond(ax: Axes, low: float | None, high: float | None, *, horizontal: bool = True) -> None:
    """Hatch the forbidden side(s) of a hard limit: below ``low`` and above ``high`` (either may be None).

    ``horizontal=True`` shades bands in y (limits on the value axis); ``False`` shades bands in x.
    """
    span = ax.axhspan if horizontal else ax.axvspan
    big = 1e9  # far beyond any plotted value; the axis limits are restored afterwards
    limits = ax.get_ylim() if horizontal else ax.get_xlim()
    if low is not None:
        span(-big, low, zorder=0, **FORBIDDEN)
    if high is not None:
        span(high, big, zorder=0, **FORBIDDEN)
    (ax.set_ylim if horizontal else ax.set_xlim)(limits)


@styled
def png_bytes(figure: Figure, *, dpi: int = DPI) -> bytes:
    """Render ``figure`` to PNG bytes (no timestamp or software metadata, so equal figures give equal bytes)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()
