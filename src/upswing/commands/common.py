"""Pieces every command shares: the result it hands back to the CLI, and the common header of JSON output."""

from __future__ import annotations

import argparse
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from upswing import __version__
from upswing.model.rig import Rig, load_rig
from upswing.safety import CAUTIONS, STANDARDS


@dataclass(frozen=True)
class Outcome:
    """What a command hands back: readable ``text``, the ``data`` for ``--json``, warnings and the exit code."""

    text: str
    data: dict[str, Any]
    warnings: tuple[str, ...] = field(default=())
    exit_code: int = 0


def add_rig_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("rig", type=Path, metavar="RIG", help="the rig file (TOML); see docs/rig-file.md")


def rig_header(rig: Rig) -> dict[str, Any]:
    """Fields every JSON object starts with: tool, rig, names and units in the conventions' order."""
    return {
        "tool": {"name": "upswing", "version": __version__},
        "rig": {"name": rig.name, "source": rig.source, "content_hash": rig.content_hash, "family": rig.family,
                "base": rig.base},
        "state": list(rig.state_names),
        "inputs": list(rig.input_names),
        "units": {"state": list(rig.state_units), "inputs": list(rig.input_units), "time": "s",
                  "frequency": "Hz", "eigenvalues": "1/s"},
        "sign_convention": "u = u_eq - K (x - x_eq); angles counter-clockwise positive, theta1 from the upward "
                           "vertical, theta2 relative to link 1; angle errors wrapped to (-pi, pi]",
    }


def safety_block() -> dict[str, Any]:
    return {"cautions": list(CAUTIONS), "standards": dict(STANDARDS)}


def load(args: argparse.Namespace) -> Rig:
    return load_rig(args.rig)
