"""The rig drawn to scale: one pose with its swept region, a filmstrip along a trajectory, an animated GIF.

All drawings are front views in metres with equal axis scales (x to the right, y up, the shoulder axis at height 0),
the geometry taken from the compiled model's ``points(q, p)`` so a drawing can never disagree with the equations of
motion. Two regions are drawn around the rig:

* the **swept region**: every point a link can reach, i.e. the circle of radius l1 + l2 about the shoulder on a fixed
  base, or that circle slid along the rail (|x| <= travel) on a cart rig;
* the **keep-out boundary**: the swept region grown by the clearance margin of
  :func:`upswing.model.derived.keep_out_radius` (common practice, to be replaced by the ISO 13857 distances of the
  real guard layout).
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import numpy as np
from matplotlib.animation import PillowWriter
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Polygon, Rectangle
from PIL import Image

from upswing.errors import RequestError
from upswing.model.derived import derived_quantities, keep_out_radius
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import Rig
from upswing.report import style

KEEP_OUT_MARGIN = 0.5  # m, the clearance of upswing.model.derived.keep_out_radius's default


# ---------------------------------------------------------------------------------------------------------- geometry
def pose_points(rig: Rig, q: np.ndarray) -> np.ndarray:
    """Pivot, link-1 centre of mass, elbow, link-2 centre of mass and tip at configuration ``q``.

    Parameters
    ----------
    rig : Rig
    q : ndarray, shape (n_q,)
        Generalized coordinates ([theta1, theta2] or [x, theta1, theta2]) [rad, m].

    Returns
    -------
    ndarray, shape (2, 5)
        Columns pivot, com1, elbow, com2, tip; rows x, y [m].
    """
    q = np.asarray(q, dtype=float)
    n_q = rig.n_states // 2
    if q.shape != (n_q,):
        raise RequestError(f"a pose of rig {rig.name!r} needs {n_q} coordinates; got shape {q.shape}")
    return np.array(model_for(rig).points(q, rig.parameter_vector()))


def cart_size(rig: Rig) -> tuple[float, float]:
    """Width and height of the drawn cart body [m] (schematic: the rig file does not give its size)."""
    reach = rig.link1.length + rig.link2.length
    width = float(np.clip(0.22 * reach, 0.06, 0.16))
    return width, 0.5 * width


def swept_outline(rig: Rig, radius: float, n: int = 181) -> np.ndarray:
    """Outline of the points within ``radius`` of the shoulder's path: a circle, or a stadium on a rail.

    Returns
    -------
    ndarray, shape (2, m)
        Closed polygon (x, y) [m].
    """
    travel = rig.cart.travel if rig.cart is not None else 0.0
    if travel == 0.0:
        angle = np.linspace(-math.pi / 2, 3 * math.pi / 2, 2 * n - 1)[:-1]
        return radius * np.vstack([np.cos(angle), np.sin(angle)])
    right = np.linspace(-math.pi / 2, math.pi / 2, n)
    left = right + math.pi
    xs = np.concatenate([travel + radius * np.cos(right), -travel + radius * np.cos(left)])
    ys = np.concatenate([radius * np.sin(right), radius * np.sin(left)])
    return np.vstack([xs, ys])


def scene_limits(rig: Rig, *, include_keep_out: bool, cart_span: tuple[float, float] = (0.0, 0.0)
                 ) -> tuple[tuple[float, float], tuple[float, float]]:
    """x and y limits [m] that show the whole swept region (and the keep-out boundary when asked).

    ``cart_span`` (lowest, highest cart position [m]) widens the view when a trajectory runs past the end stops,
    so a failed run is drawn, not clipped.
    """
    radius = (rig.link1.length + rig.link2.length) + (KEEP_OUT_MARGIN if include_keep_out else 0.0)
    travel = rig.cart.travel if rig.cart is not None else 0.0
    pad = 0.06 * radius
    return ((min(-travel, cart_span[0]) - radius - pad, max(travel, cart_span[1]) + radius + pad),
            (-radius - pad, radius + pad))


def _cart_span(rig: Rig, X: np.ndarray) -> tuple[float, float]:
    if rig.cart is None:
        return (0.0, 0.0)
    x = np.asarray(X, dtype=float)[:, 0]
    return (float(x.min()), float(x.max()))


# ---------------------------------------------------------------------------------------------------------- drawing
# Patches are added with add_artist, not add_patch: every scene sets its limits explicitly, and skipping the
# data-limit bookkeeping makes animation frames several times cheaper.
def draw_regions(ax: Axes, rig: Rig, *, keep_out: bool = True, fill: bool = True) -> None:
    """Swept region (filled, or outlined only when ``fill=False``) and, when ``keep_out``, the keep-out boundary."""
    reach = derived_quantities(rig).reach
    swept = swept_outline(rig, reach)
    ax.add_artist(Polygon(swept.T, closed=True, facecolor=style.SAND if fill else "none", edgecolor=style.OCHRE,
                         linewidth=0.9, zorder=0.5, label="swept by the links"))
    if keep_out:
        outer = swept_outline(rig, reach + KEEP_OUT_MARGIN)
        ax.add_artist(Polygon(outer.T, closed=True, fill=False, edgecolor=style.OCHRE, linewidth=1.3,
                             linestyle=(0, (6.0, 3.0)), zorder=0.6, label="keep-out boundary"))


def _radius_arrow(ax: Axes, start: np.ndarray, radius: float, degrees: float, text: str) -> None:
    """An arrow from ``start`` out to ``radius`` [m] at ``degrees`` with ``text`` beside its middle."""
    angle = math.radians(degrees)
    end = start + radius * np.array([math.cos(angle), math.sin(angle)])
    ax.annotate("", xy=end, xytext=start, zorder=5,
                arrowprops={"arrowstyle": "-|>", "color": style.INK, "linewidth": 0.9, "shrinkA": 0, "shrinkB": 0,
                            "mutation_scale": 9})
    mid = 0.55 * (start + end)
    ax.text(mid[0], mid[1], text, fontsize=style.FONT_SIZES["small"], ha="left", va="top", zorder=6,
            bbox={"boxstyle": "square,pad=0.2", "facecolor": style.PAPER, "edgecolor": "none", "alpha": 0.9})


def draw_mount(ax: Axes, rig: Rig) -> None:
    """What the rig stands on: the shoulder's bearing plate, or the rail with its end stops."""
    if rig.cart is None:
        side = 0.14 * (rig.link1.length + rig.link2.length)
        ax.add_artist(Rectangle((-side / 2, -side / 2), side, side, facecolor=style.SHADE, edgecolor=style.RULE,
                               linewidth=0.8, hatch="xxx", zorder=1))
        return
    width, height = cart_size(rig)
    rail_y = -height - 0.012
    stop = rig.cart.travel + width / 2  # the cart body touches a stop when its pivot is at |x| = travel
    block = 0.02
    ax.plot([-stop - block, stop + block], [rail_y, rail_y], color=style.RULE, linewidth=2.4, zorder=1,
            solid_capstyle="butt")
    for left in (-stop - block, stop):
        ax.add_artist(Rectangle((left, rail_y), block, 1.1 * height, facecolor=style.INK, edgecolor=style.INK,
                               zorder=1.2))


def draw_cart(ax: Axes, rig: Rig, cart_x: float, *, ghost: bool = False) -> None:
    """The cart body with its pivot at ``cart_x`` [m] (schematic size, see :func:`cart_size`); ``ghost`` draws
    the faint outline of a reference pose."""
    width, height = cart_size(rig)
    powered = "cart" in rig.actuated and not ghost  # a driven cart carries the motor mark's fill
    ax.add_artist(Rectangle((cart_x - width / 2, -height), width, 1.25 * height,
                            facecolor=style.OCHRE if powered else (style.PAPER if ghost else style.SHADE),
                            edgecolor=style.MIST if ghost else style.INK, linewidth=1.0, zorder=1.4 if ghost else 1.5))


def draw_pose(ax: Axes, rig: Rig, q: np.ndarray, *, ghost: bool = False, marks: bool = True) -> np.ndarray:
    """Draw both links at configuration ``q``; returns the (2, 5) points drawn.

    Link 1 is the darker ink, link 2 the lighter; joints are open circles, centres of mass small white dots on
    the links (``marks``), a powered joint carries a square motor mark. ``ghost=True`` draws a faint outline
    (reference poses).
    """
    pts = pose_points(rig, q)
    scale = rig.link1.length + rig.link2.length
    width = 5.5 if scale > 0.3 else 4.5
    if ghost:
        ax.plot(pts[0, [0, 2, 4]], pts[1, [0, 2, 4]], color=style.MIST, linewidth=width * 0.6,
                solid_capstyle="round", zorder=2, alpha=0.9)
        return pts
    if rig.cart is not None:
        draw_cart(ax, rig, float(q[0]))
    ax.plot(pts[0, [0, 2]], pts[1, [0, 2]], color=style.INK, linewidth=width, solid_capstyle="round", zorder=3,
            label="link 1")
    ax.plot(pts[0, [2, 4]], pts[1, [2, 4]], color=style.SLATE, linewidth=width * 0.85, solid_capstyle="round",
            zorder=3.1, label="link 2")
    joint_r = 0.028 * scale
    for col, joint in ((0, "shoulder"), (2, "elbow")):
        powered = joint in rig.actuated
        if powered:
            ax.add_artist(Rectangle((pts[0, col] - 1.5 * joint_r, pts[1, col] - 1.5 * joint_r), 3 * joint_r,
                                   3 * joint_r, facecolor=style.OCHRE, edgecolor=style.INK, linewidth=0.9,
                                   zorder=3.5))
        ax.add_artist(Circle(pts[:, col], joint_r, facecolor=style.PAPER, edgecolor=style.INK, linewidth=1.0,
                            zorder=4))
    if marks:
        for col in (1, 3):
            ax.add_artist(Circle(pts[:, col], 0.45 * joint_r, facecolor=style.PAPER, edgecolor=style.PAPER,
                                zorder=4))
    return pts


def _frame_axes(ax: Axes, rig: Rig, *, include_keep_out: bool, labels: bool = True,
                cart_span: tuple[float, float] = (0.0, 0.0)) -> None:
    xlim, ylim = scene_limits(rig, include_keep_out=include_keep_out, cart_span=cart_span)
    ax.set_xlim(xlim)
    ax.set_ylim(ylim)
    ax.set_aspect("equal")
    if labels:
        ax.set_xlabel(style.label("horizontal position", "m"))
        ax.set_ylabel(style.label("height above shoulder axis", "m"))


def _link_dimensions(ax: Axes, rig: Rig, pts: np.ndarray) -> None:
    """Dimension lines beside each link (on the side away from the other link) with the length."""
    scale = rig.link1.length + rig.link2.length
    for a, b, name, length in ((0, 2, "l1", rig.link1.length), (2, 4, "l2", rig.link2.length)):
        p, r = pts[:, a], pts[:, b]
        along = (r - p) / np.linalg.norm(r - p)
        normal = np.array([along[1], -along[0]])
        other = pts[:, 4] if a == 0 else pts[:, 0]
        if np.dot(other - 0.5 * (p + r), normal) > 0:  # keep the dimension on the free side of the link
            normal = -normal
        off = 0.1 * scale * normal
        ax.annotate("", xy=r + off, xytext=p + off, zorder=5,
                    arrowprops={"arrowstyle": "|-|", "color": style.RULE, "linewidth": 0.8, "shrinkA": 0,
                                "shrinkB": 0, "mutation_scale": 3})
        mid = 0.5 * (p + r) + 1.35 * off
        ax.text(mid[0], mid[1], f"{name} = {length:.3g} m", fontsize=style.FONT_SIZES["small"],
                ha="left" if normal[0] >= 0 else "right", va="center", zorder=6,
                bbox={"boxstyle": "square,pad=0.15", "facecolor": style.PAPER, "edgecolor": "none", "alpha": 0.85})


# ---------------------------------------------------------------------------------------------------------- figures
@style.styled
def rig_figure(rig: Rig, q: np.ndarray | None = None) -> Figure:
    """The rig to scale at configuration ``q`` (default: upright): a close-up and an overview with the keep-out.

    Left, the links over their swept region with their lengths, the hanging pose faint for reference and a square
    motor mark on each powered joint. Right, the same to a smaller scale with the keep-out boundary.
    """
    n_q = rig.n_states // 2
    q = equilibrium_state(rig, "upright")[:n_q] if q is None else np.asarray(q, dtype=float)
    pose_points(rig, q)  # refuses a q of the wrong size before anything is drawn
    hanging = equilibrium_state(rig, "hanging")[:n_q]
    if rig.cart is not None:
        hanging[0] = q[0]
    derived = derived_quantities(rig)
    travel = rig.cart.travel if rig.cart is not None else 0.0
    (x0, x1), (y0, y1) = scene_limits(rig, include_keep_out=False)
    fig = style.new_figure(7.2, min(5.0, 1.6 + 3.2 * (y1 - y0) / (x1 - x0)))  # room for titles, legend
    close, whole = fig.subplots(1, 2, width_ratios=(1.25, 1.0))
    for ax, keep_out in ((close, False), (whole, True)):
        draw_regions(ax, rig, keep_out=keep_out)
        draw_mount(ax, rig)
        draw_pose(ax, rig, hanging, ghost=True)
        pts = draw_pose(ax, rig, q, marks=not keep_out)
        _frame_axes(ax, rig, include_keep_out=keep_out)
    _link_dimensions(close, rig, pts)
    _radius_arrow(close, np.array([travel, 0.0]), derived.reach, -30.0, f"reach {derived.reach:.3g} m")
    _radius_arrow(whole, np.array([travel, 0.0]), derived.reach + KEEP_OUT_MARGIN, -55.0,
                  f"{derived.reach + KEEP_OUT_MARGIN:.2f} m")
    whole.set_ylabel("")
    close.set_title("rig and swept region")
    half = keep_out_radius(rig, KEEP_OUT_MARGIN)
    whole.set_title(f"keep-out (dashed): {'±' if rig.cart is not None else 'radius '}{half:.2f} m")
    handles, _ = whole.get_legend_handles_labels()
    handles += [Rectangle((0, 0), 1, 1, facecolor=style.OCHRE, edgecolor=style.INK, label="motor (powered joint)"),
                Line2D([], [], color=style.MIST, linewidth=3.0, label="hanging, for reference")]
    fig.legend(handles=handles, loc="outside lower center", ncols=4)
    return fig


def sample_trajectory(t: np.ndarray, X: np.ndarray, times: np.ndarray) -> np.ndarray:
    """States at ``times`` by linear interpolation of each component of ``X`` (shape (len(t), n)) over ``t``."""
    t = np.asarray(t, dtype=float)
    X = np.asarray(X, dtype=float)
    if t.ndim != 1 or X.ndim != 2 or X.shape[0] != t.size or t.size < 2:
        raise RequestError(f"a trajectory needs t of shape (N,) and X of shape (N, n) with N >= 2; got "
                           f"{t.shape} and {X.shape}")
    if np.any(np.diff(t) <= 0):
        raise RequestError("trajectory times must be strictly increasing")
    return np.column_stack([np.interp(times, t, X[:, j]) for j in range(X.shape[1])])


def checked_trajectory(rig: Rig, t: np.ndarray, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``t`` and ``X`` as float arrays after checking that X has one row per time and the rig's state width."""
    t = np.asarray(t, dtype=float)
    X = np.asarray(X, dtype=float)
    if X.ndim != 2 or X.shape[1] != rig.n_states:
        raise RequestError(f"states of rig {rig.name!r} need shape (N, {rig.n_states}); got {X.shape}")
    sample_trajectory(t, X, t[:1])
    return t, X


def tip_path(rig: Rig, t: np.ndarray, X: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Tip positions (2, len(times)) [m] along a trajectory at ``times`` (states interpolated linearly)."""
    n_q = rig.n_states // 2
    Xs = sample_trajectory(t, X, np.asarray(times, dtype=float))
    points = model_for(rig).points.map(len(times))(Xs[:, :n_q].T, rig.parameter_vector())
    return np.array(points).reshape(2, len(times), 5)[:, :, 4]


def _strip_axes(ax: Axes, rig: Rig, cart_span: tuple[float, float]) -> None:
    _frame_axes(ax, rig, include_keep_out=False, labels=False, cart_span=cart_span)
    ax.set_axis_off()


@style.styled
def filmstrip_figure(rig: Rig, t: np.ndarray, X: np.ndarray, *, frames: int = 8, columns: int = 4) -> Figure:
    """Poses at ``frames`` evenly spaced times of a trajectory, each with the tip's path since the panel before.

    Parameters
    ----------
    rig : Rig
    t : ndarray, shape (N,)
        Times [s], strictly increasing.
    X : ndarray, shape (N, n_states)
        States along the trajectory (state order of the rig).
    frames, columns : int
        Number of panels and panels per row.
    """
    if frames < 2:
        raise RequestError(f"a filmstrip needs at least 2 frames; got {frames}")
    t, X = checked_trajectory(rig, t, X)
    times = np.linspace(t[0], t[-1], frames)
    Xs = sample_trajectory(t, X, times)
    n_q = rig.n_states // 2
    rows = math.ceil(frames / columns)
    span = _cart_span(rig, X)
    xlim, ylim = scene_limits(rig, include_keep_out=False, cart_span=span)
    aspect = (xlim[1] - xlim[0]) / (ylim[1] - ylim[0])
    fig = style.new_figure(7.2, rows * 7.2 / columns / aspect + 0.45)
    axes = fig.subplots(rows, columns, squeeze=False)
    for k, ax in enumerate(axes.flat):
        _strip_axes(ax, rig, span)
        if k >= frames:
            continue
        draw_regions(ax, rig, keep_out=False, fill=False)
        draw_mount(ax, rig)
        if k > 0:
            path = tip_path(rig, t, X, np.linspace(times[k - 1], times[k], 60))
            ax.plot(path[0], path[1], color=style.OCHRE, linewidth=1.2, zorder=2.5)
            draw_pose(ax, rig, Xs[k - 1, :n_q], ghost=True)
        draw_pose(ax, rig, Xs[k, :n_q], marks=False)
        ax.text(0.02, 0.98, f"{k + 1}   t = {times[k]:.2f} s", transform=ax.transAxes, ha="left", va="top",
                fontsize=style.FONT_SIZES["small"], fontweight="bold")
    fig.suptitle(f"poses every {times[1] - times[0]:.2f} s; grey: the panel before, ochre: the tip's path since",
                 fontsize=style.FONT_SIZES["base"], fontweight="normal", x=0.01, ha="left")
    return fig


class _SharedPaletteWriter(PillowWriter):
    """PillowWriter that draws each frame once and maps it onto the first frame's palette without dithering.

    Frames then differ only where the drawing moved, so the GIF stores small changed rectangles instead of whole
    re-dithered frames (about a fifth of the size).
    """

    def grab_frame(self, **savefig_kwargs: object) -> None:
        canvas = self.fig.canvas
        canvas.draw()
        frame = Image.frombuffer("RGBA", canvas.get_width_height(), canvas.buffer_rgba()).convert("RGB")
        if not self._frames:
            self._palette = frame.quantize(colors=48, method=Image.Quantize.MEDIANCUT, dither=Image.Dither.NONE)
            # Median cut averages the background with its antialiased edges, and Pillow maps colours to a palette
            # through a reduced-precision cache, so white would land on a near-white entry: make those white.
            colors = np.array(self._palette.getpalette()).reshape(-1, 3)
            colors[np.abs(colors - 255).sum(axis=1) <= 24] = 255  # within ~8 per channel of white
            self._palette.putpalette(colors.ravel().tolist())
        self._frames.append(frame.quantize(palette=self._palette, dither=Image.Dither.NONE))

    def repeat_last(self, count: int) -> None:
        """Show the last frame ``count`` more frame intervals (Pillow merges equal frames into one longer one)."""
        self._frames.extend([self._frames[-1].copy() for _ in range(count)])


@style.styled
def animation_gif(rig: Rig, t: np.ndarray, X: np.ndarray, *, max_frames: int = 90, width_px: int = 360,
                  hold_end: float = 1.0) -> bytes:
    """An animated GIF of a trajectory in real time (frames further apart when it would need more than ``max_frames``).

    Parameters
    ----------
    rig : Rig
    t : ndarray, shape (N,)
        Times [s], strictly increasing.
    X : ndarray, shape (N, n_states)
    max_frames : int
        Cap on the number of distinct frames (keeps the file small enough to inline).
    width_px : int
        Image width [pixel].
    hold_end : float
        Time the last pose stays on screen before the loop restarts [s].

    Returns
    -------
    bytes
        The GIF file (loops forever).
    """
    t, X = checked_trajectory(rig, t, X)
    duration = float(t[-1] - t[0])
    interval = max(0.05, duration / max(max_frames - 1, 1))  # s per frame: 20 frames/s at most
    interval = math.ceil(interval * 100.0) / 100.0  # GIF frame delays are whole hundredths of a second
    times = np.append(np.arange(t[0], t[-1] - 0.5 * interval, interval), t[-1])
    Xs = sample_trajectory(t, X, times)
    dense_times = np.linspace(t[0], t[-1], 8 * len(times))
    path = tip_path(rig, t, X, dense_times)
    n_q = rig.n_states // 2
    span = _cart_span(rig, X)
    xlim, ylim = scene_limits(rig, include_keep_out=False, cart_span=span)
    aspect = (xlim[1] - xlim[0]) / (ylim[1] - ylim[0])
    dpi = 72
    fig = style.new_figure(width_px / dpi, max(width_px / dpi / aspect, 1.6))
    fig.set_dpi(dpi)  # frames are drawn straight from the canvas, at the figure's own resolution
    fig.set_layout_engine("none")
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    _strip_axes(ax, rig, span)
    draw_regions(ax, rig, keep_out=False, fill=False)
    draw_mount(ax, rig)
    trail, = ax.plot([], [], color=style.OCHRE, linewidth=1.2, zorder=2.5)
    clock = ax.text(0.02, 0.98, "", transform=ax.transAxes, ha="left", va="top",
                    fontsize=12, fontweight="bold")  # 72 dpi frames: larger than the print type scale
    writer = _SharedPaletteWriter(fps=1.0 / interval)
    with tempfile.TemporaryDirectory(prefix="upswing-gif-") as folder:
        target = Path(folder) / "motion.gif"
        with writer.saving(fig, str(target), dpi):
            for time, x in zip(times, Xs, strict=True):
                before = set(ax.get_children())
                recent = (dense_times <= time) & (dense_times >= time - 1.0)  # the last second of the tip's path
                trail.set_data(path[0, recent], path[1, recent])
                clock.set_text(f"t = {time:.2f} s")
                draw_pose(ax, rig, x[:n_q], marks=False)
                writer.grab_frame()
                if time < times[-1]:
                    for artist in set(ax.get_children()) - before:
                        artist.remove()
            writer.repeat_last(max(0, round(hold_end / interval)))
        return target.read_bytes()
