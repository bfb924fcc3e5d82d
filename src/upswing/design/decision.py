"""The design run's verdict: every stage, budget and margin weighed into power / do not power / no decision.

Rule (:data:`DESIGN_RULE`):

* **do not power** when any stage failed, any budget with a limit is exceeded, or any margin is below its required
  value; the reasons name each of them;
* **incomplete** (no decision) when nothing failed but a stage is missing from this build or could not run, or a
  result could not be checked (a swing-up planned but not verified on the nonlinear model);
* **power** otherwise: every stage ran and every budget and margin is met (and then only at reduced limits first,
  with the cautions).

What limits the verdict is the rated budget with the highest share of its limit
(:func:`upswing.verification.budgets.tightest_budget`: peak-effort lines excluded, since the actuator clamps the
applied effort at its peak, so reaching 100 % there is saturation, judged by the time spent saturated) and the
margin with the lowest ratio to its requirement.

The margins a design run judges (:func:`loop_margins`, :func:`success_margin`):

* at each actuator input of the loop that runs (discrete LQR with the velocity estimator, broken at the plant input
  after the zero-order hold, the other inputs closed): delay margin of at least
  :data:`~upswing.synthesis.margins.DELAY_MARGIN_MIN_SAMPLES` loop periods (the balance design's own flag), a gain
  margin factor of at least :data:`GAIN_FACTOR_MIN` both ways (6 dB, common practice) and a phase margin of at least
  :data:`PHASE_MARGIN_MIN_DEG` (common practice). "Both ways" is min(k_high, 1 / k_low) for the stable interval
  (k_low, k_high) of input gain factors: a balancing loop is open-loop unstable, so too little drive (k_low, the
  margin an estimator's lag erodes first) fails it as surely as too much;
* the Monte Carlo success rate: the lower end of its 95 % Wilson interval against the required success rate;
* controllability at upright: the scaled PBH margin against :data:`~upswing.model.modes.WEAK_CONTROL`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from upswing.report.verdict import Margin, Verdict, smallest_margin
from upswing.synthesis.margins import DELAY_MARGIN_MIN_SAMPLES, MarginReport
from upswing.verification.budgets import Budget, tightest_budget

GAIN_FACTOR_MIN = 2.0  # 6 dB each way (common practice for a loop that must tolerate actuator and model error)
PHASE_MARGIN_MIN_DEG = 30.0  # common practice: 30 to 60 deg; the lower end, the estimator's lag included
DESIGN_RULE = ("do not power when a stage failed, a budget exceeds its limit or a margin is below its requirement; "
               "no decision when a stage is missing or could not run or a result is unchecked; power (at reduced "
               "limits first) otherwise")


@dataclass(frozen=True)
class StageRecord:
    """How one stage of the run went.

    Attributes
    ----------
    name : str
        Stage name (``validate``, ``modes``, ``balance``, ``swing-up``, ``verification``, ``budgets and hazards``).
    status : str
        ``"done"``, ``"failed"`` (it raised: ``message`` says what and what to try), ``"skipped"`` (a stage it
        needs did not finish) or ``"missing"`` (this build cannot run it).
    seconds : float
        Wall time [s].
    message : str
        Empty when done; otherwise why.
    """

    name: str
    status: str
    seconds: float
    message: str = ""

    @property
    def done(self) -> bool:
        return self.status == "done"


def loop_margins(report: MarginReport) -> tuple[Margin, ...]:
    """Delay, gain and phase margins at each input of the loop ``report`` describes, with their requirements.

    An unstable closed loop fails all three (its margins mean nothing: value 0).
    """
    out = []
    for lm in report.loops:
        where = f"{lm.input} input"
        low, high = lm.gain_margin
        ok = bool(lm.stable)
        factor = float(min(high, math.inf if low <= 0 else 1.0 / low)) if ok else 0.0
        delay = float(lm.delay_margin_samples) if ok else 0.0
        phase = float(lm.phase_margin_deg) if ok else 0.0
        out += [Margin(f"delay margin at the {where}", delay, DELAY_MARGIN_MIN_SAMPLES, "samples",
                       bool(ok and delay >= DELAY_MARGIN_MIN_SAMPLES)),
                Margin(f"gain margin factor at the {where}", factor, GAIN_FACTOR_MIN, "-",
                       bool(ok and factor >= GAIN_FACTOR_MIN)),
                Margin(f"phase margin at the {where}", phase, PHASE_MARGIN_MIN_DEG, "deg",
                       bool(ok and phase >= PHASE_MARGIN_MIN_DEG))]
    return tuple(out)


def success_margin(what: str, lower_bound: float, required: float) -> Margin:
    """The success rate ``what`` as a margin in percent: the lower end of its 95 % Wilson interval (fractions in,
    percent out) against ``required``."""
    return Margin(f"{what} rate, 95 % lower bound", 100.0 * lower_bound, 100.0 * required, "%",
                  bool(lower_bound >= required))


def _number(value: float) -> str:
    return "unbounded" if math.isinf(value) else f"{value:.3g}"


def _unit(unit: str) -> str:
    return "" if unit in ("", "-") else f" {unit}"


def decide(stages: Sequence[StageRecord], budgets: Sequence[Budget], margins: Sequence[Margin], *,
           details: Mapping[str, str] | None = None, unchecked: Sequence[tuple[str, str]] = ()) -> Verdict:
    """Apply :data:`DESIGN_RULE`.

    Parameters
    ----------
    stages : sequence of StageRecord
    budgets : sequence of Budget
        Every budget of the run (names carry their stage, e.g. ``balance.elbow.rms_effort``).
    margins : sequence of Margin
    details : mapping of str to str, optional
        A sentence to add to the reason of a failing budget or margin, by its name.
    unchecked : sequence of (str, str)
        (what, why) for results a stage produced but could not check (e.g. a swing-up planned but not verified):
        like a missing stage, they leave the verdict without a decision unless something failed.
    """
    details = details or {}
    failed, pending, unchecked_names, reasons = [], [], [], []
    for s in stages:
        if s.status == "failed":
            failed.append(f"the {s.name} stage")
            reasons.append(f"{s.name} stage failed: {s.message}")
        elif s.status in ("missing", "skipped"):
            pending.append(f"the {s.name} stage")
            reasons.append(f"{s.name} stage {'is missing' if s.status == 'missing' else 'was skipped'}: {s.message}")
    for what, why in unchecked:
        unchecked_names.append(what)
        reasons.append(f"{what} is unchecked: {why}")
    for b in budgets:
        if b.ok is False:
            failed.append(b.name)
            text = (f"budget {b.name} = {b.value:.4g}{_unit(b.unit)} exceeds its limit {b.limit:.4g}{_unit(b.unit)}"
                    + (f" ({b.meaning})" if b.meaning else ""))
            reasons.append(text + (f"; {details[b.name]}" if b.name in details else ""))
    for m in margins:
        if not m.ok:
            failed.append(m.name)
            text = f"{m.name} = {_number(m.value)}{_unit(m.unit)}, below the required {_number(m.required)}" \
                   f"{_unit(m.unit)}"
            reasons.append(text + (f"; {details[m.name]}" if m.name in details else ""))
    tight, small = tightest_budget(budgets), smallest_margin(margins)
    # Failures first, then what did not run.
    reasons.sort(key=lambda r: any(w in r for w in (" stage is missing", " stage was skipped", " is unchecked: ")))
    if failed:
        headline = (f"Do not power this rig: {len(failed)} check{'s' if len(failed) > 1 else ''} "
                    f"fail{'' if len(failed) > 1 else 's'} ({'; '.join(failed)}).")
        if pending:
            headline += f" Not run: {', '.join(pending)}."
        if unchecked_names:
            headline += f" Not checked: {', '.join(unchecked_names)}."
        return Verdict("do-not-power", headline, tight, small, tuple(reasons))
    if pending or unchecked_names:
        parts = ([f"{', '.join(pending)} did not run"] if pending else []) + \
                ([f"{', '.join(unchecked_names)} could not be checked"] if unchecked_names else [])
        return Verdict("incomplete", f"No decision: {' and '.join(parts)}, so this run cannot clear the rig. "
                       "Everything that did run passes its checks.", tight, small, tuple(reasons))
    return Verdict("power", "Every stage ran and every budget and margin is met: power up at reduced limits first, "
                   "as cautioned below.", tight, small, ())
