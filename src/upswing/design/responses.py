"""How the balance loop answers a released offset and a tap on the tip, simulated on the nonlinear model.

Two responses of the loop that runs on the rig (discrete LQR at the loop rate, encoders with their quantization and
noise, the exported estimator, saturation, delay, friction), both from upright at the nominal parameters, simulated
by the batch engine (:func:`upswing.verification.simulate.simulate`):

``offset``
    the links held straight, link 1 tilted by ``offset`` [rad], then released at rest (the regulator's step
    response: a step in the initial condition);
``tap``
    a horizontal impulse J [N s] at the tip of link 2 while upright at rest (a finger's tap). With the joints free
    during the impact (motor torques and friction are finite, so they pass no impulse), the generalized momentum
    jumps by the impulse's generalized force: M(q) dq_dot = J_tip(q)' [J, 0], with J_tip = d(tip position)/dq
    (impulse-momentum principle for a system of rigid bodies; any dynamics text, e.g. Greenwood, *Principles of
    Dynamics*, 1988, ch. 8).

Both are sized from the region of attraction the verification found, so that they show the loop working rather than
failing: the offset is half the catchable range along theta1 (at most :data:`MAX_OFFSET`), and the tap puts the state
on the level set (x - x_eq)' P (x - x_eq) = rho / 4 of the verified level set rho (half its size in every
direction). Without a verified level set (rho = 0) they fall back to :data:`FALLBACK_OFFSET` and the tap that gives
the straight rig a tip speed of :data:`FALLBACK_TAP_SPEED`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import casadi as ca
import numpy as np

from upswing.model.derived import derived_quantities
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign
from upswing.verification.roa import RegionOfAttraction
from upswing.verification.simulate import STATUS, SimulationSetup, simulate

MAX_OFFSET = 0.1  # rad: larger releases are a region-of-attraction question, answered by the slice maps
FALLBACK_OFFSET = 0.01  # rad, when no level set was verified
FALLBACK_TAP_SPEED = 0.05  # m/s at the tip of the straight rig, when no level set was verified
TAP_LEVEL = 0.25  # the tap's state lands on x'Px = TAP_LEVEL * rho
HORIZON = 3.0  # s simulated per response
STREAM = 7  # noise stream of these runs (verification's studies use 1 to 4)


@dataclass(frozen=True)
class Response:
    """One simulated response.

    Attributes
    ----------
    name : str
        ``"offset"`` or ``"tap"``.
    description : str
        What was done, with its size, in words.
    t : ndarray, shape (K + 1,)
        Sample times [s].
    X : ndarray, shape (K + 1, n_states)
        States (absolute, rig state order) [m, rad, m/s, rad/s].
    U : ndarray, shape (K + 1, n_inputs)
        Applied inputs [N or N m]; the last row repeats the one before (the input of the last sample period).
    outcome : str
        The engine's status name (``"held"``, ``"fell"``, ...).
    settle_time : float
        Last time the state was outside the settling box [s].
    peak_input : ndarray, shape (n_inputs,)
        Largest |applied input| [N or N m].
    """

    name: str
    description: str
    t: np.ndarray
    X: np.ndarray
    U: np.ndarray
    outcome: str
    settle_time: float
    peak_input: np.ndarray


@dataclass(frozen=True)
class BalanceResponses:
    """The offset release and the tip tap, with their sizes.

    Attributes
    ----------
    offset : float
        Released tilt of link 1 [rad].
    tap_impulse : float
        Horizontal impulse at the tip [N s] (positive to the right).
    tap_velocity : ndarray, shape (n_q,)
        Generalized velocity the tap gives [m/s, rad/s] (coordinate order).
    measurement : str
        ``"encoders"`` (quantized, noisy readings and the estimator) or ``"state"`` (ideal).
    responses : tuple of Response
    """

    offset: float
    tap_impulse: float
    tap_velocity: np.ndarray
    measurement: str
    responses: tuple[Response, ...]


def tap_velocity(rig: Rig, impulse: float) -> np.ndarray:
    """Generalized velocity change [m/s, rad/s] from a horizontal impulse ``impulse`` [N s] at the tip, at upright.

    Solves M(q) dq_dot = J_tip(q)' [impulse, 0] (module docstring) with M from the model's mass matrix and J_tip the
    tip position's Jacobian by casadi's automatic differentiation of the model's ``points``.
    """
    model = model_for(rig)
    n_q = rig.n_states // 2
    p = rig.parameter_vector()
    q = ca.SX.sym("q", n_q)
    jacobian = ca.Function("tip_jacobian", [q], [ca.jacobian(model.points(q, p)[:, 4], q)])
    q0 = equilibrium_state(rig, "upright")[:n_q]
    J = np.array(jacobian(q0), dtype=float)
    M = np.array(model.mass_matrix(q0, p), dtype=float)
    return np.linalg.solve(M, J.T @ np.array([impulse, 0.0]))


def response_sizes(rig: Rig, region: RegionOfAttraction | None) -> tuple[float, float]:
    """(offset [rad], tap impulse [N s]) as the module docstring sets them."""
    n, n_q = rig.n_states, rig.n_states // 2
    if region is None or region.rho <= 0.0:
        d = derived_quantities(rig)
        return FALLBACK_OFFSET, FALLBACK_TAP_SPEED * d.inertia_about_pivot / d.reach**2
    low, high = region.axis_catch["theta1"]
    caught = min(abs(low), abs(high))
    offset = min(MAX_OFFSET, 0.5 * caught) if caught > 0 else FALLBACK_OFFSET
    dx = np.zeros(n)
    dx[n_q:] = tap_velocity(rig, 1.0)  # state change per N s of impulse
    level = float(dx @ region.P @ dx)
    return offset, math.sqrt(TAP_LEVEL * region.rho / level)


def balance_responses(rig: Rig, design: BalanceDesign, controller, region: RegionOfAttraction | None, *,
                      seed: int = 0, substeps: int | None = None) -> BalanceResponses:
    """Simulate the offset release and the tip tap (module docstring) with ``controller``.

    Parameters
    ----------
    rig : Rig
    design : BalanceDesign
        The design ``controller`` runs (for the equilibrium).
    controller : Controller
        The balance loop as the verification runs it (:func:`upswing.verification.controllers.balance_controller`).
    region : RegionOfAttraction or None
        Sizes the two responses; None uses the fallbacks.
    seed : int
        Seed of the sensor noise.
    substeps : int, optional
        RK4 steps per sample (default: the engine's rule).
    """
    n_q = rig.n_states // 2
    offset, impulse = response_sizes(rig, region)
    x_eq = np.asarray(design.x_eq, dtype=float)
    x_offset = x_eq.copy()
    x_offset[rig.state_names.index("theta1")] += offset
    dq = tap_velocity(rig, impulse)
    x_tap = x_eq.copy()
    x_tap[n_q:] += dq
    setup = SimulationSetup(horizon=HORIZON, substeps=substeps, record=True)
    runs = simulate(rig, controller, np.vstack([x_offset, x_tap]), setup=setup, seed=seed, stream=STREAM)
    # The engine stops recording a run that failed, repeating its last state; cut each run at its end.
    words = (f"link 1 tilted {offset:.3g} rad ({math.degrees(offset):.2g} deg) with link 2 in line, released at rest",
             f"a horizontal tap of {impulse:.3g} N s at the tip, from upright at rest")
    out = []
    for k, (name, text) in enumerate(zip(("offset", "tap"), words, strict=True)):
        last = int(np.searchsorted(runs.times, runs.end_time[k] - 1e-12)) + 1
        t = runs.times[:last]
        X = runs.states[:last, k, :]
        U = runs.inputs[:last - 1, k, :]
        U = np.vstack([U, U[-1:]])
        out.append(Response(name=name, description=text, t=t, X=X, U=U, outcome=STATUS[int(runs.status[k])],
                            settle_time=float(runs.settle_time[k]), peak_input=runs.peak_input[k]))
    return BalanceResponses(offset=offset, tap_impulse=impulse, tap_velocity=dq, measurement=controller.measurement,
                            responses=tuple(out))

