"""Batch closed-loop simulation: many rollouts of the nonlinear rig under a digital controller, at once.

Each rollout has its own initial state and its own physical parameters. Per controller sample k (period T_s = 1 /
``controller.sample_rate``) the engine

1. reads the sensors: angles and cart position quantized to one encoder count (mid-tread rounding) plus Gaussian
   noise of the rig's ``[sensors]`` standard deviations, minus their upright values, angles wrapped (``"encoders"``),
   or the exact state error (``"state"``); during a sensor drop-out the last reading before it is repeated;
2. asks the controller for u (:mod:`upswing.verification.controllers`);
3. delays the command by the computation delay (d samples; zero input until the first command arrives), clips it to
   +-``peak`` and, with a motor line, to stall * (1 - |w| / no_load_speed) while the motor drives at speed w (the
   speed at the sample; braking may use the full peak), and holds it for the sample (zero-order hold);
4. integrates the full nonlinear model (viscous and Coulomb friction included) over the sample with ``substeps``
   classical RK4 steps (:mod:`upswing.verification.kernels`);
5. checks the new state: a non-finite state, a cart at the end stop (|x| >= travel), a link past ``Bounds.angle``
   from upright, or a runaway speed ends the rollout as a failure on the spot (its numbers up to then are kept).

Peaks (inputs, speeds, rail, base loads, tip speed, kinetic energy) are taken at every sample, right after the new
input is applied; between samples a quantity can exceed its sampled peak by at most its rate times T_s.

A rollout succeeds when it has not failed and its state stayed inside the :class:`Settling` box for the final
``Settling.hold`` seconds of the horizon.

Reproducibility: everything random (sensor noise) comes from a generator seeded with ``(seed, stream, block)``,
drawn for the whole block at every sample whether or not a rollout has ended, so a rollout's numbers depend only on
the seed and its block, never on how blocks are grouped into chunks, processes or cluster workers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields

import numpy as np

from upswing.errors import RequestError
from upswing.model.equilibria import angle_mask, equilibrium_state
from upswing.model.linearize import linearize
from upswing.model.modes import measured_states
from upswing.model.rig import Rig
from upswing.verification import kernels, sampling
from upswing.verification.controllers import MEASUREMENTS, Controller

STATUS = ("held", "not settled", "fell", "end stop", "runaway speed", "non-finite")
HELD, NOT_SETTLED, FELL, END_STOP, RUNAWAY, NON_FINITE = range(6)
STEP_RULE = 0.05  # h * Omega <= 0.05: RK4's local error ~ (h Omega)^5 / 120 ~ 3e-9 of the state scale per step


@dataclass(frozen=True)
class Bounds:
    """When a rollout has certainly failed (it stops there).

    Attributes
    ----------
    angle : float or None
        |theta1| or |theta2| (wrapped error from upright) beyond this [rad] means the links fell; ``None`` for
        controllers that travel through all angles (swing-up).
    joint_speed : float
        Runaway joint speed [rad/s].
    cart_speed : float
        Runaway cart speed [m/s].
    """

    angle: float | None = math.pi / 2
    joint_speed: float = 100.0
    cart_speed: float = 20.0


@dataclass(frozen=True)
class Settling:
    """The box a held rollout stays in for the final ``hold`` seconds: |angles| <= ``angle`` [rad], |joint rates|
    <= ``rate`` [rad/s], |x| <= ``cart`` * travel and, when ``cart_rate`` is set, |x_dot| <= ``cart_rate`` [m/s].

    "Held" means what a person at the rig cares about: the links stay up and the cart stays well clear of its end
    stops (with ``cart`` = 0.25, three quarters of the travel remain free on each side). The box is wide on
    purpose: Coulomb friction (no stiction in the model either) makes a linear balance loop hunt in a small limit
    cycle instead of converging, and that still counts as holding the links up. For the same reason the cart's
    speed is not bounded by default: a cart hunting back and forth at a few tenths of a metre per second inside
    the position box is a finding (reported as residual motion, :attr:`Rollouts.hold_error`), not a fall, and
    the position bound over the hold window already rules out a cart drifting away. ``cart_rate`` is there for
    studies that want a tighter definition."""

    angle: float = 0.15
    rate: float = 1.5
    cart: float = 0.25
    cart_rate: float | None = None
    hold: float = 1.0


@dataclass(frozen=True)
class SimulationSetup:
    """How to simulate.

    Attributes
    ----------
    horizon : float
        Simulated time per rollout [s].
    substeps : int or None
        RK4 steps per controller sample; ``None`` chooses them with :func:`choose_substeps`.
    delay_samples : int or None
        Computation delay [samples]; ``None`` takes the rig's ``[balance].delay_samples``.
    quantize, noise : bool
        Encoder quantization and measurement noise on (``"encoders"`` measurement only).
    dropout : tuple of float or None
        (start, duration) [s] of a sensor drop-out during which the reading freezes.
    bounds, settling : Bounds, Settling
    record : bool
        Keep every sample's state and applied input (for plots and tests; memory grows with N * horizon).
    rms_until : float or None
        Also take the RMS of the applied input over [0, rms_until] s (:attr:`Rollouts.rms_input_window`): a
        swing-up's effort over the manoeuvre itself, which the settling time after it would dilute.
    backend : str
        ``"auto"``, ``"numba"`` or ``"numpy"`` (:mod:`upswing.verification.kernels`).
    """

    horizon: float = 5.0
    substeps: int | None = None
    delay_samples: int | None = None
    quantize: bool = True
    noise: bool = True
    dropout: tuple[float, float] | None = None
    bounds: Bounds = field(default_factory=Bounds)
    settling: Settling = field(default_factory=Settling)
    record: bool = False
    rms_until: float | None = None
    backend: str = "auto"


@dataclass(frozen=True)
class Rollouts:
    """Per-rollout results (row i is rollout ``ids[i]``). Units: s, rad, m, N, N m, J.

    Attributes
    ----------
    ids : ndarray (N,)
        Global rollout numbers.
    status : ndarray (N,) of int
        Index into :data:`STATUS` (0 = held).
    end_time : ndarray (N,)
        When the rollout stopped [s]: the horizon, or the sample at which it failed.
    settle_time : ndarray (N,)
        Last time the state was outside the :class:`Settling` box [s].
    final_error : ndarray (N, n_states)
        State minus upright at ``end_time`` (angles wrapped).
    peak_input, rms_input, peak_request, saturated_time : ndarray (N, n_inputs)
        max |applied u| [N m or N]; RMS of applied u over the run; max |commanded u| before the limits; time
        the command exceeded the available effort [s].
    peak_speed : ndarray (N, n_q)
        max |q_dot| per joint, in generalized coordinate order [m/s, rad/s].
    peak_rail : ndarray (N,)
        max |x| [m] (0 on a fixed base).
    peak_monitors : ndarray (N, 5)
        max |force_x| [N], max |force_y| [N], max |moment| [N m], max tip speed [m/s], max kinetic energy [J].
    peak_force : ndarray (N,)
        max |(force_x, force_y)| [N] on the base.
    hold_error : ndarray (N, n_states)
        max |state error| over the final ``Settling.hold`` seconds: the residual motion (e.g. friction hunting).
    substeps, step : int, float
        RK4 steps per sample and their length [s].
    times, states, inputs : ndarray or None
        With ``record``: sample times (K + 1,), states (K + 1, N, n_states) and applied inputs (K, N, n_inputs);
        rows after a rollout's end repeat its last values.
    rms_input_window : ndarray (N, n_inputs) or None
        With ``SimulationSetup.rms_until``: RMS of applied u over [0, rms_until] (over the run if it ended first).
    """

    ids: np.ndarray
    status: np.ndarray
    end_time: np.ndarray
    settle_time: np.ndarray
    final_error: np.ndarray
    peak_input: np.ndarray
    rms_input: np.ndarray
    peak_request: np.ndarray
    saturated_time: np.ndarray
    peak_speed: np.ndarray
    peak_rail: np.ndarray
    peak_monitors: np.ndarray
    peak_force: np.ndarray
    hold_error: np.ndarray
    substeps: int
    step: float
    times: np.ndarray | None = None
    states: np.ndarray | None = None
    inputs: np.ndarray | None = None
    rms_input_window: np.ndarray | None = None

    @property
    def held(self) -> np.ndarray:
        return self.status == HELD

    def subset(self, rows: np.ndarray) -> Rollouts:
        """The rollouts selected by a boolean mask or index array (recorded trajectories too)."""
        out = {}
        for f in fields(Rollouts):
            value = getattr(self, f.name)
            if f.name in ("substeps", "step", "times"):
                out[f.name] = value
            elif f.name in ("states", "inputs"):
                out[f.name] = None if value is None else value[:, rows]
            elif value is None:
                out[f.name] = None
            else:
                out[f.name] = value[rows]
        return Rollouts(**out)

    @staticmethod
    def concatenate(parts: list[Rollouts]) -> Rollouts:
        """Join block results in the order given (recorded trajectories are dropped)."""
        if not parts:
            raise RequestError("no rollouts to join")
        out = {}
        for f in fields(Rollouts):
            first = getattr(parts[0], f.name)
            if f.name in ("substeps", "step"):
                out[f.name] = first
            elif f.name in ("times", "states", "inputs") or first is None:
                out[f.name] = None
            else:
                out[f.name] = np.concatenate([getattr(p, f.name) for p in parts])
        return Rollouts(**out)


def characteristic_rate(rig: Rig) -> float:
    """Omega [1/s]: the largest |eigenvalue| at upright and hanging, or the fastest actuated joint speed limit
    [rad/s], whichever is larger: the rate the solution's angles and speeds change at."""
    rates = [float(np.max(np.abs(linearize(rig, eq).eigenvalues))) for eq in ("upright", "hanging")]
    rates += [a.max_speed for a in rig.actuators if a.joint != "cart"]
    return max(rates)


def choose_substeps(rig: Rig, sample_rate: float) -> int:
    """RK4 steps per sample so that h * Omega <= :data:`STEP_RULE` (Omega from :func:`characteristic_rate`)."""
    return max(1, math.ceil(characteristic_rate(rig) / (STEP_RULE * sample_rate)))


def generalized_input_map(rig: Rig) -> np.ndarray:
    """S, shape (n_q, n_inputs): which generalized force each input drives (coordinates [x,] theta1, theta2)."""
    joints = ("cart", "shoulder", "elbow") if rig.base == "cart" else ("shoulder", "elbow")
    S = np.zeros((len(joints), rig.n_inputs))
    for col, joint in enumerate(rig.input_names):
        S[joints.index(joint), col] = 1.0
    return S


def _noise_generator(seed: int, stream: int, block: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(stream, block)))


def simulate(rig: Rig, controller: Controller, x0: np.ndarray, params: np.ndarray | None = None, *,
             setup: SimulationSetup | None = None, seed: int = 0, stream: int = 0, block: int = 0,
             ids: np.ndarray | None = None) -> Rollouts:
    """Simulate one block of closed-loop rollouts.

    Parameters
    ----------
    rig : Rig
        Limits, sensors and nominal parameters.
    controller : Controller
    x0 : ndarray, shape (N, n_states)
        Initial states (absolute, in the rig's state order) [m, rad, m/s, rad/s].
    params : ndarray, shape (N, 16) or (16,), optional
        Physical parameters per rollout (:data:`upswing.model.rig.PARAMETER_NAMES` order); default nominal.
    setup : SimulationSetup, optional
    seed, stream, block : int
        Select the noise generator (see the module docstring).
    ids : ndarray (N,), optional
        Global rollout numbers to carry into the result (default 0..N-1).

    Returns
    -------
    Rollouts
    """
    setup = SimulationSetup() if setup is None else setup
    x0 = np.atleast_2d(np.asarray(x0, dtype=float))
    N, n = x0.shape
    if N == 0:
        raise RequestError("simulate needs at least one rollout; got an empty batch of initial states")
    if n != rig.n_states:
        raise RequestError(f"initial states need {rig.n_states} entries ({', '.join(rig.state_names)}); got {n}")
    if controller.measurement not in MEASUREMENTS:
        raise RequestError(f"controller.measurement must be one of {MEASUREMENTS}; got {controller.measurement!r}")
    if not setup.horizon > 0:
        raise RequestError(f"horizon must be > 0 s; got {setup.horizon}")
    P = np.broadcast_to(rig.parameter_vector() if params is None else np.asarray(params, dtype=float), (N, 16))
    ids = np.arange(N) if ids is None else np.asarray(ids)
    fs = float(controller.sample_rate)
    Ts = 1.0 / fs
    n_samples = max(1, round(setup.horizon * fs))
    horizon = n_samples * Ts
    nsub = choose_substeps(rig, fs) if setup.substeps is None else int(setup.substeps)
    if nsub < 1:
        raise RequestError(f"substeps must be >= 1; got {nsub}")
    h = Ts / nsub
    delay = rig.balance.delay_samples if setup.delay_samples is None else int(setup.delay_samples)
    nq, m = n // 2, rig.n_inputs
    cart = rig.base == "cart"
    backend = kernels.default_backend() if setup.backend == "auto" else setup.backend
    compiled = backend == "numba"
    x_eq = equilibrium_state(rig, "upright")
    is_angle = angle_mask(rig)
    Smap = generalized_input_map(rig)
    peak = rig.peak_inputs.astype(float)
    joint = np.array([int(np.flatnonzero(Smap[:, j])[0]) for j in range(m)], dtype=np.int64)
    stall = np.array([a.stall or 0.0 for a in rig.actuators])
    no_load = np.array([a.no_load_speed or 1.0 for a in rig.actuators])
    travel = rig.cart.travel if cart else math.inf
    encoders = controller.measurement == "encoders"
    names = rig.state_names
    n_meas = len(measured_states(rig)) if encoders else n
    quantum = np.zeros(n_meas)
    sigma = np.zeros(n_meas)
    if encoders:
        for j, name in enumerate(measured_states(rig)):
            quantum[j] = (rig.sensors.cart_resolution if name == "x" else rig.sensors.angle_resolution) \
                if setup.quantize else 0.0
            sigma[j] = rig.sensors.cart_noise if name == "x" else rig.sensors.angle_noise
    draw_noise = encoders and setup.noise and bool(np.any(sigma > 0))
    rng = _noise_generator(seed, stream, block)
    st, bounds = setup.settling, setup.bounds
    cart_rate = math.inf if st.cart_rate is None else st.cart_rate
    box = np.array([st.cart * travel if s == "x" else cart_rate if s == "x_dot" else
                    st.rate if s.endswith("_dot") else st.angle for s in names])
    speed_bound = np.array([bounds.cart_speed if s == "x_dot" else bounds.joint_speed for s in names[nq:]])
    angle_bound = math.inf if bounds.angle is None else float(bounds.angle)
    hold_from = horizon - st.hold - 1e-9

    # --- the active rollouts (columns); compacted whenever some end -----------------------------------------------
    pos = np.arange(N)  # each active rollout's place in the block
    S = np.array(x0.T, order="C")  # a copy: the caller's x0 is never touched
    C = kernels.plant_coefficients(P)
    pipe = np.zeros((max(delay, 1), m, N))
    n_acc_u, n_acc_x = 4 * m, nq + 8 + n
    acc_u, acc_x = np.zeros((n_acc_u, N)), np.zeros((n_acc_x, N))
    out_u, out_x = np.zeros((n_acc_u, N)), np.zeros((n_acc_x, N))
    out_status = np.zeros(N, dtype=np.int8)
    out_end = np.full(N, horizon)
    out_final = np.zeros((n, N))
    noise_block = np.empty((n_meas, N))
    # RMS window: the sum of u^2 (rows 2, 6, ... of acc_u) is copied once the window's last sample has run
    k_window = None if setup.rms_until is None else min(max(1, int(round(setup.rms_until / Ts))), n_samples)
    window_sum = np.full((m, N), np.nan)
    if setup.record:
        rec_x = np.empty((n_samples + 1, N, n))
        rec_u = np.zeros((n_samples, N, m))
        rec_x[0] = S.T

    def buffers(k: int) -> tuple[np.ndarray, ...]:
        return (np.empty((k, n_meas)), np.empty((nq, k)), np.empty((5, k)), np.empty(k, dtype=np.int8),
                np.empty((4, nq, k)))

    Y, T, Mon, status, work = buffers(N)

    def take_reading() -> np.ndarray:
        noise = None
        if draw_noise:  # drawn for the whole block, so a rollout's noise never depends on which others ended
            rng.standard_normal(out=noise_block)
            np.multiply(noise_block, sigma[:, None], out=noise_block)
            noise = noise_block if pos.size == N else noise_block[:, pos]
        sampling.read(S, x_eq, is_angle, n_meas, quantum, noise, Y, compiled)
        return Y.copy()

    y = take_reading()
    memory = controller.start(y)
    y_hold = y
    drop = setup.dropout
    for k in range(n_samples):
        t = k * Ts
        if k > 0:
            y = take_reading()
        if drop is not None and drop[0] <= t < drop[0] + drop[1]:
            y = y_hold
        else:
            y_hold = y
        u_req, memory = controller.step(t, y, memory)
        u_req = np.ascontiguousarray(np.asarray(u_req, dtype=float).T)  # (m, N_active)
        if delay:
            slot = k % delay
            u_cmd = pipe[slot].copy()
            pipe[slot] = u_req
        else:
            u_cmd = u_req
        sampling.limit(u_cmd, S, peak, stall, no_load, joint, nq, T, acc_u, compiled)
        if setup.record:
            rec_u[k, pos] = T[joint].T
        kernels.advance(S, T, C, h, nsub, Mon, backend, work)
        if k_window is not None and k == k_window - 1:
            window_sum[:, pos] = acc_u[2::4]
        failed = sampling.check(S, Mon, x_eq, is_angle, cart, travel, angle_bound, speed_bound, box, t + Ts,
                                hold_from, acc_x, status, compiled)
        if setup.record:
            rec_x[k + 1, pos] = S.T
        if failed == 0 and k < n_samples - 1:
            continue
        ended = status != 0
        if k == n_samples - 1:
            ended[:] = True
        done = pos[ended]
        out_status[done] = status[ended]
        out_end[done] = np.where(status[ended] != 0, t + Ts, horizon)
        E = S[:, ended] - x_eq[:, None]
        E[is_angle] = sampling.wrap(E[is_angle])
        out_final[:, done] = E
        out_u[:, done] = acc_u[:, ended]
        out_x[:, done] = acc_x[:, ended]
        if setup.record and k < n_samples - 1:
            rec_x[k + 2:, done] = S[:, ended].T
            rec_u[k + 1:, done] = T[joint][:, ended].T
        keep = ~ended
        pos, memory, pipe = pos[keep], memory[keep], pipe[:, :, keep]
        y_hold = y_hold[keep]  # a drop-out may outlast some rollouts: its frozen readings shrink with them
        S, C = np.ascontiguousarray(S[:, keep]), np.ascontiguousarray(C[:, keep])
        acc_u, acc_x = np.ascontiguousarray(acc_u[:, keep]), np.ascontiguousarray(acc_x[:, keep])
        Y, T, Mon, status, work = buffers(pos.size)
        if pos.size == 0:
            break
    held = out_status == 0
    last_out = out_x[nq + 7]
    out_status = np.where(held & (last_out > hold_from), NOT_SETTLED, out_status).astype(np.int8)
    samples_run = np.maximum(np.rint(out_end / Ts), 1.0)
    U4 = out_u.reshape(m, 4, N)
    rms_window = None
    if k_window is not None:
        early = np.isnan(window_sum)  # rollouts that ended before the window did: their whole run
        window_sum[early] = U4[:, 2][early]
        rms_window = np.sqrt(window_sum / np.minimum(samples_run, k_window)).T
    return Rollouts(
        ids=ids, status=out_status, end_time=out_end, settle_time=last_out, final_error=out_final.T,
        peak_input=U4[:, 0].T, rms_input=np.sqrt(U4[:, 2] / samples_run).T, peak_request=U4[:, 1].T,
        saturated_time=(U4[:, 3] * Ts).T, peak_speed=out_x[:nq].T, peak_rail=out_x[nq],
        peak_monitors=out_x[nq + 1:nq + 6].T, peak_force=out_x[nq + 6], hold_error=out_x[nq + 8:].T,
        substeps=nsub, step=h,
        times=np.arange(n_samples + 1) * Ts if setup.record else None,
        states=rec_x if setup.record else None, inputs=rec_u if setup.record else None,
        rms_input_window=rms_window)
