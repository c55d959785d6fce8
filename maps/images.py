"""Decoders for map images: PGM (P2, P5) and PNG, bytes in, grey samples out.

These functions know nothing of sidecars or thresholds: they turn the bytes of one
image into a 2-D array of grey samples (row 0 = top row of the image) and its maxval.
:func:`pixels_on_8bit_scale` then puts any maxval on the 0..255 scale the thresholds use.

Every size is checked against ``max_cells`` from the header alone, before a raster is
read or a decoder runs, so a small file that claims a huge image costs nothing.

References
----------
.. [NETPBM] Netpbm, "PGM format specification", http://netpbm.sourceforge.net/doc/pgm.html
.. [PNG12] PNG (Portable Network Graphics) Specification, Version 1.2, sections 2.1
   (data representation), 3 (file structure) and 4.1.1 (IHDR),
   https://libpng.org/pub/png/spec/1.2/
"""

from __future__ import annotations

import re
import struct
import zlib

import cv2
import numpy as np

from . import _checks
from .errors import MapFormatError, MapTooLargeError
from .grid import DEFAULT_MAX_CELLS

__all__ = ["PNG_SIGNATURE", "pixels_on_8bit_scale", "read_image", "read_pgm", "read_png"]

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
"""The eight bytes every PNG file starts with [PNG12]_ (section 3.1)."""

# Netpbm whitespace: blank, tab, CR, LF, vertical tab, form feed [NETPBM].
_WHITESPACE = frozenset(b" \t\n\v\f\r")
_DIGITS = frozenset(b"0123456789")
_COMMENT = re.compile(rb"#[^\r\n]*")
# A header number longer than this is absurd (and would slow int()).
_MAX_HEADER_DIGITS = 12
# Plain-PGM rasters are converted this many bytes at a time to bound memory.
_PLAIN_CHUNK_BYTES = 1 << 22

# Legal bit depths per PNG colour type [PNG12]_ (section 4.1.1).
_PNG_DEPTHS = {
    0: (1, 2, 4, 8, 16),  # greyscale
    2: (8, 16),  # truecolour
    3: (1, 2, 4, 8),  # indexed colour (palette)
    4: (8, 16),  # greyscale with alpha
    6: (8, 16),  # truecolour with alpha
}
_PNG_TYPE_NAMES = {0: "grey", 2: "RGB", 3: "palette", 4: "grey+alpha", 6: "RGBA"}
_PNG_MAX_DIMENSION = 2**31 - 1


def _check_cells(rows: int, cols: int, max_cells: int, source: str) -> None:
    """Refuse an image of more than ``max_cells`` cells before it is decoded."""
    if rows * cols > max_cells:
        raise MapTooLargeError(
            f"{source}: image is {cols} x {rows} = {rows * cols} cells, more than the {max_cells} "
            "veer accepts (crop or downsample the map, or raise max_cells)"
        )


# --------------------------------------------------------------------------- PGM


def _pgm_header_number(data: bytes, pos: int, name: str, source: str) -> tuple[int, int]:
    """Skip whitespace and comments from ``pos``, read one decimal; return (value, end)."""
    size = len(data)
    while pos < size:
        byte = data[pos]
        if byte in _WHITESPACE:
            pos += 1
        elif byte == 0x23:  # "#": comment to the end of the line
            while pos < size and data[pos] not in (0x0A, 0x0D):
                pos += 1
        else:
            break
    start = pos
    while pos < size and data[pos] in _DIGITS:
        pos += 1
    if pos == start:
        found = "the end of the file" if pos >= size else repr(data[pos : pos + 8])
        raise MapFormatError(
            f"{source}: bad PGM header: expected the {name} as a decimal number, found {found}"
        )
    if pos - start > _MAX_HEADER_DIGITS:
        raise MapFormatError(f"{source}: bad PGM header: the {name} has {pos - start} digits")
    if pos < size and data[pos] not in _WHITESPACE and data[pos] != 0x23:
        raise MapFormatError(
            f"{source}: bad PGM header: the {name} is followed by {data[pos:pos + 1]!r}, "
            "expected whitespace"
        )
    return int(data[start:pos]), pos


def read_pgm(
    data: bytes, source: str = "<bytes>", *, max_cells: int = DEFAULT_MAX_CELLS
) -> tuple[np.ndarray, int]:
    """Decode the first image of a PGM file, raw (P5) or plain (P2).

    Parameters
    ----------
    data : bytes
        The whole file. Bytes after the first image (further images) are ignored.
    source : str
        Name used in error messages (the file path or message field).
    max_cells : int
        Largest ``width * height`` accepted; checked from the header alone.

    Returns
    -------
    samples : ndarray of uint8 (maxval < 256) or uint16, shape (height, width)
        Grey samples, row 0 = top. May be a read-only view of ``data``.
    maxval : int
        The header's maxval, 1..65535.

    Raises
    ------
    MapFormatError
        Wrong magic, bad header, zero size, truncated raster, a sample above maxval.
    MapTooLargeError
        More than ``max_cells`` samples.

    Notes
    -----
    Header: magic, width, height and maxval separated by whitespace, with ``#``
    comments allowed up to the end of maxval; then exactly one whitespace byte (a
    comment right after maxval ends at its newline) and the raster. Raw samples are one
    byte when maxval < 256, otherwise two, most significant first [NETPBM]_.
    """
    max_cells = _checks.cell_count_limit(max_cells)
    data = bytes(data)
    if len(data) == 0:
        raise MapFormatError(f"{source}: the file is empty; veer reads PGM (P2, P5) or PNG images")
    magic = data[:2]
    if magic not in (b"P5", b"P2"):
        raise MapFormatError(f"{source}: not a PGM image (starts with {data[:2]!r}); expected P5 or P2")
    if len(data) > 2 and data[2] not in _WHITESPACE and data[2] != 0x23:
        raise MapFormatError(f"{source}: bad PGM header: the magic {magic.decode()} must be followed by whitespace")
    cols, pos = _pgm_header_number(data, 2, "width", source)
    rows, pos = _pgm_header_number(data, pos, "height", source)
    maxval, pos = _pgm_header_number(data, pos, "maxval", source)
    if cols == 0 or rows == 0:
        raise MapFormatError(f"{source}: the PGM image is empty ({cols} x {rows}); a map needs at least one cell")
    if not 0 < maxval < 65536:
        raise MapFormatError(f"{source}: PGM maxval is {maxval}; veer accepts 1 to 65535")
    _check_cells(rows, cols, max_cells, source)
    if pos >= len(data):
        raise MapFormatError(f"{source}: PGM file ends after its header; the raster is missing")
    if data[pos] == 0x23:
        # A comment right after maxval: it and its line end stand for the one whitespace byte.
        while pos < len(data) and data[pos] not in (0x0A, 0x0D):
            pos += 1
    pos += 1  # exactly one whitespace byte; the raster may start with 0x0A or 0x20
    count = rows * cols
    if magic == b"P5":
        sample_bytes = 1 if maxval < 256 else 2
        available = len(data) - pos
        if available < count * sample_bytes:
            raise MapFormatError(
                f"{source}: PGM raster is truncated: {cols} x {rows} samples need "
                f"{count * sample_bytes} bytes, the file has {max(available, 0)}"
            )
        if sample_bytes == 1:
            samples = np.frombuffer(data, dtype=np.uint8, count=count, offset=pos)
        else:
            samples = np.frombuffer(data, dtype=">u2", count=count, offset=pos).astype(np.uint16)
    else:
        samples = _plain_samples(data, pos, count, source)
    top = int(samples.max())
    if top > maxval:
        raise MapFormatError(f"{source}: PGM sample value {top} is above the maxval {maxval}")
    samples = samples.astype(np.uint8 if maxval < 256 else np.uint16, copy=False)
    return samples.reshape(rows, cols), maxval


def _plain_samples(data: bytes, pos: int, count: int, source: str) -> np.ndarray:
    """Read ``count`` ASCII decimal samples from ``data[pos:]`` (plain PGM), comments allowed."""
    text = _COMMENT.sub(b" ", data[pos:])
    out = np.empty(count, dtype=np.int64)
    filled = 0
    start = 0
    size = len(text)
    while filled < count:
        if start >= size:
            raise MapFormatError(
                f"{source}: plain PGM raster is truncated: found {filled} of {count} samples"
            )
        end = min(start + _PLAIN_CHUNK_BYTES, size)
        while end < size and text[end] not in _WHITESPACE:
            end += 1
        tokens = text[start:end].split()[: count - filled]
        start = end
        if not tokens:
            continue
        if not b"".join(tokens).isdigit():
            bad = next(t for t in tokens if not t.isdigit())
            raise MapFormatError(
                f"{source}: plain PGM sample {bad[:12]!r} is not a decimal number"
            )
        if max(len(t) for t in tokens) > 18:  # would not fit int64; surely above any maxval
            bad = max(tokens, key=len)
            raise MapFormatError(f"{source}: plain PGM sample {bad[:12]!r}... is above 65535")
        out[filled : filled + len(tokens)] = np.array(tokens).astype(np.int64)
        filled += len(tokens)
    return out


# --------------------------------------------------------------------------- PNG


def _png_header(data: bytes, source: str, max_cells: int) -> tuple[int, int, int, int]:
    """Check the signature, IHDR and chunk layout of a PNG; return (width, height, depth, colour type).

    The header is read by hand, per [PNG12]_ sections 3.2 and 4.1.1, so that an
    absurd size or an illegal depth is refused before any decoder allocates memory.
    """
    if data[:8] != PNG_SIGNATURE:
        raise MapFormatError(f"{source}: not a PNG image (bad signature {data[:8]!r})")
    if len(data) < 8 + 8 + 13 + 4:
        raise MapFormatError(f"{source}: PNG file is truncated inside its IHDR header")
    length, kind = struct.unpack(">I4s", data[8:16])
    if kind != b"IHDR" or length != 13:
        raise MapFormatError(
            f"{source}: bad PNG: the first chunk must be a 13-byte IHDR, found {kind!r} of {length} bytes"
        )
    width, height, depth, colour, compression, filtering, interlace = struct.unpack(">IIBBBBB", data[16:29])
    (crc,) = struct.unpack(">I", data[29:33])
    if zlib.crc32(data[12:29]) != crc:
        raise MapFormatError(f"{source}: bad PNG: the IHDR checksum (CRC) does not match; the file is damaged")
    if not (0 < width <= _PNG_MAX_DIMENSION and 0 < height <= _PNG_MAX_DIMENSION):
        raise MapFormatError(f"{source}: bad PNG: size {width} x {height}; width and height must be 1 to 2^31-1")
    _check_cells(height, width, max_cells, source)
    if colour not in _PNG_DEPTHS:
        raise MapFormatError(f"{source}: PNG colour type {colour} does not exist; PNG has types 0, 2, 3, 4, 6")
    if depth not in _PNG_DEPTHS[colour]:
        allowed = ", ".join(str(d) for d in _PNG_DEPTHS[colour])
        raise MapFormatError(
            f"{source}: PNG bit depth {depth} is not allowed for {_PNG_TYPE_NAMES[colour]} "
            f"(colour type {colour}); allowed depths: {allowed}"
        )
    if compression != 0 or filtering != 0 or interlace not in (0, 1):
        raise MapFormatError(
            f"{source}: bad PNG: compression {compression}, filter {filtering}, interlace {interlace}; "
            "PNG defines compression 0, filter 0, interlace 0 or 1"
        )
    _walk_png_chunks(data, source, colour)
    return width, height, depth, colour


def _walk_png_chunks(data: bytes, source: str, colour: int) -> None:
    """Check that the chunks after IHDR are complete and end with IEND (critical CRCs checked)."""
    view = memoryview(data)
    pos = 33
    seen_idat = seen_plte = False
    while True:
        if pos + 8 > len(data):
            raise MapFormatError(f"{source}: PNG file is truncated (no IEND chunk); the file is incomplete")
        length, kind = struct.unpack(">I4s", data[pos : pos + 8])
        end = pos + 12 + length
        if length > _PNG_MAX_DIMENSION or end > len(data):
            raise MapFormatError(f"{source}: PNG file is truncated inside a {kind!r} chunk; the file is incomplete")
        if kind[0] & 0x20 == 0:  # critical chunk: libpng refuses a bad CRC, so do we, with a clearer message
            (crc,) = struct.unpack(">I", data[end - 4 : end])
            if zlib.crc32(view[pos + 4 : end - 4]) != crc:
                raise MapFormatError(
                    f"{source}: bad PNG: the checksum (CRC) of a {_checks.path_text(kind.decode('latin-1'))} chunk does not match; "
                    "the file is damaged"
                )
        seen_idat |= kind == b"IDAT"
        seen_plte |= kind == b"PLTE"
        pos = end
        if kind == b"IEND":
            break
    if not seen_idat:
        raise MapFormatError(f"{source}: bad PNG: no image data (IDAT chunk)")
    if colour == 3 and not seen_plte:
        raise MapFormatError(f"{source}: bad PNG: a palette image without a PLTE chunk")


def read_png(
    data: bytes, source: str = "<bytes>", *, max_cells: int = DEFAULT_MAX_CELLS
) -> tuple[np.ndarray, int]:
    """Decode a PNG image to grey samples.

    Parameters
    ----------
    data : bytes
        The whole file.
    source : str
        Name used in error messages.
    max_cells : int
        Largest ``width * height`` accepted; checked from IHDR before decoding.

    Returns
    -------
    samples : ndarray of uint8 or uint16, shape (height, width)
        Grey samples, row 0 = top. Colour is converted to grey with OpenCV
        (0.299 R + 0.587 G + 0.114 B), alpha is dropped, palettes and grey depths
        1, 2 and 4 are expanded to 8 bits by the decoder.
    maxval : int
        255 for 8-bit (and smaller) samples, 65535 for 16-bit.

    Raises
    ------
    MapFormatError
        Bad signature, illegal depth/type, truncated or damaged file.
    MapTooLargeError
        IHDR claims more than ``max_cells`` pixels.
    """
    max_cells = _checks.cell_count_limit(max_cells)
    data = bytes(data)
    if len(data) == 0:
        raise MapFormatError(f"{source}: the file is empty; veer reads PGM (P2, P5) or PNG images")
    width, height, _depth, _colour = _png_header(data, source, max_cells)
    try:
        image = cv2.imdecode(np.frombuffer(data, dtype=np.uint8), cv2.IMREAD_UNCHANGED)
    except cv2.error as exc:
        first_line = str(exc).strip().splitlines()[-1] if str(exc).strip() else "decoder error"
        raise MapFormatError(f"{source}: PNG image data could not be decoded ({first_line})") from None
    if image is None:
        raise MapFormatError(f"{source}: PNG image data could not be decoded; the file is damaged or truncated")
    if image.ndim == 3:
        channels = image.shape[2]
        if channels == 3:
            image = cv2.cvtColor(image, cv2.COLOR_BGR2GRAY)
        elif channels == 4:
            image = cv2.cvtColor(image, cv2.COLOR_BGRA2GRAY)
        else:
            raise MapFormatError(f"{source}: PNG decoded to {channels} channels; veer reads grey or colour images")
    if image.shape != (height, width):
        raise MapFormatError(
            f"{source}: PNG decoded to {image.shape[1]} x {image.shape[0]} pixels, but IHDR says {width} x {height}"
        )
    if image.dtype == np.uint8:
        return image, 255
    if image.dtype == np.uint16:
        return image, 65535
    raise MapFormatError(f"{source}: PNG decoded to {image.dtype} samples; veer reads 8- or 16-bit images")


# --------------------------------------------------------------------------- both


def read_image(data: bytes, source: str = "<bytes>", *, max_cells: int = DEFAULT_MAX_CELLS) -> tuple[np.ndarray, int]:
    """Decode a PGM or PNG image, chosen by its first bytes.

    Parameters
    ----------
    data : bytes
        The whole file.
    source : str
        Name used in error messages.
    max_cells : int
        Largest number of pixels accepted.

    Returns
    -------
    samples : ndarray of uint8 or uint16, shape (rows, cols)
        Grey samples, row 0 = top.
    maxval : int
        Largest possible sample value.

    Raises
    ------
    MapFormatError
        Neither PGM nor PNG, or not decodable (see :func:`read_pgm`, :func:`read_png`).
    MapTooLargeError
        More than ``max_cells`` pixels.
    """
    data = bytes(data)
    if len(data) == 0:
        raise MapFormatError(f"{source}: the file is empty; veer reads PGM (P2, P5) or PNG images")
    if data[:8] == PNG_SIGNATURE:
        return read_png(data, source, max_cells=max_cells)
    if data[:2] in (b"P5", b"P2"):
        return read_pgm(data, source, max_cells=max_cells)
    other = {b"P1": "PBM", b"P4": "PBM", b"P3": "PPM", b"P6": "PPM", b"P7": "PAM"}.get(data[:2])
    if other:
        raise MapFormatError(
            f"{source}: this is a {other} ({data[:2].decode()}) file; veer reads PGM (P2, P5) or PNG images"
        )
    raise MapFormatError(
        f"{source}: not a PGM or PNG image (starts with {data[:8]!r}); veer reads PGM (P2, P5) or PNG images"
    )


def pixels_on_8bit_scale(samples: np.ndarray, maxval: int) -> np.ndarray:
    """Put grey samples on the 0..255 scale the thresholds use: ``value * 255 / maxval``.

    Parameters
    ----------
    samples : ndarray of uint8 or uint16, shape (rows, cols)
        Grey samples.
    maxval : int
        Largest possible sample, 1..65535.

    Returns
    -------
    ndarray of float32, shape (rows, cols)
        Scaled samples. For maxval <= 65535, ``value * 255`` is below 2**24, so the
        product is exact in float32 and the one division is correctly rounded: a sample
        that lands exactly on a threshold compares as equal.

    Raises
    ------
    MapFormatError
        When ``maxval`` is outside 1..65535.
    """
    if isinstance(maxval, bool) or not isinstance(maxval, (int, np.integer)) or not 0 < maxval < 65536:
        raise MapFormatError(f"maxval must be an integer from 1 to 65535, got {maxval!r}")
    pixels = np.asarray(samples).astype(np.float32)
    if maxval != 255:
        pixels *= np.float32(255.0)
        pixels /= np.float32(maxval)
    return pixels
