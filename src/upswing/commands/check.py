"""``upswing check RIG``: validate a rig file and print the quantities a person checks first."""

from __future__ import annotations

import argparse

from upswing.commands.common import Outcome, add_rig_argument, load, rig_header, safety_block
from upswing.model.derived import derived_quantities, keep_out_radius
from upswing.report.text import check_text

NAME = "check"
HELP = "validate a rig file and print derived quantities (mass, inertia, reach, swept radius)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_rig_argument(parser)


def run(args: argparse.Namespace) -> Outcome:
    rig = load(args)
    derived = derived_quantities(rig)
    data = {**rig_header(rig), "valid": True, "derived": derived,
            "derived_units": {"total_mass": "kg", "moving_mass": "kg", "inertia_about_pivot": "kg m^2",
                              "reach": "m", "swept_radius": "m", "keep_out_half_width": "m",
                              "holding_torque": "N m"},
            "keep_out_radius": keep_out_radius(rig), "warnings": list(rig.warnings), **safety_block()}
    return Outcome(text=check_text(rig, derived), data=data, warnings=rig.warnings)
