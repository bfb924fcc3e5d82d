"""Frozen encoder readings during a swing-up: how long the firmware may run on an old reading.

A swing-up drives the links through their circle at full effort on the encoder readings. When the reading stops
updating (a loose connector, a bus error, a stalled interface), the law keeps acting on where the links *were*.
This study reruns the swing-up verification's Monte Carlo (:mod:`upswing.verification.manoeuvre`: the same plan,
table, hand-over rule, parameter draws, starts, noise streams and blocks, so that a freeze of zero samples
reproduces the verification's catches rollout for rollout) with the readings frozen
(:attr:`upswing.verification.simulate.SimulationSetup.dropout`: every sample inside the freeze gets the last
reading before it again) for a ladder of durations, at the moments of the nominal run that ask the most of the
readings:

* **fastest**: the sample of the largest joint speed before the hand-over [rad/s]. There the stale reading falls
  behind the links fastest (angle error ~ speed x age) and the tracking law, with its largest gains along the
  swing, acts on that error with full effort;
* **hand-over**: the nominal run's first hand-over sample. The catch decision (x - x_eq)' P (x - x_eq) <= rho_in and
  the seeding of the balance loop's estimator are made on the reading, and a wrong catch cannot be undone once the
  links have fallen out of the balance loop's region of attraction.

A freeze of ``n`` samples starts at the moment's sample k0: samples k0 .. k0 + n - 1 repeat the reading of sample
k0 - 1, so the firmware sees one value for n + 1 consecutive samples and the reading is up to (n + 1) sample
periods old when it refreshes. The duration quoted is n / sample_rate.

Result per (moment, duration): caught and held out of the rollouts, the 95 % Wilson interval (Wilson 1927), and,
paired with the verification's own runs, the catches lost and gained. A duration is *tolerated* when the
interval's lower end reaches the bar min(required success rate, lower end for the same runs without a freeze):
the verdict's own rule (:data:`upswing.verification.verdict.VERDICT_RULE`) where the study's runs can show the
required rate, and "no worse than without the freeze" where they cannot (a required rate above what 128 runs can
show, 0.971 when all are caught, or a miss or two in the first block of a verification that passed on all its
runs). The longest tolerated freeze at a moment is the longest tested duration for which it and every shorter one
are tolerated; the study's is the smaller over the moments. When the verification itself did not show the required
rate, no freeze can be shown harmless: none counts as tolerated.

Detection threshold for the firmware (:func:`stale_threshold`): remove drive power once ``T`` consecutive control
samples have passed without a fresh reading, with T = max(1, floor(:data:`THRESHOLD_FRACTION` x L)) for the longest
tolerated freeze of L samples. Freezes shorter than T go undetected and must be survivable; they are at most half
of what was shown survivable at the two moments. The factor 2 is judgement (common practice: a trip threshold
well inside what was shown safe), for what the study does not cover: moments between the two tested, the gap
between the longest passing and the first failing duration, the drive's own reaction time after the trip, and
model error. With L unknown (even the shortest freeze fell short, or the swing-up itself does) T is one sample:
the first missed reading stops the drive.

Rollouts: the verification's first block (:data:`upswing.verification.manoeuvre.CHUNK` = 128 runs, or all of
them when there are fewer). The simulator draws noise per block, in a shape set by the block's size, so only whole
verification blocks pair exactly with its runs; and its cost is set by the number of control samples far more
than by the runs in a block (measured on the demo acrobot: one block of 128 runs 0.53 s, 128 + 72 in two blocks
1.0 s, 200 in one block 0.60 s), so one block per case keeps the study to about a dozen block simulations.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from upswing.errors import RequestError
from upswing.verification.simulate import SimulationSetup
from upswing.verification.stats import wilson_interval

FREEZES_MS = (2.0, 5.0, 10.0, 20.0, 50.0, 100.0)  # rounded to whole samples (at least one), repeats dropped
THRESHOLD_FRACTION = 0.5
MOMENTS = ("fastest", "hand-over")


@dataclass(frozen=True)
class FreezeMoment:
    """When a freeze starts.

    Attributes
    ----------
    name : str
        ``"fastest"`` or ``"hand-over"`` (module docstring).
    sample : int
        The first frozen control sample k0.
    time_s : float
        k0 / sample_rate [s].
    meaning : str
        Why this moment, with the nominal run's number (e.g. the speed there).
    """

    name: str
    sample: int
    time_s: float
    meaning: str


@dataclass(frozen=True)
class FreezeCase:
    """One (moment, duration) of the study.

    Attributes
    ----------
    moment : str
        :attr:`FreezeMoment.name`.
    samples : int
        Consecutive control samples with a repeated reading (>= 0; 0 is the verification itself).
    duration_ms : float
        samples / sample_rate [ms].
    successes, rollouts : int
        Caught and held, of the rollouts run.
    success_rate : float
        successes / rollouts [fraction].
    interval : tuple of float
        95 % Wilson interval of the success rate [fraction].
    lost, gained : int
        Rollouts caught in the verification but not with this freeze, and the other way round.
    meets : bool
        Tolerated: the verification showed the required rate and this interval's lower end reaches
        :attr:`SwingUpDropoutStudy.bar`.
    """

    moment: str
    samples: int
    duration_ms: float
    successes: int
    rollouts: int
    success_rate: float
    interval: tuple[float, float]
    lost: int
    gained: int
    meets: bool


@dataclass(frozen=True)
class SwingUpDropoutStudy:
    """What :func:`run_dropout_study` found (module docstring).

    Attributes
    ----------
    moments : tuple of FreezeMoment
    cases : tuple of FreezeCase
        Moment by moment, durations in increasing order.
    rollouts : int
        Rollouts per case (the verification's first ones).
    sample_rate : float
        Control loop rate [Hz].
    required_success : float
        [fraction]
    baseline_successes : int
        Caught and held among the same rollouts without a freeze (the verification's own runs).
    shown : bool
        The verification showed the required success rate (else no freeze counts as tolerated).
    bar : float
        A freeze is tolerated when its Wilson lower end reaches this: min(required_success, the lower end for
        ``baseline_successes``) [fraction] (module docstring).
    longest_tolerated : dict of str to int or None
        Per moment, the longest tolerated freeze [samples] (None: even the shortest fell short).
    longest_tolerated_samples : int or None
        The smallest over the moments [samples].
    longest_tolerated_ms : float or None
        The same in ms.
    all_tolerated : bool
        Every tested duration met the requirement (the true limit lies beyond the longest tested).
    stale_reading_samples : int
        The detection threshold T [samples] (:func:`stale_threshold`).
    stale_reading_ms : float
        T / sample_rate [ms].
    threshold_reason : str
        How T follows from the study, in words.
    simulate_s : float
        Wall time of the study's simulations [s].
    caught : ndarray of bool (cases, rollouts)
        Per case and rollout, caught and held.
    """

    moments: tuple[FreezeMoment, ...]
    cases: tuple[FreezeCase, ...]
    rollouts: int
    sample_rate: float
    required_success: float
    baseline_successes: int
    shown: bool
    bar: float
    longest_tolerated: dict[str, int | None]
    longest_tolerated_samples: int | None
    longest_tolerated_ms: float | None
    all_tolerated: bool
    stale_reading_samples: int
    stale_reading_ms: float
    threshold_reason: str
    simulate_s: float
    caught: np.ndarray

    @property
    def first_short(self) -> FreezeCase | None:
        """The shortest freeze that was not tolerated (of those, the moment with the fewest catches), or None."""
        short = [c for c in self.cases if c.samples > 0 and not c.meets]
        return min(short, key=lambda c: (c.samples, c.successes)) if short else None

    @property
    def summary(self) -> str:
        """The finding in one sentence: what was tested, what was tolerated, the threshold."""
        tested = ", ".join(f"{ms:g}" for ms in sorted({c.duration_ms for c in self.cases if c.samples > 0}))
        at = " and ".join(f"the {m.name} point ({m.time_s:.3f} s)" for m in self.moments)
        short = self.first_short
        if not self.shown:
            held = ("the swing-up did not show the required catch rate even without a freeze, so no freeze counts "
                    "as tolerated")
        elif self.longest_tolerated_ms is None:
            held = f"even the shortest freeze took the catch rate's 95 % lower bound below {self.bar:.1%}"
        else:
            held = (f"freezes up to {self.longest_tolerated_ms:g} ms kept the catch rate's 95 % lower bound at or "
                    f"above {self.bar:.1%}")
        if short is not None:
            held += (f"; {short.duration_ms:g} ms at the {short.moment} point caught {short.successes} of "
                     f"{short.rollouts}")
        elif self.all_tolerated:
            held += " (every freeze tested; longer ones were not tested)"
        plural = "s" if self.stale_reading_samples != 1 else ""
        return (f"with the readings frozen for {tested} ms at {at}, {self.rollouts} runs each, {held}. Remove drive "
                f"power when no fresh encoder reading has arrived for {self.stale_reading_ms:g} ms "
                f"({self.stale_reading_samples} control sample{plural} at {self.sample_rate:g} Hz: "
                f"{self.threshold_reason})")


def study_rollouts(rollouts: int, chunk: int) -> int:
    """Rollouts the study reruns: the verification's first block of ``chunk`` (module docstring)."""
    return int(min(rollouts, chunk))


def freeze_samples(sample_rate: float, durations_ms: tuple[float, ...] = FREEZES_MS) -> tuple[int, ...]:
    """Durations [ms] as whole control samples: round(ms x rate / 1000), at least 1, repeats dropped, ascending."""
    if not (math.isfinite(sample_rate) and sample_rate > 0):
        raise RequestError(f"sample rate must be a positive number of Hz; got {sample_rate!r}")
    out = set()
    for ms in durations_ms:
        if not (math.isfinite(ms) and ms > 0):
            raise RequestError(f"freeze durations must be positive numbers of ms; got {ms!r}")
        out.add(max(1, round(ms * sample_rate / 1000.0)))
    return tuple(sorted(out))


def freeze_moments(times: np.ndarray, states: np.ndarray, handover_time: float, angle_rates: np.ndarray,
                   sample_rate: float) -> tuple[FreezeMoment, ...]:
    """The moments of the module docstring from the nominal run.

    Parameters
    ----------
    times : ndarray (K + 1,)
        Sample times of the nominal run [s].
    states : ndarray (K + 1, n_states)
    handover_time : float
        The nominal run's first hand-over [s] (NaN if never: then the whole run is searched and there is no
        hand-over moment).
    angle_rates : ndarray of int
        Columns of the joint angle rates theta1_dot, theta2_dot [rad/s] (a cart's speed is in other units).
    sample_rate : float
        [Hz]
    """
    caught = math.isfinite(handover_time)
    last = int(round(handover_time * sample_rate)) if caught else len(times) - 1
    speeds = np.max(np.abs(states[: max(last, 1) + 1, angle_rates]), axis=1)
    k_fast = int(np.argmax(speeds))
    moments = [FreezeMoment("fastest", k_fast, k_fast / sample_rate,
                            f"largest joint speed of the nominal run before the hand-over, {speeds[k_fast]:.3g} "
                            "rad/s: the stale reading falls behind the links fastest")]
    if caught:
        moments.append(FreezeMoment("hand-over", last, last / sample_rate,
                                    "the nominal run's hand-over: the catch is decided and the balance loop's "
                                    "estimator seeded on the reading"))
    return tuple(moments)


def stale_threshold(longest_samples: int | None, sample_rate: float, *, shown: bool = True) -> tuple[int, str]:
    """The detection threshold T [samples] and its reason (module docstring); ``shown``: the verification showed
    the required catch rate without a freeze."""
    period_ms = 1000.0 / sample_rate
    if not shown:
        return 1, ("the swing-up did not show the required catch rate even without a freeze, so no freeze is known "
                   "to be harmless and the first control sample without a fresh reading must stop the drive")
    if longest_samples is None:
        return 1, ("no tested freeze was tolerated, so the first control sample without a fresh reading must "
                   "stop the drive")
    samples = max(1, int(math.floor(THRESHOLD_FRACTION * longest_samples)))
    reason = (f"{THRESHOLD_FRACTION:g} x the longest tolerated freeze of {longest_samples} samples "
              f"({longest_samples * period_ms:g} ms), rounded down to whole samples")
    if samples == 1 and THRESHOLD_FRACTION * longest_samples < 1:
        reason += " and at least one sample"
    return samples, reason


def run_dropout_study(rerun: Callable[[SimulationSetup], np.ndarray], setup: SimulationSetup, *,
                      baseline_caught: np.ndarray, moments: tuple[FreezeMoment, ...], sample_rate: float,
                      required_success: float, samples: tuple[int, ...], shown: bool) -> SwingUpDropoutStudy:
    """Rerun the verification with frozen readings and derive the tolerated freeze and the threshold.

    Parameters
    ----------
    rerun : callable (SimulationSetup) -> ndarray of bool (rollouts,)
        Runs the verification's first ``rollouts`` rollouts (same draws, noise and blocks) under a setup and returns
        which were caught and held.
    setup : SimulationSetup
        The verification's setup (horizon, delay, bounds); only ``dropout`` changes.
    baseline_caught : ndarray of bool (rollouts,)
        The verification's own outcome of those rollouts.
    moments : tuple of FreezeMoment
    sample_rate : float
        Control loop rate [Hz].
    required_success : float
        [fraction in (0, 1)]
    samples : tuple of int
        Freeze durations [samples], ascending, >= 0 (0 reruns the verification unchanged).
    shown : bool
        The verification (all its runs) showed the required success rate: the lower end of its 95 % Wilson
        interval reached ``required_success``. If not, no freeze counts as tolerated (module docstring).
    """
    baseline = np.asarray(baseline_caught, dtype=bool)
    n = baseline.size
    if list(samples) != sorted(set(samples)) or any(s < 0 for s in samples):
        raise RequestError(f"freeze durations must be distinct whole samples >= 0 in ascending order; got {samples}")
    if n < 1:
        raise RequestError("the drop-out study needs at least one rollout")
    bar = min(float(required_success), wilson_interval(int(baseline.sum()), n)[0])
    Ts = 1.0 / sample_rate
    cases, caught_rows = [], []
    longest: dict[str, int | None] = {}
    clock = time.perf_counter()
    for moment in moments:
        ok_so_far, best = True, None
        for s in samples:
            # (s - 0.5) sample periods: samples k0 .. k0 + s - 1 fall inside [start, start + duration), whatever the
            # rounding of k Ts (simulate compares t = k Ts with the window)
            trial = replace(setup, dropout=None if s == 0 else (moment.sample * Ts, (s - 0.5) * Ts))
            caught = np.asarray(rerun(trial), dtype=bool)
            successes = int(caught.sum())
            interval = wilson_interval(successes, n)
            meets = bool(shown and interval[0] >= bar)
            if ok_so_far and meets:
                best = s
            ok_so_far = ok_so_far and meets
            cases.append(FreezeCase(moment=moment.name, samples=int(s), duration_ms=1000.0 * s * Ts,
                                    successes=successes, rollouts=n, success_rate=successes / n, interval=interval,
                                    lost=int(np.sum(baseline & ~caught)), gained=int(np.sum(~baseline & caught)),
                                    meets=bool(meets)))
            caught_rows.append(caught)
        longest[moment.name] = None if best == 0 else best
    simulate_s = time.perf_counter() - clock
    values = list(longest.values())
    overall = None if not values or any(v is None for v in values) else min(values)
    threshold, reason = stale_threshold(overall, sample_rate, shown=shown)
    positive = [s for s in samples if s > 0]
    return SwingUpDropoutStudy(
        moments=moments, cases=tuple(cases), rollouts=n, sample_rate=float(sample_rate),
        required_success=float(required_success), baseline_successes=int(baseline.sum()), shown=bool(shown),
        bar=bar,
        longest_tolerated=longest, longest_tolerated_samples=overall,
        longest_tolerated_ms=None if overall is None else 1000.0 * overall * Ts,
        all_tolerated=bool(positive) and overall == max(positive), stale_reading_samples=threshold,
        stale_reading_ms=1000.0 * threshold * Ts, threshold_reason=reason, simulate_s=simulate_s,
        caught=np.array(caught_rows, dtype=bool).reshape(len(cases), n))
