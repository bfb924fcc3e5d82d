"""The whole job in one call: rig file -> every stage -> one :class:`DesignRun` with a verdict.

Stages, in order (:data:`STAGES`), each timed:

``validate``
    read the rig file (its bytes are kept for the run folder's byte-identical copy) and check it, including the
    ``[uncertainty]`` spreads the verification will draw from. A rig that cannot be read is bad input: the error
    is raised (the command line turns it into one line and exit code 2), and no run exists.
``modes``
    linear models, controllability and observability at the four equilibria, oscillation modes.
``balance``
    the LQR balance design at the loop rate, both velocity estimators and the margins of every variant
    (:func:`upswing.synthesis.study.study_balance`).
``swing-up``
    :mod:`upswing.design.swingup_stage`: the planned swing-up, its tracking table, and the tracked manoeuvre with
    hand-over verified on the uncertain nonlinear model (Monte Carlo with the run's rollout count and seed); the
    success rate's 95 % lower bound is judged like the balance loop's, and the tracked budgets against the limits.
``verification``
    the balance loop on the nonlinear model (:func:`upswing.verification.verdict.verify_balance`: Monte Carlo,
    region of attraction, drop-outs, budgets), then the offset and tap responses
    (:mod:`upswing.design.responses`).
``budgets and hazards``
    every budget and margin gathered and weighed (:mod:`upswing.design.decision`), hazard notes merged.

Degrading honestly: a stage that raises an :class:`~upswing.errors.UpswingError` (or fails unexpectedly) is
recorded as ``failed`` with its message; stages that need it are ``skipped``; the run goes on with what it has and
the verdict names what failed. No stage failure ever escapes as a traceback (set ``UPSWING_DEBUG=1`` to let
unexpected ones through while developing).
"""

from __future__ import annotations

import hashlib
import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from upswing.design.decision import (
    StageRecord,
    decide,
    loop_margins,
    success_margin,
)
from upswing.design.responses import BalanceResponses, balance_responses
from upswing.design.swingup_stage import StageUnavailable, SwingUpOutcome, run_swingup_stage, swingup_hazards
from upswing.errors import RequestError, RigFileError, UpswingError
from upswing.model.modes import EquilibriumReport, analyse_all
from upswing.model.rig import Rig, load_rig
from upswing.report.assemble import control_margins, model_hazards
from upswing.report.verdict import Margin, Verdict
from upswing.safety import CAUTIONS
from upswing.synthesis.study import BalanceStudy, study_balance
from upswing.verification.budgets import MOUNT_ADVICE, MOUNT_RATING, Budget
from upswing.verification.controllers import balance_controller
from upswing.verification.hazards import HazardNote
from upswing.verification.montecarlo import check_spreads
from upswing.verification.verdict import Verification, verify_balance

STAGES = ("validate", "modes", "balance", "swing-up", "verification", "budgets and hazards")
SWINGUP_ADVICE = ("the swing-up asks more than the rig file allows there: allow a longer swing-up, or a "
                  "motor and gear with more speed or torque (upswing.synthesis.swingup.size_motor finds the smallest "
                  "peak for a given time)")
# Region-of-attraction starts behind the swing-up's hand-over level (verify_swingup's own default): the level is half
# the estimated rho, so a coarser estimate than the verification stage's costs little.
SWINGUP_ROA_SAMPLES = 300
RUNNING_LOOP = "discrete_kalman"  # the margins of the loop the verification runs: discrete LQR + Kalman filter


@dataclass(frozen=True)
class DesignOptions:
    """Settings of a design run.

    Attributes
    ----------
    rollouts : int
        Monte Carlo rollouts of the balance verification (>= 1; 1000 or more for a decision).
    seed : int
        Seed of every random draw (>= 0); the same seed gives the same numbers.
    roa_samples : int
        Starts in the first round of the region-of-attraction estimate (>= 10).
    horizon : float
        Simulated seconds per Monte Carlo rollout (> 1 s, the settling window).
    required_success : float or None
        Success rate the lower end of the 95 % Wilson interval must reach [fraction in (0, 1)]; None takes the rig
        file's ``[verification].required_success``.
    workers : int or None
        Local processes for the batch simulations (None: the machine's cores).
    progress : bool
        Draw the Monte Carlo progress bar on stderr.
    """

    rollouts: int = 1000
    seed: int = 0
    roa_samples: int = 1500
    horizon: float = 5.0
    required_success: float | None = None
    workers: int | None = None
    progress: bool = False

    def __post_init__(self) -> None:
        if isinstance(self.rollouts, bool) or not isinstance(self.rollouts, int) or self.rollouts < 1:
            raise RequestError(f"rollouts must be a whole number >= 1; got {self.rollouts!r}")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0:
            raise RequestError(f"seed must be a whole number >= 0; got {self.seed!r}")
        if not isinstance(self.roa_samples, int) or self.roa_samples < 10:
            raise RequestError(f"roa_samples must be a whole number >= 10; got {self.roa_samples!r}")
        if not self.horizon > 1.0:
            raise RequestError(f"horizon must be more than the 1 s settling window; got {self.horizon!r} s")
        if self.required_success is not None and not 0.0 < self.required_success < 1.0:
            raise RequestError(f"required_success must be a fraction in (0, 1); got {self.required_success!r}")


@dataclass(frozen=True)
class DesignRun:
    """Everything a design run found. Stage results are None when their stage did not finish.

    Attributes
    ----------
    rig : Rig
    rig_path : Path
        The rig file read.
    rig_bytes : bytes
        The rig file's bytes as read (SHA-256 = ``rig.content_hash``).
    options : DesignOptions
    stages : tuple of StageRecord
        In :data:`STAGES` order, with wall times.
    modes : dict of str to EquilibriumReport or None
    balance : BalanceStudy or None
    swingup : SwingUpOutcome or None
    verification : Verification or None
    responses : BalanceResponses or None
    budgets : tuple of Budget
        Every budget, names prefixed by their stage (``balance.elbow.rms_effort``).
    margins : tuple of Margin
        Every judged margin.
    hazards : tuple of HazardNote
    unchecked : tuple of (str, str)
        (what, why) for results produced but not checked (a swing-up planned but not verified).
    verdict : Verdict
    cautions : tuple of str
    total_s : float
        Wall time of the whole run [s].
    """

    rig: Rig
    rig_path: Path
    rig_bytes: bytes = field(repr=False)
    options: DesignOptions
    stages: tuple[StageRecord, ...]
    modes: dict[str, EquilibriumReport] | None
    balance: BalanceStudy | None
    swingup: SwingUpOutcome | None
    verification: Verification | None
    responses: BalanceResponses | None
    budgets: tuple[Budget, ...]
    margins: tuple[Margin, ...]
    hazards: tuple[HazardNote, ...]
    unchecked: tuple[tuple[str, str], ...]
    verdict: Verdict
    cautions: tuple[str, ...]
    total_s: float

    @property
    def required_success(self) -> float:
        """The success rate the run asked the verification to show [fraction]: the option, or the rig file's."""
        given = self.options.required_success
        return self.rig.verification.required_success if given is None else given

    def stage(self, name: str) -> StageRecord:
        """The record of stage ``name``."""
        for s in self.stages:
            if s.name == name:
                return s
        raise RequestError(f"no stage {name!r}; stages are {', '.join(STAGES)}")


Progress = Callable[[str, StageRecord | None], None]


class _Stages:
    """Runs stage functions, times them and records how they went."""

    def __init__(self, progress: Progress | None) -> None:
        self.records: list[StageRecord] = []
        self.progress = progress

    def status(self, name: str) -> str:
        return next((r.status for r in self.records if r.name == name), "not run")

    def run(self, name: str, function: Callable[[], Any], *, needs: tuple[str, ...] = (), fatal: bool = False) -> Any:
        """Run ``function`` as stage ``name``; its value, or None when it did not finish. With ``fatal`` every
        exception propagates (the run cannot go on without this stage's result: bad input, or a bug)."""
        if self.progress is not None:
            self.progress(name, None)
        unmet = [n for n in needs if self.status(n) != "done"]
        start = time.perf_counter()
        value, status, message = None, "done", ""
        if unmet:
            status = "skipped"
            message = f"it needs the {' and '.join(unmet)} stage{'s' if len(unmet) > 1 else ''}, which did not finish"
        else:
            try:
                value = function()
            except StageUnavailable as exc:
                status, message = "missing", str(exc)
            except RigFileError:
                raise  # bad input is the caller's to report, never a stage's result
            except UpswingError as exc:
                if fatal:
                    raise
                status, message = "failed", str(exc)
            except Exception as exc:  # noqa: BLE001 - a bug in one stage must not hide what the others found
                if fatal or os.environ.get("UPSWING_DEBUG"):
                    raise  # without the stage's result there is nothing to run on: the CLI reports the bug
                status = "failed"
                message = (f"internal error ({type(exc).__name__}: {exc}); this is a bug in upswing, please report "
                           "it (UPSWING_DEBUG=1 shows the traceback)")
        record = StageRecord(name, status, time.perf_counter() - start, message)
        self.records.append(record)
        if self.progress is not None:
            self.progress(name, record)
        return value


def _read_rig(path: Path) -> tuple[Rig, bytes]:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise RigFileError(str(path), "", f"cannot be read ({exc.strerror or exc})") from None
    rig = load_rig(path)
    if hashlib.sha256(raw).hexdigest() != rig.content_hash:
        raise RequestError(f"{path}: the file changed while it was being read; run again")
    check_spreads(rig)  # a bad [uncertainty] table is bad input, found before any work is done
    return rig, raw


def _verify(rig: Rig, study: BalanceStudy, options: DesignOptions) -> tuple[Verification, BalanceResponses]:
    verification = verify_balance(rig, rollouts=options.rollouts, seed=options.seed, horizon=options.horizon,
                                  required_success=options.required_success, workers=options.workers,
                                  progress=options.progress, roa_samples=options.roa_samples)
    controller = balance_controller(rig, measurement="encoders", design=study.design, estimator=study.kalman)
    responses = balance_responses(rig, study.design, controller, verification.region, seed=options.seed,
                                  substeps=verification.integration.substeps)
    return verification, responses


def _merge_hazards(*groups: tuple[HazardNote, ...]) -> tuple[HazardNote, ...]:
    """Notes of all groups, the first note of each topic kept (earlier groups carry the measured figures)."""
    seen, out = set(), []
    for group in groups:
        for note in group:
            topic = note.topic.replace("rail ", "")
            if topic not in seen:
                seen.add(topic)
                out.append(note)
    governing = [n for n in out if n.topic == "governing"]
    return tuple([n for n in out if n.topic != "governing"] + governing)


def run_design(rig_path: str | Path, options: DesignOptions | None = None, *,
               progress: Progress | None = None) -> DesignRun:
    """Run every stage on the rig file at ``rig_path`` (module docstring) and weigh the results.

    Parameters
    ----------
    rig_path : str or Path
        The rig file (TOML).
    options : DesignOptions, optional
    progress : callable (stage, record) -> None, optional
        Called with ``record=None`` when a stage starts and with its :class:`StageRecord` when it ends.

    Raises
    ------
    RigFileError, RequestError
        When the rig file cannot be read or is invalid (the ``validate`` stage); nothing later raises.
    """
    options = options or DesignOptions()
    path = Path(rig_path)
    start = time.perf_counter()
    stages = _Stages(progress)
    rig, raw = stages.run("validate", lambda: _read_rig(path), fatal=True)

    modes = stages.run("modes", lambda: analyse_all(rig))
    study = stages.run("balance", lambda: study_balance(rig))
    swingup = stages.run("swing-up", lambda: run_swingup_stage(
        rig, seed=options.seed, rollouts=options.rollouts, required_success=options.required_success,
        roa_samples=min(options.roa_samples, SWINGUP_ROA_SAMPLES)))
    verified = stages.run("verification", lambda: _verify(rig, study, options), needs=("balance",))
    verification, responses = verified if verified is not None else (None, None)

    def weigh() -> tuple[tuple[Budget, ...], tuple[Margin, ...], dict[str, str], tuple[HazardNote, ...]]:
        checked = swingup is not None and swingup.verification is not None
        budgets: list[Budget] = []
        margins: list[Margin] = []
        details: dict[str, str] = {}
        if modes is not None:
            margins += control_margins(rig, modes)
        if study is not None:
            margins += loop_margins(study.margins[RUNNING_LOOP])
        if swingup is not None:
            budgets += [_prefixed("swingup", b) for b in swingup.budgets]
            for b in swingup.budgets:
                if b.ok is False:
                    details[f"swingup.{b.name}"] = SWINGUP_ADVICE
            check = swingup.verification
            if check is not None:
                catch = success_margin("swing-up catch", check.decision.success_lower_bound, check.required_success)
                margins.append(catch)
                misses = ", ".join(f"{k}: {n}" for k, n in check.outcomes.items() if k != "caught and held")
                follow = [c.parameter for c in check.correlations if c.notable][:3]
                details[catch.name] = (f"{check.successes} of {check.rollouts} tracked swing-ups were caught and "
                                       f"held ({check.success_rate:.1%})" + (f"; missed: {misses}" if misses else "")
                                       + (f"; the misses follow {', '.join(follow)}" if follow else "")
                                       + "; swingup_montecarlo.csv lists each run's parameters and outcome: the "
                                       "parameters the misses follow are the ones to measure better (narrowing "
                                       "[uncertainty]), or the swing-up needs more authority (motor, gear, time)")
        if verification is not None:
            mc = verification.monte_carlo
            budgets += [_prefixed("balance", b) for b in verification.budgets]
            d = verification.decision
            hold = success_margin("balance hold", d.success_lower_bound, d.required_success)
            margins.append(hold)
            fails = ", ".join(f"{k}: {v}" for k, v in mc.outcomes.items() if k != "held")
            details[hold.name] = (f"{mc.successes} of {mc.rollouts} Monte Carlo rollouts held "
                                  f"({mc.success_rate:.1%})" + (f"; did not hold: {fails}" if fails else ""))
        for b in budgets:  # a base load over the mount's rating needs a stronger fixing, not a bigger motor
            if b.ok is False and b.name.split(".", 1)[1] in MOUNT_RATING:
                details[b.name] = MOUNT_ADVICE
        hazards = _merge_hazards(verification.hazards if verification is not None else (),
                                 swingup.verification.hazards if checked else (),
                                 swingup_hazards(rig, swingup.budgets, tracked=checked) if swingup is not None else (),
                                 model_hazards(rig, modes) if modes is not None else ())
        return tuple(budgets), tuple(margins), details, hazards

    weighed = stages.run("budgets and hazards", weigh)
    budgets, margins, details, hazards = weighed if weighed is not None else ((), (), {}, ())
    # The verdict is made from the finished records, so a failure in "budgets and hazards" is weighed too.
    unchecked = (("the swing-up", swingup.unverified),) if swingup is not None and swingup.unverified else ()
    verdict = decide(stages.records, budgets, margins, details=details, unchecked=unchecked)
    return DesignRun(rig=rig, rig_path=path, rig_bytes=raw, options=options, stages=tuple(stages.records),
                     modes=modes, balance=study, swingup=swingup, verification=verification, responses=responses,
                     budgets=budgets, margins=margins, hazards=hazards, unchecked=unchecked, verdict=verdict,
                     cautions=CAUTIONS, total_s=time.perf_counter() - start)


def _prefixed(stage: str, budget: Budget) -> Budget:
    return Budget(name=f"{stage}.{budget.name}", value=float(budget.value), limit=budget.limit, unit=budget.unit,
                  ok=None if budget.ok is None else bool(budget.ok), median=float(budget.median),
                  meaning=budget.meaning)
