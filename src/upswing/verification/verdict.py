"""The whole verification of a rig's balance controller: one call, one result a person can act on.

:func:`verify_balance` runs, in order:

1. an integration check: a few rollouts (encoders ideal, so that a one-count flip cannot hide the integration
   error; Coulomb friction off, see :func:`check_integration`) at the chosen RK4 step and at half of it;
   Richardson's estimate of the step's error, |x_h - x_(h/2)| * 16 / 15 for a fourth-order method, must stay below
   :data:`STEP_TOLERANCE`, else the step is halved (up to three times);
2. Monte Carlo robustness (:mod:`upswing.verification.montecarlo`);
3. the region of attraction (:mod:`upswing.verification.roa`);
4. a sensor drop-out study: from small offsets, the encoder reading freezes for 2 to 100 ms at t = 1 s;
5. budgets and hazard notes (:mod:`upswing.verification.budgets`, :mod:`upswing.verification.hazards`).

The verdict is ``pass`` when every Monte Carlo rollout held and every budget that has a limit is within it.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.synthesis.balance import design_balance
from upswing.verification.budgets import Budget, compute_budgets
from upswing.verification.controllers import balance_controller
from upswing.verification.hazards import HazardNote, hazard_notes
from upswing.verification.montecarlo import InitialOffsets, MonteCarloResult, run_monte_carlo, sample_offsets
from upswing.verification.parallel import run_rollouts
from upswing.verification.roa import RegionOfAttraction, estimate_region
from upswing.verification.simulate import SimulationSetup, choose_substeps, simulate

STEP_TOLERANCE = 1e-6  # rad or m, on angles and cart position: far below one encoder count (1.5e-3 rad at 4096)
DROPOUTS_MS = (2.0, 5.0, 10.0, 20.0, 50.0, 100.0)
CHECK_STREAM, DROPOUT_STREAM = 3, 4


@dataclass(frozen=True)
class IntegrationCheck:
    """RK4 step used and its estimated error on angles and cart position [rad, m] (Richardson, step doubling) on
    ``rollouts`` trajectories without Coulomb friction; ``coulomb_sensitivity`` is the largest change of an angle or
    the cart position [rad, m] when the step is halved with Coulomb friction on (first-order in h)."""

    substeps: int
    step: float
    error_estimate: float
    tolerance: float
    rollouts: int
    horizon_s: float
    coulomb_sensitivity: float


@dataclass(frozen=True)
class DropoutStudy:
    """Held fraction per frozen-reading duration [ms]; ``longest_held_ms`` is the longest with every run held
    (None if even the shortest failed)."""

    durations_ms: tuple[float, ...]
    held_fraction: tuple[float, ...]
    longest_held_ms: float | None
    rollouts_each: int


@dataclass(frozen=True)
class Verification:
    """Everything :func:`verify_balance` found. ``verdict`` is ``"pass"`` or ``"fail"`` with ``reasons``."""

    controller: str
    measurement: str
    estimator: str
    setup: SimulationSetup
    integration: IntegrationCheck
    monte_carlo: MonteCarloResult
    region: RegionOfAttraction
    dropout: DropoutStudy
    budgets: tuple[Budget, ...]
    hazards: tuple[HazardNote, ...]
    verdict: str
    reasons: tuple[str, ...]
    total_s: float


def _without_coulomb(rig: Rig) -> Rig:
    p = rig.parameter_vector()
    return rig.with_parameters(np.array([0.0 if name.endswith(".coulomb") else v
                                         for name, v in zip(PARAMETER_NAMES, p, strict=True)]))


def check_integration(rig: Rig, controller, setup: SimulationSetup, *, seed: int, rollouts: int = 8,
                      max_halvings: int = 3) -> IntegrationCheck:
    """Step-doubling check of the RK4 step (see the module docstring); returns the substeps to use.

    The check runs with Coulomb friction removed: its sign switch has no smooth solution for a fixed-step method
    to converge on (errors there shrink only like h), so it would measure the switch, not the step. The spread that
    the switch adds is reported separately as ``coulomb_sensitivity`` (same comparison with friction on).
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(CHECK_STREAM, 0)))
    x0 = sample_offsets(rig, rollouts, InitialOffsets(angle=0.05, rate=0.2, cart=0.02, cart_rate=0.05), rng)
    base = replace(setup, quantize=False, noise=False, record=True, horizon=min(setup.horizon, 2.0))
    nsub = choose_substeps(rig, controller.sample_rate) if setup.substeps is None else setup.substeps
    smooth = _without_coulomb(rig)
    nq = rig.n_states // 2

    def difference(r: Rig, k: int) -> float:
        coarse = simulate(r, controller, x0, setup=replace(base, substeps=k), seed=seed, stream=CHECK_STREAM)
        fine = simulate(r, controller, x0, setup=replace(base, substeps=2 * k), seed=seed, stream=CHECK_STREAM)
        both = coarse.held & fine.held  # a falling rollout's divergence is not integration error
        if not both.any():
            return 0.0
        return float(np.max(np.abs(coarse.states[:, both, :nq] - fine.states[:, both, :nq]))) * 16.0 / 15.0

    for _ in range(max_halvings + 1):
        error = difference(smooth, nsub)
        if error <= STEP_TOLERANCE:
            break
        nsub *= 2
    return IntegrationCheck(substeps=nsub, step=1.0 / (controller.sample_rate * nsub), error_estimate=error,
                            tolerance=STEP_TOLERANCE, rollouts=rollouts, horizon_s=base.horizon,
                            coulomb_sensitivity=difference(rig, nsub) / 16.0 * 15.0)


def dropout_study(rig: Rig, controller, setup: SimulationSetup, *, seed: int, rollouts: int = 32,
                  workers: int | None = None, scheduler: str | None = None) -> DropoutStudy:
    """Held fraction when the encoder reading freezes at t = 1 s for each of :data:`DROPOUTS_MS`."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(DROPOUT_STREAM, 0)))
    x0 = sample_offsets(rig, rollouts, InitialOffsets(), rng)
    P = np.tile(rig.parameter_vector(), (rollouts, 1))
    fractions = []
    for k, ms in enumerate(DROPOUTS_MS):
        study = replace(setup, horizon=3.0, dropout=(1.0, ms / 1000.0))
        res, _ = run_rollouts(rig, controller, x0, P, setup=study, seed=seed, stream=DROPOUT_STREAM * 100 + k,
                              workers=workers, scheduler=scheduler)
        fractions.append(float(res.held.mean()))
    longest = None
    for ms, f in zip(DROPOUTS_MS, fractions, strict=True):
        if f < 1.0:
            break
        longest = ms
    return DropoutStudy(durations_ms=DROPOUTS_MS, held_fraction=tuple(fractions), longest_held_ms=longest,
                        rollouts_each=rollouts)


def verify_balance(rig: Rig, *, rollouts: int = 1000, seed: int = 0, measurement: str = "encoders",
                   horizon: float = 5.0, scheduler: str | None = None, workers: int | None = None,
                   progress: bool = False, roa_samples: int = 1500) -> Verification:
    """Verify the rig's balance LQR on the nonlinear model (see the module docstring).

    Parameters
    ----------
    rig : Rig
    rollouts : int
        Monte Carlo rollouts (>= 1).
    seed : int
        Seed of every random draw; the same seed gives the same result on any number of processes or workers.
    measurement : {"encoders", "state"}
        Encoders with a Kalman filter (the default) or ideal full-state feedback.
    horizon : float
        Simulated seconds per Monte Carlo rollout.
    scheduler : str, optional
        Dask scheduler address; default: local processes.
    """
    start = time.perf_counter()
    design = design_balance(rig)
    controller = balance_controller(rig, measurement=measurement, design=design)
    estimator = "exact state (ideal)" if controller.observer is None else controller.observer.kind
    setup = SimulationSetup(horizon=horizon)
    check = check_integration(rig, controller, setup, seed=seed)
    setup = replace(setup, substeps=check.substeps)
    mc = run_monte_carlo(rig, controller, rollouts, seed=seed, setup=setup, workers=workers, scheduler=scheduler,
                         progress=progress)
    region = estimate_region(rig, controller, design, seed=seed, setup=replace(setup, horizon=4.0),
                             samples=roa_samples, workers=workers, scheduler=scheduler)
    drop = dropout_study(rig, controller, setup, seed=seed, workers=workers, scheduler=scheduler)
    budgets = compute_budgets(rig, mc.results, mc.horizon_s)
    catch = region.axis_catch
    rho_summary = ", ".join(f"{s} {lo:+.3g}..{hi:+.3g}" for s, (lo, hi) in catch.items() if s in ("theta1", "theta2"))
    hazards = hazard_notes(rig, budgets, rho_summary=f"caught along single axes: {rho_summary} rad",
                           success_rate=mc.success_rate, dropout_ms=drop.longest_held_ms,
                           dropout_tested_ms=drop.durations_ms)
    reasons = []
    if mc.successes < mc.rollouts:
        reasons.append(f"{mc.rollouts - mc.successes} of {mc.rollouts} Monte Carlo rollouts did not hold "
                       f"({', '.join(f'{k}: {v}' for k, v in mc.outcomes.items() if k != 'held')})")
    reasons += [f"{b.name} = {b.value:.4g} {b.unit} exceeds {b.limit:.4g} {b.unit}" for b in budgets if b.ok is False]
    return Verification(
        controller=f"discrete LQR at {design.sample_rate:g} Hz, delay {design.delay_samples} samples",
        measurement=measurement, estimator=estimator, setup=setup, integration=check, monte_carlo=mc, region=region,
        dropout=drop, budgets=budgets, hazards=hazards, verdict="fail" if reasons else "pass",
        reasons=tuple(reasons), total_s=time.perf_counter() - start)
