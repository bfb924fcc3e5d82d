"""Initial guesses for the swing-up NLP.

IPOPT from a poor guess is fragile on this problem: from a straight interpolation it often stops at "infeasible"
for limits that are in fact feasible. The planner therefore tries several guesses in turn:

- :func:`interpolation_guess` — the positions move along a smoothstep from start to goal, the speeds are its
  derivative, the inputs are zero (a "cold" start);
- :func:`random_guess` — the same plus a few random, smooth, seeded sine modes on every position and input, each
  vanishing at both ends (a "restart");
- :func:`rollout_guess` — the states of a simulation under a feedback law (energy pumping), blended into the
  goal over the last quarter;
- :func:`resampled_guess` — a previous plan read on a new mesh (continuation, warm starts, mesh refinement).

:func:`energy_pumping_law` supplies a law for the rollout when the caller gives none.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from upswing.model.dynamics import RigModel
from upswing.synthesis.swingup.collocation import Guess
from upswing.synthesis.swingup.plan import SwingUpPlan, interpolate

Law = Callable[[float, np.ndarray], np.ndarray]


def _smoothstep(tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """s(tau) = 3 tau^2 - 2 tau^3 and ds/dtau: rest at both ends."""
    return 3 * tau**2 - 2 * tau**3, 6 * tau - 6 * tau**2


def _positions_to_guess(q: np.ndarray, dq_dtau: np.ndarray, u: np.ndarray, duration: float) -> Guess:
    """States from positions q(tau) and their tau-derivatives on nodes and midpoints interleaved (2N+1 rows).

    Even rows are nodes, odd rows midpoints.
    """
    x = np.hstack([q, dq_dtau / duration])
    return Guess(x=x[0::2], u=u[0::2], u_mid=u[1::2], duration=duration, x_mid=x[1::2])


def _fine(mesh: np.ndarray) -> np.ndarray:
    """Nodes and midpoints interleaved: tau_0, tau_c0, tau_1, ..., tau_N (2N+1 points)."""
    fine = np.empty(2 * len(mesh) - 1)
    fine[0::2] = mesh
    fine[1::2] = 0.5 * (mesh[:-1] + mesh[1:])
    return fine


def interpolation_guess(mesh: np.ndarray, duration: float, start: np.ndarray, goal: np.ndarray,
                        n_inputs: int) -> Guess:
    """Positions along a smoothstep from ``start`` to ``goal``, consistent speeds, zero inputs.

    Parameters
    ----------
    mesh : ndarray, shape (N+1,)
        Fractions of the duration.
    duration : float
        [s]
    start, goal : ndarray, shape (n_states,)
    n_inputs : int
    """
    n_q = len(start) // 2
    tau = _fine(mesh)
    s, ds = _smoothstep(tau)
    q = start[:n_q] + np.outer(s, goal[:n_q] - start[:n_q])
    dq = np.outer(ds, goal[:n_q] - start[:n_q])
    return _positions_to_guess(q, dq, np.zeros((len(tau), n_inputs)), duration)


def random_guess(rng: np.random.Generator, mesh: np.ndarray, duration: float, start: np.ndarray, goal: np.ndarray,
                 limit: np.ndarray, position_scale: np.ndarray, *, modes: int = 3) -> Guess:
    """The interpolation guess plus random smooth excursions that vanish at both ends.

    Each position gets sum_j a_j sin(j pi tau), j = 1..modes, with a_j ~ N(0, (position_scale / j)^2); each input
    gets the same with amplitude limit / 2. The speeds are the exact derivatives.

    Parameters
    ----------
    rng : numpy.random.Generator
        Seeded by the caller (the plan's ``seed``), so restarts are reproducible.
    position_scale : ndarray, shape (n_q,)
        Typical excursion of each position [rad or m].
    """
    n_q = len(start) // 2
    tau = _fine(mesh)
    s, ds = _smoothstep(tau)
    q = start[:n_q] + np.outer(s, goal[:n_q] - start[:n_q])
    dq = np.outer(ds, goal[:n_q] - start[:n_q])
    u = np.zeros((len(tau), len(limit)))
    for j in range(1, modes + 1):
        a = rng.normal(size=n_q) * position_scale / j
        q = q + np.outer(np.sin(j * np.pi * tau), a)
        dq = dq + np.outer(j * np.pi * np.cos(j * np.pi * tau), a)
        u = u + np.outer(np.sin(j * np.pi * tau), rng.normal(size=len(limit)) * 0.5 * limit / j)
    return _positions_to_guess(q, dq, np.clip(u, -limit, limit), duration)


def rollout_guess(model: RigModel, p: np.ndarray, law: Law, mesh: np.ndarray, duration: float, start: np.ndarray,
                  goal: np.ndarray, limit: np.ndarray, *, steps_per_interval: int = 8) -> Guess:
    """Simulate ``law`` from ``start`` (RK4, input saturated at ``limit``) and blend the end into ``goal``.

    Over the last quarter of the horizon the state is moved smoothly from the rollout to ``goal`` (weights of a
    smoothstep), so the guess meets both boundary conditions; the inputs are the law's.

    Parameters
    ----------
    law : callable
        ``u = law(t, x)`` [N m or N].
    steps_per_interval : int
        RK4 steps between two guess points (accuracy is secondary: this is only a guess).
    """
    n_q = len(start) // 2
    tau = _fine(mesh)
    times = tau * duration
    x = np.empty((len(tau), len(start)))
    u = np.empty((len(tau), len(limit)))
    state = np.array(start, dtype=float)

    def f(t: float, xs: np.ndarray) -> np.ndarray:
        return model.rhs(xs, np.clip(law(t, xs), -limit, limit), p)

    for i, t_i in enumerate(times):
        x[i] = state
        u[i] = np.clip(law(t_i, state), -limit, limit)
        if i + 1 == len(times):
            break
        dt = (times[i + 1] - t_i) / steps_per_interval
        t = t_i
        for _ in range(steps_per_interval):
            k1 = f(t, state)
            k2 = f(t + dt / 2, state + dt / 2 * k1)
            k3 = f(t + dt / 2, state + dt / 2 * k2)
            k4 = f(t + dt, state + dt * k3)
            state = state + dt / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
            t += dt
        if not np.all(np.isfinite(state)):
            state = x[i].copy()
    # Shift the goal by whole turns to the ones nearest the rollout's end, then blend.
    goal = nearest_goal(goal, x[-1], n_q)
    weight, _ = _smoothstep(np.clip((tau - 0.75) / 0.25, 0.0, 1.0))
    blended = x + weight[:, None] * (goal - x[-1])
    blended[:, n_q:] = x[:, n_q:] * (1 - weight[:, None])
    return Guess(x=blended[0::2], u=u[0::2], u_mid=u[1::2], duration=duration, x_mid=blended[1::2])


def nearest_goal(goal: np.ndarray, state: np.ndarray, n_q: int) -> np.ndarray:
    """``goal`` with each angle moved by whole turns to the one nearest ``state``'s (the cart position is kept)."""
    shifted = np.array(goal, dtype=float)
    first_angle = n_q - 2
    for i in range(first_angle, n_q):
        shifted[i] = goal[i] + 2 * np.pi * np.round((state[i] - goal[i]) / (2 * np.pi))
    return shifted


def resampled_guess(plan: SwingUpPlan, mesh: np.ndarray, duration: float | None = None) -> Guess:
    """A previous plan read on a new mesh (and, optionally, stretched to a new duration)."""
    T = plan.duration if duration is None else duration
    tau = _fine(mesh)
    x, u = interpolate(plan.scheme, plan.t, plan.x, plan.x_dot, plan.u, plan.u_mid, tau * plan.duration)
    x = np.array(x)
    n_q = x.shape[1] // 2
    x[:, n_q:] *= plan.duration / T  # same path, new pace
    return Guess(x=x[0::2], u=u[0::2], u_mid=u[1::2], duration=T, x_mid=x[1::2])


def energy_pumping_law(model: RigModel, p: np.ndarray, start: np.ndarray, goal: np.ndarray, limit: np.ndarray,
                       speed_index: tuple[int, ...]) -> Law | None:
    """A plain energy-pumping law for fixed-base rigs, used only to make a rollout guess.

    With E the total energy and E* its value at upright rest, the power the motors put in is sum_j u_j w_j (w_j
    the speed of the joint input j drives), so u_j = sat(k (E* - E) w_j) makes E approach E* while friction is
    small: the passivity argument behind energy-based swing-up (Åström & Furuta 2000, *Automatica* 36(2); Spong
    1995, *IEEE Control Systems* 15(1)). A push at half the limit during the first 0.1 s leaves a rest state,
    where w = 0. The gain k reaches the limit at a joint speed of 2 rad/s with the starting energy deficit.

    Returns ``None`` on a cart rig: pumping the total energy there mostly speeds the cart toward an end stop.
    """
    if model.base == "cart":
        return None

    def energy(x: np.ndarray) -> float:
        return float(np.asarray(model.energy(x, p))[2, 0])

    target = energy(goal)
    gain = limit / (2.0 * max(target - energy(start), 1e-3 * abs(target) + 1e-9))
    index = list(speed_index)

    def law(t: float, x: np.ndarray) -> np.ndarray:
        u = gain * (target - energy(x)) * x[index]
        return u + 0.5 * limit if t < 0.1 else u

    return law
