"""Pieces every command shares: the result it hands back to the CLI, and the common header of JSON output."""

from __future__ import annotations

import argparse
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from upswing.export.header import rig_header, safety_block  # noqa: F401 - defined with the export header (design/ uses them too, below commands/); commands import them from here
from upswing.model.rig import Rig, load_rig


@dataclass(frozen=True)
class Outcome:
    """What a command hands back: readable ``text``, the ``data`` for ``--json``, warnings and the exit code."""

    text: str
    data: dict[str, Any]
    warnings: tuple[str, ...] = field(default=())
    exit_code: int = 0


def add_rig_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("rig", type=Path, metavar="RIG", help="the rig file (TOML); see docs/rig-file.md")


def load(args: argparse.Namespace) -> Rig:
    return load_rig(args.rig)
