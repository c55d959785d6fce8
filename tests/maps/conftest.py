"""Shared helpers for the map tests: an independent PNG encoder and a PGM writer."""

from __future__ import annotations

import struct
import zlib

import numpy as np
import pytest


def _chunk(kind: bytes, payload: bytes) -> bytes:
    # source: PNG 1.2 specification, section 3.2 (length, type, data, CRC over type + data)
    return struct.pack(">I", len(payload)) + kind + payload + struct.pack(">I", zlib.crc32(kind + payload))


def encode_png(
    samples: np.ndarray,
    *,
    depth: int,
    colour: int,
    palette: list[tuple[int, int, int]] | None = None,
    width: int | None = None,
    height: int | None = None,
    extra_chunks: tuple[tuple[bytes, bytes], ...] = (),
) -> bytes:
    """Write a PNG byte by byte: signature, IHDR, optional PLTE, one IDAT (filter 0), IEND.

    ``samples`` is (rows, cols) for colour types 0 and 3, (rows, cols, channels) otherwise.
    ``width``/``height`` override the IHDR values (to write lying headers).
    """
    # source: PNG 1.2 specification, sections 2.3 (scanlines, filter byte), 2.1 (network byte order),
    # 4.1.1 (IHDR fields), 4.1.2 (PLTE)
    samples = np.asarray(samples)
    rows, cols = samples.shape[:2]
    ihdr = struct.pack(">IIBBBBB", cols if width is None else width, rows if height is None else height, depth, colour, 0, 0, 0)
    lines = []
    for row in samples:
        flat = row.reshape(-1).astype(np.int64)
        if depth == 16:
            line = b"".join(struct.pack(">H", int(v)) for v in flat)
        elif depth == 8:
            line = bytes(int(v) for v in flat)
        else:
            bits = "".join(format(int(v), f"0{depth}b") for v in flat)
            bits += "0" * (-len(bits) % 8)  # pad the last byte of each scanline
            line = int(bits, 2).to_bytes(len(bits) // 8, "big")
        lines.append(b"\x00" + line)
    out = b"\x89PNG\r\n\x1a\n" + _chunk(b"IHDR", ihdr)
    if palette is not None:
        out += _chunk(b"PLTE", b"".join(bytes(c) for c in palette))
    for kind, payload in extra_chunks:
        out += _chunk(kind, payload)
    out += _chunk(b"IDAT", zlib.compress(b"".join(lines)))
    return out + _chunk(b"IEND", b"")


def encode_pgm_p5(samples: np.ndarray, maxval: int, header_comment: bytes = b"") -> bytes:
    """Write a raw PGM (P5): header, one whitespace byte, samples (2 bytes big-endian if maxval > 255)."""
    # source: Netpbm PGM specification
    samples = np.asarray(samples)
    rows, cols = samples.shape
    header = b"P5\n" + header_comment + f"{cols} {rows}\n{maxval}\n".encode()
    dtype = ">u2" if maxval > 255 else "u1"
    return header + samples.astype(dtype).tobytes()


@pytest.fixture
def png_bytes():
    return encode_png


@pytest.fixture
def pgm_bytes():
    return encode_pgm_p5


@pytest.fixture
def rng():
    return np.random.default_rng(20240611)
