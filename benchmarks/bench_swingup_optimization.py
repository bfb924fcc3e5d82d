"""Benchmark of swing-up trajectory optimization against the targets of issue 5.

Run from the repository root::

    PYTHONPATH=src python benchmarks/bench_swingup_optimization.py            # full run, a few minutes
    PYTHONPATH=src python benchmarks/bench_swingup_optimization.py --quick    # smoke run, no SLSQP baseline

What it measures, in one process:

1. IPOPT's one-off load time (first solve in the process), reported apart.
2. Demo acrobot, Hermite–Simpson, 100 intervals, default duration, the rig's peak: build and solve time of the
   cold solve (median over repeats; wall and processor time), and the whole ``plan_swingup`` call with the mesh
   check and refinement. Targets: build < 0.2 s, solve < 0.3 s.
3. Demo cart rig, same: build + solve < 1 s.
4. Motor sizing on the acrobot at that duration, then a sweep of 10 limits from 3x down to 1.1x the sized minimum:
   the automatic strategy (target: succeeds at every one) beside cold starts alone.
5. A scipy SLSQP single-shooting baseline (25 piecewise-constant inputs, RK4 rollouts batched with the model's
   mapped right-hand side, forward-difference constraint Jacobians, at most 300 iterations) on the same problems,
   with the ratio of its time to ``plan_swingup``'s (target >= 100x where it converges at all).

Wall times on a machine shared with other jobs are noisy; the processor times (IPOPT's own, and
``time.process_time`` for the baseline) are printed beside them.
"""

from __future__ import annotations

import argparse
import statistics
import time
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import load_rig
from upswing.synthesis.swingup import default_duration, plan_swingup, size_motor
from upswing.synthesis.swingup.sizing import FULL_LIMITS

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def _rig(name):
    return load_rig(SCENARIOS / f"{name}.toml")


def _median(values):
    return statistics.median(values) if values else float("nan")


def ipopt_load_time() -> float:
    started = time.perf_counter()
    plan_swingup(_rig("pendubot"), intervals=8, strategies=("cold",), max_refinements=0)
    return time.perf_counter() - started


def cold_timing(name: str, repeats: int) -> dict:
    rig = _rig(name)
    builds, solves, cpus, iterations, totals, statuses = [], [], [], [], [], []
    for _ in range(repeats):
        plan = plan_swingup(rig, intervals=100, strategies=("cold",), max_refinements=0)
        first = plan.attempts[0]
        builds.append(first.build_s)
        solves.append(first.solve_s)
        cpus.append(first.cpu_s)
        iterations.append(first.iterations)
        statuses.append(first.solver_status)
        started = time.perf_counter()
        full = plan_swingup(rig, intervals=100)
        totals.append(time.perf_counter() - started)
    return {"rig": name, "build": _median(builds), "solve": _median(solves), "cpu": _median(cpus),
            "iterations": _median(iterations), "status": max(set(statuses), key=statuses.count),
            "full": _median(totals), "full_success": full.success, "full_intervals": full.intervals,
            "full_error": full.max_interval_error, "duration": full.duration}


def sweep(rig, duration: float, minimum: float, count: int = 10) -> list[dict]:
    rows = []
    for multiple in np.geomspace(3.0, 1.1, count):
        limit = multiple * minimum
        started = time.perf_counter()
        # the limits the sizing planned to (full peak and max_speed): the sized minimum is reachable only there,
        # not within the rig file's plan_speed_share
        cold = plan_swingup(rig, duration=duration, intervals=100, peak=limit, strategies=("cold",), **FULL_LIMITS)
        cold_s = time.perf_counter() - started
        started = time.perf_counter()
        auto = plan_swingup(rig, duration=duration, intervals=100, peak=limit, **FULL_LIMITS)
        auto_s = time.perf_counter() - started
        rows.append({"multiple": multiple, "limit": limit, "cold": cold.success,
                     "cold_status": cold.attempts[0].solver_status, "cold_s": cold_s, "auto": auto.success,
                     "auto_s": auto_s, "solves": len(auto.attempts), "strategy": auto.strategy})
    return rows


# ----------------------------------------------------------------------------------------------------------------
# The baseline: single shooting with SLSQP


class SingleShooting:
    """min sum_j h u_j^2 / peak^2 s.t. x(T) = goal, |u_j| <= limit, u piecewise constant on 25 intervals.

    Rollouts use RK4 with 16 steps per interval; the constraint Jacobian is forward differences, all perturbed
    rollouts integrated at once through the model's mapped right-hand side.
    """

    def __init__(self, rig, duration: float, limit: float, segments: int = 25, steps: int = 16) -> None:
        self.model = model_for(rig, coulomb_smoothing=0.2)
        self.p = rig.parameter_vector()
        self.start = equilibrium_state(rig, "hanging")
        self.goal = equilibrium_state(rig, "upright")
        self.peak = rig.peak_inputs[0]
        self.limit = limit
        self.segments, self.steps = segments, steps
        self.h = duration / segments
        self.rollouts = 0

    def final_states(self, U: np.ndarray) -> np.ndarray:
        """End states of many input sequences at once: U (K, segments) -> (K, n_states)."""
        K = U.shape[0]
        x = np.repeat(self.start[None, :], K, axis=0)
        dt = self.h / self.steps
        for j in range(self.segments):
            u = U[:, j:j + 1]
            for _ in range(self.steps):
                k1 = self.model.rhs_batch(x, u, self.p)
                k2 = self.model.rhs_batch(x + dt / 2 * k1, u, self.p)
                k3 = self.model.rhs_batch(x + dt / 2 * k2, u, self.p)
                k4 = self.model.rhs_batch(x + dt * k3, u, self.p)
                x = x + dt / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        self.rollouts += K
        return x

    def solve(self, max_iterations: int) -> dict:
        eps = 1e-6 * self.limit

        def objective(u):
            return float(self.h * np.sum(u**2) / self.peak**2)

        def objective_gradient(u):
            return 2 * self.h * u / self.peak**2

        def constraint(u):
            return self.final_states(u[None, :])[0] - self.goal

        def constraint_jacobian(u):
            batch = np.vstack([u, u + eps * np.eye(len(u))])
            ends = self.final_states(batch)
            return ((ends[1:] - ends[0]) / eps).T

        u0 = np.zeros(self.segments)
        wall, cpu = time.perf_counter(), time.process_time()
        result = minimize(objective, u0, jac=objective_gradient, method="SLSQP",
                          bounds=[(-self.limit, self.limit)] * self.segments,
                          constraints=[{"type": "eq", "fun": constraint, "jac": constraint_jacobian}],
                          options={"maxiter": max_iterations, "ftol": 1e-8})
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        violation = float(np.max(np.abs(constraint(result.x))))
        return {"converged": bool(result.success) and violation < 1e-4, "message": str(result.message),
                "iterations": int(result.nit), "wall": wall, "cpu": cpu, "violation": violation,
                "rollouts": self.rollouts}


def baseline(rig, duration: float, limit: float, max_iterations: int) -> dict:
    wall, cpu = time.perf_counter(), time.process_time()
    plan = plan_swingup(rig, duration=duration, peak=limit, **FULL_LIMITS)  # the baseline has no plan shares
    ours = {"wall": time.perf_counter() - wall, "cpu": time.process_time() - cpu, "success": plan.success,
            "strategy": plan.strategy}
    slsqp = SingleShooting(rig, duration, limit).solve(max_iterations)
    return {"limit": limit, "ours": ours, "slsqp": slsqp}


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats, no sweep, no SLSQP baseline")
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--slsqp-iterations", type=int, default=300)
    args = parser.parse_args(argv)
    repeats = 2 if args.quick else args.repeats

    print(f"IPOPT load (first solve in this process): {ipopt_load_time():.2f} s")
    print("\nCold solve, Hermite-Simpson, 100 intervals, default duration, rig peak "
          f"(median of {repeats}; wall [processor]):")
    for name, target in (("acrobot", "build < 0.2 s, solve < 0.3 s"), ("cart-double", "build + solve < 1 s")):
        r = cold_timing(name, repeats)
        print(f"  {r['rig']:12s} T = {r['duration']:.2f} s  build {r['build']:.3f} s  solve {r['solve']:.3f} s "
              f"[{r['cpu']:.3f} s]  build+solve {r['build'] + r['solve']:.3f} s  {r['iterations']:.0f} iterations "
              f"({r['status']})   target: {target}")
        print(f"  {'':12s} whole plan_swingup with mesh check/refinement: {r['full']:.2f} s, success "
              f"{r['full_success']}, {r['full_intervals']} intervals, max interval error {r['full_error']:.1e}")
    if args.quick:
        return

    rig = _rig("acrobot")
    duration = default_duration(rig)
    started = time.perf_counter()
    sizing = size_motor(rig, duration=duration, intervals=100)
    sizing_s = time.perf_counter() - started
    minimum = float(sizing.minimum_peak[0])
    print(f"\nSizing, acrobot, T = {duration:.2f} s: minimum elbow peak {minimum:.4f} N m "
          f"({sizing.minimum_factor:.4f} x rig peak); every strategy failed at {sizing.infeasible_below:.4f} x; "
          f"{len(sizing.trials)} trials in {sizing_s:.1f} s")
    print("\nSweep from 3x down to 1.1x the sized minimum (100 intervals):")
    print(f"  {'x min':>6} {'limit N m':>9} | {'cold':5} {'IPOPT status (cold)':28} {'s':>5} | {'auto':5} {'s':>5} "
          f"{'solves':>6}  strategy")
    rows = sweep(rig, duration, minimum)
    for row in rows:
        print(f"  {row['multiple']:6.2f} {row['limit']:9.4f} | {row['cold']!s:5} {row['cold_status']:28} "
              f"{row['cold_s']:5.1f} | {row['auto']!s:5} {row['auto_s']:5.1f} {row['solves']:6d}  {row['strategy']}")
    print(f"  automatic strategy: {sum(r['auto'] for r in rows)}/{len(rows)} succeeded; cold starts alone: "
          f"{sum(r['cold'] for r in rows)}/{len(rows)}")

    print(f"\nSLSQP single-shooting baseline (25 intervals, at most {args.slsqp_iterations} iterations), same process:")
    for limit in (float(rig.peak_inputs[0]), 1.5 * minimum):
        r = baseline(rig, duration, limit, args.slsqp_iterations)
        s, o = r["slsqp"], r["ours"]
        ratio_wall, ratio_cpu = s["wall"] / o["wall"], s["cpu"] / o["cpu"]
        verdict = "converged" if s["converged"] else f"did NOT converge ({s['message']})"
        bound = "" if s["converged"] else "at least "
        print(f"  limit {limit:.3f} N m: SLSQP {verdict}, {s['iterations']} iterations, {s['rollouts']} rollouts, "
              f"{s['wall']:.1f} s [{s['cpu']:.1f} s], terminal error {s['violation']:.1e}")
        print(f"  {'':18s}plan_swingup: success {o['success']}, {o['wall']:.2f} s [{o['cpu']:.2f} s] "
              f"({o['strategy']}); ratio {bound}{ratio_wall:.0f}x wall, {bound}{ratio_cpu:.0f}x processor")


if __name__ == "__main__":
    main()
