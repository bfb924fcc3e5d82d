"""Swing-up synthesis: trajectory optimization, motor sizing, time-varying LQR tracking (:mod:`.tracking`),
energy-based laws (:mod:`.energy`) and the hand-over to the balance controller.

Public API::

    plan_swingup(rig, *, duration=None, minimum_time=False, scheme="hermite-simpson", intervals=100,
                 start="hanging", seed=0, ...) -> SwingUpPlan      # plan.sample(t) -> (x_ref, u_ff)
    size_motor(rig, *, duration, ...) -> SizingResult
    tradeoff_curve(rig, limits, ...) -> TradeoffCurve;  plot_tradeoff(curve, ax=None)

Modules: :mod:`.collocation` (the Opti problem), :mod:`.compact` (the optimizer's closed-form equations of motion,
checked against the model), :mod:`.guesses` (initial guesses), :mod:`.mesh` (re-integration check and
refinement), :mod:`.plan` (the result and its interpolants), :mod:`.problem` (validated request, scaling),
:mod:`.planner` (strategies), :mod:`.sizing`.
"""

from upswing.synthesis.swingup.plan import Attempt, SwingUpPlan
from upswing.synthesis.swingup.planner import STRATEGIES, plan_swingup
from upswing.synthesis.swingup.problem import default_duration
from upswing.synthesis.swingup.sizing import SizingResult, TradeoffCurve, plot_tradeoff, size_motor, tradeoff_curve

__all__ = [
    "STRATEGIES", "Attempt", "SizingResult", "SwingUpPlan", "TradeoffCurve", "default_duration", "plan_swingup",
    "plot_tradeoff", "size_motor", "tradeoff_curve",
]
