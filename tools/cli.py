"""veer: plan drivable paths for car-like robots on occupancy grids.

Subcommands (``veer SUBCOMMAND --help`` for each):

  plan     plan once on a map image and write the path JSON (and a picture)
  demo     plan the built-in scenarios and write maps, paths and pictures
  node     run the ZeroMQ planner node            (not built yet in this version)
  replay   replay a recorded log offline           (not built yet in this version)

Exit codes: 0 done (a path was found), 1 valid request but no path, 2 bad input.
"""

from __future__ import annotations

import argparse
import logging
import sys

__all__ = ["main", "build_parser", "UsageError"]

EXIT_OK = 0
EXIT_NO_PATH = 1
EXIT_BAD_INPUT = 2


class UsageError(Exception):
    """A bad command line: printed as one line, exit code 2."""


class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad command line in one line instead of usage + error."""

    def error(self, message: str) -> None:  # noqa: D401 - argparse hook
        raise UsageError(f"{self.prog}: {message} (see '{self.prog} --help')")


def build_parser() -> argparse.ArgumentParser:
    from veer.tools import demo as demo_command
    from veer.tools import plan as plan_command

    parser = _Parser(
        prog="veer",
        description=__doc__.split("\n\n")[0],
        epilog="Exit codes: 0 done, 1 no path, 2 bad input.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("-v", "--verbose", action="store_true", help="log debug detail on stderr")
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", parser_class=_Parser)

    plan_command.add_arguments(
        sub.add_parser("plan", help="plan once on a map image and write the path JSON",
                       description=plan_command.__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    )
    demo_command.add_arguments(
        sub.add_parser("demo", help="plan the built-in scenarios; write maps, paths and pictures",
                       description=demo_command.__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    )
    node = sub.add_parser("node", help="run the ZeroMQ planner node (not built yet in this version)",
                          description="Run the planner node. Not built yet in this version.")
    node.add_argument("--config", metavar="NODE.toml")
    node.add_argument("--vehicle", metavar="VEHICLE.toml")
    replay = sub.add_parser("replay", help="replay a recorded log offline (not built yet in this version)",
                            description="Replay a recorded log offline. Not built yet in this version.")
    replay.add_argument("log", metavar="LOG")
    replay.add_argument("--config", metavar="NODE.toml")
    replay.add_argument("--out", metavar="REPORT_DIR")
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
    if args.command in ("node", "replay"):
        print(
            f"veer {args.command}: not built yet in this version; 'veer plan' plans once on a map image",
            file=sys.stderr,
        )
        return EXIT_BAD_INPUT
    if args.command == "plan":
        from veer.tools.plan import run

        return run(args)
    from veer.tools.demo import run

    return run(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
