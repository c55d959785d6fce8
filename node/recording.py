"""The recording log: an append-only file of what the planner node saw and said.

A log is a 16-byte file header followed by records. Every record is framed so that a
reader can check it on its own and find the next one after damage::

    file header  magic b"\\x89veerlog\\r\\n\\x1a\\n" (12 bytes), format version (u16),
                 reserved (u16, 0)                                   -- little-endian
    record       marker b"\\xf5vr\\x1e" (4) | kind (u8) | flags (u8, 0) | reserved (u16, 0)
                 | payload length (u32) | t_s (f64) | header CRC-32 (u32, of the 20 bytes
                 before it) | payload (msgpack) | payload CRC-32 (u32)

The checksums are the CRC-32 of ISO 3309 / ITU-T V.42 as used by zlib (RFC 1950, RFC
1952) and PNG (ISO/IEC 15948, section 5.5), computed with :func:`zlib.crc32`. The
header carries its own checksum so a damaged length is never trusted: after any damage
the reader resynchronises on the next marker whose header checksum holds.

Grids are stored once per content: the first grid whose content id (SHA-256, FIPS 180-4,
of its geometry and cell bytes, cut to 16 bytes) is new gets a ``grid_content`` record
holding the bytes; every grid record holds the message without ``cells`` and a
reference to its content. A content is stored again when its last copy is
``repeat_grid_content_s`` (default 600 s) old, so one damaged copy loses at most that
stretch of grids: an hour of the same map at 10 Hz costs six copies of the map.

The writer flushes every record to the operating system (optionally fsyncs every N
records or seconds) and is safe to call from one thread at a time: it holds no lock.

Record kinds (:data:`RECORD_KINDS`): inputs ``grid`` and ``pose``; ``control`` (a
request and its reply); outputs ``path``, ``status`` and ``event``; a free-form
``note``; and ``grid_content``, which the reader uses and never yields.

Writing::

    with LogWriter("drive.log") as log:
        log.write_input("grid", grid_message, t_s)
        log.write_control(request, reply, t_s)
        log.write_output("path", path_message, t_s)

Reading (damage is reported in ``reader.damage``, never raised)::

    reader = LogReader("drive.log")
    for record in reader:
        record.t_s, record.kind, record.message   # grid messages have their cells back
    reader.damage, reader.skipped_tail_bytes

A person's read-out: ``python -m veer.node.recording LOG``. The format is documented in
docs/files.md ("Recording log").
"""

from __future__ import annotations

import hashlib
import math
import os
import struct
import sys
import time
import zlib
from collections import OrderedDict
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Mapping

import msgpack

__all__ = [
    "CONTROL_KINDS",
    "DAMAGE_REASONS",
    "FILE_MAGIC",
    "FORMAT_VERSION",
    "INPUT_KINDS",
    "LogDamage",
    "LogFormatError",
    "LogReader",
    "LogRecord",
    "LogWriter",
    "OUTPUT_KINDS",
    "RECORD_KINDS",
    "RECORD_MARKER",
    "format_summary",
    "grid_content_id",
    "main",
]

FILE_MAGIC = b"\x89veerlog\r\n\x1a\n"
"""First 12 bytes of every log. The high byte and the CR LF / EOF / LF tail catch a file
mangled by a text-mode copy, as the PNG signature does (ISO/IEC 15948, section 5.2)."""

FORMAT_VERSION = 1
"""Format version written in the file header; a reader refuses a newer one."""

RECORD_MARKER = b"\xf5vr\x1e"
"""First 4 bytes of every record: 0xF5 never occurs in UTF-8 text, 0x1E is ASCII's record separator."""

_FILE_HEADER = struct.Struct("<12sHH")
_RECORD_HEAD = struct.Struct("<4sBBHId")  # marker, kind, flags, reserved, payload length, t_s
_CRC = struct.Struct("<I")
FILE_HEADER_BYTES = _FILE_HEADER.size  # 16
RECORD_HEADER_BYTES = _RECORD_HEAD.size + _CRC.size  # 24
RECORD_OVERHEAD_BYTES = RECORD_HEADER_BYTES + _CRC.size  # 28: header + payload checksum
MAX_PAYLOAD_BYTES = 2**32 - 1

INPUT_KINDS = ("grid", "pose")
OUTPUT_KINDS = ("path", "status", "event")
CONTROL_KINDS = ("control",)
_KIND_CODES = {
    "grid_content": 1,
    "grid": 2,
    "pose": 3,
    "control": 4,
    "path": 5,
    "status": 6,
    "event": 7,
    "note": 8,
}
RECORD_KINDS = tuple(_KIND_CODES)
"""Every record kind, in code order; ``grid_content`` is internal (never yielded)."""
_KIND_NAMES = {code: name for name, code in _KIND_CODES.items()}

DAMAGE_REASONS = {
    "cut_off": "the record runs past the end of the file (cut off mid-write)",
    "bad_header": "no record marker, or the record header fails its checksum",
    "bad_checksum": "the payload fails its checksum",
    "bad_payload": "the payload is not the msgpack this record kind holds",
    "unknown_kind": "a record kind this version of veer does not know",
    "missing_content": "a grid whose content record is missing or damaged",
}
"""Every value ``LogDamage.reason`` can take, with what it means."""

_CONTENT_ID_BYTES = 16
_GEOMETRY_FIELDS = ("encoding", "rows", "cols", "cell_size_m", "origin_m")
_RESYNC_CHUNK_BYTES = 1 << 20
DEFAULT_REPEAT_GRID_CONTENT_S = 600.0
_CONTENT_CACHE_ENTRIES = 4


class LogFormatError(ValueError):
    """A file that is not a readable veer log, or a record the writer cannot store.

    ``code`` is ``"bad_log"`` (not a log, unreadable, empty), ``"log_version"`` (written
    by a newer veer), ``"bad_record"`` (the writer was given something it cannot
    store), ``"log_closed"`` (a write after close) or ``"log_write"`` (the disk refused
    a write). Messages are one line.
    """

    code = "bad_log"

    def __init__(self, message: str, code: str | None = None) -> None:
        super().__init__(message)
        if code is not None:
            self.code = code


@dataclass(frozen=True, slots=True)
class LogRecord:
    """One record read back: recorder time, kind, the message as it was written, and where."""

    t_s: float
    kind: str
    message: Any
    offset: int

    @property
    def stream(self) -> str:
        """``"input"``, ``"output"``, ``"control"`` or ``"note"``."""
        if self.kind in INPUT_KINDS:
            return "input"
        if self.kind in OUTPUT_KINDS:
            return "output"
        return "control" if self.kind == "control" else "note"


@dataclass(frozen=True, slots=True)
class LogDamage:
    """Bytes the reader skipped: where, how many, why (a key of :data:`DAMAGE_REASONS`).

    ``at_tail`` marks damage with no whole record after it: a log cut off mid-write.
    """

    offset: int
    length: int
    reason: str
    at_tail: bool = False

    def describe(self) -> str:
        """One line for a person."""
        where = "at the tail" if self.at_tail else "in the middle"
        return (f"{self.length} bytes skipped at byte {self.offset} ({where}): "
                f"{DAMAGE_REASONS.get(self.reason, self.reason)}")


def grid_content_id(message: Mapping) -> bytes:
    """The 16-byte content id of a grid message: SHA-256 (FIPS 180-4) of geometry and cells.

    Two grid messages share an id exactly when their ``encoding``, ``rows``, ``cols``,
    ``cell_size_m``, ``origin_m`` and ``cells`` bytes agree (``map_id`` and other fields
    do not count), so a map sent again under a new id is still stored once.
    """
    geometry = msgpack.packb([message.get(name) for name in _GEOMETRY_FIELDS],
                             use_bin_type=True, default=_plain)
    digest = hashlib.sha256(geometry)
    digest.update(bytes(message["cells"]))
    return digest.digest()[:_CONTENT_ID_BYTES]


def _plain(value: Any) -> Any:
    """msgpack fallback: arrays and numpy scalars as lists and numbers, anything else refused."""
    if hasattr(value, "tolist"):
        return value.tolist()
    if isinstance(value, (bytearray, memoryview)):
        return bytes(value)
    raise TypeError(f"cannot store a {type(value).__name__}")


def _pack(value: Any) -> bytes:
    try:
        return msgpack.packb(value, use_bin_type=True, default=_plain)
    except (TypeError, ValueError, OverflowError) as error:
        raise LogFormatError(
            f"cannot store this message in a log ({error}); give msgpack-compatible values "
            "(maps, lists, str, bytes, numbers, bool, None)", code="bad_record") from None


def _unpack(payload: bytes) -> Any:
    return msgpack.unpackb(payload, raw=False, strict_map_key=False)


class LogWriter:
    """Append records to a log file, flushed to the operating system after every record.

    Parameters
    ----------
    path : str or path-like
        The log file. Created (or overwritten) unless ``append`` is true.
    append : bool
        Add to an existing log or start one if missing. A tail cut off by a crash (an
        incomplete last record) is cut away first, so the log stays whole.
    fsync_every_records, fsync_every_s : int or float, optional
        Also force the data to the disk (``os.fsync``) after this many records or when
        this many seconds have passed since the last fsync, whichever comes first. Without
        them a record survives a crash of the process, not a power loss. ``close`` fsyncs.
    repeat_grid_content_s : float or None
        Write a grid's content again when its latest copy is this many seconds (of ``t_s``)
        old, so one damaged copy costs at most that long a stretch of grids; ``None``
        writes each content once. Default 600 s: six copies of an unchanging map an hour.

    One thread at a time: the writer holds no lock, so a caller writing from several
    threads must serialise its calls. Every ``write_*`` returns the record's byte offset.
    """

    def __init__(self, path, *, append: bool = False, fsync_every_records: int | None = None,
                 fsync_every_s: float | None = None,
                 repeat_grid_content_s: float | None = DEFAULT_REPEAT_GRID_CONTENT_S) -> None:
        if fsync_every_records is not None and (isinstance(fsync_every_records, bool)
                                                or not isinstance(fsync_every_records, int)
                                                or fsync_every_records < 1):
            raise LogFormatError(f"fsync_every_records must be a whole number >= 1, got {fsync_every_records!r}",
                                 code="bad_record")
        if fsync_every_s is not None and not (isinstance(fsync_every_s, (int, float))
                                              and not isinstance(fsync_every_s, bool)
                                              and math.isfinite(fsync_every_s) and fsync_every_s > 0):
            raise LogFormatError(f"fsync_every_s must be a number of seconds > 0, got {fsync_every_s!r}",
                                 code="bad_record")
        if repeat_grid_content_s is not None and not (isinstance(repeat_grid_content_s, (int, float))
                                                      and not isinstance(repeat_grid_content_s, bool)
                                                      and repeat_grid_content_s > 0):
            raise LogFormatError(f"repeat_grid_content_s must be a number of seconds > 0 or None, got "
                                 f"{repeat_grid_content_s!r}", code="bad_record")
        self.path = Path(path)
        self._fsync_every_records = fsync_every_records
        self._fsync_every_s = fsync_every_s
        self._repeat_content_s = repeat_grid_content_s
        self._content_written_t_s: dict[bytes, float] = {}  # content id -> t_s of its latest copy
        self._last_grid: tuple[bytes, list, bytes] | None = None  # cells, geometry, content id
        self.records_written = 0
        self.contents_written = 0
        existing = append and self.path.exists() and self.path.stat().st_size > 0
        whole_bytes = None
        if existing:
            # refuses a file that is not a log; this session stores its own grid copies. A tail
            # cut off by a crash is dropped first, so appending never turns it into damage mid-file
            reader = LogReader(self.path)
            for _ in reader.records(restore_grids=False):
                pass
            if reader.skipped_tail_bytes:
                whole_bytes = self.path.stat().st_size - reader.skipped_tail_bytes
        try:
            self._file = open(self.path, "r+b" if existing else "wb")
            if existing:
                if whole_bytes is not None:
                    self._file.truncate(whole_bytes)
                self._file.seek(0, os.SEEK_END)
            if not existing:
                self._file.write(_FILE_HEADER.pack(FILE_MAGIC, FORMAT_VERSION, 0))
                self._file.flush()
        except OSError as error:
            raise LogFormatError(f"cannot write log {self.path}: {error.strerror or error}; "
                                 "check the folder exists and is writable", code="log_write") from None
        self.size_bytes = self._file.tell()
        self._since_fsync = 0
        self._last_fsync_s = time.monotonic()

    # -- the calls the node makes -------------------------------------------------
    def write_input(self, kind: str, message: Any, t_s: float | None = None) -> int:
        """Record an input the node received: ``kind`` is ``"grid"`` or ``"pose"``."""
        if kind not in INPUT_KINDS:
            raise LogFormatError(f"input kind must be one of {', '.join(INPUT_KINDS)}, got {kind!r}",
                                 code="bad_record")
        return self.write(kind, message, t_s)

    def write_output(self, kind: str, message: Any, t_s: float | None = None) -> int:
        """Record an output the node published: ``"path"``, ``"status"`` or ``"event"``."""
        if kind not in OUTPUT_KINDS:
            raise LogFormatError(f"output kind must be one of {', '.join(OUTPUT_KINDS)}, got {kind!r}",
                                 code="bad_record")
        return self.write(kind, message, t_s)

    def write_control(self, request: Any, reply: Any, t_s: float | None = None) -> int:
        """Record a control request and the reply it got (``None`` when none was sent)."""
        return self.write("control", {"request": request, "reply": reply}, t_s)

    def write_note(self, text: str, t_s: float | None = None, data: Any = None) -> int:
        """Record a free-form note (what happened, by whom), with optional structured data."""
        if not isinstance(text, str):
            raise LogFormatError(f"a note's text must be a str, got {type(text).__name__}", code="bad_record")
        return self.write("note", {"text": text, "data": data}, t_s)

    def write(self, kind: str, message: Any, t_s: float | None = None) -> int:
        """Record ``message`` as ``kind`` (any of :data:`RECORD_KINDS` but ``grid_content``).

        ``t_s`` is seconds on the recorder's clock (default ``time.time()``); replay uses
        only differences. A grid message whose ``cells`` are bytes is stored with its cells
        moved to a ``grid_content`` record written once per content id.
        """
        if kind not in _KIND_CODES or kind == "grid_content":
            raise LogFormatError(f"record kind must be one of {', '.join(RECORD_KINDS[1:])}, got {kind!r}",
                                 code="bad_record")
        if t_s is None:
            t_s = time.time()
        if isinstance(t_s, bool) or not isinstance(t_s, (int, float)) or not math.isfinite(t_s):
            raise LogFormatError(f"t_s must be a finite number of seconds, got {t_s!r}", code="bad_record")
        payload: dict = {"m": message}
        if kind == "grid" and isinstance(message, Mapping) and isinstance(message.get("cells"),
                                                                            (bytes, bytearray, memoryview)):
            content_id = self._content_id(message)
            packed = _pack({"m": {k: v for k, v in message.items() if k != "cells"}, "ref": content_id})
            last_copy_t_s = self._content_written_t_s.get(content_id)
            if last_copy_t_s is None or (self._repeat_content_s is not None
                                         and abs(t_s - last_copy_t_s) >= self._repeat_content_s):
                self._write_record("grid_content",
                                   _pack({"id": content_id, "cells": bytes(message["cells"])}), t_s)
                self._content_written_t_s[content_id] = t_s
                self.contents_written += 1
            return self._write_record(kind, packed, t_s)
        return self._write_record(kind, _pack(payload), t_s)

    def _content_id(self, message: Mapping) -> bytes:
        """:func:`grid_content_id`, with a byte comparison against the previous grid first
        (memcmp runs many times faster than SHA-256, and most grids repeat the last one)."""
        cells = message["cells"]
        geometry = [message.get(name) for name in _GEOMETRY_FIELDS]
        if self._last_grid is not None:
            last_cells, last_geometry, last_id = self._last_grid
            if len(cells) == len(last_cells) and geometry == last_geometry and cells == last_cells:
                return last_id
        content_id = grid_content_id(message)
        self._last_grid = (bytes(cells), geometry, content_id)
        return content_id

    # -- housekeeping ---------------------------------------------------------------
    def flush(self, fsync: bool = True) -> None:
        """Push buffered bytes to the operating system, and to the disk when ``fsync``."""
        self._check_open()
        try:
            self._file.flush()
            if fsync:
                os.fsync(self._file.fileno())
        except OSError as error:
            raise LogFormatError(f"cannot write log {self.path}: {error.strerror or error}",
                                 code="log_write") from None
        self._since_fsync = 0
        self._last_fsync_s = time.monotonic()

    def close(self) -> None:
        """Flush, fsync and close; further writes raise ``LogFormatError`` (``log_closed``)."""
        if self._file is None:
            return
        try:
            self.flush(fsync=True)
        finally:
            self._file.close()
            self._file = None

    @property
    def closed(self) -> bool:
        return self._file is None

    def __enter__(self) -> "LogWriter":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _check_open(self) -> None:
        if self._file is None:
            raise LogFormatError(f"log {self.path} is closed; open a new LogWriter to write more",
                                 code="log_closed")

    def _write_record(self, kind: str, payload: bytes, t_s: float) -> int:
        self._check_open()
        if len(payload) > MAX_PAYLOAD_BYTES:
            raise LogFormatError(f"a {kind} record of {len(payload)} bytes exceeds the {MAX_PAYLOAD_BYTES}-byte "
                                 "record limit", code="bad_record")
        head = _RECORD_HEAD.pack(RECORD_MARKER, _KIND_CODES[kind], 0, 0, len(payload), float(t_s))
        offset = self.size_bytes
        try:
            self._file.write(head + _CRC.pack(zlib.crc32(head)))
            self._file.write(payload)
            self._file.write(_CRC.pack(zlib.crc32(payload)))
            self._file.flush()
        except OSError as error:
            raise LogFormatError(f"cannot write log {self.path}: {error.strerror or error}",
                                 code="log_write") from None
        self.size_bytes = offset + RECORD_OVERHEAD_BYTES + len(payload)
        self.records_written += 1
        self._since_fsync += 1
        if ((self._fsync_every_records is not None and self._since_fsync >= self._fsync_every_records)
                or (self._fsync_every_s is not None
                    and time.monotonic() - self._last_fsync_s >= self._fsync_every_s)):
            self.flush(fsync=True)
        return offset


@dataclass(slots=True)
class _Frame:
    kind_code: int
    t_s: float
    payload: bytes
    end: int


class LogReader:
    """Read a log record by record, skipping and reporting damage.

    The constructor checks the file header and raises :class:`LogFormatError` for a file
    that is not a log (or is unreadable, empty, or of a newer format); nothing else is
    ever raised. Iterating yields :class:`LogRecord` objects in file order, grid messages
    with their ``cells`` restored. After (or during) an iteration:

    ``damage``
        :class:`LogDamage` entries: a record with a bad checksum or length in the
        middle is skipped by resynchronising on the next record marker; a log cut off
        mid-write ends in one ``at_tail`` entry.
    ``skipped_tail_bytes``, ``skipped_bytes``
        Bytes after the last whole record; all bytes skipped.
    ``counts``
        Records per kind (``grid_content`` included).

    Each iteration reads the file afresh, up to its size when the iteration started.
    """

    def __init__(self, path) -> None:
        self.path = Path(path)
        head = self._read_head()
        magic, version, _reserved = _FILE_HEADER.unpack(head)
        if magic != FILE_MAGIC:
            raise LogFormatError(f"{self.path} is not a veer recording log (its first bytes are not the log "
                                 "signature); give a file written by veer record")
        if version > FORMAT_VERSION or version < 1:
            raise LogFormatError(f"{self.path} is a recording log of format version {version}; this veer reads "
                                 f"version {FORMAT_VERSION}: update veer", code="log_version")
        self.version = version
        self.damage: list[LogDamage] = []
        self.counts: dict[str, int] = {}
        self.content_ids: set[bytes] = set()
        self.content_bytes = 0
        self.first_t_s: float | None = None
        self.last_t_s: float | None = None
        self.size_bytes = 0

    def _read_head(self) -> bytes:
        try:
            with open(self.path, "rb") as file:
                head = file.read(FILE_HEADER_BYTES)
        except OSError as error:
            raise LogFormatError(f"cannot read log {self.path}: {error.strerror or error}; "
                                 "give the path of a log written by veer record") from None
        if not head:
            raise LogFormatError(f"{self.path} is empty: not a veer recording log")
        if len(head) < FILE_HEADER_BYTES:
            if FILE_MAGIC.startswith(head[:len(FILE_MAGIC)]):
                raise LogFormatError(f"{self.path} ends inside its {FILE_HEADER_BYTES}-byte header: the recording "
                                     "stopped before its first record")
            raise LogFormatError(f"{self.path} is not a veer recording log (too short, no log signature); "
                                 "give a file written by veer record")
        return head

    @property
    def skipped_tail_bytes(self) -> int:
        return sum(entry.length for entry in self.damage if entry.at_tail)

    @property
    def skipped_bytes(self) -> int:
        return sum(entry.length for entry in self.damage)

    def __iter__(self) -> Iterator[LogRecord]:
        return self.records()

    def read_all(self) -> list[LogRecord]:
        """Every readable record, in file order."""
        return list(self.records())

    def records(self, *, restore_grids: bool = True) -> Iterator[LogRecord]:
        """Yield the records in file order; with ``restore_grids=False`` grids come without cells."""
        self.damage = []
        self.counts = {}
        self.content_ids = set()
        self.content_bytes = 0
        self.first_t_s = self.last_t_s = None
        try:
            file = open(self.path, "rb")
        except OSError as error:
            raise LogFormatError(f"cannot read log {self.path}: {error.strerror or error}") from None
        with file:
            try:
                yield from self._scan(file, restore_grids)
            except OSError as error:
                raise LogFormatError(f"cannot read log {self.path}: {error.strerror or error}") from None

    # -- the scan ----------------------------------------------------------------------
    def _scan(self, file, restore_grids: bool) -> Iterator[LogRecord]:
        size = os.fstat(file.fileno()).st_size
        self.size_bytes = size
        contents: dict[bytes, tuple[int, int]] = {}  # content id -> (record offset, payload length)
        cache: OrderedDict[bytes, bytes] = OrderedDict()
        position = FILE_HEADER_BYTES
        while position < size:
            frame = self._frame_at(file, position, size)
            if isinstance(frame, str):
                following = self._resync(file, position + 1, size)
                if following is None:
                    self.damage.append(LogDamage(position, size - position, frame, at_tail=True))
                    return
                self.damage.append(LogDamage(position, following - position, frame))
                position = following
                continue
            record_offset, position = position, frame.end
            kind = _KIND_NAMES.get(frame.kind_code)
            if kind is None:
                self.damage.append(LogDamage(record_offset, frame.end - record_offset, "unknown_kind"))
                continue
            try:
                payload = _unpack(frame.payload)
            except Exception:  # noqa: BLE001 - any decoder failure is damage, not a crash
                payload = None
            if not _payload_fits(kind, payload):
                self.damage.append(LogDamage(record_offset, frame.end - record_offset, "bad_payload"))
                continue
            self.counts[kind] = self.counts.get(kind, 0) + 1
            if kind == "grid_content":
                contents[payload["id"]] = (record_offset, len(frame.payload))
                self.content_ids.add(payload["id"])
                self.content_bytes += len(payload["cells"])
                cache[payload["id"]] = payload["cells"]
                cache.move_to_end(payload["id"])
                while len(cache) > _CONTENT_CACHE_ENTRIES:
                    cache.popitem(last=False)
                continue
            message = payload["m"]
            if kind == "grid" and "ref" in payload:
                reference = payload["ref"]
                if reference not in contents:
                    self.counts[kind] -= 1
                    self.damage.append(LogDamage(record_offset, frame.end - record_offset, "missing_content"))
                    continue
                if restore_grids:
                    cells = cache.get(reference)
                    if cells is None:
                        cells = self._content_at(file, *contents[reference])
                        if cells is None:  # the file changed under the reader
                            self.counts[kind] -= 1
                            self.damage.append(LogDamage(record_offset, frame.end - record_offset,
                                                         "missing_content"))
                            file.seek(position)
                            continue
                        cache[reference] = cells
                        while len(cache) > _CONTENT_CACHE_ENTRIES:
                            cache.popitem(last=False)
                    cache.move_to_end(reference)
                    message = dict(message)
                    message["cells"] = cells
                    file.seek(position)
            if self.first_t_s is None or frame.t_s < self.first_t_s:
                self.first_t_s = frame.t_s
            if self.last_t_s is None or frame.t_s > self.last_t_s:
                self.last_t_s = frame.t_s
            yield LogRecord(frame.t_s, kind, message, record_offset)

    @staticmethod
    def _frame_at(file, position: int, size: int) -> _Frame | str:
        """The whole, checked record at ``position``, or the damage reason why there is none."""
        if file.tell() != position:
            file.seek(position)
        head = file.read(RECORD_HEADER_BYTES)
        if len(head) < RECORD_HEADER_BYTES:
            return "cut_off" if RECORD_MARKER.startswith(head[:4]) else "bad_header"
        if head[:4] != RECORD_MARKER or _CRC.unpack_from(head, _RECORD_HEAD.size)[0] != zlib.crc32(
                head[:_RECORD_HEAD.size]):
            return "bad_header"
        _marker, kind_code, _flags, _reserved, length, t_s = _RECORD_HEAD.unpack_from(head)
        end = position + RECORD_OVERHEAD_BYTES + length
        if end > size:
            return "cut_off"
        payload = file.read(length)
        checksum = file.read(_CRC.size)
        if len(payload) != length or len(checksum) != _CRC.size:
            return "cut_off"
        if _CRC.unpack(checksum)[0] != zlib.crc32(payload):
            return "bad_checksum"
        return _Frame(kind_code, t_s, payload, end)

    @staticmethod
    def _resync(file, start: int, size: int) -> int | None:
        """Offset of the next record marker at or after ``start`` whose header checksum holds."""
        overlap = len(RECORD_MARKER) - 1
        chunk_start = start
        while chunk_start < size:
            file.seek(chunk_start)
            chunk = file.read(_RESYNC_CHUNK_BYTES + overlap)
            if not chunk:
                return None
            found = chunk.find(RECORD_MARKER)
            while found != -1:
                candidate = chunk_start + found
                file.seek(candidate)
                head = file.read(RECORD_HEADER_BYTES)
                if len(head) == RECORD_HEADER_BYTES and _CRC.unpack_from(head, _RECORD_HEAD.size)[0] == zlib.crc32(
                        head[:_RECORD_HEAD.size]):
                    file.seek(candidate)
                    return candidate
                found = chunk.find(RECORD_MARKER, found + 1)
            chunk_start += _RESYNC_CHUNK_BYTES
        return None

    @staticmethod
    def _content_at(file, offset: int, length: int) -> bytes | None:
        """Read back the cells of the (already checked) grid content record at ``offset``."""
        file.seek(offset + RECORD_HEADER_BYTES)
        payload = file.read(length)
        checksum = file.read(_CRC.size)
        if len(checksum) != _CRC.size or _CRC.unpack(checksum)[0] != zlib.crc32(payload):
            return None
        try:
            return _unpack(payload)["cells"]
        except Exception:  # noqa: BLE001 - checked once already; a change since is damage
            return None


def _payload_fits(kind: str, payload: Any) -> bool:
    """Whether a decoded payload has the shape its record kind is written with."""
    if not isinstance(payload, dict):
        return False
    if kind == "grid_content":
        return (isinstance(payload.get("id"), bytes) and len(payload["id"]) == _CONTENT_ID_BYTES
                and isinstance(payload.get("cells"), bytes))
    if "m" not in payload:
        return False
    if kind == "grid" and "ref" in payload:
        return isinstance(payload["ref"], bytes) and isinstance(payload["m"], dict)
    if kind == "control":
        return isinstance(payload["m"], dict) and set(payload["m"]) == {"request", "reply"}
    if kind == "note":
        return isinstance(payload["m"], dict) and isinstance(payload["m"].get("text"), str)
    return True


_MAX_DAMAGE_LINES = 20


def format_summary(reader: LogReader) -> list[str]:
    """Read the whole log and describe it: one line per kind, the time span, one per damage.

    Grids lost with their content record make one line together; past 20 damage lines
    the rest are counted in one more.
    """
    for _ in reader.records(restore_grids=False):
        pass
    lines = [f"{reader.path}: veer recording log, format {reader.version}, {reader.size_bytes} bytes"]
    for kind in RECORD_KINDS:
        count = reader.counts.get(kind, 0)
        if not count:
            continue
        if kind == "grid_content":
            lines.append(f"  {kind:<13}{count:>9} stored cop(ies) of {len(reader.content_ids)} distinct grid(s), "
                         f"{reader.content_bytes} bytes of cells")
        else:
            lines.append(f"  {kind:<13}{count:>9} record(s)")
    if reader.first_t_s is None:
        lines.append("time span: no records")
    else:
        lines.append(f"time span: {reader.first_t_s:.3f} s to {reader.last_t_s:.3f} s "
                     f"({reader.last_t_s - reader.first_t_s:.3f} s)")
    lost_grids = [entry for entry in reader.damage if entry.reason == "missing_content"]
    others = [entry for entry in reader.damage if entry.reason != "missing_content"]
    if not reader.damage:
        lines.append("damage: none")
    for entry in others[:_MAX_DAMAGE_LINES]:
        lines.append(f"damage: {entry.describe()}")
    if len(others) > _MAX_DAMAGE_LINES:
        rest = others[_MAX_DAMAGE_LINES:]
        lines.append(f"damage: {len(rest)} more damaged stretch(es), {sum(e.length for e in rest)} bytes")
    if lost_grids:
        lines.append(f"damage: {len(lost_grids)} grid record(s) from byte {lost_grids[0].offset} on skipped "
                     f"({sum(e.length for e in lost_grids)} bytes): {DAMAGE_REASONS['missing_content']}")
    return lines


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.node.recording LOG...``: 0 clean, 1 damage found, 2 not a log."""
    args = sys.argv[1:] if argv is None else argv
    if not args or any(arg in ("-h", "--help") for arg in args):
        print("usage: python -m veer.node.recording LOG...  (one line per record kind, the time span, "
              "and any damage; exit 0 clean, 1 damaged, 2 not a log)", file=sys.stderr if not args else sys.stdout)
        return 2 if not args else 0
    code = 0
    for name in args:
        try:
            reader = LogReader(name)
            lines = format_summary(reader)
        except LogFormatError as error:
            print(f"error: {error}", file=sys.stderr)
            code = 2
            continue
        print("\n".join(lines))
        if reader.damage and code == 0:
            code = 1
    return code


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
