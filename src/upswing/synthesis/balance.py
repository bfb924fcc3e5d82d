"""Balance controller at the upright: continuous and discrete LQR from the rig's weights.

Sign convention everywhere: u = u_eq - K (x - x_eq), angle errors wrapped to (-pi, pi].

The discrete design is the standard discrete LQR on the zero-order-hold model at the loop rate with the same Q and
R and no cross term (``docs/conventions.md``), so it tends to the continuous gain as the rate grows. A computation
delay of d samples is designed in by augmenting the state with the d inputs still in the pipeline:
z[k] = [x[k], u[k-d], ..., u[k-1]], u[k] computed at k is applied at k + d.
"""

from __future__ import annotations

from dataclasses import dataclass

import control
import numpy as np
import scipy.linalg

from upswing.errors import SynthesisError
from upswing.model.linearize import LinearModel, linearize
from upswing.model.rig import Rig

# Bryson's rule defaults: the largest deviation from upright we are willing to see in each state.
ALLOWED_DEVIATION = {"x": 0.05, "theta1": 0.05, "theta2": 0.05,  # m, rad, rad
                     "x_dot": 0.5, "theta1_dot": 1.0, "theta2_dot": 1.0}  # m/s, rad/s, rad/s


@dataclass(frozen=True)
class BalanceDesign:
    """An LQR balance design at ``upright``.

    Attributes
    ----------
    K : ndarray, shape (n_inputs, n_states)
        Continuous-time LQR gain [N m/rad, N m s/rad, N/m, ...].
    K_discrete : ndarray, shape (n_inputs, n_states + delay_samples * n_inputs)
        Discrete LQR gain for the zero-order-hold model at ``sample_rate``; with a delay it acts on the augmented
        state [x - x_eq, u[k-d] - u_eq, ..., u[k-1] - u_eq].
    P, P_discrete : ndarray
        Continuous and discrete Riccati solutions (cost-to-go (x - x_eq)' P (x - x_eq)).
    Q, R : ndarray
        State and input weights used (Q on the plain state).
    A, B : ndarray
        Continuous linear model at upright.
    Ad, Bd : ndarray
        Zero-order-hold discrete model at ``sample_rate`` (augmented when ``delay_samples`` > 0).
    x_eq, u_eq : ndarray
        The equilibrium the state error is taken from, and the input there.
    sample_rate : float
        Loop rate [Hz].
    delay_samples : int
        Computation delay designed in [samples].
    closed_loop_poles : ndarray
        Eigenvalues of A - B K [1/s].
    closed_loop_poles_discrete : ndarray
        Eigenvalues of Ad - Bd K_discrete (dimensionless, inside the unit circle when stable).
    riccati_residual : float
        Relative residual of the continuous Riccati equation, ||A'P + PA - PBR^-1B'P + Q|| / ||Q||.
    riccati_residual_discrete : float
        Relative residual of the discrete Riccati equation.
    weights_source : str
        ``"rig file"`` or ``"Bryson's rule"``.
    state_names, input_names : tuple of str
    """

    K: np.ndarray
    K_discrete: np.ndarray
    P: np.ndarray
    P_discrete: np.ndarray
    Q: np.ndarray
    R: np.ndarray
    A: np.ndarray
    B: np.ndarray
    Ad: np.ndarray
    Bd: np.ndarray
    x_eq: np.ndarray
    u_eq: np.ndarray
    sample_rate: float
    delay_samples: int
    closed_loop_poles: np.ndarray
    closed_loop_poles_discrete: np.ndarray
    riccati_residual: float
    riccati_residual_discrete: float
    weights_source: str
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]


def bryson_weights(rig: Rig) -> tuple[np.ndarray, np.ndarray]:
    """Q = diag(1 / dx_max^2), R = diag(1 / u_max^2) with dx_max from :data:`ALLOWED_DEVIATION` and u_max the
    actuator peaks (Bryson & Ho, *Applied Optimal Control*, 1975)."""
    Q = np.diag([1.0 / ALLOWED_DEVIATION[s] ** 2 for s in rig.state_names])
    R = np.diag(1.0 / rig.peak_inputs**2)
    return Q, R


def balance_weights(rig: Rig) -> tuple[np.ndarray, np.ndarray, str]:
    """The rig file's [balance] q, r as diagonal matrices, or Bryson's rule when they are absent."""
    if rig.balance.q is None or rig.balance.r is None:
        Q, R = bryson_weights(rig)
        return Q, R, "Bryson's rule"
    return np.diag(rig.balance.q), np.diag(rig.balance.r), "rig file"


def zero_order_hold(A: np.ndarray, B: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact zero-order-hold discretization via the block matrix exponential (Van Loan, 1978)."""
    n, m = B.shape
    block = np.zeros((n + m, n + m))
    block[:n, :n] = A
    block[:n, n:] = B
    E = scipy.linalg.expm(block * dt)
    return E[:n, :n], E[:n, n:]


def augment_delay(Ad: np.ndarray, Bd: np.ndarray, delay: int) -> tuple[np.ndarray, np.ndarray]:
    """Discrete model with a d-sample input delay: z = [x, u[k-d], ..., u[k-1]]."""
    if delay == 0:
        return Ad, Bd
    n, m = Bd.shape
    N = n + delay * m
    Az = np.zeros((N, N))
    Bz = np.zeros((N, m))
    Az[:n, :n] = Ad
    Az[:n, n:n + m] = Bd  # the oldest held input acts now
    for i in range(delay - 1):  # shift register of pending inputs
        Az[n + i * m:n + (i + 1) * m, n + (i + 1) * m:n + (i + 2) * m] = np.eye(m)
    Bz[N - m:, :] = np.eye(m)
    return Az, Bz


def design_balance(rig: Rig, *, sample_rate: float | None = None, delay_samples: int | None = None,
                   linear: LinearModel | None = None) -> BalanceDesign:
    """Continuous and discrete LQR at ``upright``.

    Parameters
    ----------
    rig : Rig
    sample_rate : float, optional
        Loop rate [Hz]; default the rig file's ``[balance].sample_rate``.
    delay_samples : int, optional
        Computation delay to design in [samples]; default ``[balance].delay_samples``.
    linear : LinearModel, optional
        Use this linear model instead of linearizing the rig at ``upright``.

    Returns
    -------
    BalanceDesign

    Raises
    ------
    SynthesisError
        When a Riccati equation has no stabilizing solution (e.g. an uncontrollable rig).
    """
    rate = rig.balance.sample_rate if sample_rate is None else float(sample_rate)
    delay = rig.balance.delay_samples if delay_samples is None else int(delay_samples)
    lin = linearize(rig, "upright") if linear is None else linear
    Q, R, source = balance_weights(rig)
    A, B = lin.A, lin.B
    try:
        K, P, poles = control.lqr(A, B, Q, R)
        Ad, Bd = augment_delay(*zero_order_hold(A, B, 1.0 / rate), delay)
        Qz = scipy.linalg.block_diag(Q, np.zeros((delay * rig.n_inputs,) * 2)) if delay else Q
        Kd, Pd, poles_d = control.dlqr(Ad, Bd, Qz, R)
    except (ValueError, np.linalg.LinAlgError, control.ControlArgument) as exc:
        raise SynthesisError(f"{rig.source}: no stabilizing LQR at upright ({exc}); check controllability "
                             "with `upswing modes` and the [balance] weights") from None
    K, P, Kd, Pd = (np.asarray(M) for M in (K, P, Kd, Pd))
    residual = np.linalg.norm(A.T @ P + P @ A - P @ B @ np.linalg.solve(R, B.T @ P) + Q) / np.linalg.norm(Q)
    BtPB = R + Bd.T @ Pd @ Bd
    residual_d = np.linalg.norm(
        Ad.T @ Pd @ Ad - Pd - Ad.T @ Pd @ Bd @ np.linalg.solve(BtPB, Bd.T @ Pd @ Ad) + Qz) / np.linalg.norm(Qz)
    return BalanceDesign(
        K=K, K_discrete=Kd, P=P, P_discrete=Pd, Q=Q, R=R, A=A, B=B, Ad=Ad, Bd=Bd, x_eq=lin.x_eq, u_eq=lin.u_eq,
        sample_rate=rate, delay_samples=delay, closed_loop_poles=np.asarray(poles),
        closed_loop_poles_discrete=np.asarray(poles_d), riccati_residual=float(residual),
        riccati_residual_discrete=float(residual_d), weights_source=source, state_names=rig.state_names,
        input_names=rig.input_names,
    )
