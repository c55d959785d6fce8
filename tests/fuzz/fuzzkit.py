"""Shared pieces of the fuzz tests: settings per profile, the outcome check, seed files, mutations.

The property every fuzz test checks: a call returns a valid result or raises one of the
project's own errors, which carries a non-empty string ``code`` and a one-line message;
any other exception fails the test, and so does a call that has not returned after
:data:`HANG_LIMIT_S` (a hang, not a timing: inputs are small, calls take milliseconds).

Seed files are written here byte by byte from the published formats, never with the
code under test or OpenCV:

# source: Netpbm pgm spec (http://netpbm.sourceforge.net/doc/pgm.html): magic P5 (raw) or
#   P2 (plain), whitespace-separated width, height, maxval, one whitespace byte, raster;
#   raw samples are 1 byte (maxval < 256) or 2 bytes most significant first
# source: PNG 1.2 specification: signature (section 3.1), chunk = length, type, data,
#   CRC-32 over type + data (section 3.2), IHDR fields (4.1.1), PLTE (4.1.2), scanlines
#   with a filter-type byte, samples packed most significant bit first (2.3, 2.4)
"""

from __future__ import annotations

import datetime
import json
import math
import os
import struct
import threading
import zlib

import numpy as np
from hypothesis import event, settings
from hypothesis import strategies as st

PROFILE_VARIABLE = "VEER_FUZZ_PROFILE"
HANG_LIMIT_S = 120.0
"""A call still running after this long counts as a hang (generous: a shared machine)."""


# --------------------------------------------------------------------------- settings


def active_profile() -> str:
    """``ci`` unless ``VEER_FUZZ_PROFILE`` says ``deep``."""
    return os.environ.get(PROFILE_VARIABLE, "ci")


def fuzz_settings(ci: int, deep: int) -> settings:
    """Settings of one fuzz test: the active profile with its own example count."""
    name = active_profile()
    return settings(
        settings.get_profile(name), max_examples=ci if name == "ci" else deep, deadline=None
    )


# --------------------------------------------------------------------------- outcome


def bounded_call(function, *args, **kwargs):
    """Run ``function(*args, **kwargs)`` in a thread; re-raise what it raises; fail if it hangs."""
    outcome: dict = {}

    def run() -> None:
        try:
            outcome["value"] = function(*args, **kwargs)
        except BaseException as exc:  # noqa: BLE001 - handed back to the calling thread as is
            outcome["error"] = exc

    worker = threading.Thread(target=run, name="fuzz-call", daemon=True)
    worker.start()
    worker.join(HANG_LIMIT_S)
    if worker.is_alive():
        raise AssertionError(f"{getattr(function, '__name__', function)} did not return within {HANG_LIMIT_S:.0f} s")
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]


def check_project_error(exc: BaseException) -> None:
    """A project error: a non-empty string ``code`` and a one-line, non-empty message."""
    code = getattr(exc, "code", None)
    assert isinstance(code, str) and code, f"{type(exc).__name__} has no code: {exc!r}"
    text = str(exc)
    assert text.strip(), f"{type(exc).__name__} ({code}) has an empty message"
    assert "\n" not in text and "Traceback" not in text, f"{type(exc).__name__} message is not one line: {text!r}"


# Bugs the fuzzers found in code this folder does not own, each kept as a strict xfail in
# test_regressions.py. While one is open, the fuzz tests let exactly that failure pass (same
# exception type raised in the same function of the same file) so that they go on looking
# for others; everything else still fails. Remove an entry when its bug is fixed (its
# regression test then passes and loses its xfail).
#   (exception type, file the exception is raised in, function or "*", regression test)
KNOWN_BUGS: list[tuple[str, str, str, str]] = []  # none open; an entry is (exception, file, function, test)


_REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))).replace(os.sep, "/")
_PACKAGES = tuple(f"{_REPO}/{name}/" for name in ("maps", "planning", "node", "tools"))


def known_bug(exc: BaseException) -> str | None:
    """The regression test of ``exc`` when it is a known open bug (see :data:`KNOWN_BUGS`).

    Matched on the innermost frame in veer's own code (the standard library may raise it
    on veer's behalf) and on the exact exception type.
    """
    tb = exc.__traceback__
    last = None
    while tb is not None:
        filename = tb.tb_frame.f_code.co_filename.replace(os.sep, "/")
        if filename.startswith(_PACKAGES):
            last = (filename, tb.tb_frame.f_code.co_name)
        tb = tb.tb_next
    if last is None:
        return None
    filename, function = last
    for kind, path, func, test in KNOWN_BUGS:
        if type(exc).__name__ == kind and filename.endswith("/" + path) and func in (function, "*"):
            return test
    return None


def outcome(function, *args, allowed: tuple, **kwargs):
    """``(result, None)`` or ``(None, error)`` for an ``allowed`` error (checked); others propagate.

    A known open bug (:data:`KNOWN_BUGS`) gives ``(None, None)`` (or ``(None, error)`` when
    the bug is only in the error's message) and a hypothesis event.
    """
    try:
        return bounded_call(function, *args, **kwargs), None
    except allowed as exc:
        try:
            check_project_error(exc)
        except AssertionError:
            test = known_bug(exc)
            if test is None:
                raise
            event(f"known bug, see test_regressions.py::{test}")
        return None, exc
    except Exception as exc:  # noqa: BLE001 - re-raised unless it is a known open bug
        test = known_bug(exc)
        if test is None:
            raise
        event(f"known bug, see test_regressions.py::{test}")
        return None, None


# --------------------------------------------------------------------------- PGM seeds


def pgm_p5(samples: np.ndarray, maxval: int, header: bytes | None = None) -> bytes:
    """A raw PGM: ``P5 cols rows maxval`` and big-endian samples (2 bytes when maxval > 255)."""
    # source: Netpbm pgm spec
    samples = np.asarray(samples)
    rows, cols = samples.shape
    head = header if header is not None else f"P5\n{cols} {rows}\n{maxval}\n".encode()
    return head + samples.astype(">u2" if maxval > 255 else "u1").tobytes()


def pgm_p2(samples: np.ndarray, maxval: int) -> bytes:
    """A plain PGM: ``P2``, the header, then decimal samples, one image row per line."""
    # source: Netpbm pgm spec (plain PGM, lines of at most 70 characters recommended, not required)
    samples = np.asarray(samples)
    rows, cols = samples.shape
    lines = [f"P2\n# fuzz seed\n{cols} {rows}\n{maxval}"]
    lines += [" ".join(str(int(v)) for v in row) for row in samples]
    return ("\n".join(lines) + "\n").encode()


# --------------------------------------------------------------------------- PNG seeds

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG 1.2 specification, section 3.1
PNG_DEPTHS = {0: (1, 2, 4, 8, 16), 2: (8, 16), 3: (1, 2, 4, 8), 4: (8, 16), 6: (8, 16)}  # source: PNG 1.2, 4.1.1
PNG_CHANNELS = {0: 1, 2: 3, 3: 1, 4: 2, 6: 4}  # source: PNG 1.2 specification, section 2.4


def png_chunk(kind: bytes, payload: bytes) -> bytes:
    """length (u32 BE), type, data, CRC-32 of type + data."""
    # source: PNG 1.2 specification, section 3.2
    return struct.pack(">I", len(payload)) + kind + payload + struct.pack(">I", zlib.crc32(kind + payload))


def png_ihdr(width: int, height: int, depth: int, colour: int, compression=0, filtering=0, interlace=0) -> bytes:
    """The IHDR chunk (13 data bytes), with its CRC."""
    # source: PNG 1.2 specification, section 4.1.1
    return png_chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, depth, colour, compression, filtering, interlace))


def _scanline(row: np.ndarray, depth: int) -> bytes:
    flat = row.reshape(-1).astype(np.uint16)
    if depth == 16:
        return flat.astype(">u2").tobytes()
    if depth == 8:
        return flat.astype(np.uint8).tobytes()
    # depths 1, 2, 4: pack samples most significant bit first, pad the last byte with zeros
    bits = ((flat[:, None] >> np.arange(depth - 1, -1, -1)) & 1).astype(np.uint8).reshape(-1)
    return np.packbits(bits).tobytes()


def png_file(samples: np.ndarray, depth: int, colour: int, palette: list | None = None,
             filter_type: int = 0) -> bytes:
    """A whole PNG: signature, IHDR, PLTE (colour type 3), one IDAT, IEND; no interlace."""
    # source: PNG 1.2 specification, sections 2.3 (filter byte per scanline), 3.2, 4.1.1-4.1.4
    samples = np.asarray(samples)
    rows, cols = samples.shape[:2]
    raw = b"".join(bytes([filter_type]) + _scanline(row, depth) for row in samples)
    out = PNG_SIGNATURE + png_ihdr(cols, rows, depth, colour)
    if palette is not None:
        out += png_chunk(b"PLTE", b"".join(bytes(entry) for entry in palette))
    return out + png_chunk(b"IDAT", zlib.compress(raw)) + png_chunk(b"IEND", b"")


def fix_png_crcs(data: bytes) -> bytes:
    """Recompute the CRC of every whole chunk after the signature, so damage reaches the decoder."""
    out = bytearray(data)
    pos = 8
    while pos + 12 <= len(out):
        (length,) = struct.unpack(">I", out[pos : pos + 4])
        end = pos + 12 + length
        if end > len(out):
            break
        out[end - 4 : end] = struct.pack(">I", zlib.crc32(bytes(out[pos + 4 : end - 4])))
        pos = end
    return bytes(out)


# --------------------------------------------------------------------------- strategies


@st.composite
def pgm_seeds(draw) -> bytes:
    """A valid PGM, P5 or P2, 8 or 16 bit, up to 12 x 12."""
    rows = draw(st.integers(1, 12))
    cols = draw(st.integers(1, 12))
    maxval = draw(st.sampled_from([1, 15, 255, 256, 1000, 65535]))
    seed = draw(st.integers(0, 2**32 - 1))
    samples = np.random.default_rng(seed).integers(0, maxval + 1, size=(rows, cols))
    return pgm_p5(samples, maxval) if draw(st.booleans()) else pgm_p2(samples, maxval)


@st.composite
def png_seeds(draw) -> bytes:
    """A valid PNG of any colour type and legal depth (grey, RGB, palette, with alpha), up to 10 x 10."""
    colour = draw(st.sampled_from(sorted(PNG_DEPTHS)))
    depth = draw(st.sampled_from(PNG_DEPTHS[colour]))
    rows = draw(st.integers(1, 10))
    cols = draw(st.integers(1, 10))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    palette = None
    top = 2**depth - 1
    if colour == 3:
        entries = draw(st.integers(1, 2**depth))
        palette = [tuple(int(v) for v in rng.integers(0, 256, 3)) for _ in range(entries)]
        top = entries - 1
    shape = (rows, cols) if PNG_CHANNELS[colour] == 1 else (rows, cols, PNG_CHANNELS[colour])
    samples = rng.integers(0, top + 1, size=shape)
    return png_file(samples, depth, colour, palette, filter_type=draw(st.sampled_from([0, 0, 0, 1, 2, 3, 4])))


@st.composite
def mutated(draw, seeds, max_ops: int = 4) -> bytes:
    """A seed file after 1..max_ops byte-level mutations: bit flips, truncation, insertion,
    deletion, overwrite, a splice of its own bytes, garbage appended."""
    data = bytearray(draw(seeds))
    for _ in range(draw(st.integers(1, max_ops))):
        op = draw(st.sampled_from(["flip", "flip", "truncate", "insert", "delete", "overwrite", "splice", "append"]))
        size = len(data)
        at = draw(st.integers(0, max(size - 1, 0)))
        if op == "flip" and size:
            data[at] ^= 1 << draw(st.integers(0, 7))
        elif op == "truncate":
            del data[at:]
        elif op == "insert":
            data[at:at] = draw(st.binary(min_size=1, max_size=16))
        elif op == "delete":
            del data[at : at + draw(st.integers(1, 16))]
        elif op == "overwrite":
            chunk = draw(st.binary(min_size=1, max_size=8))
            data[at : at + len(chunk)] = chunk
        elif op == "splice" and size:
            start = draw(st.integers(0, size - 1))
            piece = bytes(data[start : start + draw(st.integers(1, 64))])
            data[at:at] = piece
        elif op == "append":
            data += draw(st.binary(min_size=1, max_size=32))
    return bytes(data)


def mostly(usual, unusual, one_in: int = 5):
    """``usual``, and ``unusual`` one time in ``one_in`` (``a | b`` would draw each half the time)."""
    return st.integers(0, one_in - 1).flatmap(lambda pick: unusual if pick == 0 else usual)


def huge_ints():
    """Integers far beyond 64 bits, both signs: TOML and Python allow them, floats do not."""
    return st.integers(min_value=2**64, max_value=2**1100) | st.integers(min_value=-(2**1100), max_value=-(2**64))


def odd_floats():
    return st.sampled_from([math.nan, math.inf, -math.inf, 0.0, -0.0, 1e-320, 1e308, -1e308, 5e-324])


def scalars():
    """Scalars of every kind a decoded file or message may hold, and some it may not."""
    return st.one_of(
        st.none(),
        st.booleans(),
        st.integers(min_value=-(2**63), max_value=2**64 - 1),
        huge_ints(),
        st.floats(allow_nan=True, allow_infinity=True),
        odd_floats(),
        st.text(max_size=12),
        st.binary(max_size=12),
    )


def junk_values(max_leaves: int = 8):
    """Scalars, lists and string-keyed dicts of them, nested a little."""
    return st.recursive(
        scalars(),
        lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=8), inner, max_size=4),
        max_leaves=max_leaves,
    )


def number_like():
    """Values meant for numeric fields: plausible numbers, edge floats, huge ints, and junk."""
    return st.one_of(
        st.floats(min_value=-1e3, max_value=1e3, allow_nan=False),
        st.integers(-1000, 1000),
        odd_floats(),
        huge_ints(),
        junk_values(max_leaves=3),
    )


# ------------------------------------------------------------------ a small TOML writer


def toml_value(value) -> str:
    """``value`` as TOML text (TOML v1.0.0: basic strings, nan/inf, arrays, inline tables)."""
    # source: TOML v1.0.0 specification (toml.io): strings, integers, floats incl. nan/inf,
    # booleans, offset date-times, arrays, inline tables
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # JSON escapes are TOML basic-string escapes
    if isinstance(value, datetime.datetime):
        return value.isoformat()
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    return json.dumps(repr(value))  # bytes, None: not TOML; written as a string


def toml_table(table: dict) -> str:
    return "".join(f"{json.dumps(key)} = {toml_value(value)}\n" for key, value in table.items())


def toml_values():
    return st.one_of(
        number_like(),
        st.sampled_from(["blocked", "free", "Blocked", ""]),
        st.lists(number_like(), max_size=3),
        st.datetimes(min_value=datetime.datetime(1, 1, 1), timezones=st.just(datetime.timezone.utc)),
        st.dictionaries(st.text(max_size=5), st.integers(), max_size=2),
    )
