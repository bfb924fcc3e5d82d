"""One module per CLI command. To add a command, write a module with ``NAME``, ``HELP``,
``add_arguments(parser)`` and ``run(args) -> Outcome`` and list it in :data:`COMMANDS`."""

from __future__ import annotations

from upswing.commands import balance, check, design, modes, swingup, verify

COMMANDS = (check, modes, balance, verify, swingup, design)
