"""Swing-up controllers for the batch engine, with the catch: swing-up law, hand-over with hysteresis, balance LQR.

Both swing-up laws follow the controller interface of :mod:`upswing.verification.controllers` and share one
combinator, :class:`CatchController`, which per rollout and per sample

1. forms the state estimate x_hat: with ``measurement = "state"`` the exact state (y + upright); with encoders the
   readings for the angles (and cart position) and, for the rates, a filtered backward difference (angle
   differences wrapped, first-order low-pass at ``rate_cutoff``). Without a reference the readings themselves are
   differenced (cut-off default ``[balance].velocity_cutoff`` = sample_rate / 10, as
   :func:`upswing.synthesis.estimation.finite_difference_estimator` describes). While a tracking table runs, the
   estimate is reference-aided: rate = x_ref rate[k] + low-pass of the differenced tracking error
   (y - y_ref[k]), cut-off default ``[swingup].tracking_rate_cutoff`` (20 Hz). The reference carries the fast,
   large motion without lag, so only the small error is filtered and the filter can be slow enough to quieten
   encoder steps. Measured on the demo acrobot (200 runs, seed 0): differencing the readings at 50 Hz gave a
   tracked RMS effort of 0.81 N m; the reference-aided estimate at 20 Hz 0.66 N m with the catch rate up from
   0.79 to 0.83, while differencing the readings at 20 Hz lagged the swing so much that only 0.11 were caught.
   Both estimates are model-free, so they stay valid far from upright, where the balance design's Kalman filter
   does not. Firmware that runs ``swingup.csv`` should estimate rates the same way (the export says so);
2. updates the mode with the hand-over rule of :class:`upswing.synthesis.swingup.tracking.HandoverRule`: balance
   engages when x_hat' P x_hat <= rho_in and releases only above rho_out > rho_in (hysteresis); a tracking table
   also engages balance for good once its last row is over (the ``swingup.csv`` contract). While balancing, the
   level is read from the balance loop's own estimate (its Kalman filter on encoders): the swing-up's filtered
   differences are noisy enough near upright to cross the whole band between two samples, and the controllers
   then alternated about 200 times in 0.9 s on the demo acrobot;
3. applies the swing-up law or the balance loop. The balance loop is the one ``upswing balance`` exports (discrete
   LQR and, on encoders, its Kalman filter). Its estimator is seeded at the engaging sample so that its estimate
   equals the swing-up's x_hat (bumpless transfer: xi = pinv(Cxi) (x_hat - Dy y)), because a linear filter about
   upright that ran through the swing, fed inputs it did not command, would hand over a wrong estimate.

Swing-up laws (``law(t, X) -> U``, X absolute states (N, n), U (N, m) saturated at peak):

* :func:`tracking_law`: u = u_ff[k] - K[k] (x_hat - x_ref[k]) (angle errors wrapped) for the row k active at t,
  exactly the ``swingup.csv`` law;
* :func:`energy_law`: the family's energy-based law of :mod:`upswing.synthesis.swingup.energy`.

Hand-over times: the first sample at which each rollout engaged balance is written to
:attr:`CatchController.handover_time` (NaN if never; a table's end engages it in any case), the first sample at
which the cost-to-go reached rho_in to :attr:`CatchController.level_time` (NaN if never), and whether it was
balancing at its last sample to :attr:`CatchController.balancing_at_end`, all for the rollouts of the latest
:meth:`CatchController.start`. The simulator keeps a controller's per-rollout state only in ``memory``; the
rollout's row at ``start`` travels in a memory column so these logs find their row however the simulator
compacts the batch. The logs live in the process that runs the simulation: use
:func:`upswing.verification.simulate.simulate` in-process (as :mod:`upswing.verification.manoeuvre` does), not a
process pool.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from upswing.errors import RequestError
from upswing.model.equilibria import equilibrium_state
from upswing.model.modes import measured_states
from upswing.model.rig import Rig
from upswing.synthesis.estimation import velocity_cutoff
from upswing.synthesis.swingup.energy import energy_law_params, energy_swingup_input
from upswing.synthesis.swingup.tracking import HandoverRule, TrackingTable
from upswing.verification.controllers import LinearFeedback

Law = Callable[[float, np.ndarray], np.ndarray]


def tracking_law(table: TrackingTable) -> Law:
    """The ``swingup.csv`` law of ``table`` as a batch law (rows past the table's end give u_ff of the last row;
    :class:`CatchController` never asks for them, it balances by then)."""

    def law(t: float, X: np.ndarray) -> np.ndarray:
        k = min(int(table.row(t)), table.n_rows - 1)
        return table.command(np.full(X.shape[0], k), X)

    return law


def energy_law(rig: Rig) -> Law:
    """The rig family's energy-based swing-up law (raises :class:`~upswing.errors.RequestError` where none suits)."""
    params = energy_law_params(rig)

    def law(t: float, X: np.ndarray) -> np.ndarray:
        return energy_swingup_input(X, params)

    return law


class CatchController:
    """Swing-up law, hand-over with hysteresis, balance loop (module docstring).

    Parameters
    ----------
    rig : Rig
    law : callable (t, X) -> U
        The swing-up law on absolute states.
    balance : LinearFeedback
        The balance loop (``measurement`` decides this controller's measurement too).
    rule : HandoverRule
    table_end : float or None
        Time [s] after which balance is engaged for good (a tracking table's ``end_time``), or None.
    rate_cutoff : float, optional
        Cut-off of the rate filter on encoders [Hz]; default ``[swingup].tracking_rate_cutoff`` with a
        ``reference``, else ``[balance].velocity_cutoff`` (sample_rate / 10). A law that acts slowly on small
        motions may want it lower (quantization noise).
    reference : TrackingTable, optional
        The table being tracked: while it runs, rates are estimated reference-aided (module docstring).
    """

    def __init__(self, rig: Rig, law: Law, balance: LinearFeedback, rule: HandoverRule,
                 table_end: float | None = None, rate_cutoff: float | None = None,
                 reference: TrackingTable | None = None) -> None:
        self.law, self.balance, self.rule, self.table_end = law, balance, rule, table_end
        self.reference = reference
        self.sample_rate = balance.sample_rate
        self.measurement = balance.measurement
        self.x_eq = equilibrium_state(rig, "upright")
        self.n = rig.n_states
        self.p = len(measured_states(rig)) if self.measurement == "encoders" else self.n
        is_angle = np.array([s in ("theta1", "theta2") for s in measured_states(rig)])
        self._angle_cols = np.flatnonzero(is_angle)
        if rate_cutoff is not None:
            fc = float(rate_cutoff)
        elif reference is not None:
            fc = rig.swingup.tracking_rate_cutoff
        else:
            fc = velocity_cutoff(rig, self.sample_rate)
        if not (math.isfinite(fc) and 0.0 < fc < self.sample_rate / 2.0):
            raise RequestError(f"rate filter cut-off must be in (0, {self.sample_rate / 2.0:g}) Hz (below Nyquist); "
                               f"got {fc!r}")
        self._alpha = math.exp(-2.0 * math.pi * fc / self.sample_rate)  # low-pass pole of the rate filter
        est = balance.estimator
        self._seed_map = None if est is None else np.linalg.pinv(np.asarray(est.Cxi, dtype=float)).T
        self._Dyt = None if est is None else np.asarray(est.Dy, dtype=float).T
        self._Cxit = None if est is None else np.asarray(est.Cxi, dtype=float).T
        self.handover_time = np.zeros(0)
        self.level_time = np.zeros(0)
        self.balancing_at_end = np.zeros(0, dtype=bool)

    # memory columns: [row id, mode, y_prev (p), rate (p) (encoders only), balance memory]
    def _split(self, memory: np.ndarray) -> tuple[np.ndarray, ...]:
        p = self.p if self.measurement == "encoders" else 0
        return memory[:, 0], memory[:, 1], memory[:, 2:2 + p], memory[:, 2 + p:2 + 2 * p], memory[:, 2 + 2 * p:]

    def start(self, y: np.ndarray) -> np.ndarray:
        N = y.shape[0]
        self.handover_time = np.full(N, np.nan)
        self.level_time = np.full(N, np.nan)
        self.balancing_at_end = np.zeros(N, dtype=bool)
        parts = [np.arange(N, dtype=float)[:, None], np.zeros((N, 1))]
        if self.measurement == "encoders":
            parts += [y.copy(), np.zeros_like(y)]
        parts.append(self.balance.start(y))
        return np.hstack(parts)

    def _estimate(self, t: float, y: np.ndarray, y_prev: np.ndarray,
                  rate: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if self.measurement == "state":
            return y + self.x_eq, rate
        a = self._angle_cols
        table = self.reference
        if table is not None and t < table.end_time - 1e-9:
            # reference-aided: filter the differenced tracking error, add the reference's own rate (no lag on it)
            k = int(table.row(t))
            p = self.p
            de = (y - y_prev) - (table.x_ref[k, :p] - table.x_ref[max(k - 1, 0), :p])
            de[:, a] = (de[:, a] + math.pi) % (2.0 * math.pi) - math.pi
            rate = self._alpha * rate + (1.0 - self._alpha) * de * self.sample_rate
            return np.hstack([y, rate + table.x_ref[k, p:]]) + self.x_eq, rate
        dy = y - y_prev
        dy[:, a] = (dy[:, a] + math.pi) % (2.0 * math.pi) - math.pi
        rate = self._alpha * rate + (1.0 - self._alpha) * dy * self.sample_rate
        return np.hstack([y, rate]) + self.x_eq, rate

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ids, mode, y_prev, rate, mem_b = self._split(memory)
        x_hat, rate = self._estimate(t, y, y_prev, rate)
        before = mode > 0.5
        if self._Cxit is not None and before.any():
            # While balancing, the rule reads the balance loop's own estimate (its Kalman filter), not the
            # swing-up's filtered differences: those are noisy enough near upright to carry the level across the
            # whole hysteresis band from one sample to the next, and the controllers would alternate.
            x_hat = x_hat.copy()
            x_hat[before] = (mem_b[before, :self.balance.n_xi] @ self._Cxit + y[before] @ self._Dyt
                             + self.x_eq)
        level = self.rule.level(x_hat)
        met = level <= self.rule.rho_in
        if met.any():
            rows = ids[met].astype(int)
            self.level_time[rows[np.isnan(self.level_time[rows])]] = t
        balancing = self.rule.decide(level, before)
        if self.table_end is not None and t >= self.table_end - 1e-9:
            balancing[:] = True
        engage = balancing & ~before
        if engage.any():
            mem_b = mem_b.copy()
            fresh = self.balance.start(y[engage])
            if self._seed_map is not None:
                n_xi = self.balance.n_xi
                fresh[:, :n_xi] = (x_hat[engage] - self.x_eq - y[engage] @ self._Dyt) @ self._seed_map
            mem_b[engage] = fresh
            rows = ids[engage].astype(int)
            first = np.isnan(self.handover_time[rows])
            self.handover_time[rows[first]] = t
        u_b, mem_b = self.balance.step(t, y, mem_b)
        u = np.where(balancing[:, None], u_b, self.law(t, x_hat))
        self.balancing_at_end[ids.astype(int)] = balancing
        parts = [ids[:, None], balancing[:, None].astype(float)]
        if self.measurement == "encoders":
            parts += [y, rate]
        parts.append(mem_b)
        return u, np.hstack(parts)
