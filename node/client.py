"""Client of a running node, for robots and test harnesses.

::

    from veer.node.client import NodeClient

    with NodeClient() as node:                      # the node's default loopback addresses
        node.send_grid(shades, map_id=1, cell_size_m=0.1)   # uint8 grey levels, row 0 at the top
        node.send_pose(5.0, 10.0, 0.0)
        goal_id = node.set_goal(35.0, 10.0, 0.0)
        path = node.wait_path(timeout_s=10.0, goal_id=goal_id)

Inputs go out on a PUB socket (XPUB, so :meth:`NodeClient.connect` can wait until the
node's SUB has subscribed and the first grid is not lost); outputs arrive on a SUB
socket; control requests use REQ with a timeout (the socket is rebuilt after a timeout,
since a REQ socket that missed its reply cannot send again).

With a node that runs CURVE (docs/protocol.md, "Security"), pass the client's secret key
file and the node's public key file; every socket then authenticates and encrypts::

    NodeClient(secret_key_file="keys/robot1/robot1.key_secret", node_public_key_file="keys/node/node.key")

``inputs`` may be a list of addresses: the input socket connects to each (the node and,
say, a recorder), and every message goes to all of them.
"""

from __future__ import annotations

import time
from collections import deque
from pathlib import Path

import msgpack
import numpy as np
import zmq

__all__ = ["NodeClient", "NodeTimeout", "NodeRequestError", "DEFAULT_ADDRESSES", "grid_message"]

DEFAULT_ADDRESSES = {
    "inputs": "tcp://127.0.0.1:7401",
    "outputs": "tcp://127.0.0.1:7402",
    "control": "tcp://127.0.0.1:7403",
}

_SHADE_FREE = 255  # grey levels of a map image (docs/files.md: light = free, dark = occupied)
_SHADE_OCCUPIED = 0
_SHADE_UNKNOWN = 128
_BACKLOG_MAX = 10_000  # outputs kept aside by wait_for(keep_others=True); the oldest go first
_STATUS_POLL_S = 0.02  # wait_accepted asks for status at most this often (the node limits requests per second)


class NodeTimeout(TimeoutError):
    """The node did not answer, or the awaited message did not come, within the timeout."""


class NodeRequestError(RuntimeError):
    """The node answered ``{"ok": false}``; ``code`` and the message come from the node."""

    def __init__(self, code: str, error: str):
        super().__init__(f"{code}: {error}")
        self.code = code
        self.error = error


def grid_message(cells, *, map_id, cell_size_m: float | None = None, origin_m=(0.0, 0.0), encoding: str | None = None,
                 classes: bool = False, **extra) -> dict:
    """Build a grid message from an array or an image file.

    ``cells`` is a 2-D uint8 array of grey shades (row 0 top; dark = occupied, light =
    free, as in a map image), or with ``classes=True`` of cell classes (0 free, 1
    occupied, 2 unknown), or the path of a PNG / PGM file (sent as is; ``cell_size_m``
    from the argument or the file's sidecar ``NAME.toml``). ``encoding`` "raw" (default
    for arrays), "png" or "pgm".
    """
    if isinstance(cells, (str, Path)):
        path = Path(cells)
        data = path.read_bytes()
        encoding = encoding or ("png" if data[:8] == b"\x89PNG\r\n\x1a\n" else "pgm")
        sidecar = path.with_suffix(".toml")
        if sidecar.is_file():
            import tomllib

            values = tomllib.loads(sidecar.read_text(encoding="utf-8"))
            cell_size_m = cell_size_m if cell_size_m is not None else values.get("cell_size_m")
            if tuple(origin_m) == (0.0, 0.0) and "origin_m" in values:
                origin_m = values["origin_m"]
            for key in ("occupied_below", "free_above", "unknown_is"):
                if key in values:
                    extra.setdefault(key, values[key])
        import cv2

        image = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
        if image is None:
            raise ValueError(f"{path}: not an image this client can size; send it as an array")
        rows, cols = image.shape[:2]
        if cell_size_m is None:
            raise ValueError(f"{path}: no cell size; pass cell_size_m or write it in {sidecar}")
        payload = data
    else:
        array = np.asarray(cells)
        if array.ndim != 2:
            raise ValueError(f"grid cells must be a 2-D array, got shape {array.shape}")
        if classes:
            shades = np.full(array.shape, _SHADE_FREE, np.uint8)
            shades[array == 1] = _SHADE_OCCUPIED
            shades[array == 2] = _SHADE_UNKNOWN
        else:
            shades = np.ascontiguousarray(array, dtype=np.uint8)
        rows, cols = shades.shape
        encoding = encoding or "raw"
        if encoding == "raw":
            payload = shades.tobytes()
        else:
            import cv2

            ok, buffer = cv2.imencode(".png" if encoding == "png" else ".pgm", shades)
            if not ok:
                raise ValueError(f"cannot encode the grid as {encoding}")
            payload = buffer.tobytes()
        if cell_size_m is None:
            raise ValueError("pass cell_size_m (metres per cell) with an array grid")
    return {"v": 1, "kind": "grid", "map_id": map_id, "rows": int(rows), "cols": int(cols),
            "cell_size_m": float(cell_size_m), "origin_m": [float(origin_m[0]), float(origin_m[1])],
            "encoding": encoding, "cells": payload, **extra}


class NodeClient:
    """Talk to a node; a context manager that closes its sockets on exit.

    Parameters
    ----------
    inputs : str or list of str
        The node's input address, or several: the input socket connects to each (ZeroMQ
        PUB sockets may connect to several endpoints) and every grid and pose goes to all.
    outputs, control : str
        The node's output and control addresses (defaults: the node's loopback defaults).
    timeout_s : float
        Default wait of every request and every ``wait_*`` call.
    connect : bool
        Connect at once (and wait until every input address subscribed and a status arrived).
    secret_key_file, node_public_key_file : path, optional
        CURVE: this client's key pair (``NAME.key_secret`` from ``veer keys``) and the
        node's public key (its ``NAME.key``); both or neither. The node lets the client
        in only when its public key is in the node's allowed folder.
    """

    def __init__(self, inputs: str | list[str] = DEFAULT_ADDRESSES["inputs"],
                 outputs: str = DEFAULT_ADDRESSES["outputs"], control: str = DEFAULT_ADDRESSES["control"], *,
                 timeout_s: float = 10.0, connect: bool = True, secret_key_file=None, node_public_key_file=None):
        self.inputs = [inputs] if isinstance(inputs, str) else [str(address) for address in inputs]
        if not self.inputs or not all(isinstance(address, str) and address for address in self.inputs):
            raise ValueError(f"inputs must be an address or a non-empty list of addresses, got {inputs!r}")
        self.addresses = {"inputs": inputs if isinstance(inputs, str) else list(self.inputs),
                          "outputs": outputs, "control": control}
        self.timeout_s = timeout_s
        self._curve = self._curve_options(secret_key_file, node_public_key_file)
        self.context = zmq.Context()
        self._pub = self._sub = self._req = None
        self._backlog: deque = deque(maxlen=_BACKLOG_MAX)
        self._map_counter = 0
        if connect:
            try:
                self.connect()
            except BaseException:
                self.close()
                raise

    # ------------------------------------------------------------------ lifecycle
    @staticmethod
    def _curve_options(secret_key_file, node_public_key_file) -> list[tuple[int, bytes]]:
        """Socket options of a CURVE client (libzmq ``zmq_curve(7)``), or none; raises ValueError in one line."""
        if secret_key_file is None and node_public_key_file is None:
            return []
        if secret_key_file is None or node_public_key_file is None:
            raise ValueError("CURVE needs both secret_key_file (this client's NAME.key_secret) and "
                             "node_public_key_file (the node's NAME.key); pass both or neither")
        from .config import read_key_file

        public, secret = read_key_file(secret_key_file, secret=True)
        node_public, _ = read_key_file(node_public_key_file, secret=False)
        return [(zmq.CURVE_SERVERKEY, node_public), (zmq.CURVE_PUBLICKEY, public), (zmq.CURVE_SECRETKEY, secret)]

    def _socket(self, kind: int) -> zmq.Socket:
        sock = self.context.socket(kind)
        sock.setsockopt(zmq.LINGER, 0)
        for option, value in self._curve:
            sock.setsockopt(option, value)
        return sock

    def connect(self, timeout_s: float | None = None) -> None:
        """Connect all three sockets; wait until every input address subscribed and a status arrived."""
        timeout_s = self.timeout_s if timeout_s is None else timeout_s
        self._pub = self._socket(zmq.XPUB)
        self._pub.setsockopt(zmq.XPUB_VERBOSE, 1)  # one subscription message from each receiver, not just the first
        for address in self.inputs:
            self._pub.connect(address)
        self._sub = self._socket(zmq.SUB)
        self._sub.setsockopt(zmq.SUBSCRIBE, b"")
        self._sub.connect(self.addresses["outputs"])
        self._new_req()
        end = time.monotonic() + timeout_s
        hint = "is it running" + (", and is this client's public key in its allowed folder?" if self._curve else "?")
        for heard in range(len(self.inputs)):
            if not self._pub.poll(max(1, int(1000 * (end - time.monotonic())))):
                raise NodeTimeout(f"{heard} of {len(self.inputs)} input address(es) {', '.join(self.inputs)} "
                                  f"subscribed within {timeout_s} s; {hint}")
            self._pub.recv()  # a subscription message
        try:
            self.wait_for("status", timeout_s=max(0.01, end - time.monotonic()))
        except NodeTimeout:
            raise NodeTimeout(f"no status from the node at {self.addresses['outputs']} within {timeout_s} s; "
                              f"{hint}") from None

    def _new_req(self) -> None:
        if self._req is not None:
            self._req.close(linger=0)
        self._req = self._socket(zmq.REQ)
        self._req.connect(self.addresses["control"])

    def close(self) -> None:
        for sock in (self._pub, self._sub, self._req):
            if sock is not None:
                sock.close(linger=0)
        self._pub = self._sub = self._req = None
        self.context.term()

    def __enter__(self) -> "NodeClient":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ inputs
    def send_raw(self, topic: bytes | str, payload: bytes) -> None:
        """Send two frames as they are (for tests of malformed input)."""
        topic = topic.encode() if isinstance(topic, str) else topic
        self._pub.send_multipart([topic, payload])

    def send_frames(self, frames: list[bytes]) -> None:
        self._pub.send_multipart(frames)

    def send_grid(self, cells, *, map_id=None, cell_size_m: float | None = None, origin_m=(0.0, 0.0),
                  encoding: str | None = None, classes: bool = False, **extra):
        """Send a grid (array or image file, see :func:`grid_message`); returns its map_id."""
        if map_id is None:
            self._map_counter += 1
            map_id = self._map_counter
        message = grid_message(cells, map_id=map_id, cell_size_m=cell_size_m, origin_m=origin_m,
                               encoding=encoding, classes=classes, **extra)
        self.send_raw(b"grid", msgpack.packb(message, use_bin_type=True))
        return map_id

    def wait_accepted(self, map_id=None, pose=None, timeout_s: float | None = None) -> dict:
        """Wait until the node's status shows grid ``map_id`` (and ``pose`` [x, y, heading]) taken in.

        Inputs and control requests travel on different sockets, and ZeroMQ keeps no order
        between sockets: a goal sent right after a grid may reach the node first. Call this
        between the two when the goal must be planned on that grid. Returns the status.
        """
        timeout_s = self.timeout_s if timeout_s is None else timeout_s
        end = time.monotonic() + timeout_s
        while True:
            status = self.status()
            if (map_id is None or status["map_id"] == map_id) and (
                    pose is None or status["pose"] == [float(v) for v in pose]):
                return status
            if time.monotonic() >= end:
                raise NodeTimeout(f"the node did not take in map {map_id!r} / pose {pose} within {timeout_s} s "
                                  f"(status shows map {status['map_id']!r}); look for an event saying why")
            time.sleep(_STATUS_POLL_S)

    def send_pose(self, x_m: float, y_m: float, heading_rad: float, t_s: float | None = None) -> None:
        t_s = time.time() if t_s is None else t_s
        message = {"v": 1, "kind": "pose", "x_m": float(x_m), "y_m": float(y_m),
                   "heading_rad": float(heading_rad), "t_s": float(t_s)}
        self.send_raw(b"pose", msgpack.packb(message, use_bin_type=True))

    # ------------------------------------------------------------------ control
    def request(self, message: dict | bytes, timeout_s: float | None = None) -> dict:
        """Send one control request (a dict, or raw bytes) and return the answer as it is."""
        timeout_s = self.timeout_s if timeout_s is None else timeout_s
        payload = message if isinstance(message, bytes) else msgpack.packb(message, use_bin_type=True)
        wait_ms = max(1, int(1000 * timeout_s))
        # a REQ socket with no pipe to the node (not up yet, or refused by CURVE) blocks in send
        self._req.setsockopt(zmq.SNDTIMEO, wait_ms)
        try:
            self._req.send(payload)
        except zmq.Again:
            self._new_req()
            raise NodeTimeout(f"could not reach the node at {self.addresses['control']} within {timeout_s} s") from None
        if not self._req.poll(wait_ms):
            self._new_req()
            raise NodeTimeout(f"no answer from the node at {self.addresses['control']} within {timeout_s} s")
        return msgpack.unpackb(self._req.recv(), raw=False)

    def _ok(self, message: dict, timeout_s: float | None = None) -> dict:
        answer = self.request({"v": 1, **message}, timeout_s)
        if not answer.get("ok"):
            raise NodeRequestError(answer.get("code", "?"), answer.get("error", ""))
        return answer

    def set_goal(self, x_m: float, y_m: float, heading_rad: float, reverse: bool | None = None) -> int:
        """Set the goal; returns its goal_id."""
        message = {"op": "goal", "x_m": float(x_m), "y_m": float(y_m), "heading_rad": float(heading_rad)}
        if reverse is not None:
            message["reverse"] = bool(reverse)
        return self._ok(message)["goal_id"]

    def cancel(self):
        """Drop the goal; returns the goal_id dropped (or None)."""
        return self._ok({"op": "cancel"})["goal_id"]

    def plan(self, start, goal, reverse: bool | None = None, timeout_s: float | None = None) -> dict:
        """Plan once on the node's current grid; returns the path JSON (found or no_path)."""
        message = {"op": "plan", "start": [float(v) for v in start], "goal": [float(v) for v in goal]}
        if reverse is not None:
            message["reverse"] = bool(reverse)
        return self._ok(message, timeout_s)["path"]

    def status(self) -> dict:
        return self._ok({"op": "status"})

    def current_path(self) -> dict | None:
        """The last path message the node published (None before the first)."""
        return self._ok({"op": "path"})["path"]

    # ------------------------------------------------------------------ outputs
    def _receive(self, timeout_s: float):
        if not self._sub.poll(max(0, int(1000 * timeout_s))):
            return None
        topic, payload = self._sub.recv_multipart()
        return topic.decode("utf-8", "replace"), msgpack.unpackb(payload, raw=False)

    def wait_for(self, kind: str | tuple, timeout_s: float | None = None, predicate=None, keep_others: bool = False):
        """The next output of ``kind`` (path, status, event, or a tuple of them) for which ``predicate`` holds.

        Other messages read meanwhile are dropped (or kept for later calls with
        ``keep_others``). Raises :class:`NodeTimeout`.
        """
        kinds = (kind,) if isinstance(kind, str) else tuple(kind)
        timeout_s = self.timeout_s if timeout_s is None else timeout_s
        end = time.monotonic() + timeout_s
        kept = deque(maxlen=_BACKLOG_MAX)
        try:
            while self._backlog:
                topic, message = self._backlog.popleft()
                if topic in kinds and (predicate is None or predicate(message)):
                    return message
                if keep_others:
                    kept.append((topic, message))
            while True:
                left = end - time.monotonic()
                if left <= 0:
                    raise NodeTimeout(f"no {'/'.join(kinds)} message within {timeout_s} s")
                item = self._receive(left)
                if item is None:
                    continue
                topic, message = item
                if topic in kinds and (predicate is None or predicate(message)):
                    return message
                if keep_others:
                    kept.append(item)
        finally:
            self._backlog.extendleft(reversed(kept))

    def wait_path(self, timeout_s: float | None = None, goal_id: int | None = None, after_seq: int = 0,
                  map_id=None) -> dict:
        """The next path message (for ``goal_id``, with seq > ``after_seq``, on ``map_id`` when given)."""
        def wanted(message):
            return (message.get("seq", 0) > after_seq and (goal_id is None or message.get("goal_id") == goal_id)
                    and (map_id is None or message.get("map_id") == map_id))
        return self.wait_for("path", timeout_s, wanted)

    def wait_status(self, timeout_s: float | None = None, predicate=None) -> dict:
        return self.wait_for("status", timeout_s, predicate)

    def wait_event(self, code: str | None = None, timeout_s: float | None = None) -> dict:
        return self.wait_for("event", timeout_s, None if code is None else (lambda m: m.get("code") == code))

    def drain(self, timeout_s: float = 0.0) -> list[tuple[str, dict]]:
        """Every output waiting now (and arriving within ``timeout_s``), in order."""
        items = list(self._backlog)
        self._backlog.clear()
        end = time.monotonic() + timeout_s
        while True:
            item = self._receive(max(0.0, end - time.monotonic()))
            if item is None:
                return items
            items.append(item)

