"""Balance controller at the upright: continuous and discrete LQR from the rig's weights.

Sign convention everywhere: u = u_eq - K (x - x_eq), angle errors wrapped to (-pi, pi].

The continuous design minimises J = integral of (x' Q x + u' R u) dt for x_dot = A x + B u; the discrete design is
the standard discrete LQR on the zero-order-hold model at the loop rate with the same Q and R and no cross term
(``docs/conventions.md``), J = sum of (x[k]' Q x[k] + u[k]' R u[k]), so it tends to the continuous gain as the rate
grows. A computation delay of d samples is designed in by augmenting the state with the d inputs still in the
pipeline: z[k] = [x[k], u[k-d], ..., u[k-1]], and u[k] computed at k is applied at k + d.

Both Riccati equations are solved with python-control (``lqr``, ``dlqr``) and then polished by one Newton step
(Kleinman, 1968, continuous; Hewer, 1971, discrete), kept only when it lowers the residual; the relative residual is
reported with every design.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import control
import numpy as np
import scipy.linalg

from upswing.errors import RequestError, RigFileError, SynthesisError
from upswing.model.linearize import LinearModel, linearize
from upswing.model.rig import Rig

# Bryson's rule defaults: the largest deviation from upright we are willing to see in each state when the rig file
# gives no [balance] weights. The angles allow about 3 degrees, the cart 5 cm; the rates allow what a link swinging
# through that angle at the rig's natural rate (~10 rad/s) would show, rounded down.
ALLOWED_DEVIATION = {"x": 0.05, "theta1": 0.05, "theta2": 0.05,  # m, rad, rad
                     "x_dot": 0.5, "theta1_dot": 1.0, "theta2_dot": 1.0}  # m/s, rad/s, rad/s

# Loop rate against the fastest unstable pole lambda [1/s], taken as a frequency lambda / (2 pi) [Hz]:
RATE_RATIO_ADVISED = 10.0  # below 10x: warn (rule of thumb, common practice)
RATE_RATIO_MINIMUM = 2.0   # below 2x (Nyquist-style): the mode grows e^pi ~ 23-fold per sample; refuse
# Fastest continuous closed-loop pole against the loop rate: above a tenth of it, the continuous K is no stand-in
# for K_discrete (common practice: sample at least ~10x the closed-loop bandwidth).
BANDWIDTH_RATIO_ADVISED = 10.0


@dataclass(frozen=True)
class RiccatiSolution:
    """An LQR gain and the Riccati solution it comes from.

    Attributes
    ----------
    K : ndarray, shape (n_inputs, n_states)
        Gain of u = -K x.
    P : ndarray, shape (n_states, n_states)
        Stabilizing solution of the Riccati equation (cost-to-go x' P x).
    poles : ndarray
        Closed-loop eigenvalues: of A - B K [1/s] (continuous) or Ad - Bd K (discrete, dimensionless).
    residual : float
        Relative residual ||Riccati(P)||_F / ||Q||_F.
    """

    K: np.ndarray
    P: np.ndarray
    poles: np.ndarray
    residual: float


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
        Relative residual of the discrete Riccati equation,
        ||Ad'P Ad - P - Ad'P Bd (R + Bd'P Bd)^-1 Bd'P Ad + Q|| / ||Q|| (Frobenius norms).
    weights_source : str
        ``"rig file"`` or ``"Bryson's rule"``.
    state_names, input_names : tuple of str
    unstable_poles : ndarray
        Eigenvalues of A with positive real part [1/s] (what the loop must hold).
    warnings : tuple of str
        Sentences for the user (loop rate low against the unstable poles, ...).
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
    unstable_poles: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=complex))
    warnings: tuple[str, ...] = ()

    @property
    def sample_period(self) -> float:
        """1 / sample_rate [s]."""
        return 1.0 / self.sample_rate

    @property
    def discrete_plant(self) -> tuple[np.ndarray, np.ndarray]:
        """The zero-order-hold model of the plain state, (Ad, Bd) with x[k+1] = Ad x[k] + Bd u_applied[k], without
        the delay augmentation."""
        n, m = self.B.shape
        if self.delay_samples == 0:
            return self.Ad, self.Bd
        return self.Ad[:n, :n], self.Ad[:n, n:n + m]

    @property
    def gain_columns(self) -> tuple[str, ...]:
        """Names of K_discrete's columns: the states, then the pending inputs ``elbow[k-2]``, ``elbow[k-1]``, ..."""
        d = self.delay_samples
        pending = tuple(f"{u}[k-{d - j}]" for j in range(d) for u in self.input_names)
        return self.state_names + pending


def bryson_weights(rig: Rig) -> tuple[np.ndarray, np.ndarray]:
    """Bryson's rule: Q = diag(1 / dx_max^2), R = diag(1 / u_max^2) (Bryson & Ho, *Applied Optimal Control*, 1975).

    dx_max comes from :data:`ALLOWED_DEVIATION`: 0.05 m for ``x``, 0.05 rad (about 3 degrees) for ``theta1`` and
    ``theta2``, 0.5 m/s for ``x_dot`` and 1 rad/s for ``theta1_dot`` and ``theta2_dot``; u_max is each actuator's
    ``peak`` [N m or N]. The weights say "a deviation this large costs as much as a full-peak input".
    """
    Q = np.diag([1.0 / ALLOWED_DEVIATION[s] ** 2 for s in rig.state_names])
    R = np.diag(1.0 / rig.peak_inputs**2)
    return Q, R


def balance_weights(rig: Rig) -> tuple[np.ndarray, np.ndarray, str]:
    """The rig file's [balance] q, r as diagonal matrices, or Bryson's rule (:func:`bryson_weights`) when absent."""
    if rig.balance.q is None or rig.balance.r is None:
        Q, R = bryson_weights(rig)
        return Q, R, "Bryson's rule"
    return np.diag(rig.balance.q), np.diag(rig.balance.r), "rig file"


def zero_order_hold(A: np.ndarray, B: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact zero-order-hold discretization via the block matrix exponential (Van Loan, 1978).

    Returns Ad = e^(A dt) and Bd = integral_0^dt e^(A s) ds B, so x[k+1] = Ad x[k] + Bd u[k] with u held over
    [k dt, (k+1) dt).
    """
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


# ----------------------------------------------------------------------------------------------------------------
# Riccati equations


def care_residual(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: np.ndarray, P: np.ndarray) -> float:
    """||A'P + PA - P B R^-1 B'P + Q||_F / ||Q||_F."""
    E = A.T @ P + P @ A - P @ B @ np.linalg.solve(R, B.T @ P) + Q
    return float(np.linalg.norm(E) / np.linalg.norm(Q))


def dare_residual(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: np.ndarray, P: np.ndarray) -> float:
    """||A'PA - P - A'PB (R + B'PB)^-1 B'PA + Q||_F / ||Q||_F."""
    E = A.T @ P @ A - P - A.T @ P @ B @ np.linalg.solve(R + B.T @ P @ B, B.T @ P @ A) + Q
    return float(np.linalg.norm(E) / np.linalg.norm(Q))


def continuous_lqr(A: np.ndarray, B: np.ndarray, Q: np.ndarray, R: np.ndarray) -> RiccatiSolution:
    """Continuous LQR: K = R^-1 B'P with A'P + PA - P B R^-1 B'P + Q = 0, u = -K x.

    Solved by ``control.lqr`` and polished by one Kleinman (1968) step: with K0 from the first solution, P1 solves
    the Lyapunov equation (A - B K0)'P1 + P1 (A - B K0) + Q + K0'R K0 = 0.

    Raises
    ------
    ValueError, numpy.linalg.LinAlgError, control.ControlArgument
        From the solver when no stabilizing solution exists (the caller turns them into :class:`SynthesisError`).
    """
    K, P, _ = control.lqr(A, B, Q, R)
    K, P = np.asarray(K), np.asarray(P)
    residual = care_residual(A, B, Q, R, P)
    Acl = A - B @ K
    P1 = scipy.linalg.solve_continuous_lyapunov(Acl.T, -(Q + K.T @ R @ K))
    P1 = 0.5 * (P1 + P1.T)
    residual1 = care_residual(A, B, Q, R, P1)
    if residual1 < residual:
        P, residual = P1, residual1
        K = np.linalg.solve(R, B.T @ P)
    return RiccatiSolution(K=K, P=P, poles=np.linalg.eigvals(A - B @ K).astype(complex), residual=residual)


def discrete_lqr(Ad: np.ndarray, Bd: np.ndarray, Q: np.ndarray, R: np.ndarray) -> RiccatiSolution:
    """Discrete LQR: K = (R + Bd'P Bd)^-1 Bd'P Ad with P the stabilizing solution of the discrete Riccati equation
    Ad'P Ad - P - Ad'P Bd (R + Bd'P Bd)^-1 Bd'P Ad + Q = 0, u[k] = -K x[k].

    Solved by ``control.dlqr`` and polished by one Hewer (1971) step: P1 solves the Stein equation
    P1 = (Ad - Bd K0)'P1 (Ad - Bd K0) + Q + K0'R K0.
    """
    K, P, _ = control.dlqr(Ad, Bd, Q, R)
    K, P = np.asarray(K), np.asarray(P)
    residual = dare_residual(Ad, Bd, Q, R, P)
    Acl = Ad - Bd @ K
    P1 = scipy.linalg.solve_discrete_lyapunov(Acl.T, Q + K.T @ R @ K)
    P1 = 0.5 * (P1 + P1.T)
    residual1 = dare_residual(Ad, Bd, Q, R, P1)
    if residual1 < residual:
        P, residual = P1, residual1
        K = np.linalg.solve(R + Bd.T @ P @ Bd, Bd.T @ P @ Ad)
    return RiccatiSolution(K=K, P=P, poles=np.linalg.eigvals(Ad - Bd @ K).astype(complex), residual=residual)


# ----------------------------------------------------------------------------------------------------------------
# Checks of the request


def _check_weights_see_unstable_modes(rig: Rig, A: np.ndarray, Q: np.ndarray, source: str) -> None:
    """Detectability of (A, Q^1/2) (PBH test): every mode that does not decay by itself must cost something,
    or the Riccati equation has no stabilizing solution."""
    if source != "rig file":
        return
    eigenvalues, vectors = np.linalg.eig(A)
    root = np.sqrt(np.clip(np.diag(Q), 0.0, None))
    for lam, v in zip(eigenvalues, vectors.T, strict=True):
        if lam.real < -1e-9 * max(1.0, np.max(np.abs(eigenvalues))):
            continue
        v = v / np.max(np.abs(v))
        if np.linalg.norm(root * v) < 1e-9:
            states = [s for s, c in zip(rig.state_names, v, strict=True) if abs(c) > 0.1]
            raise RigFileError(rig.source, "balance.q", f"gives zero weight to every state that sees the mode at "
                               f"{lam.real:.3g}{lam.imag:+.3g}j 1/s (mostly {', '.join(states)}), so the LQR cannot "
                               f"stabilize it; give at least one of {', '.join(states)} a weight > 0; "
                               f"got q = {list(rig.balance.q or ())}")


def _rate_warnings(rig: Rig, rate: float, from_file: bool, unstable: np.ndarray,
                   closed_loop: np.ndarray) -> list[str]:
    """Loop rate against the fastest unstable pole and the continuous closed-loop bandwidth (rules of thumb)."""
    warnings = []
    if unstable.size:
        fastest = float(np.max(unstable.real))
        equivalent = fastest / (2.0 * math.pi)  # Hz
        if rate < RATE_RATIO_MINIMUM * equivalent:
            problem = (f"must be at least {RATE_RATIO_MINIMUM:g}x the fastest unstable pole's rate "
                       f"({fastest:.3g} 1/s = {equivalent:.3g} Hz-equivalent), i.e. >= "
                       f"{RATE_RATIO_MINIMUM * equivalent:.3g} Hz, and {RATE_RATIO_ADVISED:g}x "
                       f"({RATE_RATIO_ADVISED * equivalent:.3g} Hz) is advised; got {rate:g} Hz")
            if from_file:
                raise RigFileError(rig.source, "balance.sample_rate", problem)
            raise RequestError(f"sample rate {problem}")
        if rate < RATE_RATIO_ADVISED * equivalent:
            warnings.append(f"loop rate {rate:g} Hz is below {RATE_RATIO_ADVISED:g}x the fastest unstable pole "
                            f"({fastest:.3g} 1/s = {equivalent:.3g} Hz-equivalent; rule of thumb: >= "
                            f"{RATE_RATIO_ADVISED * equivalent:.3g} Hz): expect small margins and high "
                            "sensitivity to timing jitter")
    fastest_cl = float(np.max(np.abs(closed_loop))) / (2.0 * math.pi)
    if rate < BANDWIDTH_RATIO_ADVISED * fastest_cl:
        warnings.append(f"the continuous design's fastest closed-loop pole ({fastest_cl:.3g} Hz-equivalent) is "
                        f"above a tenth of the loop rate ({rate:g} Hz): the continuous K is no stand-in for "
                        "K_discrete here; the firmware must use K_discrete (or lower the weights on q)")
    return warnings


# ----------------------------------------------------------------------------------------------------------------
# The design


def design_balance(rig: Rig, *, sample_rate: float | None = None, delay_samples: int | None = None,
                   linear: LinearModel | None = None) -> BalanceDesign:
    """Continuous and discrete LQR at ``upright``.

    Weights come from the rig file's ``[balance]`` q and r, or from Bryson's rule (:func:`bryson_weights`, with the
    default allowed deviations of :data:`ALLOWED_DEVIATION`) when they are absent.

    Parameters
    ----------
    rig : Rig
    sample_rate : float, optional
        Loop rate [Hz]; default the rig file's ``[balance].sample_rate``.
    delay_samples : int, optional
        Computation delay to design in [samples], >= 0; default ``[balance].delay_samples``.
    linear : LinearModel, optional
        Use this linear model instead of linearizing the rig at ``upright``.

    Returns
    -------
    BalanceDesign
        With ``warnings`` when the loop rate is below 10x the fastest unstable pole's Hz-equivalent rate
        lambda / (2 pi) (rule of thumb, common practice), or the continuous closed loop is fast against the loop.

    Raises
    ------
    RigFileError
        When the rig file's weights leave an unstable or marginal mode unweighted (``balance.q``), or its
        ``balance.sample_rate`` is below 2x the fastest unstable pole's Hz-equivalent rate.
    RequestError
        For a ``sample_rate`` argument that low, or a non-positive one, or a negative ``delay_samples``.
    SynthesisError
        When a Riccati equation has no stabilizing solution (e.g. an uncontrollable rig).
    """
    rate = rig.balance.sample_rate if sample_rate is None else float(sample_rate)
    delay = rig.balance.delay_samples if delay_samples is None else int(delay_samples)
    if not (math.isfinite(rate) and rate > 0.0):
        raise RequestError(f"sample rate must be a finite number > 0 Hz; got {rate:g}")
    if delay < 0:
        raise RequestError(f"delay_samples must be an integer >= 0; got {delay}")
    lin = linearize(rig, "upright") if linear is None else linear
    Q, R, source = balance_weights(rig)
    A, B = lin.A, lin.B
    _check_weights_see_unstable_modes(rig, A, Q, source)
    eig_A = np.linalg.eigvals(A).astype(complex)
    unstable = eig_A[eig_A.real > 1e-9]
    try:
        cont = continuous_lqr(A, B, Q, R)
        Ad, Bd = augment_delay(*zero_order_hold(A, B, 1.0 / rate), delay)
        Qz = scipy.linalg.block_diag(Q, np.zeros((delay * rig.n_inputs,) * 2)) if delay else Q
        disc = discrete_lqr(Ad, Bd, Qz, R)
    except (ValueError, np.linalg.LinAlgError, control.ControlArgument) as exc:
        raise SynthesisError(f"{rig.source}: no stabilizing LQR at upright ({exc}); check controllability "
                             "with `upswing modes` and the [balance] weights") from None
    warnings = _rate_warnings(rig, rate, sample_rate is None, unstable, cont.poles)
    return BalanceDesign(
        K=cont.K, K_discrete=disc.K, P=cont.P, P_discrete=disc.P, Q=Q, R=R, A=A, B=B, Ad=Ad, Bd=Bd,
        x_eq=lin.x_eq, u_eq=lin.u_eq, sample_rate=rate, delay_samples=delay, closed_loop_poles=cont.poles,
        closed_loop_poles_discrete=disc.poles, riccati_residual=cont.residual,
        riccati_residual_discrete=disc.residual, weights_source=source, state_names=rig.state_names,
        input_names=rig.input_names, unstable_poles=np.sort_complex(unstable)[::-1], warnings=tuple(warnings),
    )
