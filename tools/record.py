"""Record what a running node sees and says into a recording log, from outside the node.

Subscribes to the node's output socket (paths, status, events) and binds an input tap:
a SUB socket of its own to which the robots' publishers connect as well as to the node
(a ZeroMQ PUB socket may connect to several addresses and sends each message to every
subscriber). Every frame that arrives is written with its arrival time (Unix seconds)
to OUT.log in the format of docs/files.md ("Recording log"), the format the node writes
itself with [record] in NODE.toml; `veer replay OUT.log` reads it.

Control requests travel point to point between a client and the node and cannot be
seen from outside: the goal a status message shows for a new goal_id is written as a
goal request marked "inferred": true (a status showing no goal after one: a cancel), so
a replay of the log has the goals. An input the node's codec cannot unpack is kept as
a note with its raw frames, never dropped.

Stops on SIGINT (Ctrl-C) or SIGTERM, or after --duration-s, with the log closed: exit 0.
Exit 2 for an address that cannot be bound or connected or a log that cannot be
written (one line); 1 when writing fails while recording (disk full).
"""

from __future__ import annotations

import signal
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_OK, number_flag

__all__ = ["DEFAULT_OUTPUTS", "DEFAULT_TAP", "Recorder", "RecordError", "add_arguments", "main", "run"]

DEFAULT_OUTPUTS = "tcp://127.0.0.1:7402"
"""The node's default output address (docs/protocol.md, "Sockets")."""

DEFAULT_TAP = "tcp://127.0.0.1:7404"
"""Where the input tap binds by default: loopback, the port after the node's three."""

EXIT_WRITE_FAILED = 1
"""Writing the log failed while recording (disk full): what was written up to then stays readable."""

_POLL_MS = 100  # longest wait between checks of the stop flag
_QUIET_WARNING_S = 5.0  # say so once when no status has come from the node for this long
_MAX_FRAME_BYTES = 64 * 1024 * 1024  # the node's default limits.max_message_bytes


class RecordError(RuntimeError):
    """An address that cannot be used or a log that cannot be written; the message is one line."""


@dataclass
class RecordCounts:
    """What a recording wrote, per record kind, and how many inputs were kept as notes."""

    kinds: dict = field(default_factory=dict)
    undecodable: int = 0
    inferred_goals: int = 0

    def add(self, kind: str) -> None:
        self.kinds[kind] = self.kinds.get(kind, 0) + 1

    def describe(self) -> str:
        parts = [f"{kind} {count}" for kind, count in sorted(self.kinds.items())]
        return ", ".join(parts) or "no records"


class Recorder:
    """The sockets and the log of one recording: ``open()``, ``serve(stop)``, ``close()``.

    ``outputs`` is the node's PUB address (connected); ``tap`` the address the input SUB
    binds (a port of ``*`` picks a free one; ``tap_endpoint`` holds the one bound).
    """

    def __init__(self, log_path, outputs: str = DEFAULT_OUTPUTS, tap: str = DEFAULT_TAP, *,
                 append: bool = False, fsync_every_s: float | None = None, clock=time.time):
        self.log_path = Path(log_path)
        self.outputs = outputs
        self.tap = tap
        self.append = append
        self.fsync_every_s = fsync_every_s
        self.clock = clock
        self.counts = RecordCounts()
        self.tap_endpoint: str | None = None
        self.write_error: str | None = None
        self._context = None
        self._sockets: list = []
        self._writer = None
        self._goal_id = None  # the goal_id the last status showed (for the inferred goal requests)
        self._last_status_s: float | None = None

    # ------------------------------------------------------------------ set-up
    def open(self) -> None:
        """Connect to the outputs, bind the tap, open the log; raises :class:`RecordError`."""
        import zmq

        from veer.node.recording import LogFormatError, LogWriter

        self._context = zmq.Context()
        self.sub = self._socket(zmq.SUB)
        self.sub.setsockopt(zmq.SUBSCRIBE, b"")
        try:
            self.sub.connect(self.outputs)
        except zmq.ZMQError as exc:
            self.close()
            raise RecordError(f"cannot connect to the node's outputs at {self.outputs}: {exc.strerror}; "
                              "give an address like tcp://127.0.0.1:7402 with --outputs") from None
        self.tap_sub = self._socket(zmq.SUB)
        self.tap_sub.setsockopt(zmq.SUBSCRIBE, b"")
        self.tap_sub.setsockopt(zmq.MAXMSGSIZE, _MAX_FRAME_BYTES)
        try:
            self.tap_sub.bind(self.tap)
        except zmq.ZMQError as exc:
            self.close()
            hint = ("another process holds it; pick another --tap" if exc.errno == zmq.EADDRINUSE
                    else "give an address like tcp://127.0.0.1:7404 with --tap")
            raise RecordError(f"cannot bind the input tap to {self.tap}: {exc.strerror}; {hint}") from None
        self.tap_endpoint = self.tap_sub.getsockopt_string(zmq.LAST_ENDPOINT)
        try:
            self._writer = LogWriter(self.log_path, append=self.append, fsync_every_s=self.fsync_every_s)
        except LogFormatError as exc:
            self.close()
            raise RecordError(f"{exc}; give another OUT.log") from None

    def _socket(self, kind: int):
        import zmq

        sock = self._context.socket(kind)
        sock.setsockopt(zmq.LINGER, 0)  # never wait for unsent messages on close
        self._sockets.append(sock)
        return sock

    # ------------------------------------------------------------------ loop
    def serve(self, stop: threading.Event, duration_s: float | None = None, on_quiet=None) -> None:
        """Record until ``stop`` is set, ``duration_s`` has passed, or a write fails.

        ``on_quiet(text)`` is called once when no status has come from the node for 5 s.
        """
        import zmq

        poller = zmq.Poller()
        poller.register(self.sub, zmq.POLLIN)
        poller.register(self.tap_sub, zmq.POLLIN)
        started = time.monotonic()
        end = None if duration_s is None else started + duration_s
        warned = False
        while not stop.is_set() and self.write_error is None:
            now = time.monotonic()
            if end is not None and now >= end:
                break
            wait_ms = _POLL_MS if end is None else max(1, min(_POLL_MS, int(1000 * (end - now)) + 1))
            ready = dict(poller.poll(wait_ms))
            if self.tap_sub in ready:
                self._drain(self.tap_sub, self._on_input)
            if self.sub in ready:
                self._drain(self.sub, self._on_output)
            if (not warned and on_quiet is not None and self._last_status_s is None
                    and time.monotonic() - started > _QUIET_WARNING_S):
                warned = True
                on_quiet(f"no status from the node at {self.outputs} after {_QUIET_WARNING_S:.0f} s; is it running "
                         "there? (recording goes on)")

    def _drain(self, sock, handle) -> None:
        import zmq

        while self.write_error is None:
            try:
                frames = sock.recv_multipart(zmq.NOBLOCK)
            except zmq.Again:
                return
            handle(frames, self.clock())

    def _write(self, method: str, *args) -> None:
        if self._writer is None:
            return
        try:
            getattr(self._writer, method)(*args)
        except Exception as exc:  # noqa: BLE001 - disk full, a value the log cannot hold: stop cleanly
            self.write_error = f"writing {self.log_path} failed: {exc}"

    def _on_input(self, frames: list[bytes], t_s: float) -> None:
        """One message from the tap: an input as the node unpacks it, else a note with its frames."""
        from veer.node.codec import WireError, unpack_input

        try:
            topic, message = unpack_input(frames, max_bytes=_MAX_FRAME_BYTES)
        except WireError as exc:
            self.counts.undecodable += 1
            self.counts.add("note")
            self._write("write_note", f"undecodable input: {exc.code}: {exc.detail}", t_s,
                        {"source": "tap", "code": exc.code, "frames": [bytes(f) for f in frames]})
            return
        self.counts.add(topic)
        self._write("write_input", topic, message, t_s)

    def _on_output(self, frames: list[bytes], t_s: float) -> None:
        """One message from the node: path, status or event; anything else as a note."""
        import msgpack

        from veer.node.codec import OUTPUT_TOPICS

        message = None
        if len(frames) == 2:
            try:
                message = msgpack.unpackb(frames[1], raw=False, strict_map_key=False)
            except Exception:  # noqa: BLE001 - msgpack raises many kinds for garbage
                message = None
        topic = frames[0].decode("utf-8", "replace") if frames else ""
        if not isinstance(message, dict) or topic not in OUTPUT_TOPICS or message.get("kind") != topic:
            self.counts.undecodable += 1
            self.counts.add("note")
            self._write("write_note", "undecodable output", t_s,
                        {"source": "outputs", "frames": [bytes(f) for f in frames]})
            return
        if topic == "status":
            self._last_status_s = t_s
            self._infer_goal(message, t_s)
        self.counts.add(topic)
        self._write("write_output", topic, message, t_s)

    def _infer_goal(self, status: dict, t_s: float) -> None:
        """Write the goal request (or cancel) a status reveals; docs/files.md, "Recording from outside the node"."""
        goal_id, goal = status.get("goal_id"), status.get("goal")
        if goal_id == self._goal_id:
            return
        previous, self._goal_id = self._goal_id, goal_id
        if goal_id is None:
            request, reply = {"v": 1, "op": "cancel", "inferred": True}, {"ok": True, "goal_id": previous}
        elif isinstance(goal, list) and len(goal) == 3:
            request = {"v": 1, "op": "goal", "x_m": goal[0], "y_m": goal[1], "heading_rad": goal[2],
                       "inferred": True}
            reply = {"ok": True, "goal_id": goal_id}
        else:
            return
        self.counts.inferred_goals += 1
        self.counts.add("control")
        self._write("write_control", request, reply, t_s)

    # ------------------------------------------------------------------ stop
    def close(self) -> None:
        """Close the log (flushed and fsynced) and every socket at once."""
        if self._writer is not None:
            writer, self._writer = self._writer, None
            try:
                writer.close()
            except Exception as exc:  # noqa: BLE001
                self.write_error = self.write_error or f"closing {self.log_path} failed: {exc}"
        for sock in self._sockets:
            sock.close(linger=0)
        self._sockets = []
        if self._context is not None:
            self._context.term()
            self._context = None


_SECONDS = number_flag("a number of seconds", low=0.0, low_open=True)


def add_arguments(parser) -> None:
    """Add the ``veer record`` arguments to an argparse parser."""
    parser.add_argument("log", metavar="OUT.log", help="the recording log to write (docs/files.md, 'Recording log')")
    parser.add_argument("--outputs", default=DEFAULT_OUTPUTS, metavar="ADDRESS",
                        help=f"the node's output (PUB) address to subscribe to (default {DEFAULT_OUTPUTS})")
    parser.add_argument("--tap", default=DEFAULT_TAP, metavar="ADDRESS",
                        help=f"address the input tap binds; connect the robots' publishers here as well as to "
                             f"the node (default {DEFAULT_TAP}; a port of * picks a free one)")
    parser.add_argument("--duration-s", type=_SECONDS, default=None, metavar="S",
                        help="stop after this many seconds (default: until Ctrl-C or SIGTERM)")
    parser.add_argument("--append", action="store_true", help="add to an existing log instead of starting a new one")
    parser.add_argument("--fsync-every-s", type=_SECONDS, default=None, metavar="S",
                        help="also force the log to the disk this often (default: flush each record to the OS only)")


def run(args) -> int:
    """Carry out ``veer record``; returns the exit code (see the module docstring)."""
    recorder = Recorder(args.log, args.outputs, args.tap, append=getattr(args, "append", False),
                        fsync_every_s=getattr(args, "fsync_every_s", None))
    try:
        recorder.open()
    except RecordError as exc:
        print(f"veer record: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    stop = threading.Event()
    previous = {}
    if threading.current_thread() is threading.main_thread():
        for signum in (signal.SIGINT, signal.SIGTERM):
            previous[signum] = signal.signal(signum, lambda *_: stop.set())
    print(f"veer record: writing {args.log}; outputs from {args.outputs}, input tap at {recorder.tap_endpoint}; "
          "Ctrl-C stops", file=sys.stderr, flush=True)
    started = time.monotonic()
    try:
        recorder.serve(stop, args.duration_s,
                       on_quiet=lambda text: print(f"veer record: {text}", file=sys.stderr, flush=True))
    finally:
        recorder.close()
        for signum, handler in previous.items():
            signal.signal(signum, handler)
    counts = recorder.counts
    extra = f"; {counts.undecodable} undecodable kept as notes" if counts.undecodable else ""
    print(f"veer record: {sum(counts.kinds.values())} records in {time.monotonic() - started:.1f} s to {args.log} "
          f"({counts.describe()}{extra})", file=sys.stderr, flush=True)
    if recorder.write_error:
        print(f"veer record: {recorder.write_error}", file=sys.stderr)
        return EXIT_WRITE_FAILED
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.tools.record``: the same as ``veer record``."""
    from veer.tools.cli import run_subcommand

    return run_subcommand("record", argv)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
