"""Verification of the whole swing-up manoeuvre: swing-up law, catch, balance, on the uncertain nonlinear rig.

:func:`verify_swingup` runs, in order:

1. the swing-up law: ``"optimal"`` tracks an optimized trajectory with its time-varying LQR table (exactly the
   ``swingup.csv`` law); ``"energy"`` runs the family's energy-based law (:mod:`upswing.synthesis.swingup.energy`);
2. the hand-over level rho_in: the rig file's ``[swingup].handover_level``, else :data:`HANDOVER_FRACTION` of the
   balance controller's simulated region of attraction (:mod:`upswing.verification.roa`; a margin because the
   catch starts from a moving state whose rates are estimated by finite differences), and rho_out =
   ``[swingup].release_factor`` rho_in (hysteresis);
3. a nominal run (nominal parameters; the exact start, for the energy laws :data:`ENERGY_KICK` off hanging; encoders
   with quantization and noise) and a Monte Carlo run over the rig's ``[uncertainty]`` (parameters drawn as
   :func:`upswing.verification.montecarlo.sample_parameters` does, starts uniform in a small box around the nominal
   start), with sampling, saturation and the motor line, quantization, noise and the computation delay of the batch
   engine (:mod:`upswing.verification.simulate`);
4. a drop-out study (``dropout_study=True``, the default): the Monte Carlo's first block of runs (up to
   :data:`CHUNK`) rerun with the encoder readings frozen for 2 to 100 ms at the nominal run's fastest point and at
   its hand-over
   (:mod:`upswing.verification.swingup_dropout`): the longest freeze that keeps the required catch rate, and from
   it the stale-reading threshold of the drive's supervision;
5. budgets and hazard notes (:mod:`upswing.verification.budgets`, :mod:`upswing.verification.hazards`, plus notes
   on the swing-up itself).

Success (per rollout) = caught and held: balance engaged at the last sample, no failure, and the state inside the
settling box for the final second of the horizon. The horizon is the plan's duration plus ``settle`` seconds
(optimal), or ``horizon`` (energy, default :data:`ENERGY_HORIZON`).

The verdict applies :func:`upswing.verification.verdict.decide` (lower end of the 95 % Wilson interval against the
required success rate, and every rated budget within its limit) with one change: time in saturation is reported
but not judged, because a swing-up rides its input limit by design (the balance-loop policy of
:data:`upswing.verification.budgets.SATURATION_SHARE` does not apply to it).

The rollouts run in this process, in chunks, so that the controller's hand-over log is read directly
(:mod:`upswing.verification.swingup_control`); a swing-up check needs hundreds, not hundreds of thousands, of them.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np

from upswing.errors import RequestError, SynthesisError
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import Rig
from upswing.safety import CAUTIONS
from upswing.synthesis.balance import design_balance
from upswing.synthesis.swingup import SwingUpPlan, plan_swingup
from upswing.synthesis.swingup.energy import energy_law_params
from upswing.synthesis.swingup.tracking import HandoverRule, TrackingTable, handover_rule, tvlqr_from_reference
from upswing.verification.budgets import Budget, compute_budgets
from upswing.verification.controllers import MEASUREMENTS, balance_controller
from upswing.verification.hazards import HazardNote, hazard_notes
from upswing.verification.montecarlo import (
    Correlation,
    InitialOffsets,
    failure_correlations,
    sample_offsets,
    sample_parameters,
)
from upswing.verification.roa import estimate_region
from upswing.verification.simulate import STATUS, Bounds, Rollouts, SimulationSetup, simulate
from upswing.verification.stats import wilson_interval
from upswing.verification.supervision import Supervision, derive_supervision
from upswing.verification.swingup_control import CatchController, energy_law, tracking_law
from upswing.verification.swingup_dropout import (
    SwingUpDropoutStudy,
    freeze_moments,
    freeze_samples,
    run_dropout_study,
    study_rollouts,
)
from upswing.verification.verdict import Decision, decide

METHODS = ("optimal", "energy")
STREAM = 5  # noise and draw stream of swing-up runs (the balance studies use 1-4)
NOMINAL_STREAM = 6
HANDOVER_FRACTION = 0.5
ENERGY_KICK = 0.05  # rad, the energy law's nominal start offset from hanging (theta1)
# Rate filter of the energy laws on encoders [Hz]. Measured on the demo acrobot (rho_in = 2000, 16 rollouts, 25 s):
# at the default sample_rate / 10 = 50 Hz the one-count steps of a 4096-count encoder, differentiated at 500 Hz, drown
# the slow small swings the law must pump, friction wins and nothing is caught (0 of 16); at 20 Hz 6 of 16 are
# caught. Tracking estimates rates reference-aided instead (upswing.verification.swingup_control).
ENERGY_RATE_CUTOFF = 20.0
ENERGY_HORIZON = 25.0  # s: the demo acrobot's energy law caught at up to ~23 s (benchmarks/energy_swingup.py: 9-19 s)
CHUNK = 128
START_OFFSETS = InitialOffsets(angle=0.02, rate=0.05, cart=0.01, cart_rate=0.02)

SWINGUP_CAUTIONS: tuple[str, ...] = (
    "A swing-up moves the links through their whole circle at speed: nobody inside the swept zone, guards closed, "
    "and the first runs at reduced peak with an emergency stop within reach (ISO 13850, ISO 14120).",
    "The success rate is a simulation of the model with the rig file's uncertainty; unmodelled effects (backlash, "
    "cable drag, a loose clamp) are not in it. Watch the first real swing-ups from outside the guard.",
    *CAUTIONS,
)


@dataclass(frozen=True)
class NominalRun:
    """The nominal rollout: nominal parameters, the exact start, encoders as configured.

    Attributes
    ----------
    status : str
        One of :data:`upswing.verification.simulate.STATUS`.
    caught : bool
        Caught and held (the success definition of the module docstring).
    handover_time : float
        First engagement of the balance controller [s] (NaN if never).
    times : ndarray (K + 1,)
    states : ndarray (K + 1, n_states)
    inputs : ndarray (K, n_inputs)
        Applied inputs [N m or N].
    """

    status: str
    caught: bool
    handover_time: float
    times: np.ndarray
    states: np.ndarray
    inputs: np.ndarray


@dataclass(frozen=True)
class SwingUpVerification:
    """Everything :func:`verify_swingup` found.

    Attributes
    ----------
    method : str
        ``"optimal"`` or ``"energy"``.
    law : str
        The swing-up law in words.
    plan : SwingUpPlan or None
        The optimized trajectory (``"optimal"``).
    table : TrackingTable or None
        Its time-varying LQR table (``"optimal"``): what ``swingup.csv`` holds.
    measurement : str
    rho_in, rho_out : float
        Hand-over levels of the balance cost-to-go [-].
    rho_source : str
        Where rho_in came from, in words.
    horizon_s : float
        Simulated time per rollout [s].
    nominal : NominalRun
    rollouts, seed, successes : int
    success_rate : float
    success_interval : tuple of float
        95 % Wilson interval.
    outcomes : dict
        Count per outcome ("caught and held", "not caught", and the simulator's failure statuses).
    handover_times : ndarray (rollouts,)
        Per rollout, the first hand-over [s] (NaN if never).
    handover_summary : dict
        Over the successful rollouts: ``min``, ``median``, ``p95``, ``max`` [s] (NaN when none succeeded).
    budgets : tuple of Budget
    hazards : tuple of HazardNote
    verdict : str
        ``"pass"`` or ``"fail"``.
    reasons : tuple of str
    decision : Decision
    required_success : float
    results : Rollouts
    parameters : ndarray (rollouts, 16)
    simulate_s, total_s : float
        Wall time of the batch simulation and of the whole call [s].
    cautions : tuple of str
    caught : ndarray of bool (rollouts,)
        Per rollout, caught and held (the success definition of the module docstring).
    correlations : tuple of Correlation
        How the misses follow each uncertain parameter, strongest first (empty when none or all were caught):
        the number to measure better when the catch rate falls short.
    level_times : ndarray (rollouts,) or None
        Per rollout, the first time the balance cost-to-go reached rho_in [s] (NaN if never).
    supervision : Supervision or None
        Stop conditions for the firmware derived from the runs (:mod:`upswing.verification.supervision`).
    rule : HandoverRule or None
        The hand-over rule the runs used (P, x_eq, rho_in, rho_out): what the firmware must apply.
    dropout_study : SwingUpDropoutStudy or None
        Catch rates with the readings frozen, the longest tolerated freeze and the stale-reading threshold
        (:mod:`upswing.verification.swingup_dropout`); None when not run.
    """

    method: str
    law: str
    plan: SwingUpPlan | None
    table: TrackingTable | None
    measurement: str
    rho_in: float
    rho_out: float
    rho_source: str
    horizon_s: float
    nominal: NominalRun
    rollouts: int
    seed: int
    successes: int
    success_rate: float
    success_interval: tuple[float, float]
    outcomes: dict[str, int]
    handover_times: np.ndarray
    handover_summary: dict[str, float]
    budgets: tuple[Budget, ...]
    hazards: tuple[HazardNote, ...]
    verdict: str
    reasons: tuple[str, ...]
    decision: Decision
    required_success: float
    results: Rollouts
    parameters: np.ndarray
    simulate_s: float
    total_s: float
    cautions: tuple[str, ...] = SWINGUP_CAUTIONS
    caught: np.ndarray | None = None
    correlations: tuple[Correlation, ...] = ()
    level_times: np.ndarray | None = None
    supervision: Supervision | None = None
    rule: HandoverRule | None = None
    dropout_study: SwingUpDropoutStudy | None = None

    def outcome_of(self, i: int) -> str:
        """How rollout ``i`` ended, in the words of ``outcomes``."""
        if self.caught is not None and self.caught[i]:
            return "caught and held"
        if self.results.held[i]:
            return "held but not by the balance controller"
        return STATUS[int(self.results.status[i])]


def verify_swingup(rig: Rig, *, method: str = "optimal", rollouts: int = 200, seed: int = 0,
                   plan: SwingUpPlan | None = None, duration: float | None = None, minimum_time: bool = False,
                   measurement: str = "encoders", handover_level: float | None = None, settle: float = 3.0,
                   horizon: float | None = None, required_success: float | None = None,
                   roa_samples: int = 300, dropout_study: bool | None = None,
                   dropout_samples: tuple[int, ...] | None = None) -> SwingUpVerification:
    """Verify a swing-up with catch and balance on the uncertain nonlinear rig (see the module docstring).

    Parameters
    ----------
    rig : Rig
    method : {"optimal", "energy"}
    rollouts : int
        Monte Carlo rollouts (>= 1).
    seed : int
        Seed of every random draw (>= 0); the same seed gives the same numbers.
    plan : SwingUpPlan, optional
        A successful plan to track (``"optimal"``); default :func:`upswing.synthesis.swingup.plan_swingup`
        ``(rig, duration=duration, minimum_time=minimum_time)``.
    duration, minimum_time
        Passed to the planner when ``plan`` is None.
    measurement : {"encoders", "state"}
        Encoders (quantized, noisy; rates by filtered differences, the balance loop's Kalman filter after the
        catch) or the exact state (a baseline).
    handover_level : float, optional
        rho_in [-]; default ``[swingup].handover_level``, else :data:`HANDOVER_FRACTION` of the region of attraction.
    settle : float
        Seconds simulated after the plan ends (``"optimal"``) [s], > 1 (the hold window is 1 s).
    horizon : float, optional
        Simulated seconds per rollout for ``"energy"`` [s]; default :data:`ENERGY_HORIZON`.
    required_success : float, optional
        Fraction in (0, 1); default ``[verification].required_success``.
    roa_samples : int
        Starts of the region-of-attraction estimate's first round (when it is needed).
    dropout_study : bool, optional
        Run the drop-out study (step 4 of the module docstring): 12 more simulations of one block of runs
        (measured: +6 s on the demo acrobot). Default: on for ``"optimal"``, off for ``"energy"``, whose 25 s
        horizon makes it about ten times dearer (measured: 5.3 s per freeze of 128 runs on the demo acrobot).
    dropout_samples : tuple of int, optional
        The study's freeze durations [control samples], ascending, >= 0; default
        :func:`upswing.verification.swingup_dropout.freeze_samples` of
        :data:`~upswing.verification.swingup_dropout.FREEZES_MS`.

    Raises
    ------
    RequestError
        For a bad argument, or ``"energy"`` on a family without an energy law (the message says why).
    SynthesisError
        When no swing-up trajectory is found (the planner's message says what to try), or the balance controller's
        region of attraction is empty.
    """
    start_clock = time.perf_counter()
    if method not in METHODS:
        raise RequestError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if measurement not in MEASUREMENTS:
        raise RequestError(f"measurement must be one of {', '.join(MEASUREMENTS)}; got {measurement!r}")
    if isinstance(rollouts, bool) or not isinstance(rollouts, (int, np.integer)) or rollouts < 1:
        raise RequestError(f"rollouts must be a whole number >= 1; got {rollouts!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise RequestError(f"seed must be a whole number >= 0; got {seed!r}")
    if not (math.isfinite(settle) and settle > 1.0):
        raise RequestError(f"settle must be more than the 1 s hold window; got {settle!r} s")
    required = rig.verification.required_success if required_success is None else float(required_success)
    if not 0.0 < required < 1.0:
        raise RequestError(f"the required success rate must be a fraction in (0, 1); got {required:g}")

    design = design_balance(rig)
    balance = balance_controller(rig, measurement=measurement, design=design)
    table = None
    if method == "optimal":
        if plan is None:
            plan = plan_swingup(rig, duration=duration, minimum_time=minimum_time)
        plan.require_success()
        table = tvlqr_from_reference(rig, plan.sample, plan.duration)
        law, law_text = tracking_law(table), (f"time-varying LQR tracking of an optimized trajectory "
                                              f"({plan.duration:.3g} s, {table.n_rows} rows at "
                                              f"{table.sample_rate:g} Hz)")
        horizon_s = table.end_time + settle
        start_state = plan.start
    else:
        params = energy_law_params(rig)
        law, law_text = energy_law(rig), f"{params.law} ({params.family}); limitation: {params.limitation}"
        horizon_s = ENERGY_HORIZON if horizon is None else float(horizon)
        if not (math.isfinite(horizon_s) and horizon_s > 1.0):
            raise RequestError(f"horizon must be more than the 1 s hold window; got {horizon_s!r} s")
        # Hanging at rest is an equilibrium of the energy laws (the pumping and shaping terms vanish there), so the
        # nominal run starts ENERGY_KICK off it along theta1, as a firmware's small initial kick would.
        start_state = equilibrium_state(rig, "hanging") + ENERGY_KICK * (np.array(rig.state_names) == "theta1")

    # The RMS effort of a tracked swing-up is taken over the table (the manoeuvre), not diluted by the settling
    # time after it: a conservative stand-in for the motor's thermal load, whose time constant is longer.
    setup = SimulationSetup(horizon=horizon_s, delay_samples=design.delay_samples, bounds=Bounds(angle=None),
                            rms_until=None if table is None else table.end_time)
    level = rig.swingup.handover_level if handover_level is None else float(handover_level)
    if level is not None:
        source = ("[swingup].handover_level of the rig file" if handover_level is None
                  else "given by the caller")
    else:
        region = estimate_region(rig, balance, design, seed=seed, samples=roa_samples, workers=1,
                                 setup=SimulationSetup(horizon=4.0, delay_samples=design.delay_samples))
        if not region.rho > 0:
            raise SynthesisError(f"{rig.source}: the balance controller caught none of the sampled starts near "
                                 "upright, so there is nothing to hand a swing-up over to; verify the balance "
                                 "design first (upswing verify)")
        level = HANDOVER_FRACTION * region.rho
        source = (f"{HANDOVER_FRACTION:g} x the balance controller's simulated region of attraction "
                  f"(rho = {region.rho:.4g} from {region.samples} held starts)")
    rule = handover_rule(rig, level)
    controller = CatchController(rig, law, balance, rule, None if table is None else table.end_time,
                                 rate_cutoff=ENERGY_RATE_CUTOFF if method == "energy" else None, reference=table)

    # --- nominal run -------------------------------------------------------------------------------------------
    nominal = simulate(rig, controller, start_state[None, :], setup=SimulationSetup(
        horizon=horizon_s, delay_samples=design.delay_samples, bounds=Bounds(angle=None), record=True),
        seed=seed, stream=NOMINAL_STREAM)
    nominal_caught = bool(nominal.held[0] and controller.balancing_at_end[0])
    nominal_run = NominalRun(status=STATUS[int(nominal.status[0])], caught=nominal_caught,
                             handover_time=float(controller.handover_time[0]), times=nominal.times,
                             states=nominal.states[:, 0], inputs=nominal.inputs[:, 0])

    # --- Monte Carlo ---------------------------------------------------------------------------------------------
    rng = np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM, 0)))
    P, _ = sample_parameters(rig, int(rollouts), rng)
    x0 = start_state + sample_offsets(rig, int(rollouts), START_OFFSETS, rng)

    def run_blocks(run_setup: SimulationSetup, count: int) -> tuple[Rollouts, np.ndarray, np.ndarray, np.ndarray]:
        """The first ``count`` rollouts in blocks of CHUNK (block b = rollouts b CHUNK ..., its own noise stream):
        results, hand-over times, level times, caught and held. The drop-out study reruns exactly this."""
        parts, times, at_end, levels = [], [], [], []
        for block, lo in enumerate(range(0, count, CHUNK)):
            hi = min(lo + CHUNK, count)
            parts.append(simulate(rig, controller, x0[lo:hi], P[lo:hi], setup=run_setup, seed=seed, stream=STREAM,
                                  block=block, ids=np.arange(lo, hi)))
            times.append(controller.handover_time.copy())
            levels.append(controller.level_time.copy())
            at_end.append(controller.balancing_at_end.copy())
        res = Rollouts.concatenate(parts)
        return res, np.concatenate(times), np.concatenate(levels), res.held & np.concatenate(at_end)

    sim_clock = time.perf_counter()
    results, handover_times, level_times, caught = run_blocks(setup, int(rollouts))
    simulate_s = time.perf_counter() - sim_clock
    successes = int(caught.sum())
    outcomes = {"caught and held": successes}
    not_caught = int(np.sum(results.held & ~caught))
    if not_caught:
        outcomes["held but not by the balance controller"] = not_caught
    for k, name in enumerate(STATUS):
        count = int(np.sum(results.status == k)) if name != "held" else 0
        if count:
            outcomes[name] = count
    ok_times = handover_times[caught]
    summary = {key: float(f(ok_times)) if ok_times.size else math.nan for key, f in (
        ("min", np.min), ("median", np.median), ("p95", lambda a: np.percentile(a, 95)), ("max", np.max))}

    # --- budgets, hazards, verdict -------------------------------------------------------------------------------
    budgets = compute_budgets(rig, results.subset(caught) if successes else results, horizon_s,
                              hold_s=setup.settling.hold)
    judged = tuple(b for b in budgets if not b.name.endswith(".saturation_time"))
    misses = {k: n for k, n in outcomes.items() if k != "caught and held"}
    decision = decide(successes, int(rollouts), judged, required, outcomes=misses)
    supervision = derive_supervision(rig, caught=caught, level_times=level_times, peak_speed=results.peak_speed,
                                     peak_rail=results.peak_rail, catch_level=rule.rho_in,
                                     duration=table.end_time if table is not None else horizon_s)
    study = None
    if (method == "optimal") if dropout_study is None else bool(dropout_study):
        count = study_rollouts(int(rollouts), CHUNK)
        rates = np.array([rig.state_names.index(s) for s in ("theta1_dot", "theta2_dot")])
        moments = freeze_moments(nominal_run.times, nominal_run.states, nominal_run.handover_time, rates,
                                 controller.sample_rate)
        samples = (freeze_samples(controller.sample_rate) if dropout_samples is None
                   else tuple(int(s) for s in dropout_samples))
        study = run_dropout_study(lambda s: run_blocks(s, count)[3], setup, baseline_caught=caught[:count],
                                  moments=moments, sample_rate=controller.sample_rate, required_success=required,
                                  samples=samples, shown=decision.success_lower_bound >= required)
        supervision = replace(supervision, stale_reading_samples=study.stale_reading_samples,
                              stale_reading_ms=study.stale_reading_ms)
    hazards = _hazards(rig, budgets, successes / int(rollouts), summary, supervision, study)
    return SwingUpVerification(
        method=method, law=law_text, plan=plan if method == "optimal" else None, table=table,
        measurement=measurement, rho_in=rule.rho_in, rho_out=rule.rho_out, rho_source=source, horizon_s=horizon_s,
        nominal=nominal_run, rollouts=int(rollouts), seed=int(seed), successes=successes,
        success_rate=successes / int(rollouts), success_interval=wilson_interval(successes, int(rollouts)),
        outcomes=outcomes, handover_times=handover_times, handover_summary=summary, budgets=budgets,
        hazards=hazards, verdict=decision.verdict, reasons=decision.reasons, decision=decision,
        required_success=required, results=results, parameters=P, simulate_s=simulate_s,
        total_s=time.perf_counter() - start_clock, caught=caught,
        correlations=failure_correlations(rig, results, P, failed=~caught), level_times=level_times,
        supervision=supervision, rule=rule, dropout_study=study)


def _hazards(rig: Rig, budgets: tuple[Budget, ...], success_rate: float, summary: dict[str, float],
             supervision: Supervision, study: SwingUpDropoutStudy | None) -> tuple[HazardNote, ...]:
    """The verification engine's notes, with the balance-only ones (tip speed while balancing, the balance loop's
    drop-out study) replaced by notes on the swing-up and its own drop-out study."""
    by = {b.name: b for b in budgets}
    general = hazard_notes(rig, budgets, rho_summary="the hand-over level", success_rate=success_rate,
                           dropout_ms=None, dropout_tested_ms=())
    replaced = ("tip speed and energy", "saturation", "sensor drop-out", "governing")
    keep = [n for n in general if n.topic not in replaced]
    saturation = max((b for b in budgets if b.name.endswith(".saturation_time")), key=lambda b: b.value)
    keep.append(HazardNote(
        "saturation",
        f"The command was at the actuator limit for up to {saturation.value:.3g} s "
        f"({saturation.name.split('.')[0]}) in the caught runs: the swing-up relies on the drive delivering its "
        f"full rated effort, and {1.0 - success_rate:.1%} of the Monte Carlo runs were not caught. A missed catch "
        "is a normal event on this rig: the drive must stop safely (stop category 0 or 1) when it happens.",
        ("IEC 60204-1", "ISO 13850")))
    catch = (f"the balance controller took over after {summary['median']:.2f} s (median; 95th percentile "
             f"{summary['p95']:.2f} s)" if math.isfinite(summary["median"]) else "no rollout was caught")
    keep.insert(1, HazardNote(
        "swing-up speed and energy",
        f"During the swing-up the tip reached {by['tip.peak_speed'].value:.2f} m/s and the links carried up to "
        f"{by['links.peak_kinetic_energy'].value:.3g} J; {catch}. A missed catch leaves the links falling or "
        "whirling with that energy: the drive must stop (stop category 0 or 1) when the catch has not happened by "
        "a set time or a speed leaves its window"
        + (f"; from these runs: {supervision.rule} (checked on {supervision.checked_on} runs it was not derived "
           f"from: {supervision.false_trips} nuisance stops, {supervision.missed_stopped} of {supervision.missed} "
           "missed catches stopped)." if math.isfinite(supervision.catch_deadline) else "."),
        ("ISO 12100", "IEC 60204-1", "ISO 13850", "ISO 14120")))
    if study is None:
        found = "The frozen-reading study did not run, so no tolerated time is known: stop on the first stale reading. "
    else:
        found = f"In simulation, {study.summary}. "
    keep.append(HazardNote(
        "sensor fault during swing-up",
        "The swing-up law and the catch act on the encoder readings at full speed; a frozen or jumping reading "
        "sends the links the wrong way with full effort. " + found + "The firmware must detect stale or "
        "implausible encoder data (a sequence counter or time stamp per reading, not an unchanged value: a joint "
        "at rest reads the same count) and remove drive power within that time; treat that check as a safety "
        "function and rate it.",
        ("IEC 60204-1", "ISO 13849-1")))
    keep.append(next(n for n in general if n.topic == "governing"))
    return tuple(keep)
