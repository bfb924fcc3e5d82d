"""Time-varying LQR along a swing-up reference, discrete at the loop rate, and the hand-over to balance.

Given a reference sampled at the controller's rate, t_k = t_0 + k / f_s (k = 0 .. N-1), with reference states
x_ref[k] and feed-forward inputs u_ff[k], the exact model is linearized at every sample (casadi's automatic
differentiation, Coulomb friction left out as in every linearization), each linearization is discretized by
zero-order hold over one sample period, and the finite-horizon discrete Riccati recursion runs backwards from the
balance design's discrete cost-to-go:

    P[N] = P_balance,
    K[k] = (R + B_k' P[k+1] B_k)^-1 B_k' P[k+1] A_k,
    P[k] = Q + K[k]' R K[k] + (A_k - B_k K[k])' P[k+1] (A_k - B_k K[k])        (Joseph form, kept symmetric)

(e.g. Anderson & Moore, *Optimal Control: Linear Quadratic Methods*, 1990, ch. 2). The law for the sample that
starts at row k is

    u = u_ff[k] - K[k] (x - x_ref[k])      (angle errors wrapped to (-pi, pi]),

held until the next row and saturated at ``peak``; after the last row the balance controller takes over. The
reference must be a trajectory of the model (x_ref[k+1] = flow of the model from x_ref[k] under u_ff[k] held),
as the trajectory optimizer's output is; the linearization then describes the error dynamics.

The hand-over between swing-up and balance uses the balance design's cost-to-go as the measure of closeness:
switch to balance when (x - x_eq)' P (x - x_eq) <= rho_in, and back only above rho_out > rho_in (hysteresis, so
noise near the boundary cannot make the two controllers chatter). rho_in comes from a region-of-attraction
estimate (the verification engine's, or ``[swingup].handover_level``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from upswing.errors import RequestError, SynthesisError
from upswing.model.equilibria import wrap_angle
from upswing.model.linearize import linearize
from upswing.model.rig import Rig
from upswing.synthesis.balance import balance_weights, design_balance

ANGLE_STATES = ("theta1", "theta2")


def _angle_mask(state_names: tuple[str, ...]) -> np.ndarray:
    return np.array([name in ANGLE_STATES for name in state_names])


@dataclass(frozen=True)
class TrackingTable:
    """A time-varying gain table along a swing-up reference, one row per controller sample.

    Attributes
    ----------
    t : ndarray, shape (N,)
        Start time of each row [s], spaced 1 / ``sample_rate``.
    x_ref : ndarray, shape (N, n_states)
        Reference state at t[k] [SI units of each state].
    u_ff : ndarray, shape (N, n_inputs)
        Feed-forward input held over row k [N m or N].
    K : ndarray, shape (N, n_inputs, n_states)
        Feedback gain of row k; u = u_ff[k] - K[k] (x - x_ref[k]).
    sample_rate : float
        Loop rate [Hz].
    state_names, input_names : tuple of str
        Names of the state entries and inputs, in the conventions' order.
    peak : ndarray, shape (n_inputs,)
        Saturation levels [N m or N].
    cost_to_go : ndarray, shape (N + 1, n_states, n_states)
        P[k] of the recursion; P[N] is the terminal (balance) cost-to-go.
    """

    t: np.ndarray
    x_ref: np.ndarray
    u_ff: np.ndarray
    K: np.ndarray
    sample_rate: float
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]
    peak: np.ndarray
    cost_to_go: np.ndarray

    @property
    def n_rows(self) -> int:
        return int(self.t.shape[0])

    @property
    def end_time(self) -> float:
        """Time at which the last row ends and the balance controller takes over [s]."""
        return float(self.t[0] + self.n_rows / self.sample_rate)

    def row(self, t: np.ndarray | float) -> np.ndarray:
        """Row index active at time ``t`` [s]: floor((t - t[0]) * sample_rate); ``n_rows`` once the table is over.

        A small tolerance (1e-9 of a sample) absorbs the rounding of t accumulated in a sampled loop.
        """
        k = np.floor((np.asarray(t, dtype=float) - self.t[0]) * self.sample_rate + 1e-9).astype(int)
        return np.clip(k, 0, self.n_rows)

    def command(self, k: np.ndarray | int, X: np.ndarray) -> np.ndarray:
        """The tracking law for rows ``k`` and states ``X``, saturated at ``peak``.

        Parameters
        ----------
        k : int or ndarray of int, shape (N,)
            Row of each state, 0 <= k < n_rows.
        X : ndarray, shape (N, n_states)

        Returns
        -------
        ndarray, shape (N, n_inputs)
            u = clip(u_ff[k] - K[k] (x - x_ref[k]), -peak, peak), angle errors wrapped.
        """
        X = np.atleast_2d(np.asarray(X, dtype=float))
        k = np.broadcast_to(np.asarray(k, dtype=int), (X.shape[0],))
        if np.any(k < 0) or np.any(k >= self.n_rows):
            raise RequestError(f"row index must be in [0, {self.n_rows}); the table is over after its last row "
                               "and the balance controller takes over")
        error = X - self.x_ref[k]
        mask = _angle_mask(self.state_names)
        error[:, mask] = wrap_angle(error[:, mask])
        u = self.u_ff[k] - np.einsum("nij,nj->ni", self.K[k], error)
        return np.clip(u, -self.peak, self.peak)


def zero_order_hold_batch(A: np.ndarray, B: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Zero-order-hold discretization of many linear models at once.

    The same block-exponential formula as :func:`upswing.synthesis.balance.zero_order_hold` (Van Loan, 1978),
    exp([[A, B], [0, 0]] dt) = [[Ad, Bd], [0, I]], evaluated by one stacked ``scipy.linalg.expm`` call, which is
    far cheaper than one call per sample.

    Parameters
    ----------
    A : ndarray, shape (N, n, n)
    B : ndarray, shape (N, n, m)
    dt : float
        Sample period [s].

    Returns
    -------
    Ad : ndarray, shape (N, n, n)
    Bd : ndarray, shape (N, n, m)
    """
    N, n, m = B.shape
    block = np.zeros((N, n + m, n + m))
    block[:, :n, :n] = A
    block[:, :n, n:] = B
    E = scipy.linalg.expm(block * dt)
    return E[:, :n, :n], E[:, :n, n:]


def riccati_recursion(Ad: np.ndarray, Bd: np.ndarray, Q: np.ndarray, R: np.ndarray, P_terminal: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Finite-horizon discrete Riccati recursion, backwards from ``P_terminal``.

    Parameters
    ----------
    Ad : ndarray, shape (N, n, n)
    Bd : ndarray, shape (N, n, m)
        Discrete models of the N steps.
    Q : ndarray, shape (n, n)
    R : ndarray, shape (m, m)
    P_terminal : ndarray, shape (n, n)

    Returns
    -------
    K : ndarray, shape (N, m, n)
        K[k] = (R + B' P[k+1] B)^-1 B' P[k+1] A.
    P : ndarray, shape (N + 1, n, n)
        Cost-to-go, P[N] = P_terminal, P[k] = Q + K' R K + (A - B K)' P[k+1] (A - B K).
    """
    N, n, _ = Ad.shape
    m = Bd.shape[2]
    K = np.empty((N, m, n))
    P = np.empty((N + 1, n, n))
    P[N] = 0.5 * (P_terminal + P_terminal.T)
    for k in range(N - 1, -1, -1):
        A, B, Pn = Ad[k], Bd[k], P[k + 1]
        BtP = B.T @ Pn
        K[k] = np.linalg.solve(R + BtP @ B, BtP @ A)
        Acl = A - B @ K[k]
        Pk = Q + K[k].T @ R @ K[k] + Acl.T @ Pn @ Acl
        P[k] = 0.5 * (Pk + Pk.T)
    return K, P


def tvlqr_from_samples(rig: Rig, t: np.ndarray, x_ref: np.ndarray, u_ff: np.ndarray, *,
                       sample_rate: float | None = None, Q: np.ndarray | None = None, R: np.ndarray | None = None,
                       P_terminal: np.ndarray | None = None) -> TrackingTable:
    """Time-varying discrete LQR along a reference given as samples at the loop rate.

    Parameters
    ----------
    rig : Rig
    t : ndarray, shape (N,)
        Sample times [s], uniformly spaced at 1 / ``sample_rate`` (within 1e-6 of a period).
    x_ref : ndarray, shape (N, n_states)
        Reference states at t.
    u_ff : ndarray, shape (N, n_inputs)
        Feed-forward inputs, each held over [t[k], t[k] + 1 / sample_rate).
    sample_rate : float, optional
        Loop rate [Hz]; default the rig file's ``[balance].sample_rate``.
    Q, R : ndarray, optional
        Tracking weights; default the balance design's Q and ``[swingup].tracking_r_factor`` (10) times its R.
        With the balance R itself the demo acrobot's gains reached 260 N m/rad against a 1.9 N m peak: one encoder
        count (1.5 mrad) then moved the command by 0.4 N m and the elbow spent 0.44 s of a 3 s swing-up in
        saturation (200 runs). Ten times R kept the gains below 100 N m/rad, cut the tracked RMS effort from 0.67
        to 0.47 N m and the saturation time to 0.11 s. The terminal cost stays the balance cost-to-go, so the gains
        still grow into the balance gains as the table ends.
    P_terminal : ndarray, shape (n_states, n_states), optional
        Terminal cost-to-go; default the discrete balance design's ``P_discrete`` at this rate without delay.

    Returns
    -------
    TrackingTable

    Raises
    ------
    RequestError
        When the shapes do not match the rig or the times are not spaced at the loop rate.
    SynthesisError
        When the recursion produces non-finite gains (a reference far outside the model's range).
    """
    rate = rig.balance.sample_rate if sample_rate is None else float(sample_rate)
    t = np.asarray(t, dtype=float).ravel()
    x_ref = np.asarray(x_ref, dtype=float)
    u_ff = np.asarray(u_ff, dtype=float)
    N, n, m = t.shape[0], rig.n_states, rig.n_inputs
    if N < 1:
        raise RequestError("a tracking table needs at least one sample; got an empty reference")
    if x_ref.shape != (N, n) or u_ff.shape != (N, m):
        raise RequestError(f"reference shapes must be x_ref ({N}, {n}) and u_ff ({N}, {m}) for {N} samples of "
                           f"{', '.join(rig.state_names)} / {', '.join(rig.input_names)}; got x_ref "
                           f"{x_ref.shape} and u_ff {u_ff.shape}")
    if N > 1 and np.max(np.abs(np.diff(t) - 1.0 / rate)) > 1e-6 / rate:
        raise RequestError(f"reference samples must be spaced 1 / sample_rate = {1.0 / rate:g} s; got spacings "
                           f"from {np.diff(t).min():g} to {np.diff(t).max():g} s (sample a callable reference "
                           "with tvlqr_from_reference instead)")
    if not (np.all(np.isfinite(x_ref)) and np.all(np.isfinite(u_ff))):
        raise RequestError("reference states and inputs must be finite numbers")

    Q_bal, R_bal, _ = balance_weights(rig)
    Q = Q_bal if Q is None else np.asarray(Q, dtype=float)
    R = rig.swingup.tracking_r_factor * R_bal if R is None else np.asarray(R, dtype=float)
    if P_terminal is None:
        P_terminal = design_balance(rig, sample_rate=rate, delay_samples=0).P_discrete
    A = np.empty((N, n, n))
    B = np.empty((N, n, m))
    for k in range(N):
        lin = linearize(rig, x_eq=x_ref[k], u_eq=u_ff[k])
        A[k], B[k] = lin.A, lin.B
    Ad, Bd = zero_order_hold_batch(A, B, 1.0 / rate)
    K, P = riccati_recursion(Ad, Bd, Q, R, np.asarray(P_terminal, dtype=float))
    if not (np.all(np.isfinite(K)) and np.all(np.isfinite(P))):
        raise SynthesisError(f"{rig.source}: the time-varying Riccati recursion produced non-finite gains; check "
                             "that the reference is a trajectory of this rig's model and lies within its limits")
    return TrackingTable(t=t.copy(), x_ref=x_ref.copy(), u_ff=u_ff.copy(), K=K, sample_rate=rate,
                         state_names=rig.state_names, input_names=rig.input_names, peak=rig.peak_inputs,
                         cost_to_go=P)


def tvlqr_from_reference(rig: Rig, reference: Callable[[float], tuple[np.ndarray, np.ndarray]], duration: float,
                         *, t0: float = 0.0, sample_rate: float | None = None, Q: np.ndarray | None = None,
                         R: np.ndarray | None = None, P_terminal: np.ndarray | None = None) -> TrackingTable:
    """Time-varying discrete LQR along a reference given as a function of time.

    Samples ``reference(t) -> (x_ref, u_ff)`` at t_k = t0 + k / sample_rate for k = 0 .. round(duration *
    sample_rate) - 1 (the last row ends at t0 + duration) and calls :func:`tvlqr_from_samples`; see there for the
    other arguments. ``u_ff`` at t_k is held over the whole sample, as the firmware will hold it.
    """
    rate = rig.balance.sample_rate if sample_rate is None else float(sample_rate)
    if not (np.isfinite(duration) and duration > 0):
        raise RequestError(f"duration must be a positive number of seconds; got {duration!r}")
    N = max(1, int(round(duration * rate)))
    t = t0 + np.arange(N) / rate
    pairs = [reference(float(tk)) for tk in t]
    x_ref = np.array([np.asarray(x, dtype=float).ravel() for x, _ in pairs])
    u_ff = np.array([np.asarray(u, dtype=float).ravel() for _, u in pairs])
    return tvlqr_from_samples(rig, t, x_ref, u_ff, sample_rate=rate, Q=Q, R=R, P_terminal=P_terminal)


# ----------------------------------------------------------------------------------------------------------------
# Hand-over to the balance controller


@dataclass(frozen=True)
class HandoverRule:
    """Switch between swing-up and balance on the balance cost-to-go, with hysteresis.

    Balance engages when (x - x_eq)' P (x - x_eq) <= ``rho_in`` and releases only when the level exceeds
    ``rho_out`` > ``rho_in``.

    Attributes
    ----------
    P : ndarray, shape (n_states, n_states)
        Cost-to-go matrix of the balance design (its ``P_discrete`` without delay).
    x_eq : ndarray, shape (n_states,)
        The upright equilibrium.
    rho_in, rho_out : float
        Engage and release levels [-] (the cost-to-go is dimensionless when Q and R are).
    state_names : tuple of str
    """

    P: np.ndarray
    x_eq: np.ndarray
    rho_in: float
    rho_out: float
    state_names: tuple[str, ...]

    def level(self, X: np.ndarray) -> np.ndarray:
        """(x - x_eq)' P (x - x_eq) for each state, angle errors wrapped; shape (N,)."""
        X = np.atleast_2d(np.asarray(X, dtype=float))
        error = X - self.x_eq
        mask = _angle_mask(self.state_names)
        error[:, mask] = wrap_angle(error[:, mask])
        return np.einsum("ni,ij,nj->n", error, self.P, error)

    def update(self, X: np.ndarray, balancing: np.ndarray) -> np.ndarray:
        """Which rollouts balance after this sample, given which balanced before it.

        Parameters
        ----------
        X : ndarray, shape (N, n_states)
        balancing : ndarray of bool, shape (N,)

        Returns
        -------
        ndarray of bool, shape (N,)
            True where level <= rho_in, or where the rollout was balancing and level <= rho_out.
        """
        return self.decide(self.level(X), balancing)

    def decide(self, level: np.ndarray, balancing: np.ndarray) -> np.ndarray:
        """:meth:`update` for levels already computed (shape (N,)): engage at <= rho_in, keep while <= rho_out."""
        balancing = np.asarray(balancing, dtype=bool)
        return np.where(balancing, level <= self.rho_out, level <= self.rho_in)


def handover_rule(rig: Rig, rho_in: float | None = None, *, release_factor: float | None = None,
                  sample_rate: float | None = None) -> HandoverRule:
    """The hand-over rule for a rig.

    Parameters
    ----------
    rig : Rig
    rho_in : float, optional
        Engage level, from a region-of-attraction estimate; default the rig file's ``[swingup].handover_level``.
    release_factor : float, optional
        rho_out / rho_in (> 1); default ``[swingup].release_factor``.
    sample_rate : float, optional
        Rate of the balance design whose cost-to-go is used; default ``[balance].sample_rate``.

    Raises
    ------
    RequestError
        When no level is given and the rig file has none, or when the levels are not 0 < rho_in < rho_out.
    """
    rho = rig.swingup.handover_level if rho_in is None else float(rho_in)
    factor = rig.swingup.release_factor if release_factor is None else float(release_factor)
    if rho is None:
        raise RequestError(f"{rig.source}: the hand-over level rho_in is unknown; pass the region-of-attraction "
                           "estimate or set [swingup].handover_level")
    if not (np.isfinite(rho) and rho > 0):
        raise RequestError(f"hand-over level rho_in must be a positive number; got {rho!r}")
    if not (np.isfinite(factor) and factor > 1.0):
        raise RequestError(f"release factor rho_out / rho_in must be > 1 for hysteresis; got {factor!r}")
    design = design_balance(rig, sample_rate=sample_rate, delay_samples=0)
    return HandoverRule(P=design.P_discrete, x_eq=design.x_eq, rho_in=float(rho), rho_out=float(rho * factor),
                        state_names=rig.state_names)
