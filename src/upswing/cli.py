"""The ``upswing`` command line: thin glue that parses arguments and hands them to one command module each.

Every command lives in :mod:`upswing.commands` as a module with ``NAME``, ``HELP``, ``add_arguments(parser)`` and
``run(args) -> Outcome``. This module owns the shared behaviour: ``--json`` prints exactly one JSON object on
stdout, human text goes to stdout otherwise and warnings to stderr, and every :class:`~upswing.errors.UpswingError`
becomes one readable line on stderr with exit code 2, never a traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence

from upswing import __version__
from upswing.commands import COMMANDS
from upswing.errors import UpswingError
from upswing.export.jsonable import dumps

EXIT_OK = 0
EXIT_VERDICT = 1  # the command ran, and its verdict is negative (e.g. a design that must not be powered)
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="upswing",
        description="From a double-pendulum rig file to a controller that is safe to run on the hardware.",
    )
    parser.add_argument("--version", action="version", version=f"upswing {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMANDS:
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.add_arguments(p)
        p.add_argument("--json", action="store_true",
                       help="print one JSON object on stdout instead of the readable text")
        p.set_defaults(handler=module.run)
    return parser




def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "handler", None) is None:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        outcome = args.handler(args)
    except UpswingError as exc:
        print(f"upswing {args.command}: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print(f"upswing {args.command}: interrupted; no output was written", file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001 - the last line of defence: a bug must still not show a traceback
        if os.environ.get("UPSWING_DEBUG"):
            raise
        print(f"upswing {args.command}: internal error: {type(exc).__name__}: {exc}\n"
              "This is a bug in upswing; set UPSWING_DEBUG=1 to see the traceback and please report it.",
              file=sys.stderr)
        return EXIT_INTERNAL
    for warning in outcome.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    if args.json:
        print(dumps(outcome.data))
    else:
        print(outcome.text)
    return outcome.exit_code


if __name__ == "__main__":
    raise SystemExit(main())
