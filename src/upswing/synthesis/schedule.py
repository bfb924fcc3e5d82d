"""Gain schedules: the balance LQR over a grid of one rig parameter, and where each gain still stabilizes.

A payload clamped to link 2, a link swapped for a longer one, a heavier cart: the gain designed for one value of a
parameter is tried on the rig at every other grid value (the discrete loop Ad(p_i) - Bd(p_i) K_discrete(p_j), with
the delay line when one is designed in), and for each gain the contiguous run of grid values around its own design
point on which that loop is stable is reported. Between grid points nothing is checked: make the grid fine where it
matters.

Parameters are the entries of :data:`upswing.model.rig.PARAMETER_NAMES` (absolute values in SI units) and
``link2.payload``: a point mass [kg] added at link 2's tip, which moves link 2's mass, centre of mass and inertia
together (parallel-axis theorem).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from upswing.errors import RequestError
from upswing.model.linearize import linearize
from upswing.model.rig import PARAMETER_NAMES, Link, Rig
from upswing.model.schema import CART, LINK, TOP
from upswing.synthesis.balance import BalanceDesign, design_balance

PAYLOAD = "link2.payload"
SCHEDULE_PARAMETERS: tuple[str, ...] = (*PARAMETER_NAMES, PAYLOAD)
UNITS = {"mass": "kg", "length": "m", "com": "m", "inertia": "kg m^2", "damping": "N m s/rad", "coulomb": "N m",
         "gravity": "m/s^2", "payload": "kg"}


@dataclass(frozen=True)
class GainSchedule:
    """Balance designs over a parameter grid.

    Attributes
    ----------
    parameter : str
        The parameter varied (a name of :data:`SCHEDULE_PARAMETERS`).
    unit : str
        Its unit.
    values : ndarray, shape (N,)
        Grid values, increasing.
    K : ndarray, shape (N, n_inputs, n_states)
        Continuous LQR gain at each grid value.
    K_discrete : ndarray, shape (N, n_inputs, n_states + delay_samples * n_inputs)
        Discrete LQR gain at each grid value.
    closed_loop_poles : ndarray, shape (N, n_states)
        Continuous closed-loop poles at each grid value [1/s].
    closed_loop_poles_discrete : ndarray, shape (N, n_states + delay_samples * n_inputs)
        Discrete closed-loop poles at each grid value (dimensionless).
    stable : ndarray of bool, shape (N, N)
        stable[j, i]: K_discrete designed at values[j] stabilizes the rig at values[i].
    spectral_radius : ndarray, shape (N, N)
        Largest pole magnitude of that loop (stable below 1).
    stabilizing_interval : ndarray, shape (N, 2)
        For each gain j, the smallest and largest grid value of the contiguous stable run containing values[j].
    sample_rate : float
        [Hz].
    delay_samples : int
    state_names, input_names : tuple of str
    """

    parameter: str
    unit: str
    values: np.ndarray
    K: np.ndarray
    K_discrete: np.ndarray
    closed_loop_poles: np.ndarray
    closed_loop_poles_discrete: np.ndarray
    stable: np.ndarray
    spectral_radius: np.ndarray
    stabilizing_interval: np.ndarray
    sample_rate: float
    delay_samples: int
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]


def parameter_unit(parameter: str) -> str:
    return UNITS[parameter.rsplit(".", 1)[-1]]


def rig_at(rig: Rig, parameter: str, value: float) -> Rig:
    """A copy of ``rig`` with one parameter set to ``value`` (checked against the rig-file ranges).

    Raises
    ------
    RequestError
        For an unknown parameter, a cart parameter on a fixed base, or a value outside the accepted range.
    """
    if parameter not in SCHEDULE_PARAMETERS:
        raise RequestError(f"schedule parameter must be one of {', '.join(SCHEDULE_PARAMETERS)}; got {parameter!r}")
    if not math.isfinite(value):
        raise RequestError(f"{parameter} must be a finite number; got {value}")
    if parameter == PAYLOAD:
        if value < 0.0:
            raise RequestError(f"{PAYLOAD} must be in [0, inf) kg (a point mass at link 2's tip); got {value:g}")
        return replace(rig, link2=with_tip_mass(rig.link2, value))
    group, _, key = parameter.partition(".")
    if group == "cart" and rig.cart is None:
        raise RequestError(f"{parameter} needs a cart rig; {rig.source} has base = \"fixed\"")
    spec = TOP.key("gravity") if parameter == "gravity" else (CART if group == "cart" else LINK).key(key)
    if not spec.in_range(value):
        raise RequestError(f"{parameter} must be in {spec.range_text()} {spec.unit}; got {value:g}")
    p = rig.parameter_vector()
    p[PARAMETER_NAMES.index(parameter)] = value
    out = rig.with_parameters(p)
    for tag in ("link1", "link2"):
        link: Link = getattr(out, tag)
        if link.com > link.length:
            raise RequestError(f"{parameter} = {value:g} puts {tag}.com = {link.com:g} m beyond {tag}.length = "
                               f"{link.length:g} m; com must be in (0, length]")
    return out


def with_tip_mass(link: Link, mass: float) -> Link:
    """The link with a point mass [kg] added at its far end: new mass, centre of mass and inertia about it."""
    total = link.mass + mass
    com = (link.mass * link.com + mass * link.length) / total
    inertia = link.inertia + link.mass * (com - link.com) ** 2 + mass * (link.length - com) ** 2
    return replace(link, mass=total, com=com, inertia=inertia)


def gain_schedule(rig: Rig, parameter: str, values: np.ndarray, *, sample_rate: float | None = None,
                  delay_samples: int | None = None) -> GainSchedule:
    """Design the balance LQR at each grid value and cross-check every gain on every grid plant.

    Parameters
    ----------
    rig : Rig
    parameter : str
        One of :data:`SCHEDULE_PARAMETERS`.
    values : array_like, shape (N,)
        Grid values (sorted here), N >= 1.
    sample_rate, delay_samples : optional
        As :func:`~upswing.synthesis.balance.design_balance`.

    Returns
    -------
    GainSchedule
    """
    grid = np.sort(np.asarray(values, dtype=float).ravel())
    if grid.size == 0:
        raise RequestError("a gain schedule needs at least one grid value")
    designs: list[BalanceDesign] = []
    for v in grid:
        r = rig_at(rig, parameter, float(v))
        designs.append(design_balance(r, sample_rate=sample_rate, delay_samples=delay_samples,
                                      linear=linearize(r, "upright")))
    N = grid.size
    radius = np.empty((N, N))
    for j, dj in enumerate(designs):
        for i, di in enumerate(designs):
            radius[j, i] = np.max(np.abs(np.linalg.eigvals(di.Ad - di.Bd @ dj.K_discrete)))
    stable = radius < 1.0
    interval = np.empty((N, 2))
    for j in range(N):
        lo = hi = j
        if stable[j, j]:
            while lo > 0 and stable[j, lo - 1]:
                lo -= 1
            while hi < N - 1 and stable[j, hi + 1]:
                hi += 1
            interval[j] = grid[lo], grid[hi]
        else:
            interval[j] = np.nan, np.nan
    d0 = designs[0]
    return GainSchedule(
        parameter=parameter, unit=parameter_unit(parameter), values=grid,
        K=np.array([d.K for d in designs]), K_discrete=np.array([d.K_discrete for d in designs]),
        closed_loop_poles=np.array([d.closed_loop_poles for d in designs]),
        closed_loop_poles_discrete=np.array([d.closed_loop_poles_discrete for d in designs]),
        stable=stable, spectral_radius=radius, stabilizing_interval=interval, sample_rate=d0.sample_rate,
        delay_samples=d0.delay_samples, state_names=d0.state_names, input_names=d0.input_names,
    )
