"""Closing the balance loop: the plant, the controller as a linear system, and the loop broken at one input.

Everything here is linear and time-invariant, continuous (``dt = None``) or discrete (``dt`` = loop period):

    plant       x+ = A x + B u,          y = C x            (u: what reaches the actuators)
    controller  c+ = Ac c + Bc y,        u = Cc c + Dc y    (observer, gain and delay line together)

so margins, LQG poles and schedules all use one interconnection (``x+`` is x_dot or x[k+1]). The discrete
controller of a :class:`~upswing.synthesis.balance.BalanceDesign` with an estimator is, per sample k,

    x_hat[k] = Cxi xi[k] + Dy y[k]                         (estimate of x - x_eq)
    u_new[k] = -Kx x_hat[k] - Kp [u[k-d], ..., u[k-1]]      (K_discrete = [Kx, Kp])
    u[k]     = u_new[k - d]                                (applied now; = u_new[k] when d = 0)
    xi[k+1]  = F xi[k] + G y[k] + H u[k]

with inputs and outputs as deviations from the equilibrium. When the loop is broken at input i, the observer still
hears the controller's own command (firmware feeds its estimator what it sent, not what reached the motor).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from upswing.synthesis.balance import BalanceDesign
    from upswing.synthesis.estimation import EstimatorDesign


@dataclass(frozen=True)
class LinearSystem:
    """x+ = A x + B u, y = C x + D u; continuous when ``dt`` is None, else discrete with period ``dt`` [s].

    Shapes: A (n, n), B (n, m), C (p, n), D (p, m); n may be 0 (a static gain).
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    dt: float | None = None

    @property
    def poles(self) -> np.ndarray:
        """Eigenvalues of A [1/s when continuous, dimensionless when discrete]."""
        return np.linalg.eigvals(self.A).astype(complex) if self.A.size else np.zeros(0, dtype=complex)

    def frequency_response(self, omega: np.ndarray) -> np.ndarray:
        """G(s) = C (sI - A)^-1 B + D at s = j omega (continuous) or z = e^(j omega dt) (discrete).

        Parameters
        ----------
        omega : ndarray, shape (N,)
            Angular frequencies [rad/s].

        Returns
        -------
        ndarray, complex, shape (N, p, m)
        """
        omega = np.asarray(omega, dtype=float)
        s = 1j * omega if self.dt is None else np.exp(1j * omega * self.dt)
        n = self.A.shape[0]
        if n == 0:
            return np.broadcast_to(self.D.astype(complex), (omega.size, *self.D.shape)).copy()
        B = np.broadcast_to(self.B.astype(complex), (omega.size, *self.B.shape))
        try:
            X = np.linalg.solve(s[:, None, None] * np.eye(n) - self.A, B)
        except np.linalg.LinAlgError:
            # A grid frequency sits exactly on a pole on the axis (an undamped mode): step off it by 1e-9 relative,
            # far below any feature the margins resolve.
            s = 1j * omega * (1 + 1e-9) if self.dt is None else np.exp(1j * omega * (1 + 1e-9) * self.dt)
            X = np.linalg.solve(s[:, None, None] * np.eye(n) - self.A, B)
        return self.C @ X + self.D


def _static(D: np.ndarray, dt: float | None) -> LinearSystem:
    p, m = D.shape
    return LinearSystem(A=np.zeros((0, 0)), B=np.zeros((0, m)), C=np.zeros((p, 0)), D=D, dt=dt)


def continuous_plant(design: BalanceDesign) -> LinearSystem:
    """x_dot = A x + B u with the full state as output (C = I)."""
    n = design.A.shape[0]
    return LinearSystem(A=design.A, B=design.B, C=np.eye(n), D=np.zeros_like(design.B))


def discrete_plant(design: BalanceDesign, C: np.ndarray | None = None) -> LinearSystem:
    """x[k+1] = Ad x[k] + Bd u[k] (zero-order hold, no delay augmentation), y = C x (default: the full state)."""
    Ad, Bd = design.discrete_plant
    C = np.eye(Ad.shape[0]) if C is None else np.asarray(C, dtype=float)
    return LinearSystem(A=Ad, B=Bd, C=C, D=np.zeros((C.shape[0], Bd.shape[1])), dt=design.sample_period)


def continuous_controller(design: BalanceDesign) -> LinearSystem:
    """u = -K x: the continuous LQR as a static gain."""
    return _static(-design.K, None)


def discrete_controller(design: BalanceDesign, estimator: EstimatorDesign | None = None) -> LinearSystem:
    """The firmware's loop as one discrete system from y to the applied u (see the module docstring).

    Without an estimator y is the full state (x_hat = y). The controller's state is [xi, u[k-d], ..., u[k-1]].
    """
    n, m = design.B.shape
    d = design.delay_samples
    Kx, Kp = design.K_discrete[:, :n], design.K_discrete[:, n:]
    if estimator is None:
        F, G, H = np.zeros((0, 0)), np.zeros((0, n)), np.zeros((0, m))
        Cxi, Dy = np.zeros((n, 0)), np.eye(n)
    else:
        F, G, H, Cxi, Dy = estimator.F, estimator.G, estimator.H, estimator.Cxi, estimator.Dy
    no, p = F.shape[0], Dy.shape[1]
    dt = design.sample_period
    if d == 0:
        # u = u_new = -Kx (Cxi xi + Dy y); the observer hears it at once.
        return LinearSystem(A=F - H @ Kx @ Cxi, B=G - H @ Kx @ Dy, C=-Kx @ Cxi, D=-Kx @ Dy, dt=dt)
    npend = d * m
    oldest = np.zeros((m, npend))
    oldest[:, :m] = np.eye(m)
    shift = np.zeros((npend, npend))
    shift[:npend - m, m:] = np.eye(npend - m)
    last = np.zeros((npend, m))
    last[npend - m:, :] = np.eye(m)
    A = np.block([[F, H @ oldest],
                  [-last @ Kx @ Cxi, shift - last @ Kp]])
    B = np.vstack([G, -last @ Kx @ Dy])
    C = np.hstack([np.zeros((m, no)), oldest])
    return LinearSystem(A=A, B=B, C=C, D=np.zeros((m, p)), dt=dt)


def closed_loop(plant: LinearSystem, controller: LinearSystem) -> np.ndarray:
    """State matrix of the loop u = controller(y): [[A + B Dc C, B Cc], [Bc C, Ac]] on [x, c]."""
    return np.block([[plant.A + plant.B @ controller.D @ plant.C, plant.B @ controller.C],
                     [controller.B @ plant.C, controller.A]])


def broken_loop(plant: LinearSystem, controller: LinearSystem, i: int) -> LinearSystem:
    """Loop transfer L_i at actuator input i with the other inputs' loops closed.

    The plant's input i is cut from the controller and driven by v; L_i = -(controller output i) / v, so the
    closed loop is stable when 1 + L_i has the right encirclements and margins read off L_i as usual.
    """
    m = plant.B.shape[1]
    others = np.eye(m)
    others[i, i] = 0.0
    Bo = plant.B @ others
    A = np.block([[plant.A + Bo @ controller.D @ plant.C, Bo @ controller.C],
                  [controller.B @ plant.C, controller.A]])
    B = np.vstack([plant.B[:, [i]], np.zeros((controller.A.shape[0], 1))])
    C = -np.hstack([controller.D[[i], :] @ plant.C, controller.C[[i], :]])
    return LinearSystem(A=A, B=B, C=C, D=np.zeros((1, 1)), dt=plant.dt)


def lqg_poles(design: BalanceDesign, estimator: EstimatorDesign) -> np.ndarray:
    """Eigenvalues of the discrete loop plant + estimator + K_discrete (+ delay line), dimensionless.

    For a Kalman filter without delay they are the LQR poles and the estimator poles together (separation).
    """
    C = measurement_matrix(design, estimator)
    A = closed_loop(discrete_plant(design, C), discrete_controller(design, estimator))
    return np.linalg.eigvals(A).astype(complex)


def measurement_matrix(design: BalanceDesign, estimator: EstimatorDesign) -> np.ndarray:
    """C selecting the estimator's measured states from x, by name."""
    names = list(design.state_names)
    return np.array([[1.0 if s == m else 0.0 for s in names] for m in estimator.measured])
