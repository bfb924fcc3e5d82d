"""Generic plots from plain arrays: time histories against the actuator envelope, the torque-speed plane,
histograms, budget bars and 2-D success maps.

Nothing here knows which controller produced the data; a later stage hands in ``t``, ``X``, ``U`` (or values and
budgets) and gets a figure back.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import Locator, MaxNLocator, MultipleLocator

from upswing.errors import RequestError
from upswing.model.rig import Actuator, Rig
from upswing.report import style
from upswing.verification.budgets import Budget, rated, usage

SPEED_STATE = {"cart": "x_dot", "shoulder": "theta1_dot", "elbow": "theta2_dot"}  # what each actuator turns


def _check_history(rig: Rig, t: np.ndarray, X: np.ndarray, U: np.ndarray) -> tuple[np.ndarray, ...]:
    t, X, U = (np.asarray(a, dtype=float) for a in (t, X, U))
    U = U.reshape(len(U), -1) if U.ndim == 1 else U
    if t.ndim != 1 or X.shape != (t.size, rig.n_states) or U.shape != (t.size, rig.n_inputs):
        raise RequestError(f"time history of {rig.name!r} needs t (N,), X (N, {rig.n_states}), U (N, "
                           f"{rig.n_inputs}); got {t.shape}, {X.shape}, {U.shape}")
    return t, X, U


def running_rms(t: np.ndarray, u: np.ndarray) -> np.ndarray:
    """sqrt( (1 / (t - t0)) * integral_t0^t u^2 dt ) by the trapezoidal rule; the first entry is |u(t0)|."""
    t = np.asarray(t, dtype=float)
    u = np.asarray(u, dtype=float)
    area = np.concatenate([[0.0], np.cumsum(0.5 * (u[1:] ** 2 + u[:-1] ** 2) * np.diff(t))])
    elapsed = t - t[0]
    out = np.abs(u).astype(float)
    out[1:] = np.sqrt(area[1:] / elapsed[1:])
    return out


def motor_limits(actuator: Actuator, speed: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest effort available at a signed ``speed`` under the linear motor line.

    highest = clip(stall (1 - w / w0), 0, peak) and lowest = -clip(stall (1 + w / w0), 0, peak), with w0 the
    no-load speed: driving with the motion (quadrants I and III) the available effort falls linearly to zero at
    w0; braking against it, the peak stays available. Without a motor line both are +-peak at every speed.
    """
    speed = np.asarray(speed, dtype=float)
    if actuator.stall is None or actuator.no_load_speed is None:
        return np.full_like(speed, -actuator.peak), np.full_like(speed, actuator.peak)
    ratio = speed / actuator.no_load_speed
    return (-np.clip(actuator.stall * (1.0 + ratio), 0.0, actuator.peak),
            np.clip(actuator.stall * (1.0 - ratio), 0.0, actuator.peak))


def _limit_label(ax: Axes, value: float, text: str) -> None:
    ax.annotate(text, xy=(1.0, value), xycoords=("axes fraction", "data"), xytext=(-3, 2),
                textcoords="offset points", ha="right", va="bottom", fontsize=style.FONT_SIZES["small"],
                color=style.INK, bbox={"boxstyle": "square,pad=0.1", "facecolor": style.PAPER, "edgecolor": "none"})


def _legend_above(ax: Axes) -> None:
    """Legend in one row on the panel's top edge, where it never hides data."""
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=4, borderaxespad=0.15, handlelength=3.2)


def _angle_locator(values: np.ndarray) -> Locator:
    """Ticks every 90 * 2^k deg: the smallest such step giving at most ~8 ticks; ordinary round steps for motions
    smaller than a right angle (a balance loop's few degrees), which 90 deg steps would leave with one tick."""
    span = float(np.ptp(values)) if values.size else 0.0
    if span < 90.0:
        return MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10])
    return MultipleLocator(90.0 * 2.0 ** max(0, math.ceil(math.log2(max(span, 1.0) / (7 * 90.0)))))


def _effort_panel(ax: Axes, rig: Rig, t: np.ndarray, X: np.ndarray, u: np.ndarray, actuator: Actuator) -> None:
    unit = "N" if actuator.joint == "cart" else "N m"
    speed = X[:, rig.state_names.index(SPEED_STATE[actuator.joint])]
    ax.plot(t, u, label=f"{actuator.joint} effort", **style.series(0))
    rms = running_rms(t, u)
    ax.plot(t, rms, label="running RMS", **style.series(2))
    if actuator.stall is not None:
        lowest, highest = motor_limits(actuator, speed)
        ax.plot(t, highest, label="motor line at the present speed", **style.MODEL_LINE)
        ax.plot(t, lowest, **style.MODEL_LINE)
    top = 1.18 * max(actuator.peak, float(np.max(np.abs(u))))
    ax.set_ylim(-top, top)
    style.shade_beyond(ax, -actuator.peak, actuator.peak)
    for sign in (-1.0, 1.0):
        ax.axhline(sign * actuator.peak, **style.HARD_LIMIT)
        ax.axhline(sign * actuator.continuous, **style.RATING)
    _limit_label(ax, actuator.peak, f"peak {actuator.peak:g} {unit}")
    _limit_label(ax, actuator.continuous, f"continuous {actuator.continuous:g} {unit}")
    share = rms[-1] / actuator.continuous
    ax.text(0.01, 0.04, f"RMS over the run {rms[-1]:.3g} {unit} = {100 * share:.0f} % of continuous",
            transform=ax.transAxes, fontsize=style.FONT_SIZES["small"], va="bottom",
            bbox={"boxstyle": "square,pad=0.2", "facecolor": style.PAPER, "edgecolor": "none", "alpha": 0.9})
    ax.set_ylabel(style.label(f"{actuator.joint} effort", unit))
    _legend_above(ax)


@style.styled
def time_history_figure(rig: Rig, t: np.ndarray, X: np.ndarray, U: np.ndarray, *, title: str = "") -> Figure:
    """Angles, speeds, the cart (on a cart rig) and each input's effort against its envelope, on one time axis.

    Parameters
    ----------
    rig : Rig
    t : ndarray, shape (N,)
        Times [s].
    X : ndarray, shape (N, n_states)
        States (rig state order; angles in rad, drawn in degrees).
    U : ndarray, shape (N, n_inputs)
        Inputs [N m or N] in the rig's input order.
    title : str
        Optional heading.

    Envelope: peak (solid, forbidden side hatched), continuous rating (dashed, compare the running RMS), motor
    line (dotted, when the rig file gives one), max speed and rail travel (solid).
    """
    t, X, U = _check_history(rig, t, X, U)
    names = rig.state_names
    on_cart = rig.cart is not None
    rows = 2 + (2 if on_cart else 0) + rig.n_inputs
    fig = style.new_figure(7.2, 1.75 * rows + 0.4)
    axes = fig.subplots(rows, 1, sharex=True)
    row = iter(axes)

    ax = next(row)
    for k, name in enumerate(("theta1", "theta2")):
        ax.plot(t, np.degrees(X[:, names.index(name)]), label=name, **style.series(k))
    ax.yaxis.set_major_locator(_angle_locator(np.degrees(X[:, [names.index("theta1"), names.index("theta2")]])))
    ax.set_ylabel(style.label("angle", "deg"))
    _legend_above(ax)

    ax = next(row)
    for k, name in enumerate(("theta1_dot", "theta2_dot")):
        ax.plot(t, X[:, names.index(name)], label=name, **style.series(k))
    for actuator in rig.actuators:
        if actuator.joint != "cart":
            for sign in (-1.0, 1.0):
                ax.axhline(sign * actuator.max_speed, **style.HARD_LIMIT)
            _limit_label(ax, actuator.max_speed, f"{actuator.joint} max speed {actuator.max_speed:g} rad/s")
    ax.set_ylabel(style.label("joint speed", "rad/s"))
    _legend_above(ax)

    if on_cart:
        ax = next(row)
        ax.plot(t, X[:, names.index("x")], label="x (cart)", **style.series(0))
        travel = rig.cart.travel
        top = 1.15 * max(travel, float(np.max(np.abs(X[:, 0]))))
        ax.set_ylim(-top, top)
        style.shade_beyond(ax, -travel, travel)
        for sign in (-1.0, 1.0):
            ax.axhline(sign * travel, **style.HARD_LIMIT)
        _limit_label(ax, travel, f"end stop ±{travel:g} m")
        ax.set_ylabel(style.label("cart position", "m"))
        _legend_above(ax)
        ax = next(row)
        ax.plot(t, X[:, names.index("x_dot")], label="x_dot (cart)", **style.series(0))
        if "cart" in rig.actuated:
            limit = rig.actuator("cart").max_speed
            for sign in (-1.0, 1.0):
                ax.axhline(sign * limit, **style.HARD_LIMIT)
            _limit_label(ax, limit, f"max speed {limit:g} m/s")
        ax.set_ylabel(style.label("cart speed", "m/s"))
        _legend_above(ax)

    for k, actuator in enumerate(rig.actuators):
        _effort_panel(next(row), rig, t, X, U[:, k], actuator)
    axes[-1].set_xlabel(style.label("time", "s"))
    for ax in axes:
        ax.yaxis.set_label_coords(-0.075, 0.5)  # one column of axis labels, however wide the tick labels
    if title:
        fig.suptitle(title, x=0.01, ha="left")
    return fig


@style.styled
def torque_speed_figure(rig: Rig, X: np.ndarray, U: np.ndarray) -> Figure:
    """Each input's operating points in the effort-speed plane against peak, max speed, rating and motor line.

    Points in quadrants I and III drive the joint (the motor line limits them); II and IV brake it.
    """
    X = np.asarray(X, dtype=float)
    U = np.asarray(U, dtype=float).reshape(len(X), -1)
    if X.shape[1] != rig.n_states or U.shape[1] != rig.n_inputs:
        raise RequestError(f"X must be (N, {rig.n_states}) and U (N, {rig.n_inputs}); got {X.shape}, {U.shape}")
    count = rig.n_inputs
    fig = style.new_figure(7.2 if count > 1 else 4.6, 3.6)
    axes = np.atleast_1d(fig.subplots(1, count))
    for ax, actuator, u in zip(axes, rig.actuators, U.T, strict=True):
        unit, speed_unit = ("N", "m/s") if actuator.joint == "cart" else ("N m", "rad/s")
        speed = X[:, rig.state_names.index(SPEED_STATE[actuator.joint])]
        w_top = 1.15 * max(actuator.max_speed, float(np.max(np.abs(speed))))
        u_top = 1.15 * max(actuator.peak, float(np.max(np.abs(u))), actuator.stall or 0.0)
        ax.set_xlim(-w_top, w_top)
        ax.set_ylim(-u_top, u_top)
        style.shade_beyond(ax, -actuator.peak, actuator.peak)
        style.shade_beyond(ax, -actuator.max_speed, actuator.max_speed, horizontal=False)
        for sign in (-1.0, 1.0):
            ax.axhline(sign * actuator.peak, **style.HARD_LIMIT)
            ax.axvline(sign * actuator.max_speed, **style.HARD_LIMIT)
            ax.axhline(sign * actuator.continuous, **style.RATING)
        if actuator.stall is not None and actuator.no_load_speed is not None:
            w = np.linspace(0.0, actuator.no_load_speed, 50)
            line = actuator.stall * (1.0 - w / actuator.no_load_speed)
            ax.plot(w, line, **style.MODEL_LINE)
            ax.plot(-w, -line, **style.MODEL_LINE)
            # Driving with the motion beyond the motor line is out of reach: hatch it like any hard limit.
            w = np.linspace(0.0, w_top, 100)
            reach = np.clip(actuator.stall * (1.0 - w / actuator.no_load_speed), 0.0, None)
            ax.fill_between(w, reach, u_top, zorder=0, **style.FORBIDDEN)
            ax.fill_between(-w, -u_top, -reach, zorder=0, **style.FORBIDDEN)
        ax.axhline(0.0, color=style.RULE, linewidth=0.6)
        ax.axvline(0.0, color=style.RULE, linewidth=0.6)
        ax.plot(speed, u, color=style.SLATE, linewidth=1.0, zorder=3)
        ax.plot(speed[:1], u[:1], linestyle="none", marker="o", markerfacecolor=style.PAPER,
                markeredgecolor=style.INK, zorder=4)
        ax.plot(speed[-1:], u[-1:], linestyle="none", marker="s", color=style.INK, zorder=4)
        ax.set_xlabel(style.label(f"{actuator.joint} speed", speed_unit))
        ax.set_ylabel(style.label(f"{actuator.joint} effort", unit))
        ax.set_title(f"{actuator.joint}: effort against speed")
    handles = [Line2D([], [], color=style.SLATE, linewidth=1.0, label="run"),
               Line2D([], [], linestyle="none", marker="o", markerfacecolor=style.PAPER, markeredgecolor=style.INK,
                      label="start"),
               Line2D([], [], linestyle="none", marker="s", color=style.INK, label="end"),
               Line2D([], [], label="peak / max speed", **style.HARD_LIMIT),
               Line2D([], [], label="continuous", **style.RATING)]
    if any(a.stall is not None for a in rig.actuators):
        handles.append(Line2D([], [], label="motor line", **style.MODEL_LINE))
    fig.legend(handles=handles, loc="outside lower center", ncols=3 if count == 1 else 6)
    return fig


@style.styled
def histogram_figure(values: np.ndarray, *, quantity: str, unit: str, limit: float | None = None,
                     bins: int | str = "auto", title: str = "") -> Figure:
    """Histogram of ``values`` with the median and 95th percentile marked and, when given, a hard ``limit``
    (values above it are counted and the far side hatched)."""
    values = np.asarray(values, dtype=float).ravel()
    values = values[np.isfinite(values)]
    if values.size == 0:
        raise RequestError(f"histogram of {quantity}: no finite values to count")
    fig = style.new_figure(7.2, 2.9)
    ax = fig.add_subplot()
    ax.hist(values, bins=bins, color=style.MIST, edgecolor=style.INK, linewidth=0.6, zorder=2)
    median, p95 = np.percentile(values, [50.0, 95.0])
    ax.axvline(median, label=f"median {median:.3g} {unit}", **{**style.RATING, "color": style.INK})
    ax.axvline(p95, label=f"95th percentile {p95:.3g} {unit}", **style.MODEL_LINE)
    note = f"n = {values.size}"
    if limit is not None:
        low, high = ax.get_xlim()
        ax.set_xlim(low, max(high, 1.08 * limit if limit > 0 else limit + 0.08 * abs(high - low)))
        style.shade_beyond(ax, None, limit, horizontal=False)
        ax.axvline(limit, label=f"limit {limit:.3g} {unit}", **style.HARD_LIMIT)
        over = int(np.sum(values > limit))
        note += f"; {over} beyond the limit ({100.0 * over / values.size:.1f} %)"
    ax.text(0.99, 0.97, note, transform=ax.transAxes, ha="right", va="top", fontsize=style.FONT_SIZES["small"],
            bbox={"boxstyle": "square,pad=0.2", "facecolor": style.PAPER, "edgecolor": "none"})
    ax.set_xlabel(style.label(quantity, unit))
    ax.set_ylabel(style.label("count", "runs"))
    _legend_above(ax)
    if title:
        fig.suptitle(title, x=0.01, ha="left")
    return fig


@style.styled
def budget_bars_figure(budgets: Sequence[Budget], *, title: str = "") -> Figure:
    """Each rated budget's usage (value / limit) as a horizontal bar against the 100 % line, in the given order.

    Met budgets are solid slate bars; failed ones are dark, cross-hatched and marked "FAILS" in words, so the
    difference survives greyscale printing. Budgets without a limit have no usage and are left out (show them in
    a table).
    """
    budgets = rated(budgets)
    if not budgets:
        raise RequestError("budget bars need at least one budget with a limit")
    shares = np.array([100.0 * usage(b) for b in budgets])
    fig = style.new_figure(7.2, 0.9 + 0.36 * len(budgets))
    ax = fig.add_subplot()
    rows = np.arange(len(budgets))[::-1]
    top = max(125.0, 1.1 * float(np.max(shares)))
    ax.set_xlim(0.0, top)
    ax.set_ylim(-0.6, len(budgets) - 0.4)
    style.shade_beyond(ax, None, 100.0, horizontal=False)
    for y, b, pct in zip(rows, budgets, shares, strict=True):
        ax.barh(y, min(max(pct, 0.0), top), height=0.62, color=style.SLATE if b.ok else style.FAIL,
                edgecolor=style.INK, linewidth=0.6, hatch=None if b.ok else "xx", zorder=3)
        text = f"{b.value:.3g} of {b.limit:.3g} {b.unit} ({pct:.0f} %)" + ("" if b.ok else "  FAILS")
        inside = pct > 0.62 * top
        ax.text(pct - 1.0 if inside else max(pct, 0.0) + 1.0, y, text, va="center",
                ha="right" if inside else "left", fontsize=style.FONT_SIZES["small"],
                color=style.PAPER if inside else style.INK, fontweight="normal" if b.ok else "bold", zorder=4)
    ax.axvline(100.0, **style.HARD_LIMIT)
    ax.set_yticks(rows, [b.name for b in budgets])
    ax.grid(axis="y", visible=False)
    ax.set_xlabel(style.label("share of the limit used", "%"))
    if title:
        ax.set_title(title)
    return fig


@dataclass(frozen=True)
class Curve:
    """A labelled line to draw over a slice map, e.g. a hand-over boundary (x, y in the map's units)."""

    label: str
    x: np.ndarray
    y: np.ndarray


@style.styled
def slice_map_figure(x: np.ndarray, y: np.ndarray, success: np.ndarray, *, x_quantity: str, x_unit: str,
                     y_quantity: str, y_unit: str, title: str = "", curves: Sequence[Curve] = (),
                     target: tuple[float, float] | None = None) -> Figure:
    """A 2-D slice through the state space: which starting points succeed, with the boundary between them.

    Parameters
    ----------
    x : ndarray, shape (nx,)
    y : ndarray, shape (ny,)
        Grid coordinates (increasing).
    success : ndarray of bool, shape (ny, nx)
        ``success[i, j]`` for the start at (x[j], y[i]).
    x_quantity, x_unit, y_quantity, y_unit : str
        Axis labels.
    curves : sequence of Curve
        Lines drawn over the map (series styles 1, 2, ...).
    target : (float, float), optional
        The point the runs aim for, marked with a cross.

    Failing cells are grey and hatched, succeeding cells light sand; the solid line is the 50 % contour of the
    success indicator, i.e. the boundary half-way between neighbouring cells that disagree.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    success = np.asarray(success, dtype=bool)
    if success.shape != (y.size, x.size):
        raise RequestError(f"success must have shape (len(y), len(x)) = ({y.size}, {x.size}); got {success.shape}")
    fig = style.new_figure(4.8, 4.3)
    ax = fig.add_subplot()
    dx = np.diff(x).mean() / 2 if x.size > 1 else 0.5
    dy = np.diff(y).mean() / 2 if y.size > 1 else 0.5
    extent = (x[0] - dx, x[-1] + dx, y[0] - dy, y[-1] + dy)
    # Cells as filled squares: failure first (hatched), success on top.
    ax.contourf(x, y, success.astype(float), levels=[-0.5, 0.5, 1.5], colors=[style.SHADE, style.SAND],
                hatches=["////", None], zorder=1)
    if success.any() and not success.all():
        ax.contour(x, y, success.astype(float), levels=[0.5], colors=[style.INK], linewidths=1.6, zorder=3)
    for k, curve in enumerate(curves, start=1):
        ax.plot(curve.x, curve.y, label=curve.label, zorder=4, **{**style.series(k), "markevery": 0.1})
    if target is not None:
        ax.plot([target[0]], [target[1]], linestyle="none", marker="P", markersize=9, color=style.INK,
                markeredgecolor=style.PAPER, zorder=5, label="target")
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.grid(False)
    ax.set_xlabel(style.label(x_quantity, x_unit))
    ax.set_ylabel(style.label(y_quantity, y_unit))
    share = 100.0 * success.mean()
    ax.set_title(title or f"{share:.0f} % of the slice succeeds")
    handles = [Patch(facecolor=style.SAND, edgecolor=style.RULE, label="succeeds"),
               Patch(facecolor=style.SHADE, edgecolor=style.RULE, hatch="////", label="fails"),
               Line2D([], [], color=style.INK, linewidth=1.6, label="boundary")]
    handles += ax.get_legend_handles_labels()[0]
    fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 3))
    return fig


def ellipse_curve(label: str, P: np.ndarray, level: float, center: tuple[float, float] = (0.0, 0.0),
                  n: int = 181) -> Curve:
    """The ellipse {z : (z - c)' P (z - c) = level} of a 2x2 positive definite P as a :class:`Curve`
    (e.g. a Lyapunov level set x' P x = c restricted to a slice)."""
    P = np.asarray(P, dtype=float)
    w, V = np.linalg.eigh(P)
    if P.shape != (2, 2) or np.any(w <= 0) or level <= 0:
        raise RequestError("an ellipse needs a 2x2 positive definite P and a level > 0")
    s = np.linspace(0.0, 2.0 * math.pi, n)
    circle = np.vstack([np.cos(s), np.sin(s)])
    points = V @ (np.sqrt(level / w)[:, None] * circle)
    return Curve(label, points[0] + center[0], points[1] + center[1])
