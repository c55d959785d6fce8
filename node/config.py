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

    [security]                         # CURVE (ZeroMQ RFC 26): on when both keys are set
    secret_key_file = "keys/node/node.key_secret"   # made by `veer keys keys/node`
    allowed_clients_dir = "keys/allowed"            # one NAME.key per client allowed in
"""

from __future__ import annotations

import ipaddress
import math
import os
import tomllib
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from veer.planning import EXAMPLE_VEHICLE, PlanningError, SearchSettings, Vehicle, load_vehicle, vehicle_from_mapping

__all__ = [
    "ConfigError",
    "SocketSettings",
    "LimitSettings",
    "SecuritySettings",
    "CurveKeys",
    "ReplanSettings",
    "RecordSettings",
    "NodeConfig",
    "load_config",
    "config_from_mapping",
    "LOG_LEVELS",
    "is_local_address",
    "exposed_addresses",
    "check_exposure",
    "read_key_file",
    "load_curve_keys",
    "KEYS_COMMAND",
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
    input_queue_messages : receive high-water mark of the input socket (messages per sender).
    drain_max_messages : most inputs read in one pass before other work is served.
    output_queue_messages : send high-water mark of the output socket (messages per
        subscriber; a subscriber that does not read loses messages beyond it, the node
        never blocks).
    control_queue_messages : receive and send high-water marks of the control socket.
    control_requests_per_s, control_burst_requests : token bucket on control requests
        (refill rate and size); a request finding the bucket empty is answered
        ``rate_limited``.
    """

    max_message_bytes: int = 64 * 1024 * 1024
    max_control_bytes: int = 1024 * 1024
    max_grid_cells: int = 16_000_000
    input_queue_messages: int = 16
    drain_max_messages: int = 1000
    output_queue_messages: int = 100
    control_queue_messages: int = 16
    control_requests_per_s: float = 100.0
    control_burst_requests: int = 200


@dataclass(frozen=True)
class SecuritySettings:
    """CURVE on the three sockets (ZeroMQ RFC 26/CurveZMQ, RFC 27/ZAP), on when both files are set.

    secret_key_file : the node's key pair (a ``NAME.key_secret`` written by ``veer keys``),
        relative to the NODE.toml folder.
    allowed_clients_dir : folder of client public keys (``NAME.key``); only these clients
        get through.
    allow_insecure_bind : bind a non-loopback address without CURVE (logged as a warning);
        false: such a config is refused.
    """

    secret_key_file: str = ""
    allowed_clients_dir: str = ""
    allow_insecure_bind: bool = False

    @property
    def curve(self) -> bool:
        return bool(self.secret_key_file)


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
    security: SecuritySettings = field(default_factory=SecuritySettings)


# (low, high) per numeric key: limits of what makes sense, checked with the type
_RANGES = {
    "max_message_bytes": (1024, 2**31),
    "max_control_bytes": (64, 2**31),
    "max_grid_cells": (1, 10**9),
    "input_queue_messages": (1, 100_000),
    "drain_max_messages": (1, 1_000_000),
    "output_queue_messages": (1, 100_000),
    "control_queue_messages": (1, 100_000),
    "control_requests_per_s": (0.1, 1_000_000.0),
    "control_burst_requests": (1, 1_000_000),
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


_MAY_BE_EMPTY = ("path", "secret_key_file", "allowed_clients_dir")


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
        if not isinstance(value, str) or not (value or key in _MAY_BE_EMPTY):
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


_SECTIONS = ("sockets", "limits", "replan", "status", "log", "vehicle", "search", "record", "security")


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
    security = _section(values, "security", SecuritySettings, source)
    if bool(security.secret_key_file) != bool(security.allowed_clients_dir):
        raise ConfigError(f"{source}: [security] needs both secret_key_file and allowed_clients_dir "
                          f"(CURVE on) or neither (CURVE off)")
    security = replace(security, **{key: str(Path(base_dir) / value) for key, value in (
        ("secret_key_file", security.secret_key_file), ("allowed_clients_dir", security.allowed_clients_dir))
        if value and not Path(value).is_absolute()})
    config = NodeConfig(sockets, limits, replan, interval, level, vehicle, search, record, source, security)
    check_exposure(config)
    if security.curve:
        load_curve_keys(security)  # start-up check: the files exist and parse (nothing is kept)
    return config


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


# ------------------------------------------------------------------ exposure and CURVE keys

KEYS_COMMAND = "veer keys DIR"
"""The command that writes a key pair (``DIR/NAME.key`` public, ``DIR/NAME.key_secret`` secret)."""

_LOCAL_TRANSPORTS = ("ipc://", "inproc://")
_HOST_TRANSPORTS = ("tcp://", "ws://", "wss://")


def is_local_address(address: str) -> bool:
    """True for an endpoint only this machine can reach: loopback TCP (127.0.0.0/8, ::1, localhost), ipc, inproc.

    Anything else (a wildcard ``*``, ``0.0.0.0``, an interface name, another host, another
    transport) counts as reachable from the network. Endpoint syntax: libzmq
    ``zmq_tcp(7)``, ``zmq_ipc(7)``, ``zmq_inproc(7)``.
    """
    if address.startswith(_LOCAL_TRANSPORTS):
        return True
    if not address.startswith(_HOST_TRANSPORTS):
        return False
    rest = address.split("://", 1)[1]
    host = rest.rsplit(":", 1)[0] if ":" in rest else rest
    if ";" in host:  # "source;destination" is connect syntax; never local for a bind
        return False
    host = host[1:-1] if host.startswith("[") and host.endswith("]") else host
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def exposed_addresses(sockets: SocketSettings) -> list[tuple[str, str]]:
    """(socket name, address) of every address reachable from the network."""
    return [(name, getattr(sockets, name)) for name in ("inputs", "outputs", "control")
            if not is_local_address(getattr(sockets, name))]


def check_exposure(config: NodeConfig) -> list[str]:
    """Refuse non-loopback addresses without CURVE unless allowed; return the warnings to log.

    Decided from the settings alone, before any socket exists. Raises :class:`ConfigError`.
    """
    exposed = exposed_addresses(config.sockets)
    if not exposed or config.security.curve:
        return []
    name, address = exposed[0]
    if not config.security.allow_insecure_bind:
        raise ConfigError(f"{config.source}: [sockets] {name} = {address!r} is reachable from the network but "
                          f"CURVE is off; set [security] secret_key_file and allowed_clients_dir (keys from "
                          f"'{KEYS_COMMAND}'), bind a loopback address, or set [security] allow_insecure_bind = true")
    return [f"[sockets] {name} = {address!r} is reachable from the network without CURVE: anyone who reaches it "
            f"can send grids and goals; set [security] secret_key_file and allowed_clients_dir to encrypt and "
            f"authenticate" for name, address in exposed]


@dataclass(frozen=True)
class CurveKeys:
    """Z85 key text (RFC 32) of the node's pair and the allowed folder; never printed (repr hides the keys)."""

    public: bytes = field(repr=False)
    secret: bytes = field(repr=False)
    allowed_clients_dir: str = ""
    allowed_count: int = 0


def _key_error(path, problem: str, secret: bool) -> ConfigError:
    kind = "secret key file (NAME.key_secret)" if secret else "public key file (NAME.key)"
    return ConfigError(f"{path}: {problem}; give a {kind} written by '{KEYS_COMMAND}'")


def read_key_file(path, *, secret: bool) -> tuple[bytes, bytes | None]:
    """(public, secret) Z85 keys of a key file in the certificate format of ``veer keys``.

    The format is ZeroMQ's certificate text (ZPL sections ``curve`` / ``public-key`` /
    ``secret-key``, as czmq and pyzmq write it). ``secret=True`` requires the secret key
    and checks that the public key belongs to it. Raises :class:`ConfigError` naming the
    path, never the key.
    """
    import zmq
    from zmq.auth import load_certificate

    path = Path(path)
    if not path.is_file():
        raise _key_error(path, "no such file" if not path.exists() else "not a file", secret)
    try:
        public, secret_key = load_certificate(path)
    except (OSError, ValueError, UnicodeDecodeError):
        raise _key_error(path, "not a key file (no public-key line)", secret) from None
    for name, key in (("public", public), ("secret", secret_key)):
        if key is None:
            continue
        if len(key) != 40:
            raise _key_error(path, f"the {name} key is not 40 characters of Z85 text", secret)
        try:
            zmq.utils.z85.decode(key)
        except (ValueError, KeyError, IndexError, TypeError):
            raise _key_error(path, f"the {name} key is not Z85 text", secret) from None
    if secret:
        if secret_key is None:
            raise _key_error(path, "holds no secret key (is it the public NAME.key?)", secret)
        if zmq.curve_public(secret_key) != public:
            raise _key_error(path, "its public key does not belong to its secret key", secret)
    return public, secret_key


def load_curve_keys(security: SecuritySettings) -> CurveKeys:
    """Read the node's key pair and check the allowed folder (every ``*.key`` must parse, at least one)."""
    public, secret = read_key_file(security.secret_key_file, secret=True)
    folder = Path(security.allowed_clients_dir)
    if not folder.is_dir():
        raise ConfigError(f"{folder}: no such folder of allowed client keys; make it and copy each client's "
                          f"NAME.key into it (a client makes its pair with '{KEYS_COMMAND}')")
    count = 0
    for path in sorted(folder.glob("*.key")):
        read_key_file(path, secret=False)
        count += 1
    if count == 0:
        raise ConfigError(f"{folder}: no client public keys (NAME.key) in this folder, so no client could connect; "
                          f"copy each client's NAME.key into it (a client makes its pair with '{KEYS_COMMAND}')")
    return CurveKeys(public, secret, str(folder), count)


def secret_file_is_private(path) -> bool:
    """True when group and others cannot read the file (always true where modes do not apply)."""
    if os.name != "posix":
        return True
    return not (Path(path).stat().st_mode & 0o077)
