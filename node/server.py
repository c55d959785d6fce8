"""The socket loop of the node: bind, poll, drain inputs, answer control, publish, stop.

Three sockets (docs/protocol.md): SUB for grids and poses, PUB for paths, status and
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
- ``ZMQ_SNDHWM`` on PUB = ``limits.output_queue_messages`` and ``ZMQ_RCVHWM`` /
  ``ZMQ_SNDHWM`` on REP = ``limits.control_queue_messages``: every queue is bounded; PUB
  drops for a subscriber at its mark and never blocks;
- ``ZMQ_LINGER`` = 0 everywhere, so stopping never waits for unsent messages;
- ZMQ_CONFLATE is not used: it keeps a single frame, and inputs are two frames.

Security (docs/protocol.md, "Security"): with ``[security]`` keys the three sockets are
CURVE servers (ZeroMQ RFC 26/CurveZMQ; libzmq ``zmq_curve(7)``) and pyzmq's
``ThreadAuthenticator``, the ZAP handler of RFC 27, lets in only the client public keys
of ``allowed_clients_dir``. It is started before any bind. A socket monitor on each
socket sees failed handshakes (``ZMQ_EVENT_HANDSHAKE_FAILED_*``, libzmq
``zmq_socket_monitor(3)``): the node logs them and publishes ``connection_refused``,
never with key material. Without CURVE, a non-loopback address is refused unless
``allow_insecure_bind`` (then a warning is logged).

Limits each hit of which is an ``event`` (at most one per second per code and socket,
with ``count`` the hits since the last one): ``rate_limited`` (control token bucket),
``input_queue_full`` / ``input_backlog`` (a pass read the input high-water mark / the
drain maximum), ``plan_deadline`` (a plan stopped at its time budget),
``connection_refused`` (with CURVE on; without it a failed handshake, a peer of the wrong
socket type, is only logged at DEBUG); ``too_large`` inputs are reported one by one as before.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass

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
from .config import ConfigError, NodeConfig, check_exposure, load_curve_keys, secret_file_is_private
from .core import CancelJob, NodeCore, Publish, Reply, StartJob
from .worker import PlanWorker

__all__ = ["NodeServer", "BindError"]

log = logging.getLogger("veer.node")

_POLL_MAX_MS = 100  # longest wait between checks of the stop flag
_REPORT_EVERY_S = 1.0  # a limit hit is reported at once, then at most this often (with a count)

_HANDSHAKE_FAILED = {
    zmq.EVENT_HANDSHAKE_FAILED_AUTH: ("key_not_allowed", "its key is not among the allowed client keys"),
    zmq.EVENT_HANDSHAKE_FAILED_PROTOCOL: ("handshake_error", "a handshake error (a wrong node public key, a "
                                                             "client without CURVE, or a refused client trying "
                                                             "again)"),
    zmq.EVENT_HANDSHAKE_FAILED_NO_DETAIL: ("handshake_failed", "a failed handshake (a client without keys, or "
                                                               "one that does not use CURVE)"),
}
_HANDSHAKE_EVENTS = 0
for _event in _HANDSHAKE_FAILED:
    _HANDSHAKE_EVENTS |= _event


class BindError(RuntimeError):
    """An address the node cannot bind (in use, malformed, not permitted), or a log it cannot write; one line."""


class TokenBucket:
    """``rate_per_s`` tokens a second, at most ``size`` saved up; :meth:`take` spends one if there is one.

    The token bucket of traffic shaping (Tanenbaum, Computer Networks, 5th ed., section
    5.4.2); the clock is passed in, so a test drives it.
    """

    def __init__(self, rate_per_s: float, size: int, now_s: float):
        self.rate_per_s = float(rate_per_s)
        self.size = float(size)
        self.tokens = float(size)
        self.updated_s = now_s

    def take(self, now_s: float) -> bool:
        elapsed_s = max(0.0, now_s - self.updated_s)
        self.tokens = min(self.size, self.tokens + elapsed_s * self.rate_per_s)
        self.updated_s = now_s
        if self.tokens >= 1.0:
            self.tokens -= 1.0
            return True
        return False


@dataclass
class _Pending:
    last_report_s: float
    count: int = 0
    detail: str = ""
    fields: dict | None = None


class ReportThrottle:
    """Report the first hit of a key at once, then at most once per ``every_s`` with the count of hits since.

    ``hit`` returns the count to report now (0: hold it); ``due`` returns the held counts
    whose time has come, so a burst that stops is still reported.
    """

    def __init__(self, every_s: float = _REPORT_EVERY_S):
        self.every_s = every_s
        self._pending: dict[tuple, _Pending] = {}

    def hit(self, key: tuple, now_s: float, detail: str, fields: dict | None = None) -> int:
        pending = self._pending.get(key)
        if pending is None:
            self._pending[key] = _Pending(now_s)
            return 1
        pending.count += 1
        pending.detail, pending.fields = detail, fields
        if now_s - pending.last_report_s >= self.every_s:
            count, pending.count, pending.last_report_s = pending.count, 0, now_s
            return count
        return 0

    def due(self, now_s: float) -> list[tuple[tuple, int, str, dict | None]]:
        ready = []
        for key, pending in self._pending.items():
            if pending.count and now_s - pending.last_report_s >= self.every_s:
                ready.append((key, pending.count, pending.detail, pending.fields))
                pending.count, pending.last_report_s = 0, now_s
        return ready


class _AuthLog:
    """Stands in for the authenticator's logger: pyzmq's messages can carry client keys, so none pass.

    Only the fixed text of a warning or error goes on, to ``veer.node``, without its arguments.
    """

    def debug(self, *args, **kwargs) -> None:
        pass

    info = debug

    def warning(self, message, *args, **kwargs) -> None:
        text = str(message).split("%", 1)[0].strip(" :")
        log.warning("authenticator: %s", text)

    error = exception = critical = warning


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
        self.authenticator = None
        self._monitors: dict = {}  # monitor socket -> the name of the socket it watches
        self._failed_handshakes: dict[str, int] = {}  # per socket: disconnects still to be skipped
        self._throttle = ReportThrottle()
        self._bucket = TokenBucket(config.limits.control_requests_per_s, config.limits.control_burst_requests,
                                   clock())
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
        """Check exposure and keys, start the authenticator, create and bind the sockets; raises :class:`BindError`."""
        limits = self.config.limits
        sockets = self.config.sockets
        security = self.config.security
        try:
            warnings = check_exposure(self.config)  # decided before any socket is bound
            keys = load_curve_keys(security) if security.curve else None
        except ConfigError as exc:
            raise BindError(str(exc)) from None
        for warning in warnings:
            log.warning("%s", warning)
        if keys is not None:
            if not secret_file_is_private(security.secret_key_file):
                log.warning("the secret key file %s is readable by group or others; chmod 600 it",
                            security.secret_key_file)
            from zmq.auth.thread import ThreadAuthenticator

            self.authenticator = ThreadAuthenticator(self.context, log=_AuthLog())
            self.authenticator.start()  # the ZAP handler must exist before a CURVE server binds (RFC 27)
            self.authenticator.configure_curve(domain="*", location=keys.allowed_clients_dir)
            log.info("CURVE on: %d allowed client key(s) in %s", keys.allowed_count, keys.allowed_clients_dir)
        self.sub = self._socket(zmq.SUB)
        self.sub.setsockopt(zmq.MAXMSGSIZE, limits.max_message_bytes)
        self.sub.setsockopt(zmq.RCVHWM, limits.input_queue_messages)
        self.sub.setsockopt(zmq.SUBSCRIBE, b"")  # every topic: unknown ones are reported, not ignored
        self.pub = self._socket(zmq.PUB)
        self.pub.setsockopt(zmq.SNDHWM, limits.output_queue_messages)
        self.rep = self._socket(zmq.REP)
        self.rep.setsockopt(zmq.MAXMSGSIZE, limits.max_message_bytes)
        self.rep.setsockopt(zmq.RCVHWM, limits.control_queue_messages)
        self.rep.setsockopt(zmq.SNDHWM, limits.control_queue_messages)
        if keys is not None:
            for sock in (self.sub, self.pub, self.rep):
                sock.setsockopt(zmq.CURVE_SERVER, 1)
                sock.setsockopt(zmq.CURVE_PUBLICKEY, keys.public)
                sock.setsockopt(zmq.CURVE_SECRETKEY, keys.secret)
        del keys
        self.wake = self._socket(zmq.PAIR)
        self.wake.bind(self._wake_address)
        for sock, name, events in ((self.sub, "inputs", zmq.EVENT_DISCONNECTED | _HANDSHAKE_EVENTS),
                                   (self.pub, "outputs", _HANDSHAKE_EVENTS),
                                   (self.rep, "control", zmq.EVENT_DISCONNECTED | _HANDSHAKE_EVENTS)):
            monitor = sock.get_monitor_socket(events)
            self._sockets.append(monitor)
            self._monitors[monitor] = name
            self._failed_handshakes[name] = 0
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
        for monitor in self._monitors:
            poller.register(monitor, zmq.POLLIN)
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
            for monitor in self._monitors:
                if monitor in ready:
                    self._read_monitor(monitor)
            self._report_held()
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
                if not self.worker.start(action.job):  # cannot happen while the core runs one job at a time
                    log.error("the planning queue is full; job %d dropped", action.job.job_id)
                    self._publish("event", {"code": "internal_error",
                                            "detail": "the planning queue is full; a plan was dropped"})
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
            self._note_deadline(result)
            self._handle("job_done", result)

    def _note_deadline(self, result) -> None:
        """A plan that stopped at its time budget is a limit hit: report it (besides its no_path)."""
        if result.outcome != "no_path" or result.code != "deadline":
            return
        budget_s = min(self.config.replan.plan_deadline_s, self.config.search.max_time_s)
        self._limit_hit("plan_deadline", f"a plan stopped at its time limit of {budget_s:g} s without a path "
                        f"([replan] plan_deadline_s, [search] max_time_s)", job=result.job.kind)

    def _limit_hit(self, code: str, detail: str, key: str = "", **fields) -> None:
        """Log and publish a limit hit as an event, at once, then at most once a second per (code, key)."""
        count = self._throttle.hit((code, key), self.clock(), detail, fields)
        if count:
            self._report(code, count, detail, fields)

    def _report(self, code: str, count: int, detail: str, fields: dict | None) -> None:
        log.info("event %s (%d): %s", code, count, detail)
        self._publish("event", {"code": code, "detail": detail, "count": count, **(fields or {})})

    def _report_held(self) -> None:
        for (code, _key), count, detail, fields in self._throttle.due(self.clock()):
            self._report(code, count, detail, fields)

    def _drain_inputs(self) -> None:
        limits = self.config.limits
        newest_grid, newest_pose, skipped, read = None, None, 0, 0
        for _ in range(limits.drain_max_messages):
            try:
                frames = self.sub.recv_multipart(zmq.NOBLOCK, copy=False)
            except zmq.Again:
                break
            read += 1
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
        if read >= limits.input_queue_messages:
            self._limit_hit("input_queue_full", f"{read} inputs were waiting in one pass, the input high-water "
                            f"mark is {limits.input_queue_messages} ([limits] input_queue_messages): older "
                            f"inputs may have been dropped; only the newest grid and pose count")
        if read >= limits.drain_max_messages and self.sub.getsockopt(zmq.EVENTS) & zmq.POLLIN:
            self._limit_hit("input_backlog", f"a pass read the most inputs it may, {limits.drain_max_messages} "
                            f"([limits] drain_max_messages); the rest wait for the next pass")

    def _serve_control(self) -> None:
        try:
            frames = self.rep.recv_multipart(zmq.NOBLOCK, copy=False)
        except zmq.Again:
            return
        self._reply_due = True
        self._request_message = None
        if not self._bucket.take(self.clock()):
            limits = self.config.limits
            detail = (f"more than {limits.control_requests_per_s:g} control requests per second (burst "
                      f"{limits.control_burst_requests}, [limits] control_requests_per_s); wait and send again")
            self._reply({"ok": False, "error": detail, "code": "rate_limited"})
            self._limit_hit("rate_limited", detail)
            return
        try:
            self._request_message = unpack_control([f.buffer for f in frames],
                                                   max_bytes=self.config.limits.max_control_bytes)
            request = check_control(self._request_message)
        except WireError as exc:
            request = exc
        self._handle("control", request)

    def _read_monitor(self, monitor) -> None:
        name = self._monitors[monitor]
        while True:
            try:
                frames = monitor.recv_multipart(zmq.NOBLOCK)
            except zmq.Again:
                return
            event = parse_monitor_message(frames)
            kind = event["event"]
            if kind in _HANDSHAKE_FAILED:
                # the disconnect that follows a failed handshake is part of the refusal, not a client leaving
                self._failed_handshakes[name] += 1
                reason, why = _HANDSHAKE_FAILED[kind]
                detail = f"refused a connection to the {name} socket: {why}"
                if self.authenticator is not None:
                    self._limit_hit("connection_refused", detail, key=name, socket=name, reason=reason)
                else:  # without CURVE only a peer of the wrong socket type or protocol fails: logged, not published
                    log.debug("%s", detail)
            elif kind == zmq.EVENT_DISCONNECTED:
                if self._failed_handshakes[name]:
                    self._failed_handshakes[name] -= 1
                    continue
                what = "an input sender" if name == "inputs" else "a control client"
                code = "input_disconnected" if name == "inputs" else "control_disconnected"
                detail = (f"{what} disconnected: normal when a client exits; ZeroMQ also drops "
                          f"a sender of a message over {self.config.limits.max_message_bytes} bytes this way")
                log.info("event %s: %s", code, detail)
                self._publish("event", {"code": code, "detail": detail})

    # ------------------------------------------------------------------ stop
    def close(self) -> None:
        """Stop the worker and close every socket at once (linger 0)."""
        if self.worker is not None:
            self.worker.stop(0.5)
        for sock in (getattr(self, "sub", None), getattr(self, "pub", None), getattr(self, "rep", None)):
            try:
                sock.disable_monitor()
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
        if self.authenticator is not None:
            self.authenticator.stop()
            self.authenticator = None
        if self.worker is None or not self.worker.alive:
            self.context.term()
        # else: the planning thread is still inside a non-cancellable step; it is a
        # daemon thread, and terminating the context would wait for it
