"""veer: plan drivable paths for car-like robots on occupancy grids.

Subcommands (``veer SUBCOMMAND --help`` for each):

  plan     plan once on a map image and write the path JSON (and a picture)
  demo     drive a simulated tractor with the node and write a replay report (--scenarios: five plans)
  check    plan scenario files and compare each result with its expectations
  node     run the ZeroMQ planner node
  replay   replay recorded logs offline and write a browsable report (or compare two settings)
  record   record what a running node sees and says into a log
  keys     write a CURVE key pair for the node or a client (veer keys DIR)

Exit codes: 0 done (a path was found), 1 valid request but no path, 2 bad input.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_OK, UsageError, bad_input_errors

__all__ = ["main", "build_parser", "run_subcommand", "SUBCOMMANDS"]

SUBCOMMANDS = ("plan", "demo", "check", "node", "replay", "record", "keys")
"""Subcommand modules under ``veer.tools``: each has ``add_arguments(parser)``, ``run(args) -> int``
and a docstring whose first line is the one-line help and whole text the description."""

class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad command line in one line instead of usage + error."""

    def error(self, message: str) -> None:  # noqa: D401 - argparse hook
        raise UsageError(f"{self.prog}: {message} (see '{self.prog} --help')")


def _command_module(name: str):
    return importlib.import_module(f"veer.tools.{name}")


def build_parser() -> argparse.ArgumentParser:
    """The ``veer`` parser with one sub-parser per entry of :data:`SUBCOMMANDS`."""
    parser = _Parser(
        prog="veer",
        description=__doc__.split("\n\n")[0],
        epilog="Exit codes: 0 done, 1 no path, 2 bad input.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("-v", "--verbose", action="store_true", help="log debug detail on stderr")
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", parser_class=_Parser)
    for name in SUBCOMMANDS:
        module = _command_module(name)
        doc = (module.__doc__ or name).strip()
        summary = doc.splitlines()[0].rstrip(".")
        module.add_arguments(
            sub.add_parser(name, help=summary[:1].lower() + summary[1:], description=doc,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        )
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``veer`` console script; returns the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except UsageError as error:
        print(str(error), file=sys.stderr)
        return EXIT_BAD_INPUT
    logging.basicConfig(
        level=logging.DEBUG if args.verbose else logging.WARNING,
        format="%(name)s %(levelname)s: %(message)s",
        stream=sys.stderr,
    )
    if args.command is None:
        parser.print_help()
        return EXIT_OK
    try:
        return _command_module(args.command).run(args)
    except bad_input_errors() as error:
        print(f"veer {args.command}: {error}", file=sys.stderr)
        return EXIT_BAD_INPUT


def run_subcommand(name: str, argv: list[str] | None = None) -> int:
    """``python -m veer.tools.NAME [ARGS]``: exactly ``veer NAME [ARGS]`` (same parser, errors, logging)."""
    return main([name, *(sys.argv[1:] if argv is None else argv)])


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
