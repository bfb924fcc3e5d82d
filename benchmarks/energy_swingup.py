"""How often the energy-based swing-up laws swing the demo rigs up and hand over to balance, and how fast the
batched law evaluation is against a one-state-at-a-time loop.

Study, not a test (it takes a minute or two on a shared 2-core machine): for each demo rig, N starts near hanging
(link 1 offset uniform in [-0.1, 0.1] rad, seed fixed), the rig's energy law with its default gains, saturation at
peak, 500 Hz sample-and-hold, then the discrete balance LQR once (x - x_eq)' P (x - x_eq) <= rho_in (with
hysteresis). The plant is integrated by RK4 at 4 substeps per sample (2 kHz; within ~2e-8 of DOP853 on such runs,
docs' measured lessons), vectorized over the starts, with Coulomb friction smoothed as tanh(v / 0.05).

rho_in per rig stands in for the verification engine's region-of-attraction estimate; a run counts as a success
when it is caught and still within 0.3 rad of upright over its last second (and the cart within its travel).

Usage: PYTHONPATH=src python benchmarks/energy_swingup.py [--starts N] [--duration S]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from upswing.model.batched import bias_batch, friction_batch, mass_matrix_batch
from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state, state_error
from upswing.model.rig import load_rig
from upswing.synthesis.balance import design_balance
from upswing.synthesis.swingup.energy import energy_law_params, energy_swingup_input
from upswing.synthesis.swingup.tracking import handover_rule

RIGS = {"acrobot": 2000.0, "pendubot": 1000.0, "cart-double": 50.0}  # rig -> rho_in stand-in
SMOOTHING = 0.05


def batch_rhs(X, U, p, base, S):
    n_q = X.shape[1] // 2
    M = mass_matrix_batch(X, p, base)
    rest = U @ S.T + friction_batch(X, p, base, coulomb_smoothing=SMOOTHING) - bias_batch(X, p, base)
    return np.concatenate([X[:, n_q:], np.linalg.solve(M, rest[..., None])[..., 0]], axis=1)


def study(name: str, rho: float, starts: int, duration: float) -> dict:
    rig = load_rig(f"scenarios/{name}.toml")
    params = energy_law_params(rig)
    rule = handover_rule(rig, rho)
    design = design_balance(rig, delay_samples=0)
    p, S, base = rig.parameter_vector(), model_for(rig).input_map, rig.base
    rate = rig.balance.sample_rate
    h = 1.0 / rate / 4
    rng = np.random.default_rng(2024)
    X = np.tile(equilibrium_state(rig, "hanging"), (starts, 1))
    X[:, 1 if base == "cart" else 0] += rng.uniform(-0.1, 0.1, starts)
    balancing = np.zeros(starts, bool)
    caught = np.full(starts, np.nan)
    angles = [i for i, s in enumerate(rig.state_names) if s in ("theta1", "theta2")]
    n_steps = int(round(duration * rate))
    last_second = np.zeros(starts)
    max_cart = np.zeros(starts)
    for k in range(n_steps):
        balancing = rule.update(X, balancing)
        caught[balancing & np.isnan(caught)] = k / rate
        U = energy_swingup_input(X, params)
        if balancing.any():
            U[balancing] = -(state_error(rig, X[balancing], design.x_eq) @ design.K_discrete.T)
        U = np.clip(U, -rig.peak_inputs, rig.peak_inputs)
        for _ in range(4):
            k1 = batch_rhs(X, U, p, base, S)
            k2 = batch_rhs(X + h / 2 * k1, U, p, base, S)
            k3 = batch_rhs(X + h / 2 * k2, U, p, base, S)
            k4 = batch_rhs(X + h * k3, U, p, base, S)
            X = X + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        if base == "cart":
            max_cart = np.maximum(max_cart, np.abs(X[:, 0]))
        if k >= n_steps - rate:
            err = np.abs(state_error(rig, X, design.x_eq)[:, angles]).max(axis=1)
            last_second = np.maximum(last_second, err)
    ok = np.isfinite(caught) & (last_second < 0.3)
    if base == "cart":
        ok &= max_cart < rig.cart.travel
    return {"rig": name, "rho_in": rho, "starts": starts, "success": int(ok.sum()),
            "catch_times": np.round(caught[ok], 1).tolist()}


def evaluation_speed(name: str, n: int = 2000) -> tuple[float, float]:
    """Seconds per state: the batched law on n states, and the same law called once per state."""
    rig = load_rig(f"scenarios/{name}.toml")
    params = energy_law_params(rig)
    X = np.random.default_rng(0).normal(size=(n, rig.n_states))
    t0 = time.perf_counter()
    energy_swingup_input(X, params)
    batched = (time.perf_counter() - t0) / n
    t0 = time.perf_counter()
    for x in X[:200]:
        energy_swingup_input(x[None], params)
    single = (time.perf_counter() - t0) / 200
    return batched, single


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--starts", type=int, default=16)
    parser.add_argument("--duration", type=float, default=20.0)
    args = parser.parse_args()
    for name, rho in RIGS.items():
        t0 = time.perf_counter()
        result = study(name, rho, args.starts, args.duration)
        print(f"{name:12s} rho_in {rho:6g}: {result['success']:2d}/{result['starts']} caught and held within "
              f"{args.duration:g} s; catch times {result['catch_times']} s  ({time.perf_counter() - t0:.0f} s wall)")
    for name in RIGS:
        batched, single = evaluation_speed(name)
        print(f"{name:12s} law evaluation: batched {batched * 1e6:.1f} us/state, one at a time "
              f"{single * 1e6:.0f} us/state, ratio {single / batched:.0f}x")


if __name__ == "__main__":
    main()
