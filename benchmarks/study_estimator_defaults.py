"""Study: which velocity-estimator setting holds the demo rigs best in the nonlinear batch engine.

For every demo rig in ``scenarios/`` and every setting below, the rig's own balance LQR runs with quantized, noisy
encoders in the batch simulator under the rig's ``[uncertainty]`` spreads (Monte Carlo, seeded, the same draws for
every setting), and the script prints per setting:

* held: rollouts that held (``upswing.verification.simulate``'s definition), and the lower end of the 95 % Wilson
  interval of the success rate (what the verdict is judged on);
* residual motion: the 99th percentile over the held rollouts of the largest |angle error| in the final second
  [rad] (friction hunting; larger means the loop lets the links wander more), and the same for the joint rates
  [rad/s] (noise-driven jitter);
* effort: the median RMS input over the run [N m or N] (estimator noise that reaches the motor, "chatter");
* disk: the smallest disk margin alpha over the inputs of the linear loop with this estimator
  (``upswing.synthesis.margins``; larger is more robust).

Settings: the Kalman filter of ``upswing.synthesis.estimation`` with the joints' process noise sigma_a in
:data:`JOINT_NOISE` [rad/s^2] (the cart's at its default), then on cart rigs the cart's in :data:`CART_NOISE`
[m/s^2] (joints at their default), and the filtered finite difference at its default cut-off (loop rate / 10).

Run:  PYTHONPATH=src python benchmarks/study_estimator_defaults.py [--rollouts N] [--seed S] [--rigs a,b]
A full run (1000 rollouts, 4 rigs, 11 settings) takes a few minutes on 2 cores.
"""

from __future__ import annotations

import argparse
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

from upswing.model.rig import Rig, load_rig
from upswing.synthesis.balance import design_balance
from upswing.synthesis.estimation import EstimatorDesign, finite_difference_estimator, kalman_estimator
from upswing.synthesis.margins import balance_margins
from upswing.verification.controllers import balance_controller
from upswing.verification.montecarlo import run_monte_carlo
from upswing.verification.simulate import SimulationSetup

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
DEMO_RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")
JOINT_NOISE = (0.5, 1.5, 5.0, 15.0, 50.0)  # rad/s^2
CART_NOISE = (0.3, 1.0, 3.0, 10.0)  # m/s^2


def evaluate(rig: Rig, estimator: EstimatorDesign, design, rollouts: int, seed: int) -> dict[str, float]:
    controller = balance_controller(rig, design=design, estimator=estimator)
    mc = run_monte_carlo(rig, controller, rollouts, seed=seed, setup=SimulationSetup(horizon=5.0))
    res = mc.results
    nq = rig.n_states // 2
    angles = res.hold_error[:, nq - 2:nq].max(axis=1)
    held = res.held
    margins = balance_margins(design, (estimator,))
    key = "discrete_kalman" if estimator.kind == "kalman" else "discrete_finite_difference"
    rates = res.hold_error[:, -2:].max(axis=1)
    return {"held": mc.successes, "n": mc.rollouts, "low": mc.success_interval[0],
            "hunt99": float(np.quantile(angles[held], 0.99)) if held.any() else float("nan"),
            "jitter99": float(np.quantile(rates[held], 0.99)) if held.any() else float("nan"),
            "effort": float(np.median(res.rms_input.max(axis=1))),
            "disk": min(lm.disk_margin for lm in margins[key].loops),
            "outcomes": ", ".join(f"{k} {v}" for k, v in mc.outcomes.items() if k != "held")}


def settings_for(rig: Rig, joint_noise: tuple[float, ...], cart_noise: tuple[float, ...]
                 ) -> list[tuple[str, Rig, str]]:
    out = [(f"kalman joints {s:g}", replace(rig, balance=replace(rig.balance, process_noise=s)), "kalman")
           for s in joint_noise]
    if rig.cart is not None:
        out += [(f"kalman cart {s:g}", replace(rig, balance=replace(rig.balance, cart_process_noise=s)), "kalman")
                for s in cart_noise]
    out.append(("finite difference", rig, "finite-difference"))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rollouts", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--rigs", default=",".join(DEMO_RIGS))
    parser.add_argument("--joint-noise", default=",".join(f"{v:g}" for v in JOINT_NOISE),
                        help="comma-separated joint process noise values [rad/s^2]")
    parser.add_argument("--cart-noise", default=",".join(f"{v:g}" for v in CART_NOISE),
                        help="comma-separated cart process noise values [m/s^2]")
    args = parser.parse_args()
    joint = tuple(float(v) for v in args.joint_noise.split(",") if v)
    cart = tuple(float(v) for v in args.cart_noise.split(",") if v)
    start = time.perf_counter()
    for name in args.rigs.split(","):
        rig = load_rig(SCENARIOS / f"{name}.toml")
        design = design_balance(rig)
        print(f"\n{name} ({rig.source}): {args.rollouts} rollouts, seed {args.seed}")
        print(f"  {'setting':24s} {'held':>10s} {'Wilson low':>10s} {'hunt p99':>9s} {'jitter':>7s} "
              f"{'effort':>8s} {'disk':>6s}  other outcomes")
        for label, variant, kind in settings_for(rig, joint, cart):
            est = (kalman_estimator(variant, design) if kind == "kalman"
                   else finite_difference_estimator(variant, design))
            r = evaluate(variant, est, design, args.rollouts, args.seed)
            print(f"  {label:24s} {r['held']:>5d}/{r['n']:<4d} {r['low']:10.4f} {r['hunt99']:9.4f} "
                  f"{r['jitter99']:7.3f} {r['effort']:8.4g} {r['disk']:6.3f}  {r['outcomes']}", flush=True)
    print(f"\n{time.perf_counter() - start:.0f} s in all")


if __name__ == "__main__":
    main()
