"""Region of attraction of the balance controller, estimated by simulation under the real constraints.

The candidate regions are the level sets {x : (x - x_eq)' P (x - x_eq) <= rho} of the discrete LQR cost-to-go
(P = the leading state block of ``BalanceDesign.P_discrete``). The estimate is the largest rho for which every
simulated start inside the set was held (saturation, sampling, delay, encoder quantization and noise, friction all
on, nominal parameters):

1. boundary-heavy sampling: starts on the surfaces x' P x = rho for rho log-uniform over four decades below
   rho_max (the level set that reaches the fall bound along some angle axis), directions uniform in the whitened
   coordinates; rho_hat = the smallest rho of any failed start;
2. refinement: more starts on surfaces with rho uniform in [rho_hat / 2, rho_hat); any failure lowers rho_hat;
   repeated until a round finds no failure (at most :data:`ROUNDS` rounds).

It is a simulation-based estimate, not a proof: a set that passed every sampled start may still hold a failing
start between them; the number of starts behind it is reported. Besides the ellipsoid, the catchable range along
each state axis (offset along one axis, the others at upright) is found on a grid refined between the last held
and the first failed offset, and two 2-D slices (theta1 x theta2 and the velocity pair, others at upright) are mapped
for plots.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import Rig
from upswing.synthesis.balance import BalanceDesign
from upswing.verification.controllers import Controller
from upswing.verification.parallel import run_rollouts
from upswing.verification.simulate import SimulationSetup

STREAM = 2
ROUNDS = 3
DECADES = 4.0


@dataclass(frozen=True)
class Slice:
    """A 2-D map of held (1) and failed (0) starts; ``held[i][j]`` is at (x_values[j], y_values[i])."""

    x_state: str
    y_state: str
    x_values: np.ndarray
    y_values: np.ndarray
    held: np.ndarray


@dataclass(frozen=True)
class RegionOfAttraction:
    """Simulation-based estimate of the balance controller's region of attraction.

    Attributes
    ----------
    rho : float
        Largest level of x' P x found with every sampled start inside held (0 when even the smallest failed).
    samples : int
        Simulated starts inside that level set (all held).
    samples_total : int
        All starts simulated for the estimate (incl. failed and outside ones, axes and slices).
    rho_max : float
        Largest level sampled.
    level_set_extents : dict
        Half-width of the level set along each state axis, sqrt(rho (P^-1)_ii) [rad, m, rad/s, m/s].
    axis_catch : dict
        Per state: [most negative, most positive] offset along that axis alone that was still held.
    slices : tuple of Slice
    P : ndarray
    method : str
    """

    rho: float
    samples: int
    samples_total: int
    rho_max: float
    level_set_extents: dict[str, float]
    axis_catch: dict[str, tuple[float, float]]
    slices: tuple[Slice, ...]
    P: np.ndarray
    method: str
    simulate_s: float


def axis_limits(rig: Rig, angle_bound: float) -> np.ndarray:
    """Largest offset tried along each axis: the fall bound for angles, the rail for the cart, and for rates the
    speed a link reaches falling from upright through a quarter turn, sqrt(2 g / lc)-sized (common practice)."""
    rate = 2.0 * math.sqrt(2.0 * rig.gravity / min(rig.link1.com, rig.link2.com))
    out = []
    for s in rig.state_names:
        if s == "x":
            out.append(rig.cart.travel)
        elif s == "x_dot":
            out.append(max(a.max_speed for a in rig.actuators if a.joint == "cart") if "cart" in rig.actuated
                       else 1.0)
        elif s.endswith("_dot"):
            out.append(rate)
        else:
            out.append(angle_bound)
    return np.array(out)


def estimate_region(rig: Rig, controller: Controller, design: BalanceDesign, *, seed: int = 0,
                    setup: SimulationSetup | None = None, samples: int = 1500, grid: int = 24, slice_points: int = 25,
                    workers: int | None = None, scheduler: str | None = None,
                    progress: bool = False) -> RegionOfAttraction:
    """Estimate the region of attraction (see the module docstring).

    Parameters
    ----------
    samples : int
        Starts in the first round; each refinement round uses a third as many.
    grid : int
        Offsets per axis direction on the first axis grid (a quarter as many refine it).
    slice_points : int
        Points per side of each 2-D slice.
    """
    setup = SimulationSetup(horizon=4.0) if setup is None else setup
    n = rig.n_states
    x_eq = equilibrium_state(rig, "upright")
    P = np.asarray(design.P_discrete)[:n, :n]
    P = 0.5 * (P + P.T)
    Pinv_diag = np.diag(np.linalg.inv(P))
    R = np.linalg.cholesky(P).T  # P = R' R: x = R^-1 u sqrt(rho) for |u| = 1
    angle_bound = setup.bounds.angle if setup.bounds.angle is not None else math.pi / 2
    limits = axis_limits(rig, angle_bound)
    angles = [i for i, s in enumerate(rig.state_names) if s in ("theta1", "theta2")]
    rho_max = float(min(limits[i] ** 2 / Pinv_diag[i] for i in angles))
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(STREAM, 0)))
    nominal = rig.parameter_vector()
    seconds = 0.0
    block_seed = 0

    def run(x0: np.ndarray) -> np.ndarray:
        nonlocal seconds, block_seed
        params = np.tile(nominal, (x0.shape[0], 1))
        res, dt = run_rollouts(rig, controller, x0 + x_eq, params, setup=setup, seed=seed,
                               stream=STREAM * 100 + block_seed, workers=workers, scheduler=scheduler,
                               progress=progress)
        block_seed += 1
        seconds += dt
        return res.held

    def shell(levels: np.ndarray) -> np.ndarray:
        u = rng.standard_normal((levels.size, n))
        u /= np.linalg.norm(u, axis=1, keepdims=True)
        return np.linalg.solve(R, u.T).T * np.sqrt(levels)[:, None]

    levels = rho_max * 10.0 ** (-DECADES * rng.uniform(0.0, 1.0, samples))
    held = run(shell(levels))
    all_levels, all_held = [levels], [held]
    rho = float(levels[~held].min()) if np.any(~held) else rho_max
    for _ in range(ROUNDS):
        extra = rng.uniform(0.5 * rho, rho, max(samples // 3, 1))
        held_extra = run(shell(extra))
        all_levels.append(extra)
        all_held.append(held_extra)
        if np.all(held_extra):
            break
        rho = min(rho, float(extra[~held_extra].min()))
    levels_all = np.concatenate(all_levels)
    held_all = np.concatenate(all_held)
    inside = levels_all < rho
    samples_inside = int(np.sum(inside & held_all))
    total = levels_all.size

    # --- catchable range along each axis: a grid, then a finer grid between the last held and first failed ----
    tested: dict[tuple[int, float], list[tuple[float, bool]]] = {}
    fractions = np.arange(1, grid + 1) / grid
    starts, keys = [], []
    for i in range(n):
        for sign in (-1.0, 1.0):
            for f in fractions:
                starts.append(f * limits[i])
                keys.append((i, sign))

    def run_axis(magnitudes: list[float], where: list[tuple[int, float]]) -> None:
        x0 = np.zeros((len(magnitudes), n))
        for row, (a, (i, sign)) in enumerate(zip(magnitudes, where, strict=True)):
            x0[row, i] = sign * a
        for a, key, ok in zip(magnitudes, where, run(x0), strict=True):
            tested.setdefault(key, []).append((a, bool(ok)))

    def caught(key: tuple[int, float]) -> tuple[float, float | None]:
        """Largest magnitude with every smaller tested one held, and the first failed one."""
        best = 0.0
        for a, ok in sorted(tested[key]):
            if not ok:
                return best, a
            best = a
        return best, None

    run_axis(starts, keys)
    refine, refine_keys = [], []
    for key in tested:
        low, high = caught(key)
        if high is not None:
            for a in np.linspace(low, high, max(grid // 4, 2) + 2)[1:-1]:
                refine.append(float(a))
                refine_keys.append(key)
    if refine:
        run_axis(refine, refine_keys)
    catch = {s: (-caught((i, -1.0))[0], caught((i, 1.0))[0]) for i, s in enumerate(rig.state_names)}
    total += len(starts) + len(refine)

    # --- 2-D slices ----------------------------------------------------------------------------------------------
    slices = []
    names = rig.state_names
    pairs = [("theta1", "theta2"), ("theta1_dot", "theta2_dot")]
    for a, b in pairs:
        ia, ib = names.index(a), names.index(b)
        span_a = min(limits[ia], 2.0 * max(abs(catch[a][0]), catch[a][1], 1e-3))
        span_b = min(limits[ib], 2.0 * max(abs(catch[b][0]), catch[b][1], 1e-3))
        xa = np.linspace(-span_a, span_a, slice_points)
        xb = np.linspace(-span_b, span_b, slice_points)
        A, B = np.meshgrid(xa, xb)
        x0 = np.zeros((A.size, n))
        x0[:, ia] = A.ravel()
        x0[:, ib] = B.ravel()
        slices.append(Slice(a, b, xa, xb, run(x0).reshape(A.shape).astype(int)))
        total += A.size
    extents = {s: float(math.sqrt(rho * Pinv_diag[i])) for i, s in enumerate(names)}
    return RegionOfAttraction(
        rho=rho, samples=samples_inside, samples_total=total, rho_max=rho_max, level_set_extents=extents,
        axis_catch=catch, slices=tuple(slices), P=P,
        method="simulation-based estimate: largest level set of the discrete LQR cost-to-go x'Px in which every "
               "sampled start was held (nominal parameters; saturation, sampling, delay, quantization, noise and "
               "friction on); not a proof",
        simulate_s=seconds)
