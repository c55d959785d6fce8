"""Fuzz the recording log reader (veer.node.recording.LogReader) with damaged logs.

Logs are written with LogWriter from drawn records, then damaged: bit flips, cuts,
insertions, deletions, overwrites, splices of the log's own bytes (whole records
repeated or moved), garbage appended; and files of garbage behind a valid header.

Property: opening and iterating raise nothing but LogFormatError (with a code and a
one-line message); every record yielded is a whole record that was written (same kind,
time and message, grid cells restored), its message a complete dict; every damage entry
lies inside the file and names a documented reason.
"""

from __future__ import annotations

from unittest import mock

import pytest
from hypothesis import event, given
from hypothesis import strategies as st

from fuzzkit import bounded_call, check_project_error, fuzz_settings, mutated
from veer.node import recording
from veer.node.recording import DAMAGE_REASONS, FILE_MAGIC, RECORD_MARKER, LogFormatError, LogReader, LogWriter

FILE_HEADER = FILE_MAGIC + b"\x01\x00\x00\x00"  # magic, version 1 (u16 LE), reserved 0


def plain_values():
    """What msgpack carries back unchanged: no NaN (NaN != NaN), no tuples, ints within 64 bits."""
    scalars = st.one_of(st.none(), st.booleans(), st.integers(-(2**63), 2**64 - 1),
                        st.floats(allow_nan=False), st.text(max_size=10), st.binary(max_size=10))
    return st.recursive(scalars, lambda inner: st.lists(inner, max_size=3)
                        | st.dictionaries(st.text(max_size=6), inner, max_size=3), max_leaves=6)


@st.composite
def grid_messages(draw) -> dict:
    rows, cols = draw(st.integers(1, 6)), draw(st.integers(1, 6))
    cells = draw(st.sampled_from([bytes(rows * cols), bytes([255]) * (rows * cols)])
                 | st.binary(min_size=rows * cols, max_size=rows * cols))
    return {"v": 1, "kind": "grid", "map_id": draw(st.integers(0, 3)), "rows": rows, "cols": cols,
            "cell_size_m": 0.1, "origin_m": [0.0, 0.0], "encoding": "raw", "cells": cells}


@st.composite
def records(draw) -> list[tuple[str, dict, float]]:
    """(kind, message, t_s) in writing order; control and note messages as the writer stores them."""
    out = []
    t_s = draw(st.floats(0.0, 1e6))
    for _ in range(draw(st.integers(1, 8))):
        t_s += draw(st.floats(0.0, 700.0))  # past 600 s a grid's content is written again
        kind = draw(st.sampled_from(["grid", "grid", "pose", "control", "path", "status", "event", "note"]))
        if kind == "grid":
            message = draw(grid_messages())
        elif kind == "control":
            message = {"request": draw(plain_values()), "reply": draw(plain_values())}
        elif kind == "note":
            message = {"text": draw(st.text(max_size=20)), "data": draw(plain_values())}
        else:
            message = draw(st.dictionaries(st.text(max_size=6), plain_values(), max_size=4))
        out.append((kind, message, t_s))
    return out


def write_log(path, entries) -> None:
    """Write ``entries`` with LogWriter; its fsync at close is skipped (the reader is under test, not the disk)."""
    with mock.patch.object(recording.os, "fsync"), LogWriter(path) as log:
        for kind, message, t_s in entries:
            if kind == "control":
                log.write_control(message["request"], message["reply"], t_s)
            elif kind == "note":
                log.write_note(message["text"], t_s, message["data"])
            else:
                log.write(kind, message, t_s)


def read_log(path):
    """(records, reader), or (None, error) for a LogFormatError; anything else propagates."""
    try:
        reader = LogReader(path)
        found = list(reader)
    except LogFormatError as error:
        check_project_error(error)
        return None, error
    return found, reader


def check_damage(reader, size: int) -> None:
    for entry in reader.damage:
        assert entry.reason in DAMAGE_REASONS
        assert 0 <= entry.offset < size and 0 < entry.length <= size - entry.offset


@pytest.fixture(scope="module")
def log_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz_logs")


@given(entries=records(), data=st.data())
@fuzz_settings(ci=150, deep=4000)
def test_a_damaged_log_yields_only_whole_written_records(log_dir, entries, data):
    path = log_dir / "drive.log"
    write_log(path, entries)
    intact, reader = bounded_call(read_log, path)
    written = [(kind, t_s, message) for kind, message, t_s in entries]
    assert [(r.kind, r.t_s, r.message) for r in intact] == written and reader.damage == []

    whole = path.read_bytes()
    if data.draw(st.booleans(), label="damage the file header too"):
        damaged = data.draw(mutated(st.just(whole), max_ops=6), label="damaged log")
    else:
        body = data.draw(mutated(st.just(whole[len(FILE_HEADER):]), max_ops=6), label="damaged records")
        damaged = whole[: len(FILE_HEADER)] + body
    damaged_path = log_dir / "damaged.log"
    damaged_path.write_bytes(damaged)
    found, reader = bounded_call(read_log, damaged_path)
    if found is None:
        event(f"refused: {reader.code}")
        return
    event("all records back" if len(found) == len(written) else "some records back" if found else "no record back")
    for record in found:
        assert isinstance(record.message, dict)
        assert (record.kind, record.t_s, record.message) in written
    check_damage(reader, len(damaged))


@given(tail=st.binary(max_size=400), markers=st.lists(st.integers(0, 400), max_size=4),
       header=st.sampled_from([FILE_HEADER, FILE_HEADER[:10], FILE_MAGIC + b"\x02\x00\x00\x00",
                               FILE_MAGIC + b"\x00\x00\x00\x00", b""]))
@fuzz_settings(ci=150, deep=3000)
def test_garbage_after_a_log_header_yields_nothing_or_is_refused(log_dir, tail, markers, header):
    body = bytearray(tail)
    for at in markers:  # record markers in the garbage make the reader try to resynchronise
        body[at:at] = RECORD_MARKER
    path = log_dir / "garbage.log"
    path.write_bytes(header + bytes(body))
    found, reader = bounded_call(read_log, path)
    if found is None:
        return
    assert found == []  # a random header checksum holds with odds of 2^-32: no record is made up
    check_damage(reader, len(header) + len(body))
