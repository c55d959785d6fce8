"""Tests for the recording log (veer.node.recording): round trips, grid deduplication,
logs cut off at every byte, flipped bytes, garbage files and the read-out helper.

The frame layout is checked with an independent walker written from docs/files.md
("Recording log") and a bitwise CRC-32 written from its published definition, not with
the module's own reader.
"""

from __future__ import annotations

import math
import os
import random
import struct
import subprocess
import sys
import time
import zlib

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from veer.node import recording
from veer.node.recording import (
    DAMAGE_REASONS,
    FILE_MAGIC,
    RECORD_MARKER,
    LogDamage,
    LogFormatError,
    LogReader,
    LogWriter,
)

QUICK = settings(max_examples=40, deadline=None, database=None,
                 suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

FILE_HEADER_BYTES = 16  # docs/files.md: magic (12) + version (u16) + reserved (u16)
RECORD_HEADER_BYTES = 24  # docs/files.md: marker 4, kind 1, flags 1, reserved 2, length 4, t_s 8, CRC 4
KIND_CODES = {"grid_content": 1, "grid": 2, "pose": 3, "control": 4, "path": 5, "status": 6, "event": 7,
              "note": 8}  # docs/files.md, record kinds


def reference_crc32(data: bytes) -> int:
    """CRC-32 bit by bit: reflected polynomial 0xEDB88320, initial and final XOR 0xFFFFFFFF."""
    # source: ISO 3309 / ITU-T V.42 CRC-32 as specified in the PNG specification, annex D
    crc = 0xFFFFFFFF
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = (crc >> 1) ^ (0xEDB88320 if crc & 1 else 0)
    return crc ^ 0xFFFFFFFF


def walk_frames(data: bytes) -> list[tuple[int, int, int, float]]:
    """(offset, end, kind code, t_s) of every record, parsed from the documented layout."""
    assert data[:12] == b"\x89veerlog\r\n\x1a\n"  # docs/files.md, file header
    assert struct.unpack_from("<HH", data, 12) == (1, 0)
    frames = []
    position = FILE_HEADER_BYTES
    while position < len(data):
        marker, kind, flags, reserved, length, t_s, header_crc = struct.unpack_from("<4sBBHIdI", data, position)
        assert marker == b"\xf5vr\x1e" and flags == 0 and reserved == 0
        end = position + RECORD_HEADER_BYTES + length + 4
        frames.append((position, end, kind, t_s))
        position = end
    assert position == len(data)
    return frames


def grid_message(rows: int = 60, cols: int = 80, seed: int = 0, map_id="yard", origin=(0.0, 0.0)) -> dict:
    rng = np.random.default_rng(seed)
    cells = np.where(rng.random((rows, cols)) < 0.2, 0, 255).astype(np.uint8)
    return {"v": 1, "kind": "grid", "map_id": map_id, "rows": rows, "cols": cols, "cell_size_m": 0.1,
            "origin_m": list(origin), "encoding": "raw", "cells": cells.tobytes()}


def pose_message(i: int) -> dict:
    return {"v": 1, "kind": "pose", "x_m": 1.0 + 0.1 * i, "y_m": 2.0, "heading_rad": 0.25 * i, "t_s": 0.1 * i}


def every_kind(writer: LogWriter) -> list[tuple[float, str, object]]:
    """Write one record of every kind; return (t_s, kind, message) as a reader must give them back."""
    grid = grid_message()
    path = {"v": 1, "kind": "path", "seq": 1, "map_id": "yard", "goal_id": 1, "status": "found", "reason": None,
            "length_m": 12.5, "reverse_m": 0.0, "gear_changes": 0,
            "poses": [[1.0, 2.0, 0.0, 1], [1.2, 2.0, 0.0, 1]], "stats": {"expansions": 12, "plan_s": 0.01}}
    status = {"v": 1, "kind": "status", "state": "following", "map_id": "yard", "goal_id": 1, "path_seq": 1,
              "last_plan_s": 0.01}
    event = {"v": 1, "kind": "event", "code": "bad_grid_message", "detail": "grid message: missing field 'rows'"}
    request = {"v": 1, "op": "goal", "x_m": 5.0, "y_m": 6.0, "heading_rad": 1.5}
    reply = {"ok": True, "goal_id": 1}
    writer.write_input("grid", grid, 1.0)
    writer.write_input("pose", pose_message(1), 1.5)
    writer.write_control(request, reply, 2.0)
    writer.write_output("path", path, 2.25)
    writer.write_output("status", status, 2.5)
    writer.write_output("event", event, 3.0)
    writer.write_note("operator: map swapped", 3.5, {"who": "test"})
    writer.write_control({"v": 1, "op": "cancel"}, None, 4.0)
    return [(1.0, "grid", grid), (1.5, "pose", pose_message(1)), (2.0, "control", {"request": request, "reply": reply}),
            (2.25, "path", path), (2.5, "status", status), (3.0, "event", event),
            (3.5, "note", {"text": "operator: map swapped", "data": {"who": "test"}}),
            (4.0, "control", {"request": {"v": 1, "op": "cancel"}, "reply": None})]


def read_back(path) -> tuple[list[tuple[float, str, object]], LogReader]:
    reader = LogReader(path)
    return [(r.t_s, r.kind, r.message) for r in reader], reader


# -- the checksum and the frame -------------------------------------------------------


def test_crc32_is_the_published_crc32():
    # source: the CRC catalogue (CRC-32/ISO-HDLC, ISO 3309) check value of b"123456789"
    assert reference_crc32(b"123456789") == 0xCBF43926
    assert zlib.crc32(b"123456789") == 0xCBF43926
    rng = random.Random(7)
    for size in (0, 1, 5, 100):
        blob = bytes(rng.randrange(256) for _ in range(size))
        assert zlib.crc32(blob) == reference_crc32(blob)


def test_every_frame_follows_the_documented_layout(tmp_path):
    log = tmp_path / "frames.log"
    with LogWriter(log) as writer:
        expected = every_kind(writer)
    data = log.read_bytes()
    frames = walk_frames(data)
    # one grid_content before the grid, then one record per write
    assert [kind for _, _, kind, _ in frames] == [1, 2, 3, 4, 5, 6, 7, 8, 4]
    assert [t for _, _, _, t in frames[1:]] == [t for t, _, _ in expected]
    for offset, end, _, _ in frames:
        head = data[offset:offset + 20]
        (header_crc,) = struct.unpack_from("<I", data, offset + 20)
        assert header_crc == reference_crc32(head)
        payload = data[offset + RECORD_HEADER_BYTES:end - 4]
        (payload_crc,) = struct.unpack_from("<I", data, end - 4)
        if len(payload) < 2000:  # the bitwise reference is slow; zlib checks the large ones
            assert payload_crc == reference_crc32(payload)
        assert payload_crc == zlib.crc32(payload)
    assert FILE_MAGIC == data[:12] and RECORD_MARKER == data[16:20]
    assert recording.RECORD_KINDS == tuple(KIND_CODES)


# -- round trips ------------------------------------------------------------------------


def test_round_trip_of_every_kind(tmp_path):
    log = tmp_path / "all.log"
    with LogWriter(log) as writer:
        expected = every_kind(writer)
    records, reader = read_back(log)
    assert records == expected
    assert reader.damage == [] and reader.skipped_tail_bytes == 0
    assert reader.counts == {"grid_content": 1, "grid": 1, "pose": 1, "control": 2, "path": 1, "status": 1,
                             "event": 1, "note": 1}
    assert [r.stream for r in reader] == ["input", "input", "control", "output", "output", "output", "note",
                                          "control"]
    assert isinstance(records[0][2]["cells"], bytes)


def test_grid_without_bytes_cells_is_stored_as_it_came(tmp_path):
    """A malformed grid message the node saw is kept whole, for replay to reject again."""
    log = tmp_path / "odd.log"
    odd = [{"v": 1, "kind": "grid", "rows": 2}, {"v": 1, "kind": "grid", "cells": "not bytes"}, [1, 2, 3], b"\x00\x01"]
    with LogWriter(log) as writer:
        for i, message in enumerate(odd):
            writer.write_input("grid", message, float(i))
    records, reader = read_back(log)
    assert [m for _, _, m in records] == odd
    assert reader.counts.get("grid_content", 0) == 0


def test_numpy_values_are_stored_as_plain_numbers(tmp_path):
    log = tmp_path / "np.log"
    with LogWriter(log) as writer:
        writer.write_output("status", {"path_seq": np.int64(3), "poses": np.array([[1.0, 2.0]])}, 0.0)
    records, _ = read_back(log)
    assert records[0][2] == {"path_seq": 3, "poses": [[1.0, 2.0]]}


def test_time_defaults_to_the_wall_clock(tmp_path):
    log = tmp_path / "clock.log"
    before = time.time()
    with LogWriter(log) as writer:
        writer.write_input("pose", pose_message(0))
    after = time.time()
    (record,) = LogReader(log).read_all()
    assert before <= record.t_s <= after


# -- grid contents are stored once ----------------------------------------------------------


def test_the_same_grid_100_times_costs_far_less_than_100_grids(tmp_path):
    grid = grid_message(rows=300, cols=300)  # 90 000 bytes of cells
    grid_bytes = len(grid["cells"])
    log = tmp_path / "same.log"
    with LogWriter(log) as writer:
        writer.write_input("grid", grid, 0.0)
        size_after_one = writer.size_bytes
        for i in range(1, 100):
            message = dict(grid, map_id=f"yard-{i}")  # a new map_id with the same content is stored once too
            writer.write_input("grid", message, 0.1 * i)
        assert writer.contents_written == 1
    size_after_hundred = log.stat().st_size
    assert size_after_one > grid_bytes
    assert size_after_hundred - size_after_one < grid_bytes / 4
    assert size_after_hundred < 100 * grid_bytes / 50
    records, reader = read_back(log)
    assert len(records) == 100 and reader.counts["grid_content"] == 1
    assert all(m["cells"] == grid["cells"] for _, _, m in records)
    assert [m["map_id"] for _, _, m in records] == ["yard"] + [f"yard-{i}" for i in range(1, 100)]


def test_a_new_content_or_geometry_is_stored_again(tmp_path):
    first, changed = grid_message(seed=1), grid_message(seed=2)
    moved = dict(first, origin_m=[5.0, 0.0])  # same cells, other place: another content
    assert recording.grid_content_id(first) != recording.grid_content_id(moved)
    assert recording.grid_content_id(first) == recording.grid_content_id(dict(first, map_id=9))
    log = tmp_path / "changing.log"
    with LogWriter(log) as writer:
        for i, message in enumerate([first, changed, first, moved, changed]):
            writer.write_input("grid", message, float(i))
        assert writer.contents_written == 3
    records, _ = read_back(log)
    assert [m for _, _, m in records] == [first, changed, first, moved, changed]


def test_a_buffer_changed_in_place_is_a_new_content(tmp_path):
    grid = grid_message()
    buffer = bytearray(grid["cells"])
    log = tmp_path / "inplace.log"
    with LogWriter(log) as writer:
        writer.write_input("grid", dict(grid, cells=buffer), 0.0)
        buffer[0] ^= 0xFF  # the sender reuses its buffer
        writer.write_input("grid", dict(grid, cells=buffer), 1.0)
        assert writer.contents_written == 2
    first, second = LogReader(log).read_all()
    assert first.message["cells"] == grid["cells"] and second.message["cells"] == bytes(buffer)


def test_content_is_written_again_after_the_repeat_interval(tmp_path):
    grid = grid_message()
    log = tmp_path / "repeat.log"
    with LogWriter(log, repeat_grid_content_s=10.0) as writer:
        for i in range(31):
            writer.write_input("grid", grid, float(i))  # copies at 0, 10, 20, 30 s
        assert writer.contents_written == 4
    with LogWriter(tmp_path / "once.log", repeat_grid_content_s=None) as writer:
        for i in range(31):
            writer.write_input("grid", grid, float(i))
        assert writer.contents_written == 1
    # damage the first copy: the grids before the second copy are lost, the rest read
    data = bytearray(log.read_bytes())
    first_copy = walk_frames(bytes(data))[0]
    data[first_copy[0] + RECORD_HEADER_BYTES + 100] ^= 0xFF
    log.write_bytes(bytes(data))
    records, reader = read_back(log)
    assert [t for t, _, _ in records] == [float(i) for i in range(10, 31)]
    assert [d.reason for d in reader.damage] == ["bad_checksum"] + ["missing_content"] * 10


# -- damage -----------------------------------------------------------------------------------


def _small_log(path, poses: int = 6) -> list[tuple[float, str, object]]:
    expected = []
    with LogWriter(path) as writer:
        expected += every_kind(writer)
        for i in range(poses):
            writer.write_input("pose", pose_message(i), 10.0 + i)
            expected.append((10.0 + i, "pose", pose_message(i)))
    return expected


def test_cut_at_every_byte_of_the_last_record(tmp_path):
    log = tmp_path / "whole.log"
    expected = _small_log(log)
    data = log.read_bytes()
    last_offset = walk_frames(data)[-1][0]
    cut_log = tmp_path / "cut.log"
    for cut in range(last_offset, len(data)):
        cut_log.write_bytes(data[:cut])
        records, reader = read_back(cut_log)
        assert records == expected[:-1], cut
        assert reader.skipped_tail_bytes == cut - last_offset
        if cut > last_offset:
            assert reader.damage == [LogDamage(last_offset, cut - last_offset, "cut_off", at_tail=True)]
        else:
            assert reader.damage == []


def test_cut_at_random_offsets_reads_every_whole_record(tmp_path):
    log = tmp_path / "whole.log"
    _small_log(log)
    data = log.read_bytes()
    frames = walk_frames(data)
    whole = [r.message for r in LogReader(log)]
    rng = random.Random(3)
    cut_log = tmp_path / "cut.log"
    for cut in sorted(rng.sample(range(FILE_HEADER_BYTES, len(data)), 25)):
        cut_log.write_bytes(data[:cut])
        reader = LogReader(cut_log)
        messages = [r.message for r in reader]
        whole_frames = [f for f in frames if f[1] <= cut]
        kept = len([f for f in whole_frames if f[2] != KIND_CODES["grid_content"]])
        assert messages == whole[:kept]
        last_end = whole_frames[-1][1] if whole_frames else FILE_HEADER_BYTES
        assert reader.skipped_tail_bytes == cut - last_end


def test_a_flipped_byte_anywhere_in_a_middle_record_skips_that_record_only(tmp_path):
    log = tmp_path / "whole.log"
    expected = _small_log(log)
    data = log.read_bytes()
    frames = walk_frames(data)
    victim = len(frames) - 4  # a pose record in the middle
    offset, end, kind, _ = frames[victim]
    assert kind == KIND_CODES["pose"]
    lost = victim - 1  # expected has no entry for the grid_content frame
    damaged_log = tmp_path / "damaged.log"
    for position in range(offset, end):
        damaged = bytearray(data)
        damaged[position] ^= 0x5A
        damaged_log.write_bytes(bytes(damaged))
        records, reader = read_back(damaged_log)
        # source: a CRC of degree 32 detects every error burst of up to 32 bits
        # (Peterson & Brown, "Cyclic Codes for Error Detection", Proc. IRE 49(1), 1961)
        assert records == expected[:lost] + expected[lost + 1:], position
        reason = "bad_header" if position < offset + RECORD_HEADER_BYTES else "bad_checksum"
        assert reader.damage == [LogDamage(offset, end - offset, reason)]
        assert reader.skipped_tail_bytes == 0


def test_a_bad_length_is_caught_by_the_header_checksum(tmp_path):
    log = tmp_path / "whole.log"
    expected = _small_log(log)
    data = bytearray(log.read_bytes())
    offset, end, _, _ = walk_frames(bytes(data))[3]
    struct.pack_into("<I", data, offset + 8, 10**9)  # a length far past the end of the file
    log.write_bytes(bytes(data))
    records, reader = read_back(log)
    assert records == expected[:2] + expected[3:]
    assert reader.damage == [LogDamage(offset, end - offset, "bad_header")]


@pytest.mark.parametrize("kept_bytes", [1, 3, 10, 23, 30])
def test_a_crash_then_append_cuts_the_broken_tail_away(tmp_path, kept_bytes):
    log = tmp_path / "crash.log"
    with LogWriter(log) as writer:
        writer.write_input("pose", pose_message(0), 0.0)
        writer.write_input("pose", pose_message(1), 1.0)
    data = log.read_bytes()
    frames = walk_frames(data)
    log.write_bytes(data[:frames[1][0] + kept_bytes])  # killed inside the second record
    with LogWriter(log, append=True) as writer:
        writer.write_input("pose", pose_message(2), 2.0)
    records, reader = read_back(log)
    assert [m for _, _, m in records] == [pose_message(0), pose_message(2)]
    assert reader.damage == []  # the half record was cut away before appending
    # the appended record starts where the whole records ended
    assert walk_frames(log.read_bytes())[1][0] == frames[1][0]


def test_stray_bytes_between_records_are_skipped_exactly(tmp_path):
    log = tmp_path / "stray.log"
    expected = _small_log(log)
    data = log.read_bytes()
    frames = walk_frames(data)
    split = frames[4][0]
    stray = b"\xf5vr" + bytes(range(5))  # a marker's first bytes, then junk
    log.write_bytes(data[:split] + stray + data[split:])
    records, reader = read_back(log)
    assert records == expected
    assert reader.damage == [LogDamage(split, len(stray), "bad_header")]


def test_an_unknown_kind_and_an_odd_payload_are_reported_and_skipped(tmp_path):
    log = tmp_path / "odd.log"
    with LogWriter(log) as writer:
        writer.write_input("pose", pose_message(0), 0.0)
        writer.write_input("pose", pose_message(1), 1.0)
        writer.write_input("pose", pose_message(2), 2.0)
    data = bytearray(log.read_bytes())
    frames = walk_frames(bytes(data))

    def rewrite(index: int, kind: int, payload: bytes) -> bytes:
        offset, end, _, t_s = frames[index]
        head = struct.pack("<4sBBHId", b"\xf5vr\x1e", kind, 0, 0, len(payload), t_s)
        record = head + struct.pack("<I", reference_crc32(head)) + payload + struct.pack("<I", zlib.crc32(payload))
        return bytes(data[:offset]) + record + bytes(data[end:])

    log.write_bytes(rewrite(1, 99, b"\x80"))
    _, reader = read_back(log)
    assert [d.reason for d in reader.damage] == ["unknown_kind"]
    log.write_bytes(rewrite(1, KIND_CODES["pose"], b"\xc1"))  # 0xC1 is never used in msgpack
    records, reader = read_back(log)
    assert [d.reason for d in reader.damage] == ["bad_payload"] and len(records) == 2
    log.write_bytes(rewrite(1, KIND_CODES["grid"], b"\x81\xa1m\x01"))  # {"m": 1}: fine for a grid without ref
    records, reader = read_back(log)
    assert reader.damage == [] and records[1][2] == 1


# -- files that are not logs ----------------------------------------------------------------


def _refused(path) -> LogFormatError:
    with pytest.raises(LogFormatError) as caught:
        LogReader(path)
    assert "\n" not in str(caught.value) and str(path) in str(caught.value)
    return caught.value


def test_files_that_are_not_logs_are_refused_in_one_line(tmp_path):
    rng = random.Random(11)
    for size in (1, 15, 16, 17, 1000):
        garbage = tmp_path / f"garbage{size}.bin"
        garbage.write_bytes(bytes(rng.randrange(256) for _ in range(size)))
        assert _refused(garbage).code == "bad_log"
    empty = tmp_path / "empty.log"
    empty.write_bytes(b"")
    assert "empty" in str(_refused(empty))
    partial = tmp_path / "partial.log"
    partial.write_bytes(FILE_MAGIC[:7])
    assert "header" in str(_refused(partial))
    newer = tmp_path / "newer.log"
    newer.write_bytes(FILE_MAGIC + struct.pack("<HH", 2, 0))
    assert _refused(newer).code == "log_version"
    assert _refused(tmp_path / "missing.log").code == "bad_log"
    assert _refused(tmp_path).code == "bad_log"
    text = tmp_path / "notes.txt"
    text.write_text("this is not a log\n" * 5)
    assert isinstance(_refused(text), ValueError)


@QUICK
@given(st.binary(min_size=0, max_size=3000))
def test_a_header_followed_by_garbage_reads_as_damage_never_a_crash(tmp_path, garbage):
    log = tmp_path / "garbage.log"
    log.write_bytes(FILE_MAGIC + struct.pack("<HH", 1, 0) + garbage)
    reader = LogReader(log)
    assert reader.read_all() == []
    assert reader.skipped_bytes == len(garbage)


# -- properties ---------------------------------------------------------------------------------

_scalars = (st.none() | st.booleans() | st.integers(-(2**63), 2**64 - 1)
            | st.floats(allow_nan=False) | st.text(max_size=20) | st.binary(max_size=40))
_values = st.recursive(_scalars, lambda inner: st.lists(inner, max_size=4)
                       | st.dictionaries(st.text(max_size=8), inner, max_size=4), max_leaves=12)
_times = st.floats(-1e9, 1e12, allow_nan=False)
_grids = st.builds(lambda rows, cols, seed, map_id: grid_message(rows, cols, seed, map_id),
                   st.integers(1, 12), st.integers(1, 12), st.integers(0, 3), st.integers(0, 5))


@st.composite
def _writes(draw):
    count = draw(st.integers(1, 12))
    writes = []
    for _ in range(count):
        kind = draw(st.sampled_from(["grid", "pose", "path", "status", "event", "control", "note"]))
        if kind == "grid":
            message = draw(_grids)
        elif kind == "control":
            message = {"request": draw(_values), "reply": draw(_values)}
        elif kind == "note":
            message = {"text": draw(st.text(max_size=30)), "data": draw(_values)}
        else:
            message = draw(_values)
        writes.append((draw(_times), kind, message))
    return writes


def _write_all(path, writes) -> None:
    with LogWriter(path) as writer:
        for t_s, kind, message in writes:
            if kind == "control":
                writer.write_control(message["request"], message["reply"], t_s)
            elif kind == "note":
                writer.write_note(message["text"], t_s, message["data"])
            elif kind in ("grid", "pose"):
                writer.write_input(kind, message, t_s)
            else:
                writer.write_output(kind, message, t_s)


@QUICK
@given(_writes())
def test_property_round_trip(tmp_path, writes):
    log = tmp_path / "prop.log"
    _write_all(log, writes)
    records, reader = read_back(log)
    assert records == writes and reader.damage == []


@QUICK
@given(_writes(), st.floats(0.0, 1.0))
def test_property_a_cut_log_reads_a_prefix(tmp_path, writes, fraction):
    log = tmp_path / "prop.log"
    _write_all(log, writes)
    data = log.read_bytes()
    cut = FILE_HEADER_BYTES + int(fraction * (len(data) - FILE_HEADER_BYTES))
    log.write_bytes(data[:cut])
    records, reader = read_back(log)
    assert records == writes[:len(records)]
    whole_end = max([end for _, end, _, _ in walk_frames(data) if end <= cut], default=FILE_HEADER_BYTES)
    assert reader.skipped_tail_bytes == cut - whole_end
    assert reader.skipped_bytes == reader.skipped_tail_bytes


@QUICK
@given(_writes(), st.floats(0.0, 1.0, exclude_max=True), st.integers(1, 255))
def test_property_a_flipped_byte_loses_only_what_it_touches(tmp_path, writes, fraction, flip):
    log = tmp_path / "prop.log"
    _write_all(log, writes)
    data = bytearray(log.read_bytes())
    frames = walk_frames(bytes(data))
    position = FILE_HEADER_BYTES + int(fraction * (len(data) - FILE_HEADER_BYTES))
    data[position] ^= flip
    log.write_bytes(bytes(data))
    records, reader = read_back(log)
    hit = next(f for f in frames if f[0] <= position < f[1])
    assert reader.damage and reader.damage[0].offset == hit[0] and reader.damage[0].length == hit[1] - hit[0]
    if hit[2] != KIND_CODES["grid_content"]:  # only the record that was hit is lost
        index = [f for f in frames if f[2] != KIND_CODES["grid_content"]].index(hit)
        assert records == writes[:index] + writes[index + 1:]
    else:  # a lost content takes the grids that refer to it with it, and nothing else
        assert all(r in writes for r in records)
        assert all(d.reason == "missing_content" for d in reader.damage[1:])
        assert len(records) == len(writes) - len(reader.damage) + 1


# -- the writer ---------------------------------------------------------------------------------


def test_each_record_is_on_disk_before_the_writer_closes(tmp_path):
    log = tmp_path / "live.log"
    writer = LogWriter(log)
    writer.write_input("pose", pose_message(0), 0.0)
    assert [r.message for r in LogReader(log)] == [pose_message(0)]  # a second reader sees it at once
    writer.write_input("pose", pose_message(1), 1.0)
    assert len(LogReader(log).read_all()) == 2
    writer.close()
    writer.close()  # twice is fine
    with pytest.raises(LogFormatError) as caught:
        writer.write_input("pose", pose_message(2), 2.0)
    assert caught.value.code == "log_closed"


def test_fsync_every_n_records(tmp_path, monkeypatch):
    synced = []
    real_fsync = os.fsync
    monkeypatch.setattr(recording.os, "fsync", lambda fd: (synced.append(fd), real_fsync(fd)))
    with LogWriter(tmp_path / "sync.log", fsync_every_records=3) as writer:
        for i in range(7):
            writer.write_input("pose", pose_message(i), float(i))
        assert len(synced) == 2
    assert len(synced) == 3  # close
    synced.clear()
    with LogWriter(tmp_path / "nosync.log") as writer:
        for i in range(7):
            writer.write_input("pose", pose_message(i), float(i))
        assert synced == []


def test_append_continues_a_log_and_refuses_other_files(tmp_path):
    log = tmp_path / "more.log"
    with LogWriter(log) as writer:
        writer.write_input("grid", grid_message(), 0.0)
    with LogWriter(log, append=True) as writer:
        writer.write_input("grid", grid_message(), 1.0)
    records, reader = read_back(log)
    assert len(records) == 2 and reader.damage == []
    with LogWriter(tmp_path / "new.log", append=True) as writer:  # append to a missing file starts one
        writer.write_note("first", 0.0)
    assert LogReader(tmp_path / "new.log").read_all()[0].message["text"] == "first"
    other = tmp_path / "other.txt"
    other.write_text("hello\n")
    with pytest.raises(LogFormatError):
        LogWriter(other, append=True)
    assert other.read_text() == "hello\n"


@pytest.mark.parametrize("call", [
    lambda w: w.write_input("path", {}, 0.0),
    lambda w: w.write_output("pose", {}, 0.0),
    lambda w: w.write("grid_content", {}, 0.0),
    lambda w: w.write_input("pose", {}, math.nan),
    lambda w: w.write_input("pose", {}, True),
    lambda w: w.write_input("pose", {"x": object()}, 0.0),
    lambda w: w.write_note(3, 0.0),
])
def test_the_writer_refuses_what_it_cannot_store(tmp_path, call):
    with LogWriter(tmp_path / "w.log") as writer:
        with pytest.raises(LogFormatError) as caught:
            call(writer)
        assert caught.value.code == "bad_record" and "\n" not in str(caught.value)
    assert LogReader(tmp_path / "w.log").read_all() == []


def test_the_writer_refuses_a_missing_folder_and_bad_settings(tmp_path):
    with pytest.raises(LogFormatError) as caught:
        LogWriter(tmp_path / "no" / "such" / "folder.log")
    assert caught.value.code == "log_write"
    for keyword in ({"fsync_every_records": 0}, {"fsync_every_s": -1.0}, {"repeat_grid_content_s": 0}):
        with pytest.raises(LogFormatError):
            LogWriter(tmp_path / "x.log", **keyword)


# -- the read-out for people ----------------------------------------------------------------------


def _readout(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "veer.node.recording", *map(str, args)],
                          capture_output=True, text=True, timeout=60)


def test_readout_of_a_clean_a_damaged_and_a_foreign_file(tmp_path):
    log = tmp_path / "drive.log"
    _small_log(log)
    clean = _readout(log)
    assert clean.returncode == 0, clean.stderr
    lines = clean.stdout.splitlines()
    assert lines[0].startswith(f"{log}: veer recording log, format 1")
    assert any(line.split()[:2] == ["pose", "7"] for line in lines)
    assert any(line.split()[:2] == ["control", "2"] for line in lines)
    assert "time span: 1.000 s to 15.000 s (14.000 s)" in lines
    assert lines[-1] == "damage: none"

    data = log.read_bytes()
    (log.parent / "cut.log").write_bytes(data[:-3])
    damaged = _readout(log.parent / "cut.log")
    assert damaged.returncode == 1
    assert damaged.stdout.splitlines()[-1].startswith("damage: ")
    assert "at the tail" in damaged.stdout

    foreign = tmp_path / "photo.png"
    foreign.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(40))
    refused = _readout(foreign)
    assert refused.returncode == 2 and refused.stdout == ""
    assert len(refused.stderr.strip().splitlines()) == 1 and "Traceback" not in refused.stderr
