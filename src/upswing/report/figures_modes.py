"""What the linear models look like: eigenvalues at the four equilibria, and the oscillation modes drawn as poses.

Inputs are the plain results of :func:`upswing.model.modes.analyse_all` (computed here when not given), so these
figures add no analysis of their own.
"""

from __future__ import annotations

import math

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from upswing.model.equilibria import EQUILIBRIA, equilibrium_state
from upswing.model.modes import EquilibriumReport, OscillationMode, analyse_all
from upswing.model.rig import Rig
from upswing.report import style
from upswing.report.figures_rig import draw_cart, draw_mount, draw_pose, pose_points

DISPLAY_ANGLE = 0.5  # rad: the largest link swing drawn in a mode shape (shapes are defined only up to scale)


def _pose_icon(ax: Axes, rig: Rig, equilibrium: str) -> None:
    """A small drawing of the equilibrium's pose in the panel's upper-left corner."""
    n_q = rig.n_states // 2
    icon = ax.inset_axes((0.015, 0.56, 0.2, 0.42))
    pts = pose_points(rig, equilibrium_state(rig, equilibrium)[:n_q])
    icon.plot(pts[0, [0, 2]], pts[1, [0, 2]], color=style.INK, linewidth=3.2, solid_capstyle="round")
    icon.plot(pts[0, [2, 4]], pts[1, [2, 4]], color=style.SLATE, linewidth=2.8, solid_capstyle="round")
    icon.plot([pts[0, 0]], [pts[1, 0]], marker="o", markersize=4.5, color=style.PAPER, markeredgecolor=style.INK)
    icon.axhline(0.0, color=style.RULE, linewidth=0.6, linestyle=(0, (2, 2)))
    reach = rig.link1.length + rig.link2.length
    icon.set_xlim(-0.55 * reach, 0.55 * reach)
    icon.set_ylim(-1.15 * reach, 1.15 * reach)
    icon.set_aspect("equal")
    icon.set_xticks([])
    icon.set_yticks([])
    icon.grid(False)
    icon.set_facecolor(style.PAPER)
    for spine in icon.spines.values():
        spine.set_visible(True)
        spine.set_color(style.MIST)


@style.styled
def eigenvalue_map_figure(rig: Rig, reports: dict[str, EquilibriumReport] | None = None) -> Figure:
    """Eigenvalues of A [1/s] in the complex plane at each of the four equilibria, on shared axes.

    The unstable half-plane (real part > 0) is hatched; unstable eigenvalues are filled triangles labelled with
    their doubling time ln 2 / Re(lambda), stable ones open circles. A small drawing in each panel shows the pose.
    """
    reports = analyse_all(rig) if reports is None else reports
    every = np.concatenate([r.linear.eigenvalues for r in reports.values()])
    span = 1.15 * max(float(np.max(np.abs(every))), 1e-3)
    fig = style.new_figure(7.2, 5.4)
    axes = fig.subplots(2, 2, sharex=True, sharey=True)
    for ax, name in zip(axes.flat, EQUILIBRIA, strict=True):
        rep = reports[name]
        eig = rep.linear.eigenvalues
        ax.set_xlim(-span, span)
        ax.set_ylim(-span, span)
        style.shade_beyond(ax, None, 0.0, horizontal=False)
        ax.axvline(0.0, **style.HARD_LIMIT)
        ax.axhline(0.0, color=style.RULE, linewidth=0.6)
        unstable = eig.real > 1e-9
        ax.plot(eig.real[~unstable], eig.imag[~unstable], linestyle="none", marker="o", markersize=6.5,
                markerfacecolor=style.PAPER, markeredgecolor=style.INK, markeredgewidth=1.3)
        ax.plot(eig.real[unstable], eig.imag[unstable], linestyle="none", marker="^", markersize=8,
                markerfacecolor=style.FAIL, markeredgecolor=style.INK, markeredgewidth=0.8)
        for k, z in enumerate(sorted(eig[unstable], key=lambda z: -z.real)):
            ax.annotate(f"doubles in {1000 * math.log(2) / z.real:.0f} ms", xy=(z.real, z.imag),
                        xytext=(-10, 14 + 14 * k), textcoords="offset points", ha="right",
                        fontsize=style.FONT_SIZES["small"],
                        arrowprops={"arrowstyle": "-", "color": style.RULE, "linewidth": 0.7, "shrinkB": 4},
                        bbox={"boxstyle": "square,pad=0.15", "facecolor": style.PAPER, "edgecolor": "none"})
        growth = len(rep.growth_rates)
        control = "controllable" if rep.controllability.controllable else "NOT controllable"
        ax.set_title(f"{name}: {growth} unstable, {control}" if growth else f"{name}: stable, {control}",
                     fontsize=style.FONT_SIZES["base"])
        _pose_icon(ax, rig, name)
    for ax in axes[1]:
        ax.set_xlabel(style.label("real part (growth rate)", "1/s"))
    for ax in axes[:, 0]:
        ax.set_ylabel(style.label("imaginary part", "rad/s"))
    handles = [Line2D([], [], linestyle="none", marker="o", markerfacecolor=style.PAPER, markeredgecolor=style.INK,
                      label="stable eigenvalue"),
               Line2D([], [], linestyle="none", marker="^", markerfacecolor=style.FAIL, markeredgecolor=style.INK,
                      label="unstable eigenvalue"),
               Line2D([], [], color=style.SHADE, linewidth=6, label="unstable half-plane")]
    fig.legend(handles=handles, loc="outside lower center", ncols=3)
    return fig


def display_shape(rig: Rig, mode: OscillationMode) -> np.ndarray:
    """The mode shape scaled for drawing [m, rad]: largest link swing :data:`DISPLAY_ANGLE`, or for the cart's
    rigid-body mode a cart displacement of 0.4 reach."""
    phi = np.abs(np.asarray(mode.absolute_shape, dtype=float))
    if np.max(phi) > 1e-6:
        return np.asarray(mode.shape, dtype=float) * DISPLAY_ANGLE / np.max(phi)
    reach = rig.link1.length + rig.link2.length
    return np.asarray(mode.shape, dtype=float) * 0.4 * reach / np.max(np.abs(mode.shape))


@style.styled
def mode_shapes_figure(rig: Rig, modes: tuple[OscillationMode, ...] | None = None) -> Figure:
    """The small-oscillation modes about ``hanging``, each drawn as the rig at both extremes of its swing.

    The solid pose is hanging + shape, the faint one hanging - shape; the dotted line is the hanging pose. Swings
    are exaggerated to :data:`DISPLAY_ANGLE` for visibility (a mode fixes only the ratio of the motions).
    """
    modes = analyse_all(rig)["hanging"].modes if modes is None else modes
    n_q = rig.n_states // 2
    hanging = equilibrium_state(rig, "hanging")[:n_q]
    reach = rig.link1.length + rig.link2.length
    count = len(modes)
    shapes = [display_shape(rig, mode) for mode in modes]
    half = 0.75 * reach + max((abs(shape[0]) for shape in shapes), default=0.0) * (rig.cart is not None)
    panel = 7.2 / count
    fig = style.new_figure(7.2, min(4.2, panel * 1.34 * reach / (2.0 * half) + 1.25))
    axes = np.atleast_1d(fig.subplots(1, count, sharey=True))
    for k, (ax, mode, shape) in enumerate(zip(axes, modes, shapes, strict=True)):
        draw_mount(ax, rig)
        rest = pose_points(rig, hanging)
        ax.plot(rest[0, [0, 2, 4]], rest[1, [0, 2, 4]], color=style.RULE, linewidth=1.0, linestyle=(0, (1, 2)),
                zorder=2.6)
        draw_pose(ax, rig, hanging - shape, ghost=True)
        if rig.cart is not None:
            draw_cart(ax, rig, float((hanging - shape)[0]), ghost=True)
        draw_pose(ax, rig, hanging + shape, marks=False)
        ax.set_xlim(-half, half)
        ax.set_ylim(-1.12 * reach, 0.22 * reach)
        ax.set_aspect("equal")
        ax.set_xlabel(style.label("horizontal position", "m"))
        if mode.kind == "rigid-body":
            title = f"{k + 1}: cart free, 0 Hz"
            ratio = "whole rig moves with the cart"
        else:
            title = f"{k + 1}: {mode.kind}, {mode.frequency_hz:.3g} Hz"
            a1, a2 = mode.absolute_shape
            ratio = f"period {1.0 / mode.frequency_hz:.3g} s\nswing ratio link 2 / link 1: {a2 / a1:+.2f}"
        ax.set_title(title, fontsize=style.FONT_SIZES["base"])
        ax.text(0.03, 0.04, ratio, transform=ax.transAxes, fontsize=style.FONT_SIZES["small"], va="bottom",
                bbox={"boxstyle": "square,pad=0.2", "facecolor": style.PAPER, "edgecolor": "none", "alpha": 0.9})
    axes[0].set_ylabel(style.label("height above shoulder axis", "m"))
    handles = [Line2D([], [], color=style.INK, linewidth=4, label="one extreme of the swing"),
               Line2D([], [], color=style.MIST, linewidth=3, label="the other extreme"),
               Line2D([], [], color=style.RULE, linewidth=1.0, linestyle=(0, (1, 2)), label="hanging at rest")]
    fig.legend(handles=handles, loc="outside lower center", ncols=3)
    return fig
