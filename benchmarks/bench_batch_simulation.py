"""Benchmark: the same closed loop three ways, ratios printed; then 100,000 rollouts x 5 s, wall and peak memory.

Closed loop: the demo acrobot's discrete balance LQR (exact state feedback), saturation at peak, sample-and-hold at
500 Hz, 5 s horizon, small random offsets, Coulomb friction off (so that scipy's adaptive integrator is not
dominated by the sign switch and all three solve the same smooth problem).

(a) the naive loop a user would write: one rollout at a time, scipy solve_ivp RK45 (rtol 1e-6) between samples;
(b) upswing's batch engine (RK4 at 2 kHz = 4 steps per sample, local process pool);
(c) a compiled reference built here and not shipped: a plain C RK4 loop of the same model (one rollout at a time,
    scalar libm sin/cos, gcc -O2, OpenMP over rollouts on the same cores); numba's scalar loop if gcc is missing.

Last, 100,000 rollouts x 5 s twice: at the fixed 2 kHz step, and at the step ``upswing verify`` uses for this rig
after its step-doubling accuracy check.

Run:  PYTHONPATH=src python benchmarks/bench_batch_simulation.py [--quick]
Times are wall times on this machine under whatever else runs on it; only ratios from one process mean much.
"""

from __future__ import annotations

import argparse
import ctypes
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from upswing.model.dynamics import model_for
from upswing.model.rig import PARAMETER_NAMES, load_rig
from upswing.synthesis.balance import design_balance
from upswing.verification.controllers import balance_controller
from upswing.verification.parallel import run_rollouts
from upswing.verification.simulate import Bounds, SimulationSetup
from upswing.verification.verdict import check_integration

RIG = Path(__file__).resolve().parents[1] / "scenarios" / "acrobot.toml"
RATE, HORIZON, SUBSTEPS = 500.0, 5.0, 4

C_SOURCE = r"""
#include <math.h>
/* Acrobot (fixed base, elbow torque), closed form as upswing.verification.kernels; RK4 with held input. */
static void f(const double *x, double tau2, const double *c, double *dx) {
    double s1 = sin(x[0]), c1 = cos(x[0]), s2 = sin(x[1]), c2 = cos(x[1]);
    double s12 = s1 * c2 + c1 * s2;
    double A0 = c[0], B = c[1], D = c[2], E1 = c[3], E2 = c[4], g = c[5], b1 = c[6], b2 = c[8];
    double a11 = A0 + 2 * B * c2, a12 = D + B * c2, h = B * s2, w1 = x[2], w2 = x[3];
    double r1 = -b1 * w1 + h * (2 * w1 * w2 + w2 * w2) + g * (E1 * s1 + E2 * s12);
    double r2 = tau2 - b2 * w2 - h * w1 * w1 + g * E2 * s12;
    double det = a11 * D - a12 * a12;
    dx[0] = w1; dx[1] = w2; dx[2] = (D * r1 - a12 * r2) / det; dx[3] = (a11 * r2 - a12 * r1) / det;
}
void run(int n, double *X, const double *c, const double *K, double peak, int samples, int nsub, double Ts) {
    double h = Ts / nsub;
    #pragma omp parallel for schedule(static)
    for (int i = 0; i < n; i++) {
        double *x = X + 4 * i, k1[4], k2[4], k3[4], k4[4], y[4];
        for (int s = 0; s < samples; s++) {
            double e0 = x[0] - 2 * M_PI * floor((x[0] + M_PI) / (2 * M_PI));
            double e1 = x[1] - 2 * M_PI * floor((x[1] + M_PI) / (2 * M_PI));
            double u = -(K[0] * e0 + K[1] * e1 + K[2] * x[2] + K[3] * x[3]);
            u = u > peak ? peak : (u < -peak ? -peak : u);
            for (int j = 0; j < nsub; j++) {
                f(x, u, c, k1); for (int q = 0; q < 4; q++) y[q] = x[q] + 0.5 * h * k1[q];
                f(y, u, c, k2); for (int q = 0; q < 4; q++) y[q] = x[q] + 0.5 * h * k2[q];
                f(y, u, c, k3); for (int q = 0; q < 4; q++) y[q] = x[q] + h * k3[q];
                f(y, u, c, k4); for (int q = 0; q < 4; q++) x[q] += h / 6 * (k1[q] + 2 * k2[q] + 2 * k3[q] + k4[q]);
            }
        }
    }
}
"""


def smooth_rig():
    rig = load_rig(RIG)
    p = rig.parameter_vector()
    return rig.with_parameters(np.array([0.0 if n.endswith(".coulomb") else v
                                         for n, v in zip(PARAMETER_NAMES, p, strict=True)]))


def offsets(n: int, seed: int = 0) -> np.ndarray:
    x0 = np.zeros((n, 4))
    x0[:, :2] = np.random.default_rng(seed).uniform(-0.02, 0.02, (n, 2))
    return x0


def naive(rig, K, x0: np.ndarray, horizon: float) -> tuple[float, np.ndarray]:
    model, p = model_for(rig), rig.parameter_vector()
    Ts, peak = 1.0 / RATE, rig.peak_inputs
    start = time.perf_counter()
    finals = []
    for x in x0:
        x = x.copy()
        for _ in range(round(horizon * RATE)):
            u = np.clip(-(K @ x), -peak, peak)
            x = solve_ivp(lambda t, s, u=u: model.rhs(s, u, p), (0, Ts), x, rtol=1e-6).y[:, -1]
        finals.append(x)
    return time.perf_counter() - start, np.array(finals)


def engine(rig, controller, x0: np.ndarray, horizon: float, workers: int, substeps: int = SUBSTEPS
           ) -> tuple[float, object]:
    setup = SimulationSetup(horizon=horizon, substeps=substeps, bounds=Bounds(angle=None))
    params = np.tile(rig.parameter_vector(), (x0.shape[0], 1))
    res, seconds = run_rollouts(rig, controller, x0, params, setup=setup, seed=0, stream=0, workers=workers)
    return seconds, res


def compiled_reference(rig, K, x0: np.ndarray, horizon: float, threads: int):
    from upswing.verification.kernels import plant_coefficients

    c = np.ascontiguousarray(plant_coefficients(rig.parameter_vector()[None, :])[:, 0])
    X = np.ascontiguousarray(x0.copy())
    gcc = shutil.which("gcc") or shutil.which("cc")
    if gcc:
        folder = Path(tempfile.mkdtemp())
        (folder / "ref.c").write_text(C_SOURCE)
        subprocess.run([gcc, "-O2", "-fopenmp", "-shared", "-fPIC", "-o", str(folder / "ref.so"),
                        str(folder / "ref.c"), "-lm"], check=True)
        lib = ctypes.CDLL(str(folder / "ref.so"))
        dp = ctypes.POINTER(ctypes.c_double)
        lib.run.argtypes = [ctypes.c_int, dp, dp, dp, ctypes.c_double, ctypes.c_int, ctypes.c_int, ctypes.c_double]
        os.environ["OMP_NUM_THREADS"] = str(threads)
        Kc = np.ascontiguousarray(K[0])
        start = time.perf_counter()
        lib.run(X.shape[0], X.ctypes.data_as(dp), c.ctypes.data_as(dp), Kc.ctypes.data_as(dp),
                float(rig.peak_inputs[0]), round(horizon * RATE), SUBSTEPS, 1.0 / RATE)
        return time.perf_counter() - start, X, f"plain C (gcc -O2, OpenMP, {threads} threads)"
    raise SystemExit("no C compiler found; the compiled reference needs gcc")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="skip the 100,000-rollout run")
    parser.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    args = parser.parse_args()
    rig = smooth_rig()
    design = design_balance(rig)
    K = design.K_discrete
    controller = balance_controller(rig, measurement="state", design=design)
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}; rig {rig.name}; {RATE:g} Hz, "
          f"RK4 {SUBSTEPS} steps/sample, {HORIZON:g} s horizon")

    # (a) naive loop: a few rollouts, 1 s each, scaled per simulated second per rollout
    t_a, _ = naive(rig, K, offsets(2), 1.0)
    per_a = t_a / (2 * 1.0)
    print(f"(a) naive solve_ivp loop: {per_a:.3g} s wall per simulated second per rollout")

    # (b) and (c) on the same batch
    n = 20000
    x0 = offsets(n, seed=1)
    engine(rig, controller, x0[:8], 0.02, 1)  # compile / load kernels
    t_b, res = engine(rig, controller, x0, HORIZON, args.workers)
    per_b = t_b / (n * HORIZON)
    t_b1, _ = engine(rig, controller, x0[:4096], HORIZON, 1)
    per_b1 = t_b1 / (4096 * HORIZON)
    t_c, Xc, label = compiled_reference(rig, K, x0, HORIZON, args.workers)
    per_c = t_c / (n * HORIZON)
    evals = RATE * SUBSTEPS * 4
    print(f"(b) upswing engine, {args.workers} processes: {per_b:.3g} s per simulated second per rollout "
          f"({evals / per_b:.3g} RHS evaluations/s); 1 process: {evals / per_b1:.3g} evaluations/s")
    print(f"(c) {label}: {per_c:.3g} s per simulated second per rollout ({evals / per_c:.3g} evaluations/s)")
    final_b = res.final_error
    print(f"    (b) vs (c) final states agree to {np.max(np.abs(final_b - Xc)):.2g} (same step, same model)")
    print(f"ratio (a)/(b) = {per_a / per_b:.0f}x   (target >= 300x)")
    print(f"ratio (b)/(c) = {per_b / per_c:.2f}   (target <= 2)")

    # accuracy against DOP853 at rtol 1e-10 on a few closed-loop rollouts
    model, p = model_for(rig), rig.parameter_vector()
    setup = SimulationSetup(horizon=2.0, substeps=SUBSTEPS, record=True)
    from upswing.verification.simulate import simulate

    few = offsets(4, seed=2)
    rec = simulate(rig, controller, few, setup=setup)
    worst = 0.0
    for i, x in enumerate(few):
        x = x.copy()
        for k in range(round(2.0 * RATE)):
            u = np.clip(-(K @ x), -rig.peak_inputs, rig.peak_inputs)
            x = solve_ivp(lambda t, s, u=u: model.rhs(s, u, p), (0, 1 / RATE), x, method="DOP853", rtol=1e-10,
                          atol=1e-12).y[:, -1]
            worst = max(worst, float(np.max(np.abs(rec.states[k + 1, i] - x))))
    print(f"accuracy: max |RK4 (h = {1e3 / (RATE * SUBSTEPS):g} ms) - DOP853 (rtol 1e-10)| over 4 rollouts x 2 s "
          f"(offsets up to 0.02 rad): {worst:.2g} (rad, rad/s)")

    if not args.quick:
        # Twice: at the fixed 2 kHz step of the comparison above, and at the step `upswing verify` itself uses for
        # this rig (choose_substeps, confirmed by the step-doubling check of check_integration, which halves the
        # step while the estimated error exceeds its tolerance).
        check = check_integration(rig, controller, SimulationSetup(horizon=HORIZON), seed=0)
        N = 100_000
        for nsub, why in ((SUBSTEPS, "fixed 2 kHz step"),
                          (check.substeps, f"the step verify chooses, error estimate {check.error_estimate:.1g} "
                                           f"rad against {check.tolerance:g}")):
            load = os.getloadavg()[0]
            t, res = engine(rig, controller, offsets(N, seed=3), HORIZON, args.workers, substeps=nsub)
            peak_self = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
            peak_children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
            print(f"100,000 rollouts x {HORIZON:g} s, RK4 {nsub} steps/sample ({why}): {t:.1f} s wall on "
                  f"{args.workers} processes (load average {load:.2f} before, {os.getloadavg()[0]:.2f} after); "
                  f"peak memory {peak_self:.0f} MiB (main process), {peak_children:.0f} MiB (largest worker); "
                  f"{int(res.held.sum())} held")
    sys.stdout.flush()


if __name__ == "__main__":
    main()
