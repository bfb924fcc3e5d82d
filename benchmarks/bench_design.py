"""Benchmark: ``upswing design`` on each demo rig with 1,000 Monte Carlo rollouts, time split by stage.

Each rig runs the command as a user would, in a fresh process (``python -m upswing design RIG --json``: imports,
numba kernels loaded or compiled, IPOPT loaded, every stage, the report and the files), so the wall time is what a
person waits. The stage split comes from the run's own ``summary.json`` timing; "start-up" is the rest of the wall
time (interpreter, imports, argument parsing). Target: under 60 s per rig on 2 cores.

Run:  PYTHONPATH=src python benchmarks/bench_design.py [--rollouts N] [--rigs acrobot cart-double ...]
Times are wall times on this machine under whatever else runs on it; the shares of the total (a ratio within one
run) travel better between machines than the seconds.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RIGS = ("acrobot", "pendubot", "cart-double", "arm-2dof")
TARGET_S = 60.0


def run_one(rig: str, rollouts: int, out: Path) -> tuple[float, dict]:
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src") + os.pathsep + os.environ.get("PYTHONPATH", "")}
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "upswing", "design", str(ROOT / "scenarios" / f"{rig}.toml"),
                           "--out", str(out), "--rollouts", str(rollouts), "--json"],
                          capture_output=True, text=True, env=env, check=False)
    wall = time.perf_counter() - start
    if done.returncode not in (0, 1):
        raise SystemExit(f"upswing design {rig} failed (exit {done.returncode}):\n{done.stderr}")
    return wall, json.loads(done.stdout)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rollouts", type=int, default=1000)
    parser.add_argument("--rigs", nargs="+", default=list(RIGS), choices=RIGS)
    args = parser.parse_args(argv)
    print(f"upswing design, {args.rollouts} Monte Carlo rollouts, {os.cpu_count()} cores; seconds (share of wall)")
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench-design-") as folder:
        for rig in args.rigs:
            wall, summary = run_one(rig, args.rollouts, Path(folder))
            timing = summary["timing"]
            parts = dict(timing["stages"])
            parts["report"] = timing["report_s"]
            parts["files"] = timing["files_s"]
            parts["start-up"] = max(0.0, wall - timing["total_s"])
            rows.append((rig, wall, parts, summary["verdict"]))
    names = list(rows[0][2])
    width = max(len(n) for n in names) + 2
    print(f"{'':{width}}" + "".join(f"{rig:>20}" for rig, *_ in rows))
    for name in names:
        print(f"{name:{width}}" + "".join(f"{p[name]:>11.2f} ({100 * p[name] / w:4.1f}%)" for _, w, p, _ in rows))
    print(f"{'wall':{width}}" + "".join(f"{w:>11.2f}       " for _, w, _, _ in rows))
    print(f"{'wall / 60 s target':{width}}" + "".join(f"{w / TARGET_S:>13.2f}       " for _, w, _, _ in rows))
    print(f"{'verdict':{width}}" + "".join(f"{v:>20}" for *_, v in rows))
    slowest = max(w for _, w, _, _ in rows)
    print(f"slowest rig: {slowest:.1f} s = {slowest / TARGET_S:.2f} of the {TARGET_S:.0f} s target")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
