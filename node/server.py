"""The socket loop of the node: bind, poll, drain inputs, answer control, publish, stop.

Three sockets (contract section 3): SUB for grids and poses, PUB for paths, status and
events, REP for control requests. One loop polls them and the worker's wake-up socket,
feeds :class:`~veer.node.core.NodeCore` and carries out its actions. Planning runs on
the worker thread (:mod:`veer.node.worker`), so replies and the status heartbeat keep
flowing during a plan.

Only the newest grid and pose count: each pass reads every input waiting (up to
``limits.drain_max_messages``), checks each message's envelope, and decodes the cells
of the newest grid only. Socket options, with the ZeroMQ reference (libzmq
``zmq_setsockopt``) behind each:

- ``ZMQ_MAXMSGSIZE`` on SUB and REP = ``limits.max_message_bytes``: a peer sending a
  larger message is disconnected by ZeroMQ (the node reports it as a
  ``input_disconnected`` event when the socket monitor sees the disconnect);
- ``ZMQ_RCVHWM`` on SUB = ``limits.input_queue_messages``: bounds the memory a burst
  of grids can take (SUB drops at the high-water mark);
- ``ZMQ_LINGER`` = 0 everywhere, so stopping never waits for unsent messages;
- ZMQ_CONFLATE is not used: it keeps a single frame, and inputs are two frames.
"""

from __future__ import annotations

import logging
import threading
import time

import zmq
from zmq.utils.monitor import parse_monitor_message

from veer.planning import Planner

from .codec import (
    GridInput,
    WireError,
    check_control,
    check_input,
    decode_grid,
    encode,
    encode_output,
    unpack_control,
    unpack_input,
)
from .config import NodeConfig
from .core import CancelJob, NodeCore, Publish, Reply, StartJob
from .worker import PlanWorker

__all__ = ["NodeServer", "BindError"]

log = logging.getLogger("veer.node")

_POLL_MAX_MS = 100  # longest wait between checks of the stop flag


class BindError(RuntimeError):
    """An address the node cannot bind (in use, malformed, not permitted), or a log it cannot write; one line."""


def _topic_of(frames) -> str:
    if not frames:
        return "?"
    return bytes(frames[0][:32]).decode("utf-8", "replace") or "?"


class NodeServer:
    """The node: ``bind()``, then ``serve(stop_event)`` until the event is set, then ``close()``."""

    def __init__(self, config: NodeConfig, *, clock=time.monotonic):
        self.config = config
        self.clock = clock
        self.core = NodeCore(config)
        self.planner = Planner(config.vehicle, config.search, cache_size=2)
        self.context = zmq.Context()
        self.endpoints: dict[str, str] = {}
        self._wake_address = f"inproc://veer-node-wake-{id(self)}"
        self._reply_due = False
        self._sockets: list[zmq.Socket] = []
        self.worker: PlanWorker | None = None
        self.recorder = None
        self._request_message = None  # the control request being served, for the recording

    # ------------------------------------------------------------------ sockets
    def _socket(self, kind: int) -> zmq.Socket:
        sock = self.context.socket(kind)
        sock.setsockopt(zmq.LINGER, 0)
        self._sockets.append(sock)
        return sock

    def _bind(self, sock: zmq.Socket, name: str, address: str) -> None:
        try:
            sock.bind(address)
        except zmq.ZMQError as exc:
            hint = ("stop the other process or pick another address" if exc.errno == zmq.EADDRINUSE
                    else "give an address like tcp://127.0.0.1:7401")
            raise BindError(f"cannot bind the {name} socket to {address}: {exc.strerror}; {hint} "
                            f"in NODE.toml [sockets] {name}") from None
        self.endpoints[name] = sock.getsockopt_string(zmq.LAST_ENDPOINT)

    def bind(self) -> None:
        """Create and bind the three sockets; raises :class:`BindError`."""
        limits = self.config.limits
        sockets = self.config.sockets
        self.sub = self._socket(zmq.SUB)
        self.sub.setsockopt(zmq.MAXMSGSIZE, limits.max_message_bytes)
        self.sub.setsockopt(zmq.RCVHWM, limits.input_queue_messages)
        self.sub.setsockopt(zmq.SUBSCRIBE, b"")  # every topic: unknown ones are reported, not ignored
        self.pub = self._socket(zmq.PUB)
        self.rep = self._socket(zmq.REP)
        self.rep.setsockopt(zmq.MAXMSGSIZE, limits.max_message_bytes)
        self.wake = self._socket(zmq.PAIR)
        self.wake.bind(self._wake_address)
        self.monitor = self.sub.get_monitor_socket(zmq.EVENT_DISCONNECTED)
        self._sockets.append(self.monitor)
        self._bind(self.sub, "inputs", sockets.inputs)
        self._bind(self.pub, "outputs", sockets.outputs)
        self._bind(self.rep, "control", sockets.control)
        record = self.config.record
        if record.path:
            from .recording import LogFormatError, LogWriter

            try:
                self.recorder = LogWriter(record.path, append=record.append,
                                          fsync_every_s=record.fsync_every_s or None)
            except LogFormatError as exc:
                raise BindError(f"{exc}; or change [record] path in NODE.toml") from None
            log.info("recording to %s", record.path)

    def _record(self, method: str, *args) -> None:
        """Write one record; a failing log is reported once and switched off, the node goes on."""
        if self.recorder is None:
            return
        try:
            getattr(self.recorder, method)(*args, time.time())
        except Exception as exc:  # noqa: BLE001 - disk full, closed file: never stop the node for it
            recorder, self.recorder = self.recorder, None
            log.error("recording stopped: %s", exc)
            self._publish("event", {"code": "record_failed", "detail": f"recording stopped: {exc}"})
            try:
                recorder.close()
            except Exception:  # noqa: BLE001
                pass

    # ------------------------------------------------------------------ loop
    def serve(self, stop: threading.Event) -> None:
        """Run until ``stop`` is set (checked at least every 0.1 s)."""
        self.worker = PlanWorker(self.planner, self.context, self._wake_address)
        self.worker.begin()
        log.info("veer node listening: inputs %s, outputs %s, control %s",
                 self.endpoints["inputs"], self.endpoints["outputs"], self.endpoints["control"])
        poller = zmq.Poller()
        poller.register(self.sub, zmq.POLLIN)
        poller.register(self.wake, zmq.POLLIN)
        poller.register(self.monitor, zmq.POLLIN)
        self._handle("tick", None)
        while not stop.is_set():
            poller.register(self.rep, 0 if self._reply_due else zmq.POLLIN)
            wait_ms = max(1, min(_POLL_MAX_MS, int(1000 * self._until_status_s()) + 1))
            ready = dict(poller.poll(wait_ms))
            if self.wake in ready:
                self._collect_results()
            if self.sub in ready:
                self._drain_inputs()
            if self.rep in ready and not self._reply_due:
                self._serve_control()
            if self.monitor in ready:
                self._read_monitor()
            self._handle("tick", None)

    def _until_status_s(self) -> float:
        return self.core.last_status_s + self.config.status_interval_s - self.clock()

    def _handle(self, kind: str, message) -> None:
        try:
            actions = self.core.on_input(kind, message, self.clock())
        except Exception as exc:  # noqa: BLE001 - one bad input must not stop the node
            log.exception("node failed on a %s input", kind)
            actions = [Publish("event", {"code": "internal_error", "detail": f"{type(exc).__name__}: {exc}"})]
            if kind == "control":
                actions.append(Reply({"ok": False, "error": f"the node failed on this request ({exc})",
                                      "code": "internal_error"}))
        for action in actions:
            if isinstance(action, Publish):
                self._publish(action.topic, action.body)
            elif isinstance(action, Reply):
                self._reply(action.body)
            elif isinstance(action, StartJob):
                self.worker.start(action.job)
            elif isinstance(action, CancelJob):
                self.worker.cancel(action.job_id)

    def _publish(self, topic: str, body: dict) -> None:
        frames = encode_output(topic, body)
        try:
            self.pub.send_multipart(frames, zmq.NOBLOCK)
        except zmq.Again:  # a subscriber at its high-water mark misses this one
            pass
        if self.recorder is not None:
            self._record("write_output", topic, {"v": 1, "kind": topic, **body})

    def _reply(self, body: dict) -> None:
        if not self._reply_due:
            log.error("a reply with no request to answer was dropped: %s", body)
            return
        self._reply_due = False
        self.rep.send(encode(body))
        self._record("write_control", self._request_message, body)
        self._request_message = None

    def _collect_results(self) -> None:
        while True:
            try:
                self.wake.recv(zmq.NOBLOCK)
            except zmq.Again:
                break
        while True:
            try:
                result = self.worker.results.get_nowait()
            except Exception:  # noqa: BLE001 - queue.Empty
                break
            self._handle("job_done", result)

    def _drain_inputs(self) -> None:
        limits = self.config.limits
        newest_grid, newest_pose, skipped = None, None, 0
        for _ in range(limits.drain_max_messages):
            try:
                frames = self.sub.recv_multipart(zmq.NOBLOCK, copy=False)
            except zmq.Again:
                break
            buffers = [frame.buffer for frame in frames]
            try:
                topic, message = unpack_input(buffers, max_bytes=limits.max_message_bytes)
                self._record("write_input", topic, message)
                item = check_input(topic, message, size_bytes=len(buffers[1]), max_cells=limits.max_grid_cells)
            except WireError as exc:
                self._handle("rejected", (_topic_of(buffers), exc))
                continue
            if isinstance(item, GridInput):
                skipped += newest_grid is not None
                newest_grid = item
            else:
                newest_pose = item
        if newest_pose is not None:
            self._handle("pose", newest_pose)
        if newest_grid is not None:
            try:
                decoded = decode_grid(newest_grid, limits.max_grid_cells)
            except WireError as exc:
                self._handle("rejected", ("grid", exc))
            else:
                self._handle("grid", decoded)
        if skipped:
            self._handle("skipped", skipped)

    def _serve_control(self) -> None:
        try:
            frames = self.rep.recv_multipart(zmq.NOBLOCK, copy=False)
        except zmq.Again:
            return
        self._reply_due = True
        self._request_message = None
        try:
            self._request_message = unpack_control([f.buffer for f in frames],
                                                   max_bytes=self.config.limits.max_control_bytes)
            request = check_control(self._request_message)
        except WireError as exc:
            request = exc
        self._handle("control", request)

    def _read_monitor(self) -> None:
        while True:
            try:
                frames = self.monitor.recv_multipart(zmq.NOBLOCK)
            except zmq.Again:
                return
            event = parse_monitor_message(frames)
            if event["event"] == zmq.EVENT_DISCONNECTED:
                detail = (f"an input sender disconnected: normal when a client exits; ZeroMQ also drops "
                          f"a sender of a message over {self.config.limits.max_message_bytes} bytes this way")
                log.info("event input_disconnected: %s", detail)
                self._publish("event", {"code": "input_disconnected", "detail": detail})

    # ------------------------------------------------------------------ stop
    def close(self) -> None:
        """Stop the worker and close every socket at once (linger 0)."""
        if self.worker is not None:
            self.worker.stop(0.5)
        try:
            self.sub.disable_monitor()
        except (zmq.ZMQError, AttributeError):
            pass
        if self.recorder is not None:
            try:
                self.recorder.close()
            except Exception as exc:  # noqa: BLE001
                log.error("closing the recording failed: %s", exc)
            self.recorder = None
        for sock in self._sockets:
            sock.close(linger=0)
        if self.worker is None or not self.worker.alive:
            self.context.term()
        # else: the planning thread is still inside a non-cancellable step; it is a
        # daemon thread, and terminating the context would wait for it
