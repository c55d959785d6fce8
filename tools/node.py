"""Run the planner node: ZeroMQ + msgpack, replanning while the robot drives.

Binds three sockets (loopback by default): SUB for grids and poses
(tcp://127.0.0.1:7401), PUB for paths, status and events (tcp://127.0.0.1:7402)
and REP for control requests (tcp://127.0.0.1:7403). NODE.toml (optional) sets
the addresses, the vehicle, planner settings, the replan policy, limits and
logging; every key has a default. --vehicle overrides the config's vehicle; with
neither, the example vehicle (wheelbase 2.0 m, max steer 30 deg, disc radius 1.0 m).
The protocol and every setting: docs/protocol.md.

Stop with Ctrl-C (SIGINT) or SIGTERM. Exit codes: 0 stopped, 2 bad config, bad
vehicle or an address that cannot be bound.
"""

from __future__ import annotations

import logging
import signal
import sys
import threading

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_OK

__all__ = ["add_arguments", "run"]


log = logging.getLogger("veer.node")


def add_arguments(parser) -> None:
    """Add the `veer node` flags to an argparse parser."""
    parser.add_argument("--config", metavar="NODE.toml",
                        help="node settings (default: every key at its default; see docs/protocol.md)")
    parser.add_argument("--vehicle", metavar="VEHICLE.toml",
                        help="vehicle file (overrides the config's vehicle; default: the example vehicle)")


def _configure_logging(level: str) -> None:
    """Log ``veer.node`` at the config's level on stderr (``veer -v`` may lower it to DEBUG)."""
    root = logging.getLogger()
    if not root.handlers:
        logging.basicConfig(stream=sys.stderr, format="%(asctime)s %(name)s %(levelname)s: %(message)s")
    wanted = getattr(logging, level.upper())
    if root.level and root.level < wanted:
        wanted = root.level
    log.setLevel(wanted)


def run(args) -> int:
    """Start the node and serve until SIGINT / SIGTERM; returns the exit code."""
    from veer.node.config import ConfigError, load_config
    from veer.node.server import BindError, NodeServer

    try:
        config = load_config(getattr(args, "config", None), getattr(args, "vehicle", None))
    except ConfigError as exc:
        print(f"veer node: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    _configure_logging(config.log_level)
    server = NodeServer(config)
    try:
        server.bind()
    except BindError as exc:
        server.close()
        print(f"veer node: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    stop = threading.Event()
    previous = {}
    in_main_thread = threading.current_thread() is threading.main_thread()
    if in_main_thread:
        for signum in (signal.SIGINT, signal.SIGTERM):
            previous[signum] = signal.signal(signum, lambda *_: stop.set())
    try:
        server.serve(stop)
    finally:
        server.close()
        for signum, handler in previous.items():
            signal.signal(signum, handler)
    log.info("veer node stopped")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.tools.node``: the same as ``veer node``."""
    from veer.tools.cli import run_subcommand

    return run_subcommand("node", argv)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
