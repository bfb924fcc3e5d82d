"""The swing-up stage of a design run: a slot that calls the swing-up synthesis when this build has it.

Until :mod:`upswing.synthesis.swingup` is part of the package the stage reports itself as missing
(:class:`StageUnavailable`), and the design verdict says so instead of pretending the manoeuvre was designed.
"""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass
from typing import Any

from upswing.model.rig import Rig
from upswing.synthesis.study import BalanceStudy

SWINGUP_MODULE = "upswing.synthesis.swingup"


class StageUnavailable(Exception):  # noqa: N818 - a stage state, not an error condition of the user's making
    """A stage this build of upswing cannot run; the message says why (never a user error)."""


@dataclass(frozen=True)
class SwingUpOutcome:
    """What the swing-up stage produced (filled once the synthesis exists in this build).

    Attributes
    ----------
    plan : object
        The optimized swing-up (``SwingUpPlan``).
    """

    plan: Any


def swingup_available() -> bool:
    """Whether this build has the swing-up synthesis."""
    return importlib.util.find_spec(SWINGUP_MODULE) is not None


def run_swingup_stage(rig: Rig, study: BalanceStudy | None, *, seed: int, rollouts: int) -> SwingUpOutcome:
    """Plan, track and verify the swing-up of ``rig`` (hand-over to the balance design of ``study``).

    Raises
    ------
    StageUnavailable
        When this build has no swing-up synthesis.
    """
    if not swingup_available():
        raise StageUnavailable("this build of upswing has no swing-up synthesis yet, so how the links get from "
                               "hanging to upright was not designed or checked")
    raise StageUnavailable("the swing-up synthesis is present but not yet wired into the design run")
