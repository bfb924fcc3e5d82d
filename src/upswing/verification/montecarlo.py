"""Monte Carlo robustness: the closed loop under parameter uncertainty, from small random starts, seeded.

Parameters are drawn per rollout from the rig file's ``[uncertainty]`` spreads (relative to the nominal value):
``uniform``: p = p0 (1 + s U(-1, 1)); ``normal``: p = p0 (1 + s N(0, 1)) truncated at 3 s (redrawn beyond). Draws
are then kept physical, and each clip is counted and reported:

* masses, lengths and gravity stay >= 5 % of nominal (a normal spread of 0.9 could otherwise reach zero);
* a link's centre of mass stays inside it: 0 < com <= length (com is clipped to the drawn length);
* inertia, damping and Coulomb friction stay >= 0.

The success rate carries a 95 % Wilson interval (:mod:`upswing.verification.stats`). Which parameters the failures
follow is measured by the point-biserial correlation between "failed" and each parameter's relative deviation; with
N rollouts a |r| above about 2 / sqrt(N) is unlikely by chance (two standard errors of r under independence).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.verification.controllers import Controller
from upswing.verification.parallel import run_rollouts
from upswing.verification.simulate import STATUS, Rollouts, SimulationSetup
from upswing.verification.stats import point_biserial, wilson_interval

STREAM = 1  # noise streams of Monte Carlo runs (other studies use other numbers)
FLOOR = 0.05  # smallest fraction of nominal a mass, length or gravity may be drawn at


@dataclass(frozen=True)
class InitialOffsets:
    """Half-widths of the uniform box of initial offsets from upright: angles [rad], joint rates [rad/s], cart
    position [m] and speed [m/s]."""

    angle: float = 0.02
    rate: float = 0.05
    cart: float = 0.01
    cart_rate: float = 0.02

    def half_widths(self, rig: Rig) -> np.ndarray:
        return np.array([self.cart if s == "x" else self.cart_rate if s == "x_dot" else
                         self.rate if s.endswith("_dot") else self.angle for s in rig.state_names])


@dataclass(frozen=True)
class Correlation:
    """How failures follow one uncertain parameter: point-biserial r between failed (1) and the parameter's
    relative deviation, and the mean deviation among failed and held rollouts (fractions of nominal)."""

    parameter: str
    r: float
    mean_deviation_failed: float
    mean_deviation_held: float
    notable: bool


@dataclass(frozen=True)
class MonteCarloResult:
    """Outcome of a Monte Carlo run.

    Attributes
    ----------
    rollouts, seed : int
    successes : int
        Rollouts that held the links upright (status "held").
    success_rate : float
    success_interval : tuple of float
        95 % Wilson interval of the success rate.
    outcomes : dict
        Count per status name.
    correlations : tuple of Correlation
        One per uncertain parameter, strongest first (empty when all held or all failed).
    clipped : dict
        Number of draws clipped to stay physical, per parameter.
    offsets : InitialOffsets
    distribution : str
    results : Rollouts
    parameters : ndarray (N, 16)
        The drawn parameters.
    initial_states : ndarray (N, n_states)
        The drawn starts (absolute states, rig state order) [m, rad, m/s, rad/s].
    simulate_s : float
        Wall time in the batch simulation [s].
    horizon_s : float
        Simulated time per rollout [s].
    """

    rollouts: int
    seed: int
    successes: int
    success_rate: float
    success_interval: tuple[float, float]
    outcomes: dict[str, int]
    correlations: tuple[Correlation, ...]
    clipped: dict[str, int]
    offsets: InitialOffsets
    distribution: str
    results: Rollouts
    parameters: np.ndarray
    initial_states: np.ndarray
    simulate_s: float
    horizon_s: float


def check_spreads(rig: Rig) -> dict[str, float]:
    """The rig's relative spreads by parameter name, validated.

    Raises
    ------
    RequestError
        For a spread that is negative, not finite or 1 or more, or names no known parameter.
    """
    spreads = {}
    for name, value in rig.uncertainty.spreads:
        if name not in PARAMETER_NAMES:
            raise RequestError(f"{rig.source}: uncertainty names {name!r}, which is not a parameter "
                               f"(known: {', '.join(PARAMETER_NAMES)})")
        if not (np.isfinite(value) and 0.0 <= value < 1.0):
            raise RequestError(f"{rig.source}: uncertainty.{name} must be a relative spread in [0, 1); got {value}")
        spreads[name] = float(value)
    if rig.uncertainty.distribution not in ("uniform", "normal"):
        raise RequestError(f"{rig.source}: uncertainty.distribution must be \"uniform\" or \"normal\"; got "
                           f"{rig.uncertainty.distribution!r}")
    return spreads


def sample_parameters(rig: Rig, n: int, rng: np.random.Generator) -> tuple[np.ndarray, dict[str, int]]:
    """Draw ``n`` parameter vectors around the rig's nominal values (see the module docstring).

    Returns
    -------
    (ndarray (n, 16), dict)
        The draws and the number of clipped draws per parameter name.
    """
    spreads = check_spreads(rig)
    nominal = rig.parameter_vector()
    s = np.array([spreads.get(name, 0.0) for name in PARAMETER_NAMES])
    if rig.uncertainty.distribution == "uniform":
        z = rng.uniform(-1.0, 1.0, (n, s.size))
    else:
        z = rng.standard_normal((n, s.size))
        outside = np.abs(z) > 3.0
        while np.any(outside):  # truncation at 3 sigma by redrawing
            z[outside] = rng.standard_normal(int(outside.sum()))
            outside = np.abs(z) > 3.0
    P = nominal * (1.0 + s * z)
    clipped = dict.fromkeys(PARAMETER_NAMES, 0)
    index = {name: i for i, name in enumerate(PARAMETER_NAMES)}

    def floor(name: str, low: np.ndarray | float) -> None:
        i = index[name]
        below = P[:, i] < low
        clipped[name] += int(below.sum())
        P[:, i] = np.maximum(P[:, i], low)

    for name in PARAMETER_NAMES:
        kind = name.split(".")[-1]
        if kind in ("mass", "length", "gravity") and nominal[index[name]] > 0:
            floor(name, FLOOR * nominal[index[name]])
        elif kind in ("inertia", "damping", "coulomb"):
            floor(name, 0.0)
    for link in ("link1", "link2"):
        floor(f"{link}.com", FLOOR * nominal[index[f"{link}.com"]])
        i, j = index[f"{link}.com"], index[f"{link}.length"]
        over = P[:, i] > P[:, j]
        clipped[f"{link}.com"] += int(over.sum())
        P[:, i] = np.minimum(P[:, i], P[:, j])
    return P, {k: v for k, v in clipped.items() if v}


def sample_offsets(rig: Rig, n: int, offsets: InitialOffsets, rng: np.random.Generator) -> np.ndarray:
    """Initial states: upright plus a uniform offset in the :class:`InitialOffsets` box, shape (n, n_states)."""
    return rng.uniform(-1.0, 1.0, (n, rig.n_states)) * offsets.half_widths(rig)


def failure_correlations(rig: Rig, results: Rollouts, P: np.ndarray,
                         failed: np.ndarray | None = None) -> tuple[Correlation, ...]:
    """Point-biserial correlation of failure with each uncertain parameter's relative deviation, strongest first.

    ``failed`` (bool, one per rollout) overrides what counts as a failure (default: not held)."""
    failed = ~results.held if failed is None else np.asarray(failed, dtype=bool)
    n = failed.size
    if failed.all() or not failed.any():
        return ()
    nominal = rig.parameter_vector()
    out = []
    for name, spread in rig.uncertainty.spreads:
        if spread <= 0:
            continue
        i = PARAMETER_NAMES.index(name)
        deviation = P[:, i] / nominal[i] - 1.0
        r = point_biserial(failed, deviation)
        out.append(Correlation(parameter=name, r=r, mean_deviation_failed=float(deviation[failed].mean()),
                               mean_deviation_held=float(deviation[~failed].mean()),
                               notable=abs(r) > 2.0 / np.sqrt(n)))
    return tuple(sorted(out, key=lambda c: -abs(c.r)))


def run_monte_carlo(rig: Rig, controller: Controller, rollouts: int, *, seed: int = 0,
                    setup: SimulationSetup | None = None, offsets: InitialOffsets | None = None,
                    workers: int | None = None, scheduler: str | None = None,
                    progress: bool = False) -> MonteCarloResult:
    """Simulate ``rollouts`` closed loops with drawn parameters and starts; count how many hold.

    Raises
    ------
    RequestError
        For fewer than one rollout, a negative seed, or a bad uncertainty table.
    """
    if isinstance(rollouts, bool) or not isinstance(rollouts, (int, np.integer)) or rollouts < 1:
        raise RequestError(f"rollouts must be a whole number >= 1; got {rollouts!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise RequestError(f"seed must be a whole number >= 0; got {seed!r}")
    setup = SimulationSetup() if setup is None else setup
    offsets = InitialOffsets() if offsets is None else offsets
    rng = np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM, 0)))
    P, clipped = sample_parameters(rig, int(rollouts), rng)
    x0 = sample_offsets(rig, int(rollouts), offsets, rng)
    results, seconds = run_rollouts(rig, controller, x0, P, setup=setup, seed=int(seed), stream=STREAM,
                                    workers=workers, scheduler=scheduler, progress=progress)
    successes = int(results.held.sum())
    outcomes = {STATUS[k]: int(np.sum(results.status == k)) for k in range(len(STATUS)) if np.any(results.status == k)}
    return MonteCarloResult(
        rollouts=int(rollouts), seed=int(seed), successes=successes, success_rate=successes / int(rollouts),
        success_interval=wilson_interval(successes, int(rollouts)), outcomes=outcomes,
        correlations=failure_correlations(rig, results, P), clipped=clipped, offsets=offsets,
        distribution=rig.uncertainty.distribution, results=results, parameters=P, initial_states=x0,
        simulate_s=seconds,
        horizon_s=max(1, round(setup.horizon * controller.sample_rate)) / controller.sample_rate)
