"""``upswing modes RIG [--at NAME]``: linear models, modes, controllability and observability at the equilibria."""

from __future__ import annotations

import argparse
from typing import Any

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.model.equilibria import EQUILIBRIA
from upswing.model.modes import EquilibriumReport, analyse_equilibrium
from upswing.report.text import modes_text

NAME = "modes"
HELP = "linearize at the equilibria: eigenvalues, oscillation modes, growth rates, controllability"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_rig_argument(parser)
    parser.add_argument("--at", choices=list(EQUILIBRIA), action="append", metavar="NAME",
                        help=f"equilibrium to analyse ({', '.join(EQUILIBRIA)}); repeatable; default: all four")


def equilibrium_json(rep: EquilibriumReport) -> dict[str, Any]:
    c = rep.controllability
    out: dict[str, Any] = {
        "x_eq": rep.linear.x_eq,
        "u_eq": rep.linear.u_eq,
        "A": rep.linear.A,
        "B": rep.linear.B,
        "eigenvalues": list(rep.linear.eigenvalues),
        "controllable": c.controllable,
        "controllability_rank": c.rank,
        "pbh_margin": c.pbh_margin,
        "weakest_mode": c.weakest_mode,
        "observable": rep.observable,
        "observability_rank": rep.observability_rank,
        "measured": list(rep.measured),
        "growth_rates": list(rep.growth_rates),
        "time_to_double": list(rep.time_to_double),
    }
    if c.warning:
        out["controllability_warning"] = c.warning
    if rep.modes:
        out["modes"] = [{"kind": m.kind, "frequency_hz": m.frequency_hz, "shape": m.shape,
                         "absolute_shape": list(m.absolute_shape)} for m in rep.modes]
    return out


def run(args: argparse.Namespace) -> Outcome:
    rig = load(args)
    names = list(dict.fromkeys(args.at)) if args.at else list(EQUILIBRIA)
    reports = {name: analyse_equilibrium(rig, name) for name in names}
    warnings = list(rig.warnings) + [r.controllability.warning for r in reports.values()
                                     if r.controllability.warning]
    data = {**rig_header(rig), "equilibria": {n: equilibrium_json(r) for n, r in reports.items()},
            "units_extra": {"growth_rates": "1/s", "time_to_double": "s", "frequency_hz": "Hz"},
            "warnings": warnings, **safety_block()}
    return Outcome(text=modes_text(rig, reports), data=data, warnings=tuple(warnings))
