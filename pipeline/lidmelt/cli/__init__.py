"""The ``lidmelt`` command line: a thin layer over the Python API.

One module per command (``lidmelt.cli.<command>``), each with ``register(subparsers)`` that adds
its parser and sets ``func``, a callable ``func(args) -> int``; options that several commands
share come from the parent parsers in :mod:`lidmelt.cli._common`. Errors derived from
:class:`lidmelt.errors.LidmeltError` print without a traceback and exit with status 1.
"""

from __future__ import annotations

import argparse
import sys

from lidmelt import __version__
from lidmelt.cli import column, map, profile, regions, report, run, sample, screen
from lidmelt.errors import LidmeltError

__all__ = ["COMMANDS", "build_parser", "main"]

#: The command modules, in the order ``lidmelt --help`` lists them.
COMMANDS = (column, run, sample, profile, regions, screen, map, report)


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="lidmelt",
        description="Maps of predicted mantle melt productivity beneath oceanic lithosphere.",
    )
    parser.add_argument("--version", action="version", version=f"lidmelt {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for command in COMMANDS:
        command.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args) or 0)
    except LidmeltError as exc:
        print(f"lidmelt {args.command}: error: {exc}", file=sys.stderr)
        return 1
