"""The wire format of the node: msgpack maps with ``"v": 1``, checked at the edge.

This is the one module that knows msgpack. Everything that arrives from a socket goes
through :func:`decode_input` (SUB: two frames, topic and payload) or
:func:`decode_control` (REP: one frame); everything that leaves goes through
:func:`encode`. A message that is not msgpack, not a map, of another version, too large,
or has a field missing, mistyped or out of range raises :class:`WireError`, whose
``code`` and one-line ``detail`` go into the node's answer or ``event`` unchanged.

Numbers: wherever a field is a float, any msgpack integer or float is accepted; a bool
is not a number; NaN and infinities are refused. Grids are validated by
``veer.maps.grid_from_message``, the same checks as map files.

Full field list and error codes: docs/protocol.md.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass

import msgpack
import numpy as np

from veer.maps import GRID_ENCODINGS, MapError, OccupancyGrid, grid_from_message

__all__ = [
    "PROTOCOL_VERSION",
    "INPUT_TOPICS",
    "OUTPUT_TOPICS",
    "CONTROL_OPS",
    "MAX_MAP_ID_CHARS",
    "WireError",
    "GridInput",
    "PoseInput",
    "ControlRequest",
    "unpack_input",
    "check_input",
    "decode_input",
    "decode_grid",
    "unpack_control",
    "check_control",
    "decode_control",
    "encode",
    "encode_output",
]

PROTOCOL_VERSION = 1
INPUT_TOPICS = ("grid", "pose")
OUTPUT_TOPICS = ("path", "status", "event")
CONTROL_OPS = ("goal", "cancel", "plan", "status", "path")
MAX_MAP_ID_CHARS = 256
"""Longest string ``map_id`` accepted (an int map_id is any 64-bit msgpack integer)."""


class WireError(ValueError):
    """A message refused at the edge: ``code`` (short name) and ``detail`` (one line)."""

    def __init__(self, code: str, detail: str):
        super().__init__(detail)
        self.code = code
        self.detail = detail


@dataclass(frozen=True)
class GridInput:
    """A grid message whose envelope passed the checks; ``grid`` is filled by :func:`decode_grid`."""

    map_id: int | str
    message: dict
    size_bytes: int
    grid: OccupancyGrid | None = None


@dataclass(frozen=True)
class PoseInput:
    """The robot's pose: metres, radians; ``t_s`` the sender's clock, seconds."""

    x_m: float
    y_m: float
    heading_rad: float
    t_s: float


@dataclass(frozen=True)
class ControlRequest:
    """A checked control request: ``op`` and its typed fields (see :data:`CONTROL_OPS`)."""

    op: str
    fields: dict


# ------------------------------------------------------------------ helpers


def _unpack(payload, what: str, max_bytes: int) -> dict:
    size = len(payload)
    if size > max_bytes:
        raise WireError("too_large", f"{what} is {size} bytes, more than the limit of {max_bytes}; send less")
    try:
        value = msgpack.unpackb(payload, raw=False, strict_map_key=True, use_list=True)
    except Exception as exc:  # noqa: BLE001 - msgpack raises many kinds for garbage
        raise WireError("bad_msgpack", f"{what} is not one msgpack value ({type(exc).__name__}); "
                        "send a msgpack map") from None
    if not isinstance(value, dict):
        raise WireError("bad_message", f"{what} must be a msgpack map, got {_type_name(value)}")
    if "v" not in value:
        raise WireError("bad_version", f'{what} has no "v" field; add "v": {PROTOCOL_VERSION}')
    version = value["v"]
    if isinstance(version, bool) or version != PROTOCOL_VERSION:
        raise WireError("bad_version", f'{what} has "v": {_short(version)}; this node speaks "v": {PROTOCOL_VERSION}')
    return value


def _type_name(value) -> str:
    return {dict: "map", list: "array", str: "string", bytes: "bin", bool: "bool", type(None): "nil"}.get(
        type(value), type(value).__name__
    )


def _short(value, limit: int = 60) -> str:
    if isinstance(value, int) and value.bit_length() > 200:
        return f"an integer of {len(str(value))} digits"
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _require(message: dict, field: str, what: str):
    if field not in message:
        raise WireError("missing_field", f"{what} needs the field {field!r}")
    return message[field]


def number(message: dict, field: str, what: str, *, default=None) -> float:
    """A finite float from an int or float field; refuses bool, NaN and infinities."""
    if field not in message and default is not None:
        return default
    value = _require(message, field, what)
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise WireError("bad_field", f"{what}: {field} must be a number, got {_type_name(value)} {_short(value)}")
    try:
        result = float(value)
    except OverflowError:  # an integer beyond any float (msgpack cannot carry one; a dict can)
        result = math.inf
    if not math.isfinite(result):
        raise WireError("bad_field", f"{what}: {field} must be a finite number, got {_short(value)}")
    return result


def _triple(message: dict, field: str, what: str) -> tuple[float, float, float]:
    value = _require(message, field, what)
    if not isinstance(value, list) or len(value) != 3:
        raise WireError("bad_field", f"{what}: {field} must be [x_m, y_m, heading_rad], got {_short(value)}")
    items = dict(zip("xyh", value))
    return tuple(number(items, key, f"{what} {field}") for key in "xyh")


def _flag(message: dict, field: str, what: str) -> bool | None:
    if field not in message or message[field] is None:
        return None
    value = message[field]
    if not isinstance(value, bool):
        raise WireError("bad_field", f"{what}: {field} must be true or false, got {_type_name(value)} {_short(value)}")
    return value


def _map_id(message: dict, what: str) -> int | str:
    value = _require(message, "map_id", what)
    if isinstance(value, bool) or not isinstance(value, (int, str)):
        raise WireError("bad_field", f"{what}: map_id must be an integer or a string, got {_type_name(value)}")
    if isinstance(value, str) and not 0 < len(value) <= MAX_MAP_ID_CHARS:
        raise WireError("bad_field", f"{what}: map_id must be 1 to {MAX_MAP_ID_CHARS} characters, got {len(value)}")
    return value


# ------------------------------------------------------------------ inputs


def _grid_envelope(message: dict, size_bytes: int, max_cells: int) -> GridInput:
    """Cheap checks of a grid message (types, sizes); the cells are decoded later."""
    what = "grid message"
    map_id = _map_id(message, what)
    for field in ("rows", "cols"):
        value = _require(message, field, what)
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise WireError("bad_field", f"{what}: {field} must be an integer >= 1, got {_short(value)}")
    rows, cols = message["rows"], message["cols"]
    if rows * cols > max_cells:
        raise WireError("too_large", f"{what}: rows x cols = {rows} x {cols} is more than the limit of "
                        f"{max_cells} cells; send a smaller grid")
    number(message, "cell_size_m", what)
    origin = _require(message, "origin_m", what)
    if not isinstance(origin, list) or len(origin) != 2:
        raise WireError("bad_field", f"{what}: origin_m must be [x_m, y_m], got {_short(origin)}")
    for axis, value in zip(("origin_m x", "origin_m y"), origin):
        number({axis: value}, axis, what)
    encoding = _require(message, "encoding", what)
    if encoding not in GRID_ENCODINGS:
        raise WireError("bad_field", f'{what}: encoding must be "raw", "png" or "pgm", got {_short(encoding)}')
    cells = _require(message, "cells", what)
    if not isinstance(cells, bytes):
        raise WireError("bad_field", f"{what}: cells must be msgpack bin (bytes), got {_type_name(cells)}")
    if encoding == "raw" and len(cells) != rows * cols:
        raise WireError("bad_field", f"{what}: cells holds {len(cells)} bytes but raw needs rows * cols = "
                        f"{rows * cols}")
    return GridInput(map_id, message, size_bytes)


def decode_grid(grid_input: GridInput, max_cells: int) -> GridInput:
    """Decode and classify the cells of a checked grid message (``maps.grid_from_message``)."""
    try:
        grid = grid_from_message(grid_input.message, max_cells=max_cells)
    except MapError as exc:
        raise WireError(exc.code, str(exc)) from None
    return GridInput(grid_input.map_id, {}, grid_input.size_bytes, grid)


def _pose(message: dict) -> PoseInput:
    what = "pose message"
    return PoseInput(
        number(message, "x_m", what),
        number(message, "y_m", what),
        number(message, "heading_rad", what),
        number(message, "t_s", what),
    )


def unpack_input(frames, *, max_bytes: int) -> tuple[str, dict]:
    """First step of :func:`decode_input`: frames, topic, size, msgpack, ``v``; returns (topic, map)."""
    if len(frames) != 2:
        raise WireError("bad_frames", f"an input must be two frames (topic, payload), got {len(frames)}")
    topic_bytes, payload = frames
    topic = bytes(topic_bytes[:32]).decode("utf-8", "replace")
    if topic not in INPUT_TOPICS:
        raise WireError("unknown_topic", f"input topic {_short(topic)} is unknown; send 'grid' or 'pose'")
    return topic, _unpack(payload, f"{topic} message", max_bytes)


def check_input(topic: str, message: dict, *, size_bytes: int, max_cells: int) -> GridInput | PoseInput:
    """Second step of :func:`decode_input`: ``kind`` and the fields of a grid or pose."""
    kind = message.get("kind")
    if kind != topic:
        raise WireError("bad_kind", f'{topic} message has "kind": {_short(kind)}; it must match the topic {topic!r}')
    if topic == "grid":
        return _grid_envelope(message, size_bytes, max_cells)
    return _pose(message)


def decode_input(frames, *, max_bytes: int, max_cells: int) -> GridInput | PoseInput:
    """Check one SUB message (a list of frames: topic, payload).

    A grid comes back with its envelope checked but its cells not yet decoded (see
    :func:`decode_grid`), so a burst of grids costs one decode, for the newest.
    """
    topic, message = unpack_input(frames, max_bytes=max_bytes)
    return check_input(topic, message, size_bytes=len(frames[1]), max_cells=max_cells)


# ------------------------------------------------------------------ control


def unpack_control(frames, *, max_bytes: int) -> dict:
    """First step of :func:`decode_control`: one frame, size, msgpack, ``v``; returns the map."""
    if len(frames) != 1:
        raise WireError("bad_frames", f"a control request must be one frame, got {len(frames)}")
    return _unpack(frames[0], "control request", max_bytes)


def check_control(message: dict) -> ControlRequest:
    """Second step of :func:`decode_control`: ``op`` and its fields."""
    op = _require(message, "op", "control request")
    if op not in CONTROL_OPS:
        raise WireError("unknown_op", f"unknown op {_short(op)}; use one of {', '.join(CONTROL_OPS)}")
    what = f"{op} request"
    if op == "goal":
        fields = {name: number(message, name, what) for name in ("x_m", "y_m", "heading_rad")}
        fields["reverse"] = _flag(message, "reverse", what)
    elif op == "plan":
        fields = {"start": _triple(message, "start", what), "goal": _triple(message, "goal", what),
                  "reverse": _flag(message, "reverse", what)}
    else:
        fields = {}
    return ControlRequest(op, fields)


def decode_control(frames, *, max_bytes: int) -> ControlRequest:
    """Check one control request (REP: one frame)."""
    return check_control(unpack_control(frames, max_bytes=max_bytes))


# ------------------------------------------------------------------ outputs


def _plain(value):
    """msgpack hook: numpy scalars and arrays as plain values."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, tuple):
        return list(value)
    raise TypeError(f"cannot send {type(value).__name__} over the wire")


def encode(message: Mapping) -> bytes:
    """One msgpack map (bytes as bin, strings as UTF-8)."""
    return msgpack.packb(message, use_bin_type=True, default=_plain)


def encode_output(kind: str, body: Mapping) -> list[bytes]:
    """The two frames of a PUB message: topic, payload with ``v`` and ``kind`` first."""
    return [kind.encode("ascii"), encode({"v": PROTOCOL_VERSION, "kind": kind, **body})]
