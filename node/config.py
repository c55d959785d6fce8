"""NODE.toml: the node's settings, every one with a default, checked key by key.

An unknown section or key, or a value of the wrong type or out of range, raises
:class:`ConfigError` with one line that names the file, the key and what is accepted.
The full list of keys with defaults and units is in docs/protocol.md ("Node settings").

Example (every key optional)::

    [sockets]
    inputs = "tcp://127.0.0.1:7401"    # SUB, grids and poses
    outputs = "tcp://127.0.0.1:7402"   # PUB, paths, status and events
    control = "tcp://127.0.0.1:7403"   # REP, control requests

    [vehicle]
    file = "robot.toml"                # or the vehicle keys themselves, e.g. wheelbase_m = 2.0

    [replan]
    off_path_m = 0.5

    [search]                           # passed to the planner's SearchSettings
    max_expansions = 100000
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from veer.planning import EXAMPLE_VEHICLE, PlanningError, SearchSettings, Vehicle, load_vehicle, vehicle_from_mapping

__all__ = [
    "ConfigError",
    "SocketSettings",
    "LimitSettings",
    "ReplanSettings",
    "RecordSettings",
    "NodeConfig",
    "load_config",
    "config_from_mapping",
    "LOG_LEVELS",
]

LOG_LEVELS = ("debug", "info", "warning", "error")


class ConfigError(ValueError):
    """A NODE.toml (or vehicle) the node cannot use; the message is one line."""

    code = "bad_config"


@dataclass(frozen=True)
class SocketSettings:
    """Addresses the node binds (ZeroMQ endpoints; a port of ``*`` picks a free one)."""

    inputs: str = "tcp://127.0.0.1:7401"
    outputs: str = "tcp://127.0.0.1:7402"
    control: str = "tcp://127.0.0.1:7403"


@dataclass(frozen=True)
class LimitSettings:
    """Limits on what the node accepts.

    max_message_bytes : largest input or control message; enforced by the socket
        (ZMQ_MAXMSGSIZE: a sender of a larger message is disconnected) and by the codec.
    max_control_bytes : largest control request answered normally; larger ones (up to
        ``max_message_bytes``) are answered with ``too_large``.
    max_grid_cells : largest ``rows * cols`` of a grid.
    input_queue_messages : receive high-water mark of the input socket (messages).
    drain_max_messages : most inputs read in one pass before other work is served.
    """

    max_message_bytes: int = 64 * 1024 * 1024
    max_control_bytes: int = 1024 * 1024
    max_grid_cells: int = 16_000_000
    input_queue_messages: int = 16
    drain_max_messages: int = 1000


@dataclass(frozen=True)
class ReplanSettings:
    """The replan policy (docs/protocol.md, "Replan policy").

    off_path_m, off_path_deg : the robot counts as off its path beyond these.
    start_ahead_m : a replan for a moving robot starts this far ahead on the current path.
    moving_above_m_per_s : the robot counts as moving above this speed (from its poses).
    track_window_m : how far ahead of the robot's last place on the path it is looked for.
    max_supersedes : a grid- or pose-triggered plan in progress is cancelled by a newer
        trigger at most this many times in a row, then runs to its end (so a stream of
        grids cannot starve planning).
    plan_deadline_s : time budget of one plan.
    retry_moved_m : after a no_path, a pose change retries once the robot moved this far.
    """

    off_path_m: float = 0.5
    off_path_deg: float = 30.0
    start_ahead_m: float = 1.0
    moving_above_m_per_s: float = 0.1
    track_window_m: float = 10.0
    max_supersedes: int = 3
    plan_deadline_s: float = 5.0
    retry_moved_m: float = 0.5


@dataclass(frozen=True)
class RecordSettings:
    """The recording log (docs/files.md, "Recording log"): off while ``path`` is empty.

    path : log file (relative to the NODE.toml folder); inputs, control requests with
        their answers, and outputs are recorded with Unix time.
    append : add to an existing log instead of starting a new one.
    fsync_every_s : also force the log to the disk this often (0: only hand each record
        to the operating system, which survives a crash of the node but not a power loss).
    """

    path: str = ""
    append: bool = False
    fsync_every_s: float = 0.0


@dataclass(frozen=True)
class NodeConfig:
    """Everything the node needs to start; ``NodeConfig()`` is the default node."""

    sockets: SocketSettings = field(default_factory=SocketSettings)
    limits: LimitSettings = field(default_factory=LimitSettings)
    replan: ReplanSettings = field(default_factory=ReplanSettings)
    status_interval_s: float = 0.5
    log_level: str = "info"
    vehicle: Vehicle = EXAMPLE_VEHICLE
    search: SearchSettings = field(default_factory=SearchSettings)
    record: RecordSettings = field(default_factory=RecordSettings)
    source: str = "defaults"


# (low, high) per numeric key: limits of what makes sense, checked with the type
_RANGES = {
    "max_message_bytes": (1024, 2**31),
    "max_control_bytes": (64, 2**31),
    "max_grid_cells": (1, 10**9),
    "input_queue_messages": (1, 100_000),
    "drain_max_messages": (1, 1_000_000),
    "off_path_m": (0.01, 1000.0),
    "off_path_deg": (1.0, 180.0),
    "start_ahead_m": (0.0, 1000.0),
    "moving_above_m_per_s": (0.0, 100.0),
    "track_window_m": (0.5, 10_000.0),
    "max_supersedes": (0, 1000),
    "plan_deadline_s": (0.01, 3600.0),
    "retry_moved_m": (0.0, 1000.0),
    "interval_s": (0.05, 1.0),
    "fsync_every_s": (0.0, 3600.0),
}


def _finite(value) -> bool:
    """math.isfinite that also says no to an integer too large for a float (TOML allows any size)."""
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def _short(value, limit: int = 60) -> str:
    text = repr(value) if not isinstance(value, int) or value.bit_length() < 200 else f"an integer of {len(str(value))} digits"
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _value(section: str, key: str, value, default, source: str):
    where = f"{source}: [{section}] {key}" if section else f"{source}: {key}"
    if isinstance(default, bool):
        if not isinstance(value, bool):
            raise ConfigError(f"{where} must be true or false, got {value!r}")
        return value
    if isinstance(default, str):
        if not isinstance(value, str) or not (value or key == "path"):
            raise ConfigError(f"{where} must be a non-empty string, got {value!r}")
        return value
    low, high = _RANGES[key]
    if isinstance(default, int):
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{where} must be a whole number, got {_short(value)}")
    elif isinstance(value, bool) or not isinstance(value, (int, float)) or not _finite(value):
        raise ConfigError(f"{where} must be a finite number, got {_short(value)}")
    if not low <= value <= high:
        raise ConfigError(f"{where} must be between {low} and {high}, got {_short(value)}")
    return type(default)(value)


def _section(values: dict, section: str, cls, source: str):
    table = values.get(section, {})
    if not isinstance(table, dict):
        raise ConfigError(f"{source}: [{section}] must be a table")
    defaults = cls()
    known = [f.name for f in fields(cls)]
    unknown = sorted(set(table) - set(known))
    if unknown:
        raise ConfigError(f"{source}: unknown key [{section}] {unknown[0]!r}; accepted: {', '.join(known)}")
    changes = {key: _value(section, key, table[key], getattr(defaults, key), source) for key in table}
    return replace(defaults, **changes)


def _vehicle(values: dict, source: str, base_dir: Path) -> Vehicle:
    table = values.get("vehicle")
    if table is None:
        return EXAMPLE_VEHICLE
    if not isinstance(table, dict):
        raise ConfigError(f"{source}: [vehicle] must be a table (file = \"...\" or the vehicle keys)")
    try:
        if "file" in table:
            if len(table) > 1:
                raise ConfigError(f"{source}: [vehicle] holds either file = \"...\" or the vehicle keys, not both")
            if not isinstance(table["file"], str) or not table["file"]:
                raise ConfigError(f"{source}: [vehicle] file must be a path string")
            path = Path(table["file"])
            return load_vehicle(path if path.is_absolute() else base_dir / path)
        return vehicle_from_mapping(dict(table), source=f"{source}: [vehicle]")
    except PlanningError as exc:
        raise ConfigError(str(exc)) from None


_SECTIONS = ("sockets", "limits", "replan", "status", "log", "vehicle", "search", "record")


def config_from_mapping(values: dict, source: str = "NODE.toml", base_dir: Path | str = ".") -> NodeConfig:
    """Build a :class:`NodeConfig` from parsed TOML; raises :class:`ConfigError`."""
    unknown = sorted(set(values) - set(_SECTIONS))
    if unknown:
        raise ConfigError(f"{source}: unknown section or key {unknown[0]!r}; accepted sections: "
                          f"{', '.join('[' + s + ']' for s in _SECTIONS)}")
    sockets = _section(values, "sockets", SocketSettings, source)
    limits = _section(values, "limits", LimitSettings, source)
    replan = _section(values, "replan", ReplanSettings, source)
    status = values.get("status", {})
    if not isinstance(status, dict) or sorted(set(status) - {"interval_s"}):
        raise ConfigError(f"{source}: [status] accepts only interval_s (seconds between status messages, <= 1)")
    interval = _value("status", "interval_s", status["interval_s"], 0.5, source) if "interval_s" in status else 0.5
    log = values.get("log", {})
    if not isinstance(log, dict) or sorted(set(log) - {"level"}):
        raise ConfigError(f"{source}: [log] accepts only level ({', '.join(LOG_LEVELS)})")
    level = log.get("level", "info")
    if level not in LOG_LEVELS:
        raise ConfigError(f"{source}: [log] level must be one of {', '.join(LOG_LEVELS)}, got {level!r}")
    search_table = values.get("search", {})
    if not isinstance(search_table, dict):
        raise ConfigError(f"{source}: [search] must be a table of planner settings")
    try:
        search = SearchSettings.from_mapping(dict(search_table), source=f"{source}: [search]")
    except PlanningError as exc:
        raise ConfigError(str(exc)) from None
    if limits.max_control_bytes > limits.max_message_bytes:
        raise ConfigError(f"{source}: [limits] max_control_bytes ({limits.max_control_bytes}) must not exceed "
                          f"max_message_bytes ({limits.max_message_bytes})")
    vehicle = _vehicle(values, source, Path(base_dir))
    record = _section(values, "record", RecordSettings, source)
    if record.path and not Path(record.path).is_absolute():
        record = replace(record, path=str(Path(base_dir) / record.path))
    return NodeConfig(sockets, limits, replan, interval, level, vehicle, search, record, source)


def load_config(path: str | Path | None, vehicle_path: str | Path | None = None) -> NodeConfig:
    """Read NODE.toml (None: all defaults) and, when given, a vehicle file that overrides its vehicle."""
    if path is None:
        config = NodeConfig()
    else:
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as exc:
            raise ConfigError(f"cannot read node config {path}: {exc.strerror or exc}; give a NODE.toml file") from None
        except UnicodeDecodeError:
            raise ConfigError(f"node config {path} is not UTF-8 text; write it as TOML") from None
        try:
            values = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"node config {path} is not valid TOML: {exc}") from None
        config = config_from_mapping(values, source=str(path), base_dir=path.parent)
    if vehicle_path is not None:
        try:
            config = replace(config, vehicle=load_vehicle(vehicle_path))
        except PlanningError as exc:
            raise ConfigError(str(exc)) from None
    return config
