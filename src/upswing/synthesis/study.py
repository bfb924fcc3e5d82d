"""Everything ``upswing balance`` reports, computed once: the LQR design, both estimators, the margins of every
variant and, on request, a gain schedule."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign, design_balance
from upswing.synthesis.estimation import EstimatorDesign, finite_difference_estimator, kalman_estimator
from upswing.synthesis.margins import MarginReport, balance_margins
from upswing.synthesis.schedule import GainSchedule, gain_schedule


@dataclass(frozen=True)
class BalanceStudy:
    """The balance design and what it was checked with.

    Attributes
    ----------
    design : BalanceDesign
    kalman : EstimatorDesign
        Steady-state Kalman filter at the loop rate.
    finite_difference : EstimatorDesign
        Filtered finite-difference velocity estimate.
    margins : dict of str to MarginReport
        Keyed ``continuous``, ``discrete``, ``discrete_kalman``, ``discrete_finite_difference``.
    schedule : GainSchedule or None
    warnings : tuple of str
        The rig's and the design's warnings.
    flags : tuple of str
        Margin flags (delay margin under two samples, unstable loops).
    """

    design: BalanceDesign
    kalman: EstimatorDesign
    finite_difference: EstimatorDesign
    margins: dict[str, MarginReport]
    schedule: GainSchedule | None
    warnings: tuple[str, ...]
    flags: tuple[str, ...]


def study_balance(rig: Rig, *, schedule: tuple[str, np.ndarray] | None = None) -> BalanceStudy:
    """Design the balance loop for ``rig`` and check it.

    Parameters
    ----------
    rig : Rig
    schedule : (parameter, values), optional
        Also compute :func:`~upswing.synthesis.schedule.gain_schedule` over this grid.
    """
    design = design_balance(rig)
    kalman = kalman_estimator(rig, design)
    fd = finite_difference_estimator(rig, design)
    margins = balance_margins(design, (kalman, fd))
    sched = None if schedule is None else gain_schedule(rig, schedule[0], schedule[1])
    flags = tuple(f for report in margins.values() for f in report.flags)
    return BalanceStudy(design=design, kalman=kalman, finite_difference=fd, margins=margins, schedule=sched,
                        warnings=tuple(rig.warnings) + design.warnings, flags=flags)
