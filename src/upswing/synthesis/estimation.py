"""State estimation for encoder-only rigs: a steady-state Kalman filter and the filtered finite difference.

The encoders read the angles (and the cart position); the velocities must be estimated. Both estimators here are
returned in one general form, a discrete linear observer run once per loop sample k:

    xi[k+1]  = F xi[k] + G y[k] + H u[k]
    x_hat[k] = Cxi xi[k] + Dy y[k]

where (all as deviations from the equilibrium ``x_eq``, ``u_eq`` of the balance design)

* ``y[k]`` are the encoder readings of ``measured`` (:func:`upswing.model.modes.measured_states`: the angles, and
  the cart position on a cart rig) minus their equilibrium values, angles wrapped to (-pi, pi] [rad, m];
* ``u[k]`` is u - u_eq actually applied over [k, k+1) (with a computation delay of d samples, the command computed
  d samples earlier) [N m, N];
* ``x_hat[k]`` estimates x[k] - x_eq with angles wrapped, in state order; the controller then applies
  u = u_eq - K_discrete x_hat (with a delay, on the augmented vector).

Noise model (the same for both, so their figures compare):

* Measurement: each reading is quantized by one count Delta (2 pi / encoder_counts rad, ``cart_resolution`` m),
  modelled as white noise of variance Delta^2 / 12 (uniform rounding error; Widrow, 1956; common practice), plus the
  rig file's ``angle_noise`` / ``cart_noise`` standard deviation: R_v = diag(Delta^2 / 12 + sigma^2).
* Process: an unmodelled acceleration on each coordinate, constant over a sample and white from sample to sample
  with standard deviation ``[balance].process_noise`` [rad/s^2] (``cart_process_noise`` [m/s^2] on the cart): the
  piecewise-constant white-acceleration model (Bar-Shalom, Li & Kirubarajan, 2001, sec. 6.3), carried through the
  rig's own zero-order-hold dynamics, Q_w = Gamma diag(sigma_a^2) Gamma', Gamma = integral_0^T e^(A s) ds E, with E
  putting the accelerations on the velocity rows.
* Effort: optionally, an unmodelled effort at each actuated input, held over a sample, with standard deviation
  ``[balance].effort_noise`` [N, N m] (drive force or torque error, the friction the linearization leaves out). It
  enters where the commanded effort does, through Bd = integral_0^T e^(A s) ds B, adding Bd diag(sigma_u^2) Bd' to
  Q_w. Fictitious noise in the input directions is the loop-transfer-recovery step of Doyle & Stein (1979, "Robustness
  with observers", IEEE TAC 24(4)): as sigma_u grows the loop broken at the plant input tends to the full-state
  loop's, whose margins the estimator otherwise erodes (Doyle, 1978). Default: none.

Default tuning, 2.5 rad/s^2 on the joints and 1 m/s^2 on the cart, chosen by simulation
(``benchmarks/study_estimator_defaults.py``: every demo rig, its own parameter spreads, quantized noisy encoders,
the nonlinear batch engine with Coulomb friction, 1000 rollouts per setting). The joint setting trades two ways of
failing to settle: too low and the filter trusts the model so much that its lag lets Coulomb friction drive a large
limit cycle (the acrobot's elbow hunts by 0.12 rad at 1.5 rad/s^2 and 172 of 1000 runs do not settle at 1); too high
and encoder noise passes through to the motor and makes the rates jitter (the acrobot's rates past 1.4 rad/s at 4,
41 of 1000 runs not settled at 5). From 2 to 3 rad/s^2 every run of every demo rig settled (the acrobot's 4-5 falls
in 1000, at every setting, follow its parameter draws, not the filter); 2.5 is the middle of that window on a log
scale. It puts the filter error poles at 43-130 1/s, well above the balance loops' slowest poles (2.4-5.5 1/s). The
cart setting barely matters on the demo cart rig (0.3 to 10 m/s^2 all held every run). A rig with other encoders
or friction should be checked with ``upswing verify`` and the key set in its file.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import scipy.linalg

from upswing.errors import RequestError, SynthesisError
from upswing.model.modes import measured_states, output_matrix
from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign, dare_residual, zero_order_hold
from upswing.synthesis.loops import closed_loop, discrete_controller, discrete_plant, lqg_poles

KINDS = ("kalman", "finite-difference")
# Finite-difference velocity filter: cut-off a decade below the loop rate unless the rig file says otherwise (common
# practice: far enough under Nyquist to cut the quantization noise the difference amplifies, and still above the
# balance loop's crossover, 20-80 Hz on the demo rigs, so its lag costs only part of the phase margin).
DEFAULT_CUTOFF_FRACTION = 0.1


@dataclass(frozen=True)
class EstimatorDesign:
    """A discrete linear observer xi[k+1] = F xi + G y + H u, x_hat = Cxi xi + Dy y (see the module docstring).

    Attributes
    ----------
    F : ndarray, shape (n_xi, n_xi)
    G : ndarray, shape (n_xi, n_measured)
    H : ndarray, shape (n_xi, n_inputs)
    Cxi : ndarray, shape (n_states, n_xi)
    Dy : ndarray, shape (n_states, n_measured)
    kind : str
        ``"kalman"`` or ``"finite-difference"``.
    sample_rate : float
        Rate the observer runs at [Hz] (the loop rate).
    poles : ndarray
        Estimator error poles (eigenvalues of F; dimensionless, inside the unit circle when stable).
    measured : tuple of str
        Names of the entries of y, in order.
    state_names : tuple of str
        Names of the entries of x_hat, in order.
    measurement_std : ndarray, shape (n_measured,)
        Standard deviation of each reading's noise, sqrt(Delta^2 / 12 + sigma^2) [rad, m].
    process_noise_std : ndarray, shape (n_q,)
        Standard deviation of each coordinate's unmodelled acceleration [rad/s^2, m/s^2] (the model both estimators
        are judged under; only the Kalman filter is tuned with it).
    effort_noise_std : ndarray, shape (n_inputs,)
        Standard deviation of the unmodelled effort at each input [N, N m]; zeros when the rig file sets none (part
        of the same noise model).
    closed_loop_poles : ndarray
        Poles of the combined loop: plant, this estimator, the design's K_discrete and delay (the LQG poles for
        the Kalman filter); dimensionless.
    error_std : ndarray, shape (n_states,)
        Steady-state standard deviation of x - x_hat in that closed loop under the noise model [state units].
    gain : ndarray or None
        Kalman only: the measurement-update gain L, x_hat = x_prior + L (y - C x_prior), shape (n_states, n_measured).
    covariance : ndarray or None
        Kalman only: steady-state prior error covariance M (solution of the filter Riccati equation).
    riccati_residual : float or None
        Kalman only: relative residual of the filter Riccati equation, ||...|| / ||Q_w||.
    cutoff_hz : float or None
        Finite difference only: the low-pass cut-off [Hz].
    """

    F: np.ndarray
    G: np.ndarray
    H: np.ndarray
    Cxi: np.ndarray
    Dy: np.ndarray
    kind: str
    sample_rate: float
    poles: np.ndarray
    measured: tuple[str, ...]
    state_names: tuple[str, ...]
    measurement_std: np.ndarray
    process_noise_std: np.ndarray
    effort_noise_std: np.ndarray
    closed_loop_poles: np.ndarray
    error_std: np.ndarray
    gain: np.ndarray | None = None
    covariance: np.ndarray | None = None
    riccati_residual: float | None = None
    cutoff_hz: float | None = None


# ----------------------------------------------------------------------------------------------------------------
# Noise model


def measurement_noise_std(rig: Rig) -> np.ndarray:
    """sqrt(Delta^2 / 12 + sigma^2) for each measured state [rad, m] (quantization as uniform noise, Widrow 1956)."""
    s = rig.sensors
    out = []
    for name in measured_states(rig):
        delta, sigma = (s.cart_resolution, s.cart_noise) if name == "x" else (s.angle_resolution, s.angle_noise)
        out.append(math.sqrt(delta**2 / 12.0 + sigma**2))
    return np.array(out)


def process_noise_std(rig: Rig) -> np.ndarray:
    """Unmodelled acceleration standard deviation for each coordinate [rad/s^2, m/s^2 for the cart]."""
    b = rig.balance
    return np.array([b.cart_process_noise if name == "x" else b.process_noise for name in measured_states(rig)])


def effort_noise_std(rig: Rig) -> np.ndarray:
    """Unmodelled effort standard deviation at each input [N, N m], in input order; zeros when not set."""
    given = rig.balance.effort_noise
    return np.zeros(len(rig.input_names)) if given is None else np.array(given, dtype=float)


def process_noise_covariance(design: BalanceDesign, acceleration_std: np.ndarray, effort_std: np.ndarray
                             ) -> np.ndarray:
    """Q_w = Gamma diag(sigma_a^2) Gamma' + Bd diag(sigma_u^2) Bd': covariance of the noise driving x[k+1].

    Parameters
    ----------
    acceleration_std : ndarray, shape (n_q,)
        sigma_a per coordinate [rad/s^2, m/s^2].
    effort_std : ndarray, shape (n_inputs,)
        sigma_u per input [N, N m].
    """
    Gamma = process_noise_input(design)
    Bd = design.discrete_plant[1]
    return Gamma @ np.diag(acceleration_std**2) @ Gamma.T + Bd @ np.diag(effort_std**2) @ Bd.T


def process_noise_input(design: BalanceDesign) -> np.ndarray:
    """Gamma = integral_0^T e^(A s) ds E: how a sample-held acceleration on each coordinate moves x[k+1]."""
    n = design.A.shape[0]
    nq = n // 2
    E = np.zeros((n, nq))
    E[nq:, :] = np.eye(nq)
    return zero_order_hold(design.A, E, design.sample_period)[1]


def velocity_cutoff(rig: Rig, sample_rate: float) -> float:
    """The finite-difference filter's cut-off [Hz]: ``[balance].velocity_cutoff``, else sample_rate / 10."""
    given = rig.balance.velocity_cutoff
    return DEFAULT_CUTOFF_FRACTION * sample_rate if given is None else given


# ----------------------------------------------------------------------------------------------------------------
# Estimators


def kalman_estimator(rig: Rig, design: BalanceDesign) -> EstimatorDesign:
    """Steady-state discrete Kalman filter at the loop rate, in current-estimate form.

    With the prior covariance M solving the filter Riccati equation
    M = Ad M Ad' - Ad M C' (C M C' + R_v)^-1 C M Ad' + Q_w (noise model in the module docstring, effort noise
    included: :func:`process_noise_covariance`),
    the gain is L = M C' (C M C' + R_v)^-1 and, with xi the prior estimate,

        F = Ad (I - L C),  G = Ad L,  H = Bd,  Cxi = I - L C,  Dy = L.

    The error poles are the eigenvalues of Ad (I - L C) (= those of Ad - Ad L C, the predictor form).

    Raises
    ------
    SynthesisError
        When the filter Riccati equation has no stabilizing solution.
    """
    Ad, Bd = design.discrete_plant
    C = output_matrix(rig)
    n = Ad.shape[0]
    sigma_a, sigma_u = process_noise_std(rig), effort_noise_std(rig)
    Qw = process_noise_covariance(design, sigma_a, sigma_u)
    std = measurement_noise_std(rig)
    Rv = np.diag(std**2)
    try:
        M = scipy.linalg.solve_discrete_are(Ad.T, C.T, Qw, Rv)
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise SynthesisError(f"{rig.source}: no steady-state Kalman filter ({exc}); check the [sensors] and "
                             "[balance] noise settings") from None
    M = 0.5 * (M + M.T)
    L = M @ C.T @ np.linalg.inv(C @ M @ C.T + Rv)
    I_LC = np.eye(n) - L @ C
    F = Ad @ I_LC
    est = EstimatorDesign(
        F=F, G=Ad @ L, H=Bd, Cxi=I_LC, Dy=L, kind="kalman", sample_rate=design.sample_rate,
        poles=np.linalg.eigvals(F).astype(complex), measured=measured_states(rig), state_names=rig.state_names,
        measurement_std=std, process_noise_std=sigma_a, effort_noise_std=sigma_u, closed_loop_poles=np.zeros(0),
        error_std=np.zeros(n),
        gain=L, covariance=M, riccati_residual=dare_residual(Ad.T, C.T, Qw, Rv, M),
    )
    return _with_loop(rig, design, est)


def finite_difference_estimator(rig: Rig, design: BalanceDesign, *, cutoff_hz: float | None = None
                                ) -> EstimatorDesign:
    """Filtered finite-difference velocity: positions read as they are, velocities from the backward difference
    through a first-order low-pass,

        v[k] = alpha v[k-1] + (1 - alpha) (y[k] - y[k-1]) / T,   alpha = exp(-2 pi f_c T),

    (the low-pass pole mapped exactly to discrete time; common practice). The observer state is
    xi[k] = [y[k-1], v[k-1]], so F = Cxi = [[0, 0], [-beta I, alpha I]], G = Dy = [[I], [beta I]],
    beta = (1 - alpha) / T, and H = 0. Its poles are 0 and alpha (each once per coordinate).

    Parameters
    ----------
    cutoff_hz : float, optional
        f_c [Hz]; default :func:`velocity_cutoff` (``[balance].velocity_cutoff`` or sample_rate / 10).

    Raises
    ------
    RequestError
        When the cut-off is not in (0, sample_rate / 2).
    """
    rate = design.sample_rate
    fc = velocity_cutoff(rig, rate) if cutoff_hz is None else float(cutoff_hz)
    if not 0.0 < fc < rate / 2.0:
        raise RequestError(f"velocity filter cut-off must be in (0, {rate / 2.0:g}) Hz (below half the loop rate "
                           f"{rate:g} Hz); got {fc:g}")
    T = 1.0 / rate
    alpha = math.exp(-2.0 * math.pi * fc * T)
    beta = (1.0 - alpha) / T
    names = rig.state_names
    measured = measured_states(rig)
    n, m = len(names), len(measured)
    Cxi = np.zeros((n, 2 * m))
    Dy = np.zeros((n, m))
    for j, q in enumerate(measured):
        Dy[names.index(q), j] = 1.0
        row = names.index(f"{q}_dot")
        Cxi[row, j] = -beta
        Cxi[row, m + j] = alpha
        Dy[row, j] = beta
    # xi[k+1] = [y[k], v[k]] = x_hat[k] restricted to (positions, velocities).
    pick = np.array([names.index(q) for q in measured] + [names.index(f"{q}_dot") for q in measured])
    F, G = Cxi[pick, :], Dy[pick, :]
    est = EstimatorDesign(
        F=F, G=G, H=np.zeros((2 * m, design.B.shape[1])), Cxi=Cxi, Dy=Dy, kind="finite-difference",
        sample_rate=rate, poles=np.linalg.eigvals(F).astype(complex), measured=measured, state_names=names,
        measurement_std=measurement_noise_std(rig), process_noise_std=process_noise_std(rig),
        effort_noise_std=effort_noise_std(rig), closed_loop_poles=np.zeros(0), error_std=np.zeros(n), cutoff_hz=fc,
    )
    return _with_loop(rig, design, est)


def design_estimator(rig: Rig, design: BalanceDesign, kind: str = "kalman") -> EstimatorDesign:
    """The estimator of one of :data:`KINDS` for ``design``: :func:`kalman_estimator` (``"kalman"``, the default
    that ``upswing verify`` runs) or :func:`finite_difference_estimator` (``"finite-difference"``, its default
    cut-off).

    Raises
    ------
    RequestError
        For a kind not in :data:`KINDS`.
    """
    if kind == "kalman":
        return kalman_estimator(rig, design)
    if kind == "finite-difference":
        return finite_difference_estimator(rig, design)
    raise RequestError(f"estimator must be one of {', '.join(KINDS)}; got {kind!r}")


def kalman_setting(est: EstimatorDesign) -> str:
    """The Kalman filter's tuning in words: process noise per coordinate, then effort noise per input when set."""
    text = "process noise " + ", ".join(f"{v:g}" for v in est.process_noise_std)
    if np.any(est.effort_noise_std > 0.0):
        text += "; effort noise " + ", ".join(f"{v:g}" for v in est.effort_noise_std)
    return text


def _with_loop(rig: Rig, design: BalanceDesign, est: EstimatorDesign) -> EstimatorDesign:
    """Fill in the combined closed-loop poles and the closed-loop estimate error."""
    return replace(est, closed_loop_poles=lqg_poles(design, est), error_std=estimate_error_std(design, est))


def estimate_error_std(design: BalanceDesign, est: EstimatorDesign) -> np.ndarray:
    """Steady-state standard deviation of x - x_hat with the loop closed through ``est`` and K_discrete.

    With plant noise w (accelerations of covariance diag(process_noise_std^2) entering through Gamma, and efforts
    of covariance diag(effort_noise_std^2) entering through Bd) and reading noise v (diag(measurement_std^2)), the
    loop state s = [x, c] obeys s+ = A_cl s + N [w; v]; its covariance S solves
    S = A_cl S A_cl' + N W N', and x - x_hat = (I - Dy C) x - Cxi xi - Dy v gives the error covariance
    E S E' + Dy V Dy'. Returns NaN entries when the loop is not stable (no steady state exists).
    """
    C = np.array([[1.0 if s == m else 0.0 for s in design.state_names] for m in est.measured])
    plant = discrete_plant(design, C)
    ctrl = discrete_controller(design, est)
    A = closed_loop(plant, ctrl)
    n = plant.A.shape[0]
    if np.max(np.abs(np.linalg.eigvals(A))) >= 1.0:
        return np.full(n, np.nan)
    Gamma = np.hstack([process_noise_input(design), plant.B])
    N = np.block([[Gamma, plant.B @ ctrl.D], [np.zeros((ctrl.A.shape[0], Gamma.shape[1])), ctrl.B]])
    W = np.diag(np.concatenate([est.process_noise_std**2, est.effort_noise_std**2, est.measurement_std**2]))
    S = scipy.linalg.solve_discrete_lyapunov(A, N @ W @ N.T, method="bilinear")
    no = est.F.shape[0]
    Ce = np.hstack([np.eye(n) - est.Dy @ C, -est.Cxi, np.zeros((n, ctrl.A.shape[0] - no))])
    V = np.diag(est.measurement_std**2)
    cov = Ce @ S @ Ce.T + est.Dy @ V @ est.Dy.T
    return np.sqrt(np.clip(np.diag(cov), 0.0, None))
