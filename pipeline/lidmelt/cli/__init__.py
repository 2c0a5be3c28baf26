"""The ``lidmelt`` command line: a thin layer over the Python API.

One module per command (``lidmelt.cli.<command>``), each with ``register(subparsers)`` that adds
its parser and sets ``func``, a callable ``func(args) -> int``; options that several commands
share come from the parent parsers in :mod:`lidmelt.cli._common`.

One error handler (:func:`main`): errors derived from :class:`lidmelt._errors.LidmeltError` and
the expected failures of :func:`lidmelt.cli._failures.describe_failure` (disk full, no
permission, damaged GeoTIFF or NetCDF, out of memory) print one line without a traceback and
exit with status 1; Ctrl-C (SIGINT) exits with 130 and SIGTERM with 143, after the same
clean-up, with one line; ``lidmelt --debug COMMAND`` shows the traceback too.
"""

from __future__ import annotations

import argparse
import sys
import traceback

from lidmelt import __version__
from lidmelt._errors import LidmeltError
from lidmelt.cli import (
    _ages,
    _assess,
    _cache,
    _column,
    _map,
    _profile,
    _regions,
    _report,
    _run,
    _sample,
    _screen,
)
from lidmelt.cli._failures import Terminated, bounded, describe_failure, termination_as_interrupt
from lidmelt.physics._jitcache import cache_note as compiled_cache_note

__all__ = ["main"]

#: The command modules, in the order ``lidmelt --help`` lists them.
COMMANDS = (
    _column,
    _run,
    _sample,
    _profile,
    _regions,
    _screen,
    _ages,
    _assess,
    _map,
    _report,
    _cache,
)


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="lidmelt",
        description="Maps of predicted mantle melt productivity beneath oceanic lithosphere.",
    )
    parser.add_argument("--version", action="version", version=f"lidmelt {__version__}")
    parser.add_argument(
        "--debug", action="store_true", help="show the traceback of an error (for bug reports)"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for command in COMMANDS:
        command.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line.

    Parameters
    ----------
    argv : list of str, optional
        The arguments after ``lidmelt`` (default: the process's).

    Returns
    -------
    int
        The exit status: 0 success, 1 an error of the input or the machine, 130 interrupted,
        143 terminated.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    note = compiled_cache_note()
    if note:
        print(f"lidmelt {args.command}: note: {note}", file=sys.stderr)
    try:
        with termination_as_interrupt():
            return int(args.func(args) or 0)
    except KeyboardInterrupt as exc:
        _debug(args)
        killed = "terminated (SIGTERM)" if isinstance(exc, Terminated) else "interrupted"
        print(f"lidmelt {args.command}: {killed}; nothing half-written was left.", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130
    except LidmeltError as exc:
        _debug(args)
        print(f"lidmelt {args.command}: error: {bounded(str(exc))}", file=sys.stderr)
        return 1
    except Exception as exc:
        message = describe_failure(exc)
        if message is None:
            raise  # a bug: its traceback is the report
        _debug(args)
        print(f"lidmelt {args.command}: error: {bounded(message)}", file=sys.stderr)
        return 1


def _debug(args: argparse.Namespace) -> None:
    if getattr(args, "debug", False):
        traceback.print_exc()
