"""grid_from_message: the node's grid message in, a grid out; every malformed field named."""

from __future__ import annotations

import math

import msgpack
import numpy as np
import pytest

from veer.maps import FREE, OCCUPIED, UNKNOWN, GridMessageError, grid_from_message

SHADES = np.array([[0, 255, 150], [255, 255, 20]], dtype=np.uint8)
EXPECTED = [[OCCUPIED, FREE, UNKNOWN], [FREE, FREE, OCCUPIED]]


def _message(**fields):
    # docs/protocol.md (grid message fields)
    base = {
        "v": 1,
        "kind": "grid",
        "map_id": 7,
        "rows": 2,
        "cols": 3,
        "cell_size_m": 0.1,
        "origin_m": [1.0, -2.0],
        "encoding": "raw",
        "cells": SHADES.tobytes(),
    }
    base.update(fields)
    return {k: v for k, v in base.items() if v is not _DROP}


_DROP = object()


def test_raw_message_through_msgpack():
    # source: msgpack (the wire encoding: bytes stay bytes, lists stay lists)
    wire = msgpack.packb(_message(), use_bin_type=True)
    grid = grid_from_message(msgpack.unpackb(wire, raw=False))
    np.testing.assert_array_equal(grid.classes, EXPECTED)  # raw is row 0 top, image order
    assert grid.cell_size_m == 0.1 and grid.origin_m == (1.0, -2.0) and grid.unknown_is == "blocked"


def test_png_and_pgm_messages(png_bytes, pgm_bytes):
    # source: PNG 1.2 specification and Netpbm PGM specification (cells are the bytes of such a file)
    png = grid_from_message(_message(encoding="png", cells=png_bytes(SHADES, depth=8, colour=0)))
    pgm = grid_from_message(_message(encoding="pgm", cells=pgm_bytes(SHADES, 255)))
    deep = grid_from_message(_message(encoding="pgm", cells=pgm_bytes(SHADES.astype(int) * 257, 65535)))
    for grid in (png, pgm, deep):
        np.testing.assert_array_equal(grid.classes, EXPECTED)
    assert png.map_id == pgm.map_id == deep.map_id == grid_from_message(_message()).map_id


def test_optional_threshold_fields():
    grid = grid_from_message(_message(occupied_below=10, free_above=160, unknown_is="free"))
    np.testing.assert_array_equal(grid.classes, [[OCCUPIED, FREE, UNKNOWN], [FREE, FREE, UNKNOWN]])
    assert grid.unknown_is == "free"


def test_bytearray_and_memoryview_cells():
    for cells in (bytearray(SHADES.tobytes()), memoryview(SHADES.tobytes())):
        np.testing.assert_array_equal(grid_from_message(_message(cells=cells)).classes, EXPECTED)


@pytest.mark.parametrize("field", ["rows", "cols", "cell_size_m", "origin_m", "encoding", "cells"])
def test_missing_field(field):
    with pytest.raises(GridMessageError, match=f"missing field '{field}'"):
        grid_from_message(_message(**{field: _DROP}))


@pytest.mark.parametrize(
    ("fields", "match"),
    [
        ({"rows": True}, "rows must be an integer, got bool True"),
        ({"rows": 2.0}, "rows must be an integer, got float"),
        ({"rows": "2"}, "rows must be an integer, got str"),
        ({"rows": 0}, "rows must be at least 1, got 0"),
        ({"cols": -3}, "cols must be at least 1, got -3"),
        ({"cols": None}, "cols must be an integer, got NoneType"),
        ({"cell_size_m": 0}, "cell_size_m must be greater than 0"),
        ({"cell_size_m": -0.1}, "cell_size_m must be greater than 0"),
        ({"cell_size_m": math.nan}, "cell_size_m must be a finite number"),
        ({"cell_size_m": False}, "cell_size_m must be a number, got bool"),
        ({"cell_size_m": "0.1"}, "cell_size_m must be a number, got str"),
        ({"origin_m": [1.0]}, "origin_m must be a list of two numbers"),
        ({"origin_m": {"x": 1, "y": 2}}, "origin_m must be a list of two numbers"),
        ({"origin_m": [1.0, math.inf]}, r"origin_m\[1\] must be a finite number"),
        ({"origin_m": [True, 0.0]}, r"origin_m\[0\] must be a number, got bool"),
        ({"encoding": "jpeg"}, 'encoding must be "raw", "png" or "pgm", got \'jpeg\''),
        ({"encoding": b"raw"}, "encoding must be"),
        ({"cells": "abcdef"}, "cells must be bytes, got str"),
        ({"cells": [0, 1, 2, 3, 4, 5]}, "cells must be bytes, got list"),
        ({"cells": SHADES.tobytes()[:-1]}, r"cells holds 5 bytes, but raw encoding needs rows \* cols = 6"),
        ({"cells": SHADES.tobytes() + b"\x00"}, "cells holds 7 bytes"),
        ({"occupied_below": "low"}, "occupied_below must be a number"),
        ({"free_above": 256}, "free_above must be on the 8-bit scale 0 to 255"),
        ({"occupied_below": 210}, r"occupied_below \(210\) must not be above free_above \(200\)"),
        ({"unknown_is": "sometimes"}, 'unknown_is must be "blocked" or "free"'),
    ],
)
def test_malformed_field(fields, match):
    with pytest.raises(GridMessageError, match=match) as info:
        grid_from_message(_message(**fields))
    assert str(info.value).startswith("grid message: ") and "\n" not in str(info.value)


def test_not_a_map():
    with pytest.raises(GridMessageError, match="grid message must be a map of fields, got list"):
        grid_from_message([1, 2, 3])


def test_too_many_cells_checked_before_the_cells():
    # The size alone refuses it: cells is not even looked at.
    message = _message(rows=100_000, cols=100_000, cells=b"")
    with pytest.raises(GridMessageError, match="rows x cols = 100000 x 100000 = 10000000000 cells, more than the 100000000"):
        grid_from_message(message)
    with pytest.raises(GridMessageError, match="2 x 3 = 6 cells, more than the 5"):
        grid_from_message(_message(), max_cells=5)


def test_decoded_size_must_match(png_bytes, pgm_bytes):
    with pytest.raises(GridMessageError, match=r"cells decode to 2 x 3 pixels \(cols x rows\), but the message says rows=2, cols=3"):
        grid_from_message(_message(encoding="png", cells=png_bytes(SHADES.T, depth=8, colour=0)))
    with pytest.raises(GridMessageError, match="cells decode to 3 x 1 pixels"):
        grid_from_message(_message(encoding="pgm", cells=pgm_bytes(SHADES[:1], 255)))


def test_encoding_must_match_the_bytes(png_bytes, pgm_bytes):
    with pytest.raises(GridMessageError, match=r"grid message cells \(pgm\): not a PGM image"):
        grid_from_message(_message(encoding="pgm", cells=png_bytes(SHADES, depth=8, colour=0)))
    with pytest.raises(GridMessageError, match=r"grid message cells \(png\): not a PNG image"):
        grid_from_message(_message(encoding="png", cells=pgm_bytes(SHADES, 255)))
    with pytest.raises(GridMessageError, match=r"grid message cells \(pgm\): PGM raster is truncated"):
        grid_from_message(_message(encoding="pgm", cells=pgm_bytes(SHADES, 255)[:-2]))


def test_lying_png_header_in_a_message(png_bytes):
    # source: PNG 1.2 specification, section 4.1.1 (IHDR size); refused before decoding
    lie = png_bytes(SHADES, depth=8, colour=0, width=60_000, height=60_000)
    with pytest.raises(GridMessageError, match="more than the 1000"):
        grid_from_message(_message(encoding="png", cells=lie), max_cells=1000)
