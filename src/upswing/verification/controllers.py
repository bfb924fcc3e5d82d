"""Digital controllers as the batch simulator runs them: one small interface, vectorized over rollouts.

The interface
-------------
A controller is any object with these attributes and methods (a :class:`typing.Protocol`, :class:`Controller`)::

    sample_rate : float        # loop rate [Hz]; the simulator samples, computes and holds at this rate
    measurement : str          # "encoders": y holds the measured states (angles, cart position) as the encoders
                               #   read them (quantized, noisy), minus their upright values, angles wrapped to
                               #   (-pi, pi]; columns in upswing.model.modes.measured_states order.
                               # "state": y is the exact full state minus upright (angles wrapped): the ideal
                               #   measurement used for baselines.
    start(y) -> memory         # y: (N, p) first reading; returns the internal state, shape (N, n_memory)
    step(t, y, memory) -> (u, memory)
                               # t: sample time [s]; y: (N, p) reading at t; memory: (N, n_memory).
                               # u: (N, n_inputs) requested input [N m or N] in the rig's input order
                               #   (cart, shoulder, elbow); memory: the next internal state.

Row i of every array belongs to rollout i; the simulator drops rows of rollouts that have ended, so a controller must
keep all its per-rollout state in ``memory`` (never in attributes) and treat rows independently. The simulator adds
the physics of the drive afterwards: it clips to ``peak`` and the motor line, delays the command by the rig's
computation delay, and holds it until the next sample (zero-order hold).

Hand-over (swing-up to balance) is a combinator, :class:`HandOver`: both controllers run at every sample (so an
estimator inside the second one is warm when it takes over), and each rollout switches once, latched, the first
time ``ready(t, y, memory_of_first)`` is true for it. Time-varying laws (feed-forward plus gain tables, energy
pumping) implement ``step`` with ``t`` and their own memory; nothing else is needed.

What is here
------------
* :class:`LinearFeedback`: the firmware's balance loop, vectorized. It runs exactly the equations that
  :mod:`upswing.synthesis.loops` analyses and ``upswing balance`` exports (all as deviations from ``x_eq``,
  ``u_eq``)::

      x_hat[k] = Cxi xi[k] + Dy y[k]                          (estimate of x - x_eq)
      u_new[k] = -Kx x_hat[k] - Kp [u[k-d], ..., u[k-1]]       (K_discrete = [Kx, Kp])
      xi[k+1]  = F xi[k] + G y[k] + H u[k]                     (u[k] = u_new[k-d], the input applied now)

  with the observer (F, G, H, Cxi, Dy) of an :class:`~upswing.synthesis.estimation.EstimatorDesign`, or x_hat = y
  (``measurement = "state"``, exact full state, a baseline).
* :func:`balance_controller`: the rig's discrete balance LQR with the estimator ``upswing balance`` designs
  (by default the steady-state Kalman filter of :func:`upswing.synthesis.estimation.kalman_estimator`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Protocol

import numpy as np

from upswing.errors import RequestError
from upswing.model.modes import measured_states
from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign, design_balance
from upswing.synthesis.estimation import EstimatorDesign, kalman_estimator

MEASUREMENTS = ("encoders", "state")


class Controller(Protocol):
    """The controller interface (see the module docstring)."""

    sample_rate: float
    measurement: str

    def start(self, y: np.ndarray) -> np.ndarray: ...

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]: ...


class LinearFeedback:
    """u = u_eq - K [x_hat, pending inputs]; x_hat exact or from an estimator (equations in the module docstring).

    Parameters
    ----------
    K : ndarray, shape (n_inputs, n_states + d * n_inputs)
        Gain on the (delay-augmented) state error.
    u_eq : ndarray, shape (n_inputs,)
    peak : ndarray, shape (n_inputs,)
        [N m or N]. The request goes out unclamped (the simulator's actuator clamps it and counts the time in
        saturation); what the controller remembers as pending or applied input is the request clamped to peak,
        as firmware that feeds its estimator what it sent after its own output clamp.
    sample_rate : float
        [Hz].
    delay_samples : int
        d: the command computed at sample k reaches the actuator at k + d.
    estimator : EstimatorDesign or None
        None means ``measurement = "state"`` (exact full state).
    """

    def __init__(self, K: np.ndarray, u_eq: np.ndarray, peak: np.ndarray, sample_rate: float, delay_samples: int = 0,
                 estimator: EstimatorDesign | None = None) -> None:
        self.K = np.atleast_2d(np.asarray(K, dtype=float))
        self.u_eq = np.asarray(u_eq, dtype=float).ravel()
        self.peak = np.asarray(peak, dtype=float).ravel()
        self.sample_rate = float(sample_rate)
        self.delay = int(delay_samples)
        self.estimator = estimator
        self.measurement = "state" if estimator is None else "encoders"
        m = self.u_eq.size
        self.n_states = self.K.shape[1] - self.delay * m
        if self.K.shape[0] != m or self.peak.size != m or self.n_states <= 0:
            raise RequestError(f"gain K of shape {self.K.shape} does not match {m} inputs and a delay of "
                               f"{self.delay} samples")
        self.n_xi = 0 if estimator is None else estimator.F.shape[0]
        if estimator is not None:
            F, G, H, Cxi, Dy = (np.asarray(a, dtype=float) for a in (estimator.F, estimator.G, estimator.H,
                                                                      estimator.Cxi, estimator.Dy))
            p = G.shape[1]
            shapes_ok = (F.shape == (self.n_xi, self.n_xi) and H.shape == (self.n_xi, m)
                         and Cxi.shape == (self.n_states, self.n_xi) and Dy.shape == (self.n_states, p))
            if not shapes_ok:
                raise RequestError(f"estimator matrices do not fit {self.n_states} states and {m} inputs: F "
                                   f"{F.shape}, G {G.shape}, H {H.shape}, Cxi {Cxi.shape}, Dy {Dy.shape}")
            # Row-vector forms (rollouts in rows): x_hat = xi Cxi' + y Dy', and so on.
            self._Ft, self._Gt, self._Ht, self._Cxit, self._Dyt = F.T.copy(), G.T.copy(), H.T.copy(), Cxi.T.copy(), \
                Dy.T.copy()
            # Warm start: the fixed point of the estimator for a constant first reading and u = u_eq, i.e. it has
            # run while the rig was held still before the drive was enabled. I - F is invertible because both
            # estimators are Schur (eigenvalues of F inside the unit circle).
            self._warm = np.linalg.solve(np.eye(self.n_xi) - F, G).T.copy()

    def start(self, y: np.ndarray) -> np.ndarray:
        n = y.shape[0]
        xi = y @ self._warm if self.estimator is not None else np.zeros((n, 0))
        return np.hstack([xi, np.zeros((n, self.delay * self.u_eq.size))])

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        m = self.u_eq.size
        xi = memory[:, :self.n_xi]
        pending = memory[:, self.n_xi:]
        x_hat = y if self.estimator is None else xi @ self._Cxit + y @ self._Dyt
        z = np.hstack([x_hat, pending]) if self.delay else x_hat
        request = -(z @ self.K.T)
        du = np.clip(request, -self.peak, self.peak)
        applied = pending[:, :m] if self.delay else du
        parts = []
        if self.estimator is not None:
            parts.append(xi @ self._Ft + y @ self._Gt + applied @ self._Ht)
        if self.delay:
            parts += [pending[:, m:], du]
        new = np.hstack(parts) if parts else memory
        return self.u_eq + request, new


class HandOver:
    """Run ``first`` until ``ready`` says so for a rollout, then ``second`` for it from then on (latched).

    Parameters
    ----------
    first, second : Controller
        Same ``sample_rate`` and ``measurement``.
    ready : callable (t, y, memory_of_first) -> bool array of shape (N,)
    """

    def __init__(self, first: Controller, second: Controller,
                 ready: Callable[[float, np.ndarray, np.ndarray], np.ndarray]) -> None:
        if first.sample_rate != second.sample_rate or first.measurement != second.measurement:
            raise RequestError("hand-over needs two controllers with the same sample_rate and measurement; got "
                               f"{first.sample_rate:g} Hz / {first.measurement} and {second.sample_rate:g} Hz / "
                               f"{second.measurement}")
        self.first, self.second, self.ready = first, second, ready
        self.sample_rate = first.sample_rate
        self.measurement = first.measurement
        self._n1 = 0

    def start(self, y: np.ndarray) -> np.ndarray:
        m1, m2 = self.first.start(y), self.second.start(y)
        self._n1 = m1.shape[1]
        return np.hstack([np.zeros((y.shape[0], 1)), m1, m2])

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        mode = memory[:, 0] > 0.5
        m1, m2 = memory[:, 1:1 + self._n1], memory[:, 1 + self._n1:]
        mode = mode | np.asarray(self.ready(t, y, m1), dtype=bool)
        u1, m1 = self.first.step(t, y, m1)
        u2, m2 = self.second.step(t, y, m2)
        u = np.where(mode[:, None], u2, u1)
        return u, np.hstack([mode[:, None].astype(float), m1, m2])


def balance_controller(rig: Rig, *, measurement: str = "encoders", design: BalanceDesign | None = None,
                       estimator: EstimatorDesign | None = None) -> LinearFeedback:
    """The rig's discrete balance LQR as a :class:`Controller`: the gains and estimator ``upswing balance`` exports.

    Parameters
    ----------
    rig : Rig
    measurement : {"encoders", "state"}
        ``"state"``: exact full-state feedback (a baseline; ``estimator`` must then be None). ``"encoders"``:
        angles and cart position as the encoders read them, velocities from ``estimator``.
    design : BalanceDesign, optional
        Default :func:`upswing.synthesis.balance.design_balance` ``(rig)``. With ``design.delay_samples`` = d > 0
        the gain acts on the delay-augmented state and the estimator hears the input applied now (the command
        from d samples ago); the simulator must then delay the command by the same d (the rig's
        ``[balance].delay_samples``, or ``SimulationSetup.delay_samples``).
    estimator : EstimatorDesign, optional
        For ``"encoders"``; default :func:`upswing.synthesis.estimation.kalman_estimator` ``(rig, design)``. Use
        :func:`upswing.synthesis.estimation.design_estimator` to pick the finite-difference estimator instead.

    Raises
    ------
    RequestError
        For an unknown measurement, an estimator with ``"state"``, or an estimator designed for another loop rate
        or another set of readings.
    """
    if measurement not in MEASUREMENTS:
        raise RequestError(f"measurement must be one of {', '.join(MEASUREMENTS)}; got {measurement!r}")
    design = design_balance(rig) if design is None else design
    if measurement == "state":
        if estimator is not None:
            raise RequestError("measurement \"state\" feeds back the exact state; it takes no estimator (got a "
                               f"{estimator.kind} estimator)")
        est = None
    else:
        est = kalman_estimator(rig, design) if estimator is None else estimator
        if est.measured != measured_states(rig):
            raise RequestError(f"the estimator reads {list(est.measured)}, but this rig's encoders give "
                               f"{list(measured_states(rig))}")
        if not math.isclose(est.sample_rate, design.sample_rate):
            raise RequestError(f"the estimator was designed for {est.sample_rate:g} Hz but the balance loop runs "
                               f"at {design.sample_rate:g} Hz")
    return LinearFeedback(design.K_discrete, design.u_eq, rig.peak_inputs, design.sample_rate,
                          design.delay_samples, est)
