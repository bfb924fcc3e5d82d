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
* :class:`LinearFeedback`: u = u_eq - K z with z = [x_hat, u[k-d] - u_eq, ..., u[k-1] - u_eq] (the sign convention
  of ``docs/conventions.md``; with a computation delay of d samples K acts on the delay-augmented state, as
  :func:`upswing.synthesis.balance.design_balance` designs it). x_hat is the exact state error (``measurement =
  "state"``) or comes from a general discrete linear observer (any object with fields ``F, G, H, Cxi, Dy``):

      xi[k+1] = F xi[k] + G y[k] + H (u[k] - u_eq),    x_hat[k] = Cxi xi[k] + Dy y[k],

  where u[k] is the input the actuator applies during sample k (the command from k - d), clipped to peak.
* :class:`LinearObserver`: a plain container of that form, with :func:`filtered_difference_observer` (angles as
  read, rates from a low-pass filtered backward difference) as the simple default until a model-based estimator is
  plugged in.
* :func:`kalman_observer`: a steady-state Kalman filter in that form, the default estimator here until a tuned
  one from :mod:`upswing.synthesis.estimation` is passed in.
* :func:`balance_controller`: the rig's balance LQR with either measurement.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from upswing.errors import RequestError
from upswing.model.modes import measured_states
from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign, design_balance

MEASUREMENTS = ("encoders", "state")


class Controller(Protocol):
    """The controller interface (see the module docstring)."""

    sample_rate: float
    measurement: str

    def start(self, y: np.ndarray) -> np.ndarray: ...

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]: ...


@dataclass(frozen=True)
class LinearObserver:
    """A discrete linear observer xi[k+1] = F xi + G y + H u, x_hat = Cxi xi + Dy y (shapes as the fields say).

    Attributes
    ----------
    F : ndarray, shape (n_xi, n_xi)
    G : ndarray, shape (n_xi, p)
    H : ndarray, shape (n_xi, n_inputs)
    Cxi : ndarray, shape (n_states, n_xi)
    Dy : ndarray, shape (n_states, p)
    kind : str
        What it is, in words.
    sample_rate : float
        Rate it was designed for [Hz].
    measured : tuple of str
        Names of the measured states, the columns of y.
    """

    F: np.ndarray
    G: np.ndarray
    H: np.ndarray
    Cxi: np.ndarray
    Dy: np.ndarray
    kind: str
    sample_rate: float
    measured: tuple[str, ...]


def filtered_difference_observer(rig: Rig, sample_rate: float, cutoff: float | None = None) -> LinearObserver:
    """Angles (and cart position) as read; rates from a first-order low-pass on the backward difference.

    v[k] = a v[k-1] + (1 - a) f_s (y[k] - y[k-1]),  a = exp(-2 pi f_c / f_s)  (common practice for encoder rates:
    the "dirty derivative"). In the general form xi = [y[k-1], v[k-1]].

    Parameters
    ----------
    rig : Rig
    sample_rate : float
        f_s [Hz].
    cutoff : float, optional
        f_c [Hz]; default f_s / 10.
    """
    fs = float(sample_rate)
    fc = fs / 10.0 if cutoff is None else float(cutoff)
    if not 0.0 < fc < fs / 2.0:
        raise RequestError(f"filter cutoff must be in (0, sample_rate / 2) = (0, {fs / 2:g}) Hz; got {fc:g}")
    a = math.exp(-2.0 * math.pi * fc / fs)
    p = len(measured_states(rig))
    eye, zero = np.eye(p), np.zeros((p, p))
    gain = (1.0 - a) * fs
    F = np.block([[zero, zero], [-gain * eye, a * eye]])
    G = np.vstack([eye, gain * eye])
    Cxi = np.block([[zero, zero], [-gain * eye, a * eye]])
    Dy = np.vstack([eye, gain * eye])
    return LinearObserver(F=F, G=G, H=np.zeros((2 * p, rig.n_inputs)), Cxi=Cxi, Dy=Dy,
                          kind=f"filtered backward difference, cutoff {fc:g} Hz", sample_rate=fs,
                          measured=measured_states(rig))


def kalman_observer(rig: Rig, design: BalanceDesign, acceleration_noise: float = 1.5) -> LinearObserver:
    """Steady-state Kalman filter (Kalman, 1960) for the encoder readings, in current-estimator form.

    Model: the zero-order-hold linearization at upright, x[k+1] = Ad x + Bd u + G w with w a white change of the
    joint rates per sample, std ``acceleration_noise`` * T_s (``acceleration_noise`` in rad/s^2 or m/s^2; the
    default 1.5 was picked by simulating the demo rigs with quantized encoders); measurement noise covariance from
    the encoders: one count^2 / 12 (uniform quantization error, Widrow, 1956) plus the noise variance.
    With P the predicted covariance from the discrete Riccati equation and M = P C' (C P C' + R)^-1:

        x_hat[k] = xi + M (y - C xi),  xi[k+1] = Ad x_hat[k] + Bd u[k],

    i.e. F = Ad (I - M C), G = Ad M, H = Bd, Cxi = I - M C, Dy = M.
    """
    import control  # python-control's dlqe solves the filter Riccati equation

    from upswing.model.modes import output_matrix
    from upswing.synthesis.balance import zero_order_hold

    n, nq = rig.n_states, rig.n_states // 2
    Ts = 1.0 / design.sample_rate
    Ad, Bd = zero_order_hold(design.A, design.B, Ts)
    C = output_matrix(rig)
    names = measured_states(rig)
    counts = np.array([rig.sensors.cart_resolution if s == "x" else rig.sensors.angle_resolution for s in names])
    sigma = np.array([rig.sensors.cart_noise if s == "x" else rig.sensors.angle_noise for s in names])
    Rn = np.diag(counts**2 / 12.0 + sigma**2)
    Gw = np.vstack([np.zeros((nq, nq)), np.eye(nq)])
    Qn = np.eye(nq) * (acceleration_noise * Ts) ** 2
    _, P, _ = control.dlqe(Ad, Gw, C, Qn, Rn)
    P = np.asarray(P)
    M = P @ C.T @ np.linalg.inv(C @ P @ C.T + Rn)
    IMC = np.eye(n) - M @ C
    return LinearObserver(F=Ad @ IMC, G=Ad @ M, H=Bd, Cxi=IMC, Dy=M,
                          kind=f"steady-state Kalman filter (acceleration noise {acceleration_noise:g})",
                          sample_rate=design.sample_rate, measured=names)


class LinearFeedback:
    """u = u_eq - K [x_hat, pending inputs], clipped to +-peak; x_hat exact or from a linear observer.

    Parameters
    ----------
    K : ndarray, shape (n_inputs, n_states + d * n_inputs)
        Gain on the (delay-augmented) state error.
    u_eq : ndarray, shape (n_inputs,)
    peak : ndarray, shape (n_inputs,)
        [N m or N]. The request goes out unclamped (the simulator's actuator clamps it and counts the time in
        saturation); what the controller remembers as pending or applied input is the request clamped to peak.
    sample_rate : float
        [Hz].
    delay_samples : int
        d: the command computed at sample k reaches the actuator at k + d.
    observer : object with F, G, H, Cxi, Dy, or None
        None means ``measurement = "state"`` (exact full state).
    """

    def __init__(self, K: np.ndarray, u_eq: np.ndarray, peak: np.ndarray, sample_rate: float, delay_samples: int = 0,
                 observer: Any | None = None) -> None:
        self.K = np.atleast_2d(np.asarray(K, dtype=float))
        self.u_eq = np.asarray(u_eq, dtype=float).ravel()
        self.peak = np.asarray(peak, dtype=float).ravel()
        self.sample_rate = float(sample_rate)
        self.delay = int(delay_samples)
        self.observer = observer
        self.measurement = "state" if observer is None else "encoders"
        m = self.u_eq.size
        self.n_states = self.K.shape[1] - self.delay * m
        if self.K.shape[0] != m or self.peak.size != m or self.n_states <= 0:
            raise RequestError(f"gain K of shape {self.K.shape} does not match {m} inputs and a delay of "
                               f"{self.delay} samples")
        self.n_xi = 0 if observer is None else np.asarray(observer.F).shape[0]
        if observer is not None:
            F, G, H = (np.asarray(observer.F, float), np.asarray(observer.G, float), np.asarray(observer.H, float))
            Cxi, Dy = np.asarray(observer.Cxi, float), np.asarray(observer.Dy, float)
            p = G.shape[1]
            shapes_ok = (F.shape == (self.n_xi, self.n_xi) and H.shape == (self.n_xi, m)
                         and Cxi.shape == (self.n_states, self.n_xi) and Dy.shape == (self.n_states, p))
            if not shapes_ok:
                raise RequestError(f"observer matrices do not fit {self.n_states} states and {m} inputs: F "
                                   f"{F.shape}, G {G.shape}, H {H.shape}, Cxi {Cxi.shape}, Dy {Dy.shape}")
            self._Ft, self._Gt, self._Ht, self._Cxit, self._Dyt = F.T.copy(), G.T.copy(), H.T.copy(), Cxi.T.copy(), \
                Dy.T.copy()
            # Warm start: the fixed point of the observer for a constant first reading and u = u_eq, i.e. the
            # observer has run while the rig was held still before the drive was enabled.
            try:
                self._warm = np.linalg.solve(np.eye(self.n_xi) - F, G).T.copy()
            except np.linalg.LinAlgError:
                self._warm = np.zeros((p, self.n_xi))

    def start(self, y: np.ndarray) -> np.ndarray:
        n = y.shape[0]
        xi = y @ self._warm if self.observer is not None else np.zeros((n, 0))
        return np.hstack([xi, np.zeros((n, self.delay * self.u_eq.size))])

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        m = self.u_eq.size
        xi = memory[:, :self.n_xi]
        pending = memory[:, self.n_xi:]
        x_hat = y if self.observer is None else xi @ self._Cxit + y @ self._Dyt
        z = np.hstack([x_hat, pending]) if self.delay else x_hat
        request = -(z @ self.K.T)
        du = np.clip(request, -self.peak, self.peak)
        applied = pending[:, :m] if self.delay else du
        parts = []
        if self.observer is not None:
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
                       observer: Any | None = None) -> LinearFeedback:
    """The rig's discrete balance LQR as a :class:`Controller`.

    Parameters
    ----------
    rig : Rig
    measurement : {"encoders", "state"}
        ``"state"``: exact full-state feedback (a baseline). ``"encoders"``: angles and cart position as the
        encoders read them, the rest from ``observer``.
    design : BalanceDesign, optional
        Default :func:`upswing.synthesis.balance.design_balance` ``(rig)``.
    observer : object with F, G, H, Cxi, Dy, optional
        For ``"encoders"``; default :func:`kalman_observer`. An ``EstimatorDesign`` from
        :mod:`upswing.synthesis.estimation` plugs in here unchanged.
    """
    if measurement not in MEASUREMENTS:
        raise RequestError(f"measurement must be one of {', '.join(MEASUREMENTS)}; got {measurement!r}")
    design = design_balance(rig) if design is None else design
    if measurement == "state":
        obs = None
    else:
        obs = kalman_observer(rig, design) if observer is None else observer
        measured = tuple(getattr(obs, "measured", measured_states(rig)))
        if measured != measured_states(rig):
            raise RequestError(f"observer reads {list(measured)}, but this rig's encoders give "
                               f"{list(measured_states(rig))}")
        rate = float(getattr(obs, "sample_rate", design.sample_rate))
        if not math.isclose(rate, design.sample_rate):
            raise RequestError(f"observer was designed for {rate:g} Hz but the balance loop runs at "
                               f"{design.sample_rate:g} Hz")
    return LinearFeedback(design.K_discrete, design.u_eq, rig.peak_inputs, design.sample_rate,
                          design.delay_samples, obs)
