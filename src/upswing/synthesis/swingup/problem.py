"""The problem one ``plan_swingup`` call poses: limits, boundary states, scaling and the compact dynamics.

Everything here is validated once, at this boundary: an impossible request is a
:class:`~upswing.errors.RequestError` naming the argument, what is allowed and what was given.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import casadi as ca
import numpy as np

from upswing.errors import RequestError
from upswing.model.dynamics import RigModel, model_for
from upswing.model.equilibria import EQUILIBRIA, equilibrium_state
from upswing.model.linearize import linearize
from upswing.model.rig import Rig
from upswing.synthesis.swingup.collocation import SCHEMES, Layout, Values
from upswing.synthesis.swingup.compact import compact_dynamics
from upswing.synthesis.swingup.guesses import nearest_goal

MAX_DEFAULT_TOLERANCE = 2e-3  # rad: cap of the encoder-count default of mesh_tolerance
PASSIVE_SPEED_SCALE = 10.0  # rad/s: typical link speed during a swing-up, to scale unactuated speeds


def default_duration(rig: Rig) -> float:
    """A swing-up duration to start from: 2.5 periods of the slowest small oscillation about ``hanging`` [s].

    Pumping energy in takes a few swings; on the demo rigs this is two to four times the minimum time at the rig's
    ``peak`` (acrobot 3.0 s against 1.4 s, pendubot 2.8 s against 0.7 s, cart rig 2.7 s against 1.1 s).
    """
    eigenvalues = linearize(rig, "hanging").eigenvalues
    frequencies = np.abs(eigenvalues.imag)
    frequencies = frequencies[frequencies > 1e-6]
    omega = float(frequencies.min()) if frequencies.size else 2 * np.pi
    return float(2.5 * 2 * np.pi / omega)


# ----------------------------------------------------------------------------------------------------------------
# Problem set-up


@lru_cache(maxsize=16)
def _compact(rig: Rig, coulomb_smoothing: float) -> tuple[RigModel, ca.Function]:
    model = model_for(rig, coulomb_smoothing=coulomb_smoothing)
    return model, compact_dynamics(rig, model)


def _joint_positions(rig: Rig) -> tuple[str, ...]:
    return ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")


@dataclass(frozen=True)
class Problem:
    """Everything fixed for one call: the rig, its compact dynamics, the layout, limits and boundary states.

    Attributes
    ----------
    rig : Rig
    model : RigModel
        The model with the requested Coulomb smoothing (used for the mesh check and the plan's slopes).
    dynamics : casadi.Function
        Its compact closed form f(x, u) (:mod:`.compact`), used inside the NLP.
    p : ndarray
        The rig's parameter vector.
    scheme : str
    intervals : int
        Initial mesh size N.
    start, goal : ndarray, shape (n_states,)
        Boundary states; the goal's angles are the whole turns nearest the start's.
    start_name : str
        The equilibrium name, or ``"given state"``.
    limit : ndarray, shape (n_inputs,)
        |u| bound [N m or N].
    stall : ndarray, shape (n_inputs,)
        Motor-line stall effort at ``limit`` [N m or N] (0 where there is no line).
    duration : float
        T [s] (the starting value in minimum time).
    speed_index : tuple of int
        State index of the speed of each input's joint.
    travel : float or None
        |x| bound [m] (cart rigs: travel less the margin).
    mesh_tolerance : float
        [rad or m]
    max_iterations, max_wall_time, time_effort_weight, ipopt_options
        Passed on to every solve.
    """

    rig: Rig
    model: RigModel
    dynamics: ca.Function
    p: np.ndarray
    scheme: str
    intervals: int
    start: np.ndarray
    goal: np.ndarray
    start_name: str
    limit: np.ndarray
    stall: np.ndarray
    duration: float
    speed_index: tuple[int, ...]
    travel: float | None
    mesh_tolerance: float
    max_iterations: int
    max_wall_time: float
    time_effort_weight: float
    ipopt_options: dict | None
    speed_headroom: float = 1.0

    @classmethod
    def create(cls, rig: Rig, *, scheme: str, intervals: int, start: str | np.ndarray, peak, duration: float | None,
               travel_margin: float, coulomb_smoothing: float, mesh_tolerance: float | None, max_iterations: int,
               max_wall_time: float, time_effort_weight: float, ipopt_options: dict | None,
               headroom: float = 1.0, speed_headroom: float = 1.0) -> Problem:
        if scheme not in SCHEMES:
            raise RequestError(f"scheme must be one of {', '.join(SCHEMES)}; got {scheme!r}")
        if not isinstance(intervals, int | np.integer) or intervals < 4:
            raise RequestError(f"intervals must be an integer >= 4; got {intervals!r}")
        if mesh_tolerance is None:
            mesh_tolerance = min(rig.sensors.angle_resolution, MAX_DEFAULT_TOLERANCE)
        for name, value in (("mesh_tolerance", mesh_tolerance), ("max_wall_time", max_wall_time)):
            if not np.isfinite(value) or value <= 0:
                raise RequestError(f"{name} must be > 0; got {value}")
        if max_iterations < 1:
            raise RequestError(f"max_iterations must be >= 1; got {max_iterations}")
        if coulomb_smoothing <= 0:
            raise RequestError(f"coulomb_smoothing must be > 0 rad/s (the optimizer needs a smooth friction law); "
                               f"got {coulomb_smoothing}")
        for name, share in (("headroom", headroom), ("speed_headroom", speed_headroom)):
            if isinstance(share, bool) or not (isinstance(share, int | float | np.floating) and 0.0 < share <= 1.0):
                raise RequestError(f"{name} must be a fraction in (0, 1] of the "
                                   f"{'peak' if name == 'headroom' else 'max_speed'}; got {share!r}")
        model, dynamics = _compact(rig, float(coulomb_smoothing))
        limit = float(headroom) * _limit(rig, peak)
        stall = np.array([0.0 if a.stall is None else a.stall * limit[i] / a.peak
                          for i, a in enumerate(rig.actuators)])
        if duration is None:
            duration = default_duration(rig)
        if not isinstance(duration, int | float | np.floating | np.integer) or not np.isfinite(duration) \
                or duration <= 0:
            raise RequestError(f"duration must be > 0 s; got {duration!r}")
        x_start, start_name = _start_state(rig, start)
        goal = nearest_goal(equilibrium_state(rig, "upright"), x_start, rig.n_states // 2)
        travel = None
        if rig.cart is not None:
            if not 0 <= travel_margin < rig.cart.travel:
                raise RequestError(f"travel_margin must be in [0, cart.travel) = [0, {rig.cart.travel:g}) m; "
                                   f"got {travel_margin}")
            travel = rig.cart.travel - travel_margin
            if abs(x_start[0]) > travel:
                raise RequestError(f"start cart position must lie within the rail less the margin, |x| <= "
                                   f"{travel:g} m; got {x_start[0]:g}")
        joints = _joint_positions(rig)
        n_q = rig.n_states // 2
        speed_index = tuple(n_q + joints.index(a.joint) for a in rig.actuators)
        for a, index in zip(rig.actuators, speed_index, strict=True):
            if abs(x_start[index]) > a.max_speed:
                raise RequestError(f"start {rig.state_names[index]} must be within actuator.{a.joint}.max_speed = "
                                   f"{a.max_speed:g}; got {x_start[index]:g}")
        return cls(rig=rig, model=model, dynamics=dynamics, p=rig.parameter_vector(), scheme=scheme,
                   intervals=int(intervals), start=x_start, goal=goal, start_name=start_name, limit=limit,
                   stall=stall, duration=float(duration), speed_index=speed_index, travel=travel,
                   mesh_tolerance=float(mesh_tolerance), max_iterations=int(max_iterations),
                   max_wall_time=float(max_wall_time), time_effort_weight=float(time_effort_weight),
                   ipopt_options=ipopt_options, speed_headroom=float(speed_headroom))

    def layout(self, minimum_time: bool) -> Layout:
        rig = self.rig
        n_q = rig.n_states // 2
        state_scale = np.ones(rig.n_states)
        state_scale[n_q:] = PASSIVE_SPEED_SCALE
        for a, index in zip(rig.actuators, self.speed_index, strict=True):
            state_scale[index] = a.max_speed
        if rig.cart is not None:
            state_scale[0] = rig.cart.travel
        return Layout(
            n_states=rig.n_states, n_inputs=rig.n_inputs, scheme=self.scheme, minimum_time=minimum_time,
            speed_index=self.speed_index, max_speed=tuple(self.speed_headroom * a.max_speed for a in rig.actuators),
            motor_line=tuple(a.stall is not None for a in rig.actuators),
            no_load_speed=tuple(a.no_load_speed or 1.0 for a in rig.actuators), cart_travel=self.travel,
            state_scale=tuple(state_scale), input_scale=tuple(rig.peak_inputs),
        )

    def values(self, duration: float, limit: np.ndarray | None = None, goal: np.ndarray | None = None) -> Values:
        limit = self.limit if limit is None else limit
        return Values(limit=limit, stall=self.stall * limit / self.limit, duration=duration,
                      duration_bounds=(duration / 10.0, 3.0 * duration), start=self.start,
                      goal=self.goal if goal is None else goal, time_effort_weight=self.time_effort_weight)


def _limit(rig: Rig, peak: float | np.ndarray | None) -> np.ndarray:
    """The |u| bound per input: the rig's ``peak``, or ``peak`` (a number for every input, or one per input)."""
    peaks = rig.peak_inputs
    if peak is None:
        return peaks.copy()
    try:
        given = np.asarray(peak, dtype=float) if np.ndim(peak) <= 1 else np.array([np.nan])
    except (TypeError, ValueError):
        given = np.array([np.nan])
    if given.size not in (1, len(peaks)) or not np.all(np.isfinite(given)) or np.any(given <= 0):
        raise RequestError(f"peak must be a positive number or one per input ({', '.join(rig.input_names)}) "
                           f"[{', '.join(rig.input_units)}]; got {np.asarray(peak).tolist()}")
    return np.broadcast_to(given.ravel() if given.size > 1 else given.reshape(()), peaks.shape).copy()


def _start_state(rig: Rig, start: str | np.ndarray) -> tuple[np.ndarray, str]:
    if isinstance(start, str):
        if start not in EQUILIBRIA:
            raise RequestError(f"start must be one of {', '.join(EQUILIBRIA)} or a state of {rig.n_states} numbers "
                               f"({', '.join(rig.state_names)}); got {start!r}")
        return equilibrium_state(rig, start), start
    x = np.asarray(start, dtype=float).ravel()
    if x.shape != (rig.n_states,) or not np.all(np.isfinite(x)):
        raise RequestError(f"start must be an equilibrium name or {rig.n_states} finite numbers "
                           f"({', '.join(rig.state_names)}); got {np.asarray(start).tolist()}")
    return x, "given state"
