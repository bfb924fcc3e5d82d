"""Margins and the verdict a report leads with: plain data, filled in by whichever stage measured them.

A **budget** (:class:`upswing.verification.budgets.Budget`) is a quantity that must stay at or below a limit (peak
torque against the drive's peak, RMS against the continuous rating, rail used against travel, ...); its *usage* is
value / limit, and a budget without a limit (``limit=None``) has none. A **margin** is a quantity that must stay at
or above a required minimum (a disk margin, a PBH controllability margin, a success rate); its *ratio* is
value / required. The report names the budget with the highest usage and the margin with the lowest ratio as what
limits the verdict; which budget that is, is decided in one place,
:func:`upswing.verification.budgets.tightest_budget` (the clamped peak-effort lines are not ranked).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from upswing.errors import RequestError
from upswing.verification.budgets import Budget, tightest_budget

STATUSES = ("power", "do-not-power", "incomplete")


@dataclass(frozen=True)
class Margin:
    """A quantity that must stay at or above a required minimum.

    Attributes
    ----------
    name : str
        What the margin measures ("disk margin at the plant input").
    value : float
        The measured margin, in ``unit``.
    required : float
        The smallest acceptable value, in ``unit`` (> 0).
    unit : str
        Unit of ``value`` and ``required`` ("-" when dimensionless).
    ok : bool
        Whether the margin is met.
    """

    name: str
    value: float
    required: float
    unit: str
    ok: bool

    def __post_init__(self) -> None:
        if not (math.isfinite(self.required) and self.required > 0):
            raise RequestError(f"margin {self.name!r}: required must be a finite number > 0; got {self.required!r}")

    @property
    def ratio(self) -> float:
        """value / required [-]: below 1 the margin is not met."""
        return self.value / self.required


@dataclass(frozen=True)
class Verdict:
    """The answer at the top of a report.

    Attributes
    ----------
    status : str
        ``"power"`` (every budget and margin met; power up with the cautions), ``"do-not-power"`` or
        ``"incomplete"`` (some analysis not run yet, so no decision).
    headline : str
        One sentence in words.
    tightest : Budget or None
        The budget with the highest usage.
    smallest : Margin or None
        The margin with the lowest ratio.
    reasons : tuple of str
        Further sentences: what failed, what was not run.
    """

    status: str
    headline: str
    tightest: Budget | None = None
    smallest: Margin | None = None
    reasons: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.status not in STATUSES:
            raise RequestError(f"verdict status must be one of {', '.join(STATUSES)}; got {self.status!r}")


def smallest_margin(margins: Sequence[Margin]) -> Margin | None:
    """The margin with the lowest value / required, or None for no margins."""
    return min(margins, key=lambda m: (m.ratio, m.ok), default=None)


def budgets_from_records(records: Sequence[Mapping[str, Any]]) -> tuple[Budget, ...]:
    """Budgets from plain records ``{name, value, limit, unit, ok}`` (optionally ``median`` and ``meaning``), e.g.
    read back from a summary file; ``median`` defaults to ``value`` and ``meaning`` to "".

    Raises
    ------
    RequestError
        When a record lacks a required field or has an unknown one.
    """
    required = ("name", "value", "limit", "unit", "ok")
    optional = ("median", "meaning")
    out = []
    for k, record in enumerate(records):
        missing = [f for f in required if f not in record]
        extra = [f for f in record if f not in required + optional]
        if missing or extra:
            raise RequestError(f"budget record {k}: fields are {', '.join(required)} (and optionally "
                               f"{', '.join(optional)}); missing {missing or 'none'}, unexpected {extra or 'none'}")
        limit = None if record["limit"] is None else float(record["limit"])
        ok = None if record["ok"] is None else bool(record["ok"])
        value = float(record["value"])
        out.append(Budget(name=str(record["name"]), value=value, limit=limit, unit=str(record["unit"]), ok=ok,
                          median=float(record.get("median", value)), meaning=str(record.get("meaning", ""))))
    return tuple(out)


def verdict_from(budgets: Sequence[Budget], margins: Sequence[Margin], *, missing: Sequence[str] = ()) -> Verdict:
    """The verdict implied by budgets and margins: do not power if any fails; incomplete if a stage is missing.

    Parameters
    ----------
    budgets, margins
        Everything that was measured.
    missing : sequence of str
        Analyses not run yet (their absence makes the verdict ``incomplete`` unless something already failed).
    """
    tight, small = tightest_budget(budgets), smallest_margin(margins)
    failed = [b.name for b in budgets if b.ok is False] + [m.name for m in margins if not m.ok]
    if failed:
        return Verdict("do-not-power", f"Do not power this rig: {len(failed)} check(s) fail ({', '.join(failed)}).",
                       tight, small, tuple(f"not run yet: {m}" for m in missing))
    if missing:
        return Verdict("incomplete", "No verdict yet: " + ", ".join(missing) + " not run.", tight, small,
                       tuple(f"not run yet: {m}" for m in missing))
    return Verdict("power", "Every budget and margin is met: power up at reduced limits first, as cautioned below.",
                   tight, small)
