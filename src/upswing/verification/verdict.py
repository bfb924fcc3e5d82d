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

The controller is exactly what ``upswing balance`` exports: the discrete LQR of
:func:`upswing.synthesis.balance.design_balance` with, on encoders, the estimator of
:func:`upswing.synthesis.estimation.design_estimator` (the Kalman filter by default, the filtered finite difference
on request).

The verdict rule (:func:`decide`, :data:`VERDICT_RULE`): ``pass`` when the lower end of the 95 % Wilson interval of
the Monte Carlo success rate is at least the required success rate (``[verification].required_success``, default
0.95) and every budget that has a limit is within it; else ``fail``, with a reason naming each thing that failed.
Requiring every rollout to hold would make one rare fall in a thousand runs under +-10 % parameter spreads fail a
rig whose success rate is shown to be above 99 %; requiring only the point estimate would pass a rig on ten lucky
runs. The interval's lower end asks for what the runs actually show, and says how many runs that takes
(:func:`upswing.verification.stats.trials_to_show`).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from upswing.errors import RequestError
from upswing.model.rig import PARAMETER_NAMES, Rig
from upswing.synthesis.balance import design_balance
from upswing.synthesis.estimation import KINDS, EstimatorDesign, design_estimator
from upswing.verification.budgets import Budget, compute_budgets, tightest_budget, usage
from upswing.verification.controllers import MEASUREMENTS, balance_controller
from upswing.verification.hazards import HazardNote, hazard_notes
from upswing.verification.montecarlo import InitialOffsets, MonteCarloResult, run_monte_carlo, sample_offsets
from upswing.verification.parallel import run_rollouts
from upswing.verification.roa import RegionOfAttraction, estimate_region
from upswing.verification.simulate import SimulationSetup, choose_substeps, simulate
from upswing.verification.stats import trials_to_show, wilson_interval

STEP_TOLERANCE = 1e-6  # rad or m, on angles and cart position: far below one encoder count (1.5e-3 rad at 4096)
DROPOUTS_MS = (2.0, 5.0, 10.0, 20.0, 50.0, 100.0)
CHECK_STREAM, DROPOUT_STREAM = 3, 4
VERDICT_RULE = ("pass when the lower end of the 95 % Wilson interval of the Monte Carlo success rate is at least the "
                "required success rate and every budget that has a limit is within it")


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
class Decision:
    """A verdict and what decides it (see :func:`decide`).

    Attributes
    ----------
    verdict : str
        ``"pass"`` or ``"fail"``.
    reasons : tuple of str
        One sentence per thing that failed (empty on a pass).
    limited_by : tuple of str
        What binds: on a fail the failed items (``"success-rate bound"``, ``"budget <name>"``); on a pass the
        success-rate bound and the budget closest to its limit, with their headroom.
    required_success : float
        Required success rate [fraction].
    success_lower_bound : float
        Lower end of the 95 % Wilson interval of the success rate [fraction].
    """

    verdict: str
    reasons: tuple[str, ...]
    limited_by: tuple[str, ...]
    required_success: float
    success_lower_bound: float


def decide(successes: int, rollouts: int, budgets: tuple[Budget, ...], required_success: float, *,
           outcomes: dict[str, int] | None = None) -> Decision:
    """Apply :data:`VERDICT_RULE` to a Monte Carlo count and its budgets.

    Parameters
    ----------
    successes, rollouts : int
        Rollouts that held, of all rollouts.
    budgets : tuple of Budget
        Lines with ``ok`` False fail the verdict; ``ok`` None (no limit) never does.
    required_success : float
        Fraction in (0, 1) that the lower end of the 95 % Wilson interval (Wilson, 1927) must reach.
    outcomes : dict, optional
        Count per outcome (:data:`upswing.verification.simulate.STATUS`), quoted in the reason.

    Raises
    ------
    RequestError
        For a required success rate outside (0, 1) or an impossible count.
    """
    if not 0.0 < required_success < 1.0:
        raise RequestError(f"the required success rate must be a fraction in (0, 1); got {required_success:g}")
    low, high = wilson_interval(successes, rollouts)
    reasons, limited = [], []
    if low < required_success:
        text = (f"success rate not shown to reach the required {required_success:.1%}: {successes} of {rollouts} "
                f"rollouts held ({successes / rollouts:.1%}; 95 % Wilson interval {low:.2%} .. {high:.2%}, lower "
                f"end below {required_success:.1%})")
        failures = ", ".join(f"{k}: {v}" for k, v in (outcomes or {}).items() if k != "held")
        if failures:
            text += f"; did not hold: {failures}"
        need = trials_to_show(required_success)
        if rollouts < need:
            text += (f"; even with every rollout held, {rollouts} rollouts cannot show {required_success:.1%}: "
                     f"run at least {need}")
        reasons.append(text)
        limited.append("success-rate bound")
    over = [b for b in budgets if b.ok is False]
    reasons += [f"budget {b.name} = {b.value:.4g} {b.unit} exceeds its limit {b.limit:.4g} {b.unit}" for b in over]
    limited += [f"budget {b.name}" for b in over]
    if not reasons:
        limited.append(f"success-rate bound: {low:.2%} shown against {required_success:.1%} required")
        tight = tightest_budget(budgets)  # peak-effort lines are clamped by the actuator, so they are not ranked
        if tight is not None:
            limited.append(f"closest budget: {tight.name} = {tight.value:.4g} {tight.unit}, "
                           f"{usage(tight):.0%} of its limit {tight.limit:.4g} {tight.unit}")
    return Decision(verdict="fail" if reasons else "pass", reasons=tuple(reasons), limited_by=tuple(limited),
                    required_success=float(required_success), success_lower_bound=float(low))


@dataclass(frozen=True)
class Verification:
    """Everything :func:`verify_balance` found. ``verdict`` is ``"pass"`` or ``"fail"`` with ``reasons``;
    ``decision`` says what decided it; ``estimator`` describes the estimator in words and ``estimator_kind`` is
    one of :data:`upswing.synthesis.estimation.KINDS` (``"none"`` with exact state feedback)."""

    controller: str
    measurement: str
    estimator: str
    estimator_kind: str
    setup: SimulationSetup
    integration: IntegrationCheck
    monte_carlo: MonteCarloResult
    region: RegionOfAttraction
    dropout: DropoutStudy
    budgets: tuple[Budget, ...]
    hazards: tuple[HazardNote, ...]
    verdict: str
    reasons: tuple[str, ...]
    decision: Decision
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
                   estimator: str = "kalman", required_success: float | None = None, horizon: float = 5.0,
                   scheduler: str | None = None, workers: int | None = None, progress: bool = False,
                   roa_samples: int = 1500) -> Verification:
    """Verify the rig's balance LQR on the nonlinear model (see the module docstring).

    Parameters
    ----------
    rig : Rig
    rollouts : int
        Monte Carlo rollouts (>= 1).
    seed : int
        Seed of every random draw; the same seed gives the same result on any number of processes or workers.
    measurement : {"encoders", "state"}
        Encoders with an estimator (the default) or ideal full-state feedback.
    estimator : {"kalman", "finite-difference"}
        With encoders: the steady-state Kalman filter (default) or the filtered finite difference, as ``upswing
        balance`` designs and exports them. Ignored with ``measurement = "state"``.
    required_success : float, optional
        Required success rate for a pass [fraction in (0, 1)]; default the rig's
        ``[verification].required_success``.
    horizon : float
        Simulated seconds per Monte Carlo rollout.
    scheduler : str, optional
        Dask scheduler address; default: local processes.

    Raises
    ------
    RequestError
        For an unknown measurement or estimator, or a required success rate outside (0, 1).
    """
    start = time.perf_counter()
    if measurement not in MEASUREMENTS:
        raise RequestError(f"measurement must be one of {', '.join(MEASUREMENTS)}; got {measurement!r}")
    if estimator not in KINDS:
        raise RequestError(f"estimator must be one of {', '.join(KINDS)}; got {estimator!r}")
    required = rig.verification.required_success if required_success is None else float(required_success)
    if not 0.0 < required < 1.0:
        raise RequestError(f"the required success rate must be a fraction in (0, 1); got {required:g}")
    design = design_balance(rig)
    est = design_estimator(rig, design, estimator) if measurement == "encoders" else None
    controller = balance_controller(rig, measurement=measurement, design=design, estimator=est)
    setup = SimulationSetup(horizon=horizon, delay_samples=design.delay_samples)
    check = check_integration(rig, controller, setup, seed=seed)
    setup = replace(setup, substeps=check.substeps)
    mc = run_monte_carlo(rig, controller, rollouts, seed=seed, setup=setup, workers=workers, scheduler=scheduler,
                         progress=progress)
    region = estimate_region(rig, controller, design, seed=seed, setup=replace(setup, horizon=4.0),
                             samples=roa_samples, workers=workers, scheduler=scheduler)
    drop = dropout_study(rig, controller, setup, seed=seed, workers=workers, scheduler=scheduler)
    budgets = compute_budgets(rig, mc.results, mc.horizon_s, hold_s=setup.settling.hold)
    catch = region.axis_catch
    rho_summary = ", ".join(f"{s} {lo:+.3g}..{hi:+.3g}" for s, (lo, hi) in catch.items() if s in ("theta1", "theta2"))
    hazards = hazard_notes(rig, budgets, rho_summary=f"caught along single axes: {rho_summary} rad",
                           success_rate=mc.success_rate, dropout_ms=drop.longest_held_ms,
                           dropout_tested_ms=drop.durations_ms)
    decision = decide(mc.successes, mc.rollouts, budgets, required, outcomes=mc.outcomes)
    return Verification(
        controller=f"discrete LQR at {design.sample_rate:g} Hz, delay {design.delay_samples} samples",
        measurement=measurement, estimator=estimator_text(est), estimator_kind="none" if est is None else est.kind,
        setup=setup, integration=check, monte_carlo=mc, region=region, dropout=drop, budgets=budgets,
        hazards=hazards, verdict=decision.verdict, reasons=decision.reasons, decision=decision,
        total_s=time.perf_counter() - start)


def estimator_text(est: EstimatorDesign | None) -> str:
    """The estimator in words, with its tuning."""
    if est is None:
        return "exact state (ideal)"
    if est.kind == "kalman":
        noise = ", ".join(f"{v:g}" for v in est.process_noise_std)
        text = f"steady-state Kalman filter (process noise {noise} in coordinate order, rad/s^2 or m/s^2"
        if np.any(est.effort_noise_std > 0.0):
            text += "; effort noise " + ", ".join(f"{v:g}" for v in est.effort_noise_std) + " in input order, N or N m"
        return text + ")"
    return f"filtered finite difference (cut-off {est.cutoff_hz:g} Hz)"
