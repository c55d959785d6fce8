"""Fuzz map sidecars (read_sidecar) and grid messages (grid_from_message).

Property: a valid MapSettings / OccupancyGrid, or a MapError with a code and a one-line
message; no other exception, no hang.
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
from unittest import mock
from hypothesis import given
from hypothesis import strategies as st

import fuzzkit
from fuzzkit import fuzz_settings, junk_values, mutated, number_like, outcome, pgm_seeds, png_seeds, toml_table, toml_values
from veer.maps import images
from veer.maps import (
    GRID_ENCODINGS,
    SIDECAR_KEYS,
    MapError,
    MapSettings,
    OccupancyGrid,
    grid_from_message,
    read_image,
    read_sidecar,
)

def sidecar_tables():
    keys = st.sampled_from(SIDECAR_KEYS) | st.text(max_size=10)
    return st.dictionaries(keys, toml_values(), max_size=6)


# ------------------------------------------------------------------ sidecars


@pytest.fixture(scope="module")
def work_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz_sidecars")


def check_settings(found) -> None:
    assert isinstance(found, MapSettings)
    assert found.cell_size_m is None or (math.isfinite(found.cell_size_m) and found.cell_size_m > 0)
    assert all(math.isfinite(v) for v in found.origin_m)
    assert 0.0 <= found.occupied_below <= found.free_above <= 255.0
    assert found.unknown_is in ("blocked", "free")


@given(table=sidecar_tables())
@fuzz_settings(ci=400, deep=5000)
def test_sidecar_tables_load_or_are_refused(work_dir, table):
    path = work_dir / "map.toml"
    path.write_text(toml_table(table), encoding="utf-8", errors="surrogatepass")
    found, _ = outcome(read_sidecar, path, allowed=(MapError,))
    if found is not None:
        check_settings(found)


@given(text=st.text(max_size=200) | st.binary(max_size=200)
       | mutated(st.sampled_from([b"cell_size_m = 0.1\norigin_m = [0.0, -2.5]\noccupied_below = 100\n"
                                  b"free_above = 200\nunknown_is = \"free\"\n"])))
@fuzz_settings(ci=200, deep=4000)
def test_sidecar_text_loads_or_is_refused(work_dir, text):
    path = work_dir / "text.toml"
    if isinstance(text, str):
        path.write_text(text, encoding="utf-8", errors="surrogatepass")
    else:
        path.write_bytes(text)
    found, _ = outcome(read_sidecar, path, allowed=(MapError,))
    if found is not None:
        check_settings(found)


# ------------------------------------------------------------------ grid messages


@st.composite
def cell_bytes(draw, rows, cols):
    """Cells for a message of rows x cols: right-sized raw, a PGM or PNG (maybe damaged), or junk."""
    choice = draw(st.sampled_from(["raw", "raw_wrong", "pgm", "png", "pgm_bad", "png_bad", "junk"]))
    small_rows, small_cols = max(1, min(rows, 12)), max(1, min(cols, 12))
    if choice == "raw":
        return bytes(draw(st.binary(min_size=small_rows * small_cols, max_size=small_rows * small_cols)))
    if choice == "raw_wrong":
        return draw(st.binary(max_size=200))
    if choice == "pgm":
        samples = np.random.default_rng(draw(st.integers(0, 2**32 - 1))).integers(0, 256, (small_rows, small_cols))
        return fuzzkit.pgm_p5(samples, 255)
    if choice == "png":
        samples = np.random.default_rng(draw(st.integers(0, 2**32 - 1))).integers(0, 256, (small_rows, small_cols))
        return fuzzkit.png_file(samples, 8, 0)
    if choice == "pgm_bad":
        return draw(mutated(pgm_seeds()))
    if choice == "png_bad":
        return fuzzkit.fix_png_crcs(draw(mutated(png_seeds())))
    return draw(junk_values(max_leaves=2))


@st.composite
def grid_messages(draw):
    """Grid messages near the valid ones: each field right, wrong or missing."""
    rows = draw(st.integers(1, 12) | st.integers(-3, 0) | st.integers(10**6, 10**12) | fuzzkit.huge_ints())
    cols = draw(st.integers(1, 12) | st.integers(-3, 0) | st.integers(10**6, 10**12))
    message = {
        "v": 1,
        "kind": "grid",
        "map_id": draw(st.integers(0, 5) | st.text(max_size=4)),
        "rows": rows,
        "cols": cols,
        "cell_size_m": draw(st.sampled_from([0.05, 0.1, 1.0]) | number_like()),
        "origin_m": draw(st.sampled_from([[0.0, 0.0], [-3.5, 2.0]]) | st.lists(number_like(), max_size=3)
                         | junk_values(max_leaves=2)),
        "encoding": draw(st.sampled_from(GRID_ENCODINGS) | st.sampled_from(["RAW", "jpeg", ""]) | scalars_or_junk()),
    }
    message["cells"] = draw(cell_bytes(rows if isinstance(rows, int) and rows > 0 else 1,
                                       cols if isinstance(cols, int) and cols > 0 else 1))
    if draw(st.booleans()):
        message.update(draw(st.dictionaries(st.sampled_from(["occupied_below", "free_above", "unknown_is"]),
                                            number_like() | st.sampled_from(["blocked", "free", "maybe"]),
                                            max_size=3)))
    for field in draw(st.lists(st.sampled_from(sorted(message)), max_size=2, unique=True)):
        if draw(st.booleans()):
            del message[field]
        else:
            message[field] = draw(junk_values(max_leaves=3))
    # make the size agree with the cells now and then, so the decoders' own checks are reached
    if draw(st.booleans()) and isinstance(message.get("cells"), bytes):
        try:
            samples, _ = read_image(message["cells"], max_cells=400)
            message["rows"], message["cols"] = samples.shape
            message["encoding"] = "png" if message["cells"][:1] == b"\x89" else "pgm"
        except MapError:
            pass
    return message


def scalars_or_junk():
    return junk_values(max_leaves=2)


def check_grid(grid, message) -> None:
    assert isinstance(grid, OccupancyGrid)
    assert grid.classes.shape == (message["rows"], message["cols"])
    assert set(np.unique(grid.classes)) <= {0, 1, 2}
    assert grid.cell_size_m == float(message["cell_size_m"])
    assert all(math.isfinite(v) for v in grid.origin_m)


@given(message=grid_messages(), max_cells=st.sampled_from([1, 64, 4096, 10**6]))
@fuzz_settings(ci=300, deep=5000)
def test_grid_messages_build_a_grid_or_are_refused(message, max_cells):
    grid, _ = outcome(grid_from_message, message, max_cells=max_cells, allowed=(MapError,))
    if grid is not None:
        check_grid(grid, message)
        assert message["rows"] * message["cols"] <= max_cells


@given(message=junk_values(max_leaves=12))
@fuzz_settings(ci=100, deep=2000)
def test_anything_as_a_grid_message_is_refused(message):
    grid, error = outcome(grid_from_message, message, max_cells=4096, allowed=(MapError,))
    assert grid is None  # junk never holds all six fields with the right types


def test_a_grid_message_with_png_cells_claiming_gigabytes_is_refused_before_decoding():
    data = (fuzzkit.PNG_SIGNATURE + fuzzkit.png_ihdr(2**31 - 1, 2**31 - 1, 16, 6)
            + fuzzkit.png_chunk(b"IDAT", zlib.compress(b"")) + fuzzkit.png_chunk(b"IEND", b""))
    message = {"rows": 2, "cols": 2, "cell_size_m": 0.1, "origin_m": [0, 0], "encoding": "png", "cells": data}
    with mock.patch.object(images.cv2, "imdecode", side_effect=AssertionError("decoder called")) as decoder:
        grid, error = outcome(grid_from_message, message, allowed=(MapError,))
    assert decoder.call_count == 0
    assert grid is None and error.code == "bad_grid_message"
