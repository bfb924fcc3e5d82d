"""Study: the peak loads each demo rig puts on its base, against its ``[mount]`` ratings.

For every demo rig in ``scenarios/`` the script runs the design pipeline (``upswing.design.pipeline.run_design``,
no run folder written): the balance verification's Monte Carlo and the tracked, verified swing-up, both over the
rig's ``[uncertainty]``. It prints, per base-load line (``upswing.verification.budgets.BASE_LOAD_LINES``), the worst
and the median over the held (balance) or caught (swing-up) rollouts, the planned swing-up's value, and the limit
from ``[mount]`` (rating / safety factor) with the share of it the worst run uses.

This is how the demo rigs' ``[mount]`` ratings were checked against what the rigs actually do: the ratings come
from the kind of fixing each file's comments describe (clamps, bolt patterns), not from these loads; the study
shows the margin they leave.

Run:  PYTHONPATH=src python benchmarks/study_base_loads.py [--rollouts N] [--seed S] [--rigs a,b]
A full run (1000 rollouts, 4 rigs) takes about a minute on 2 cores.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from upswing.design.pipeline import DesignOptions, run_design
from upswing.verification.budgets import BASE_LOAD_LINES, Budget

ROOT = Path(__file__).resolve().parents[1]


def _share(b: Budget) -> str:
    return "-" if b.limit is None else f"{100.0 * b.value / b.limit:5.1f} %"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rollouts", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--rigs", default="acrobot,pendubot,cart-double,arm-2dof")
    args = parser.parse_args()
    for name in args.rigs.split(","):
        start = time.perf_counter()
        run = run_design(ROOT / "scenarios" / f"{name}.toml", DesignOptions(rollouts=args.rollouts, seed=args.seed))
        by = {b.name: b for b in run.budgets}
        planned = {} if run.swingup is None else {b.name: b for b in run.swingup.planned_budgets}
        mount = run.rig.mount
        print(f"\n{name}: {run.rig.name} ({time.perf_counter() - start:.1f} s; verdict {run.verdict.status})")
        print("  mount: " + ("none" if mount is None else
                             f"horizontal {mount.horizontal_force} N, vertical {mount.vertical_force} N, moment "
                             f"{mount.moment} N m, safety factor {mount.safety_factor:g}, lever arms h "
                             f"{mount.shoulder_height:g} m, d {mount.shoulder_offset:g} m"))
        print(f"  {'line':24s} {'balance worst':>14s} {'(median)':>9s} {'swing-up worst':>15s} {'(median)':>9s} "
              f"{'planned':>8s} {'limit':>8s} {'balance':>8s} {'swing-up':>9s}")
        for line in BASE_LOAD_LINES:
            bal, swing = by.get(f"balance.{line}"), by.get(f"swingup.{line}")
            plan = planned.get(line)
            limit = next((b.limit for b in (bal, swing, plan) if b is not None and b.limit is not None), None)
            print(f"  {line:24s} "
                  + (f"{bal.value:14.4g} {bal.median:9.4g} " if bal else f"{'-':>14s} {'-':>9s} ")
                  + (f"{swing.value:15.4g} {swing.median:9.4g} " if swing else f"{'-':>15s} {'-':>9s} ")
                  + (f"{plan.value:8.4g} " if plan else f"{'-':>8s} ")
                  + (f"{limit:8.4g} " if limit is not None else f"{'-':>8s} ")
                  + f"{_share(bal) if bal else '-':>8s} {_share(swing) if swing else '-':>9s}")
        failing = [b.name for b in run.budgets if b.name.split(".", 1)[1] in BASE_LOAD_LINES and b.ok is False]
        print("  base-load lines over their limit: " + (", ".join(failing) if failing else "none"))


if __name__ == "__main__":
    main()
