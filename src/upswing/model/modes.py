"""What the linear models say about the rig: oscillation modes, growth rates, controllability, observability.

Controllability is judged for the inputs the rig really has. Besides the Kalman rank test, a scaled measure says
how *nearly* uncontrollable the rig is: the Popov-Belevitch-Hautus (PBH) margin

    mu = min over eigenvalues lambda of A of sigma_min([lambda I - A, B]) / ||[A, B]||,

computed after scaling states by their typical magnitudes, inputs by their peak and time by the rig's pendulum time
constant, so that mu is dimensionless. mu = 0 means a mode the inputs cannot move at all; a small mu (below
:data:`WEAK_CONTROL`) means a mode that needs large inputs, e.g. an acrobot whose second link is too light for the
elbow motor to move the shoulder.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import casadi as ca
import numpy as np
import scipy.linalg

from upswing.model.dynamics import RigModel, model_for
from upswing.model.equilibria import EQUILIBRIA
from upswing.model.linearize import LinearModel, linearize
from upswing.model.rig import Rig

WEAK_CONTROL = 1e-3  # below this PBH margin a mode is called nearly uncontrollable (common practice: ~1e-3)


@dataclass(frozen=True)
class OscillationMode:
    """One small-oscillation mode about ``hanging`` (undamped, frictionless).

    Attributes
    ----------
    frequency_hz : float
        Natural frequency [Hz] (0 for the cart's rigid-body mode).
    shape : ndarray, shape (n_q,)
        Mode shape in generalized coordinates, scaled so the largest entry is +1.
    absolute_shape : tuple of float
        Link 1 and link 2 absolute angle amplitudes (phi1 = theta1, phi2 = theta1 + theta2), same scaling.
    kind : str
        ``"in-phase"`` (both links swing the same way), ``"out-of-phase"``, or ``"rigid-body"`` (cart mode).
    """

    frequency_hz: float
    shape: np.ndarray
    absolute_shape: tuple[float, float]
    kind: str


@dataclass(frozen=True)
class Controllability:
    """Controllability of (A, B) for the rig's actual inputs.

    Attributes
    ----------
    rank : int
        Rank of the controllability matrix [B, AB, ...] (numerical, on the scaled system).
    controllable : bool
        Full rank and a PBH margin above :data:`WEAK_CONTROL` / 1e3 (i.e. not numerically degenerate).
    pbh_margin : float
        The scaled PBH measure described in the module docstring (dimensionless, 0 = uncontrollable).
    weakest_mode : complex
        The eigenvalue [1/s] at which the PBH margin is attained.
    warning : str
        Empty, or a sentence for the user when the rig is nearly uncontrollable.
    """

    rank: int
    controllable: bool
    pbh_margin: float
    weakest_mode: complex
    warning: str


@dataclass(frozen=True)
class EquilibriumReport:
    """Everything :func:`analyse_equilibrium` finds at one equilibrium."""

    linear: LinearModel
    controllability: Controllability
    observable: bool
    observability_rank: int
    measured: tuple[str, ...]
    growth_rates: tuple[float, ...]  # real parts > 0 of unstable eigenvalues [1/s]
    modes: tuple[OscillationMode, ...]  # only at "hanging"

    @property
    def time_to_double(self) -> tuple[float, ...]:
        """ln 2 / growth rate for each unstable eigenvalue [s]."""
        return tuple(math.log(2.0) / s for s in self.growth_rates)


def state_scales(rig: Rig) -> np.ndarray:
    """Typical state magnitudes used to scale analyses: 1 rad, rail travel, and their rate at the pendulum
    frequency sqrt(g / (l1 + l2))."""
    omega = pendulum_rate(rig)
    q_scale = [rig.cart.travel, 1.0, 1.0] if rig.cart is not None else [1.0, 1.0]
    return np.array(q_scale + [s * omega for s in q_scale])


def pendulum_rate(rig: Rig) -> float:
    """sqrt(g / (l1 + l2)) [rad/s]: the rig's characteristic rate."""
    return math.sqrt(rig.gravity / (rig.link1.length + rig.link2.length))


def controllability(rig: Rig, linear: LinearModel) -> Controllability:
    """Kalman rank test and the scaled PBH margin of (A, B) for the rig's actual inputs."""
    omega = pendulum_rate(rig)
    Tx = np.diag(state_scales(rig))
    Tu = np.diag(rig.peak_inputs)
    A = np.linalg.solve(Tx, linear.A @ Tx) / omega
    B = np.linalg.solve(Tx, linear.B @ Tu) / omega
    n = A.shape[0]
    blocks = [B]
    for _ in range(n - 1):
        blocks.append(A @ blocks[-1])
    ctrb = np.hstack(blocks)
    sv = np.linalg.svd(ctrb, compute_uv=False)
    rank = int(np.sum(sv > sv[0] * 1e-10)) if sv[0] > 0 else 0
    norm = np.linalg.norm(np.hstack([A, B]), 2)
    margin, weakest = math.inf, 0j
    for lam in np.linalg.eigvals(A):
        s = np.linalg.svd(np.hstack([lam * np.eye(n) - A, B]), compute_uv=False)[-1] / norm
        if s < margin:
            margin, weakest = float(s), complex(lam * omega)
    controllable = rank == n and margin > WEAK_CONTROL * 1e-3
    warning = ""
    if not controllable:
        warning = (f"not controllable at {linear.equilibrium} with inputs {list(rig.input_names)}: "
                   f"the mode at {weakest.real:.3g}{weakest.imag:+.3g}j 1/s cannot be moved")
    elif margin < WEAK_CONTROL:
        warning = (f"nearly uncontrollable at {linear.equilibrium} (PBH margin {margin:.2g} < {WEAK_CONTROL:g}): "
                   f"the mode at {weakest.real:.3g}{weakest.imag:+.3g}j 1/s needs very large inputs")
    return Controllability(rank=rank, controllable=controllable, pbh_margin=margin, weakest_mode=weakest,
                           warning=warning)


def measured_states(rig: Rig) -> tuple[str, ...]:
    """States the encoders measure: the angles, and the cart position on a cart rig."""
    return tuple(s for s in rig.state_names if not s.endswith("_dot"))


def output_matrix(rig: Rig) -> np.ndarray:
    """C selecting the measured states (encoder readings) from x."""
    names = measured_states(rig)
    return np.array([[1.0 if s == m else 0.0 for s in rig.state_names] for m in names])


def observability_rank(rig: Rig, linear: LinearModel) -> int:
    """Rank of [C; CA; ...] with C the encoder readings (scaled as in :func:`controllability`)."""
    Tx = np.diag(state_scales(rig))
    A = np.linalg.solve(Tx, linear.A @ Tx) / pendulum_rate(rig)
    C = output_matrix(rig) @ Tx
    blocks = [C]
    for _ in range(A.shape[0] - 1):
        blocks.append(blocks[-1] @ A)
    sv = np.linalg.svd(np.vstack(blocks), compute_uv=False)
    return int(np.sum(sv > sv[0] * 1e-10))


def hanging_modes(rig: Rig) -> tuple[OscillationMode, ...]:
    """Small-oscillation modes about ``hanging``: solve K v = w^2 M v with K = dg/dq (friction left out).

    Returns the modes sorted by frequency; a cart rig adds a rigid-body mode (w = 0) for the free cart.
    """
    model = model_for(rig)
    p = rig.parameter_vector()
    x_eq = np.array(linearize(rig, "hanging").x_eq)
    q_eq = x_eq[: model.n_q]
    M = np.array(model.mass_matrix(q_eq, p))
    # Stiffness by AD of the gravity terms.
    K = np.array(_stiffness(model)(q_eq, p))
    w2, V = scipy.linalg.eigh(K, M)
    modes = []
    for value, vector in zip(w2, V.T, strict=True):
        shape = vector / vector[np.argmax(np.abs(vector))]
        th1, th2 = (shape[1], shape[2]) if rig.base == "cart" else (shape[0], shape[1])
        phi = (float(th1), float(th1 + th2))
        omega = math.sqrt(max(value, 0.0))
        if omega < 1e-6 * pendulum_rate(rig):
            kind = "rigid-body"
        else:
            kind = "in-phase" if phi[0] * phi[1] > 0 else "out-of-phase"
        modes.append(OscillationMode(frequency_hz=omega / (2 * math.pi), shape=shape, absolute_shape=phi,
                                     kind=kind))
    return tuple(modes)


def _stiffness(model: RigModel) -> ca.Function:
    """K(q, p) = dg/dq, the gravity stiffness, by automatic differentiation."""
    q = ca.SX.sym("q", model.n_q)
    p = ca.SX.sym("p", model.gravity_terms.size1_in(1))
    return ca.Function("stiffness", [q, p], [ca.jacobian(model.gravity_terms(q, p), q)])


def analyse_equilibrium(rig: Rig, equilibrium: str) -> EquilibriumReport:
    """Linearize at one equilibrium and report eigenvalues, growth rates, controllability and observability."""
    linear = linearize(rig, equilibrium)
    growth = tuple(sorted({round(float(e.real), 12) for e in linear.eigenvalues if e.real > 1e-9},
                          reverse=True))
    return EquilibriumReport(
        linear=linear,
        controllability=controllability(rig, linear),
        observable=observability_rank(rig, linear) == rig.n_states,
        observability_rank=observability_rank(rig, linear),
        measured=measured_states(rig),
        growth_rates=growth,
        modes=hanging_modes(rig) if equilibrium == "hanging" else (),
    )


def analyse_all(rig: Rig) -> dict[str, EquilibriumReport]:
    """:func:`analyse_equilibrium` at each of the four equilibria, in the order of ``EQUILIBRIA``."""
    return {name: analyse_equilibrium(rig, name) for name in EQUILIBRIA}
