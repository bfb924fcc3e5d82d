"""Supervision limits for a verified swing-up: when the firmware must stop the drive, with numbers.

A missed catch leaves the links whirling with the energy of the swing. The hazard notes say the drive must stop
when the catch has not happened by a set time or a speed leaves its window; this module turns the Monte Carlo runs
of :mod:`upswing.verification.manoeuvre` into those numbers and checks them on runs they were not derived from.

Rules (each is a stop condition for the firmware, to run as a safety function; see ISO 13849-1 for rating it):

* **catch deadline**: the balance cost-to-go (x - x_eq)' P (x - x_eq) must have come down to the hand-over level
  rho_in by ``catch_deadline`` seconds after the swing-up starts. The deadline is the latest such time among the
  caught runs plus :data:`DEADLINE_MARGIN` of the table's duration.
* **speed windows**: |joint speed| above ``speed_limits[joint]`` at any time stops the drive. The window is the
  largest speed of the caught runs times (1 + :data:`SPEED_MARGIN`), never above an actuated joint's ``max_speed``.
* **rail window** (cart rigs): |x| above ``rail_limit``, the caught runs' largest excursion times
  (1 + :data:`SPEED_MARGIN`), never beyond ``travel``.
* **stale reading** (when the drop-out study ran, :mod:`upswing.verification.swingup_dropout`): no fresh encoder
  reading for ``stale_reading_samples`` consecutive control samples (``stale_reading_ms``) stops the drive.

Honest check: the limits are derived from the even-numbered Monte Carlo runs and checked on the odd-numbered ones:
``false_trips`` counts checked runs that were caught but would have been stopped (a nuisance trip), and
``missed_stopped`` counts checked runs that were not caught and would have been stopped (the protection working).
The margins are judgement (common practice: a trip threshold sits above the worst normal operation with room for
what the model leaves out), stated here so they can be argued with.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from upswing.model.rig import Rig

SPEED_MARGIN = 0.15  # 15 % above the worst caught run: room for unmodelled effects without masking a runaway
DEADLINE_MARGIN = 0.1  # of the table's duration, after the latest catch among the derivation runs


@dataclass(frozen=True)
class Supervision:
    """Stop conditions for the swing-up, derived from and checked on the Monte Carlo runs (module docstring).

    Attributes
    ----------
    catch_level : float
        rho_in [-]: the level of the balance cost-to-go that counts as caught.
    catch_deadline : float
        Seconds after the start by which the level must have been reached [s]; NaN when no run was caught.
    speed_limits : tuple of (str, float, str)
        (joint, trip threshold, unit) per joint [rad/s or m/s].
    rail_limit : float or None
        Trip threshold of |x| [m] on a cart rig.
    derived_from, checked_on : int
        Caught runs the limits were derived from; runs they were checked on.
    false_trips : int
        Checked runs that were caught but would have been stopped.
    missed, missed_stopped : int
        Checked runs that were not caught, and how many of them the limits would have stopped.
    stale_reading_samples : int or None
        Consecutive control samples without a fresh encoder reading that stop the drive (from the drop-out study;
        None when it did not run).
    stale_reading_ms : float or None
        The same as a time [ms].
    """

    catch_level: float
    catch_deadline: float
    speed_limits: tuple[tuple[str, float, str], ...]
    rail_limit: float | None
    derived_from: int
    checked_on: int
    false_trips: int
    missed: int
    missed_stopped: int
    stale_reading_samples: int | None = None
    stale_reading_ms: float | None = None

    @property
    def rule(self) -> str:
        """The stop conditions in words."""
        if not math.isfinite(self.catch_deadline):
            return "no run was caught: there is no swing-up to supervise"
        speeds = ", ".join(f"|{j} speed| > {v:.3g} {u}" for j, v, u in self.speed_limits)
        rail = f", |x| > {self.rail_limit:.3g} m" if self.rail_limit is not None else ""
        stale = ""
        if self.stale_reading_samples is not None:
            stale = (f", or no fresh encoder reading has arrived for {self.stale_reading_ms:g} ms "
                     f"({self.stale_reading_samples} control sample{'s' if self.stale_reading_samples != 1 else ''})")
        return (f"stop the drive when (x - x_eq)' P (x - x_eq) has not come down to {self.catch_level:.4g} by "
                f"{self.catch_deadline:.3f} s after the start, or at any time when {speeds}{rail}{stale}")


def joint_names(rig: Rig) -> tuple[str, ...]:
    """Generalized coordinates in order, named by joint (as the budgets name their speeds)."""
    return ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")


def derive_supervision(rig: Rig, *, caught: np.ndarray, level_times: np.ndarray, peak_speed: np.ndarray,
                       peak_rail: np.ndarray, duration: float, catch_level: float) -> Supervision:
    """Derive the stop conditions from the even-numbered runs and check them on the odd-numbered ones.

    Parameters
    ----------
    rig : Rig
    caught : ndarray of bool (N,)
        Per run, caught and held.
    level_times : ndarray (N,)
        Per run, the first time the balance cost-to-go reached ``catch_level`` [s] (NaN if never).
    peak_speed : ndarray (N, n_q)
        Per run, the largest |speed| of each generalized coordinate [m/s, rad/s].
    peak_rail : ndarray (N,)
        Per run, the largest |x| [m] (0 on a fixed base).
    duration : float
        The swing-up table's duration [s].
    catch_level : float
        rho_in [-].
    """
    caught = np.asarray(caught, dtype=bool)
    n = caught.size
    derive = np.zeros(n, dtype=bool)
    derive[0::2] = True
    if n == 1:  # a single run can only be its own check
        derive[:] = True
    check = ~derive if n > 1 else derive
    base = derive & caught
    joints = joint_names(rig)
    if not base.any():
        nan_limits = tuple((j, math.nan, "m/s" if j == "cart" else "rad/s") for j in joints)
        return Supervision(catch_level, math.nan, nan_limits, None if rig.cart is None else math.nan, 0,
                           int(check.sum()), 0, int(np.sum(check & ~caught)), 0)
    deadline = float(np.nanmax(level_times[base])) + DEADLINE_MARGIN * duration
    limits = []
    for j, joint in enumerate(joints):
        window = (1.0 + SPEED_MARGIN) * float(np.max(peak_speed[base, j]))
        if joint in rig.actuated:
            window = min(window, rig.actuator(joint).max_speed)
        limits.append((joint, window, "m/s" if joint == "cart" else "rad/s"))
    rail = None
    if rig.cart is not None:
        rail = min((1.0 + SPEED_MARGIN) * float(np.max(peak_rail[base])), rig.cart.travel)
    late = ~(level_times <= deadline)  # NaN (never) counts as late
    fast = np.any(peak_speed > np.array([v for _, v, _ in limits])[None, :], axis=1)
    wide = peak_rail > rail if rail is not None else np.zeros(n, dtype=bool)
    trip = late | fast | wide
    return Supervision(
        catch_level=float(catch_level), catch_deadline=deadline, speed_limits=tuple(limits), rail_limit=rail,
        derived_from=int(base.sum()), checked_on=int(check.sum()), false_trips=int(np.sum(check & caught & trip)),
        missed=int(np.sum(check & ~caught)), missed_stopped=int(np.sum(check & ~caught & trip)))
