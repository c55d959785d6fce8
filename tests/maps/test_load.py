"""load_map, sidecars and thresholds: files on disk in, grids out; every bad input named."""

from __future__ import annotations

import math
import os

import numpy as np
import pytest

from veer.maps import (
    FREE,
    OCCUPIED,
    UNKNOWN,
    MapError,
    MapFormatError,
    MapSettings,
    MapSettingsError,
    MapTooLargeError,
    classify,
    load_map,
    read_sidecar,
    sidecar_path_for,
)

SIDECAR = """\
cell_size_m = 0.05
origin_m = [-2.0, 3.5]
occupied_below = 100
free_above = 200
unknown_is = "free"
"""


def _write(tmp_path, name, data, sidecar=None):
    path = tmp_path / name
    path.write_bytes(data)
    if sidecar is not None:
        sidecar_path_for(path).write_text(sidecar)
    return path


def test_load_pgm_with_sidecar(tmp_path, pgm_bytes):
    # docs/files.md, "Map image" and "Map sidecar" (dark = occupied, light = free, mid grey = unknown)
    shades = np.array([[0, 255, 150], [99, 201, 100]], dtype=np.uint8)
    path = _write(tmp_path, "yard.pgm", pgm_bytes(shades, 255), SIDECAR)
    grid = load_map(path)
    np.testing.assert_array_equal(grid.classes, [[OCCUPIED, FREE, UNKNOWN], [OCCUPIED, FREE, UNKNOWN]])
    assert grid.cell_size_m == 0.05
    assert grid.origin_m == (-2.0, 3.5)
    assert grid.unknown_is == "free"
    np.testing.assert_array_equal(grid.blocked, [[True, False, False], [True, False, False]])
    # row 0 of the image is the top: the lower-left cell is (1, 0)
    assert grid.world_to_cell(-2.0, 3.5) == (1, 0)


def test_load_png_with_sidecar(tmp_path, png_bytes):
    # source: PNG 1.2 specification (grey 8-bit); classes as in docs/files.md, "Map sidecar"
    shades = np.array([[10, 250], [150, 30]])
    path = _write(tmp_path, "hall.png", png_bytes(shades, depth=8, colour=0), "cell_size_m = 0.2\n")
    grid = load_map(path)
    np.testing.assert_array_equal(grid.classes, [[OCCUPIED, FREE], [UNKNOWN, OCCUPIED]])
    assert grid.origin_m == (0.0, 0.0) and grid.unknown_is == "blocked"


def test_pixels_exactly_on_the_thresholds(tmp_path, pgm_bytes):
    # docs/files.md, "Map sidecar" ("below this is an obstacle", "above this is free"; between: unknown)
    shades = np.array([[99, 100, 101, 199, 200, 201]], dtype=np.uint8)
    grid = load_map(_write(tmp_path, "edge.pgm", pgm_bytes(shades, 255), "cell_size_m = 1.0\n"))
    np.testing.assert_array_equal(grid.classes, [[OCCUPIED, UNKNOWN, UNKNOWN, UNKNOWN, UNKNOWN, FREE]])


def test_16bit_image_uses_the_8bit_scale(tmp_path, pgm_bytes, png_bytes):
    # docs/files.md, "Map image" (a pixel counts as value * 255 / maxval): 25700 * 255 / 65535 = 100
    # and 51400 * 255 / 65535 = 200 exactly
    shades = np.array([[25699, 25700, 51400, 51401]])
    expected = [[OCCUPIED, UNKNOWN, UNKNOWN, FREE]]
    grid = load_map(_write(tmp_path, "deep.pgm", pgm_bytes(shades, 65535), "cell_size_m = 1.0\n"))
    np.testing.assert_array_equal(grid.classes, expected)
    grid = load_map(_write(tmp_path, "deep.png", png_bytes(shades, depth=16, colour=0), "cell_size_m = 1.0\n"))
    np.testing.assert_array_equal(grid.classes, expected)
    # maxval 1000: 392 -> 99.96 (occupied), 393 -> 100.215 (unknown), 784 -> 199.92 (unknown), 785 -> 200.175 (free)
    grid = load_map(_write(tmp_path, "odd.pgm", pgm_bytes(np.array([[392, 393, 784, 785]]), 1000), "cell_size_m = 1.0\n"))
    np.testing.assert_array_equal(grid.classes, [[OCCUPIED, UNKNOWN, UNKNOWN, FREE]])


def test_custom_thresholds_and_unknown_is():
    # docs/files.md, "Map sidecar" (thresholds on the 8-bit scale)
    pixels = np.array([[0.0, 49.9, 50.0, 60.0, 60.1, 255.0]], dtype=np.float32)
    classes = classify(pixels, MapSettings(occupied_below=50, free_above=60))
    np.testing.assert_array_equal(classes, [[OCCUPIED, OCCUPIED, UNKNOWN, UNKNOWN, FREE, FREE]])
    same = classify(pixels, MapSettings(occupied_below=60, free_above=60))
    np.testing.assert_array_equal(same, [[OCCUPIED, OCCUPIED, OCCUPIED, UNKNOWN, FREE, FREE]])
    assert classes.dtype == np.uint8


def test_cell_size_argument_overrides_sidecar(tmp_path, pgm_bytes):
    path = _write(tmp_path, "yard.pgm", pgm_bytes(np.zeros((2, 2)), 255), SIDECAR)
    grid = load_map(path, cell_size_m=0.5)
    assert grid.cell_size_m == 0.5 and grid.origin_m == (-2.0, 3.5) and grid.unknown_is == "free"


def test_no_sidecar_needs_a_cell_size(tmp_path, pgm_bytes):
    path = _write(tmp_path, "bare.pgm", pgm_bytes(np.zeros((2, 2)), 255))
    sidecar = str(tmp_path / "bare.toml")
    with pytest.raises(MapSettingsError, match="pass a cell size .* sidecar " + ".*bare.toml \\(it does not exist\\)") as info:
        load_map(path)
    assert sidecar in str(info.value) and "\n" not in str(info.value)
    grid = load_map(path, cell_size_m=0.1)
    assert grid.cell_size_m == 0.1 and grid.origin_m == (0.0, 0.0) and grid.unknown_is == "blocked"


def test_sidecar_without_cell_size(tmp_path, pgm_bytes):
    path = _write(tmp_path, "m.pgm", pgm_bytes(np.zeros((2, 2)), 255), 'origin_m = [1.0, 2.0]\n')
    with pytest.raises(MapSettingsError, match="has no cell_size_m"):
        load_map(path)
    assert load_map(path, cell_size_m=2).origin_m == (1.0, 2.0)


@pytest.mark.parametrize("bad", [0, -0.1, math.nan, math.inf, True, "0.1"])
def test_bad_cell_size_override(tmp_path, pgm_bytes, bad):
    path = _write(tmp_path, "m.pgm", pgm_bytes(np.zeros((2, 2)), 255))
    with pytest.raises(MapSettingsError, match="cell_size_m override must be"):
        load_map(path, cell_size_m=bad)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("cell_size_m = 0\n", "cell_size_m must be greater than 0, got 0"),
        ("cell_size_m = -0.05\n", "cell_size_m must be greater than 0"),
        ("cell_size_m = nan\n", "cell_size_m must be a finite number"),
        ("cell_size_m = inf\n", "cell_size_m must be a finite number"),
        ('cell_size_m = "0.1"\n', "cell_size_m must be a number, got str '0.1'"),
        ("cell_size_m = true\n", "cell_size_m must be a number, got bool"),
        ("origin_m = [1.0]\n", r"origin_m must be a list of two numbers \[x, y\]"),
        ('origin_m = "0 0"\n', "origin_m must be a list of two numbers"),
        ('origin_m = [1.0, "a"]\n', r"origin_m\[1\] must be a number"),
        ("occupied_below = 300\n", "occupied_below must be on the 8-bit scale 0 to 255, got 300"),
        ("free_above = -1\n", "free_above must be on the 8-bit scale 0 to 255"),
        ("occupied_below = 150\nfree_above = 120\n", r"occupied_below \(150\) must not be above free_above \(120\)"),
        ("occupied_below = false\n", "occupied_below must be a number, got bool"),
        ('unknown_is = "maybe"\n', 'unknown_is must be "blocked" or "free", got \'maybe\''),
        ("unknown_is = 1\n", 'unknown_is must be "blocked" or "free"'),
        ("cell_size = 0.1\n", "unknown key 'cell_size' in the map sidecar; accepted keys: cell_size_m, origin_m, occupied_below, free_above, unknown_is"),
        ("cell_size_m = \n", "not valid TOML"),
    ],
)
def test_bad_sidecar(tmp_path, text, match):
    # source: TOML 1.0 (the sidecar syntax, read with Python's tomllib)
    path = tmp_path / "m.toml"
    path.write_text(text)
    with pytest.raises(MapSettingsError, match=match) as info:
        read_sidecar(path)
    message = str(info.value)
    assert message.startswith(f"{path}: ") and "\n" not in message


def test_bad_sidecar_is_reported_by_load_map(tmp_path, pgm_bytes):
    path = _write(tmp_path, "m.pgm", pgm_bytes(np.zeros((2, 2)), 255), "cell_size_m = -1\n")
    with pytest.raises(MapSettingsError, match=r"m\.toml: cell_size_m must be greater than 0"):
        load_map(path)


def test_sidecar_not_utf8_and_unreadable(tmp_path):
    path = tmp_path / "m.toml"
    path.write_bytes(b"cell_size_m = 0.1 # \xff\xfe\n")
    with pytest.raises(MapSettingsError, match="not UTF-8"):
        read_sidecar(path)
    with pytest.raises(MapSettingsError, match="cannot read the map sidecar"):
        read_sidecar(tmp_path / "absent.toml")


def test_sidecar_defaults():
    # docs/files.md, "Map sidecar" (the table's defaults; no default cell size)
    settings = MapSettings()
    assert (settings.cell_size_m, settings.origin_m, settings.occupied_below, settings.free_above, settings.unknown_is) == (
        None, (0.0, 0.0), 100.0, 200.0, "blocked")


def test_sidecar_path_for(tmp_path):
    assert sidecar_path_for(tmp_path / "yard.pgm") == tmp_path / "yard.toml"
    assert sidecar_path_for("a/b.v2.png").as_posix() == "a/b.v2.toml"


def test_missing_and_unreadable_image(tmp_path, pgm_bytes):
    with pytest.raises(MapFormatError, match=r"nope\.pgm: no such map image"):
        load_map(tmp_path / "nope.pgm", cell_size_m=1.0)
    with pytest.raises(MapFormatError, match="is a directory"):
        load_map(tmp_path, cell_size_m=1.0)
    garbage = _write(tmp_path, "junk.pgm", b"hello, world")
    with pytest.raises(MapFormatError, match=r"junk\.pgm: not a PGM or PNG image"):
        load_map(garbage, cell_size_m=1.0)
    empty = _write(tmp_path, "empty.png", b"")
    with pytest.raises(MapFormatError, match=r"empty\.png: the file is empty"):
        load_map(empty, cell_size_m=1.0)
    truncated = _write(tmp_path, "cut.pgm", pgm_bytes(np.zeros((4, 4)), 255)[:-3])
    with pytest.raises(MapFormatError, match=r"cut\.pgm: PGM raster is truncated"):
        load_map(truncated, cell_size_m=1.0)
    if os.geteuid() != 0:  # root reads any file
        locked = _write(tmp_path, "locked.pgm", pgm_bytes(np.zeros((2, 2)), 255))
        locked.chmod(0)
        with pytest.raises(MapFormatError, match="cannot read the map image"):
            load_map(locked, cell_size_m=1.0)


def test_too_many_cells(tmp_path, pgm_bytes):
    path = _write(tmp_path, "big.pgm", pgm_bytes(np.zeros((10, 10)), 255), "cell_size_m = 1\n")
    with pytest.raises(MapTooLargeError, match="10 x 10 = 100 cells, more than the 99"):
        load_map(path, max_cells=99)
    assert load_map(path, max_cells=100).classes.shape == (10, 10)
    with pytest.raises(MapSettingsError, match="max_cells must be a positive integer"):
        load_map(path, max_cells=0)


def test_error_codes_and_tree():
    # docs/protocol.md (control answers carry a short "code")
    from veer.maps import GridMessageError

    assert MapError.code == "bad_map"
    assert issubclass(MapError, ValueError)
    codes = {cls: cls.code for cls in (MapFormatError, MapSettingsError, MapTooLargeError, GridMessageError)}
    assert codes == {
        MapFormatError: "bad_image",
        MapSettingsError: "bad_map_settings",
        MapTooLargeError: "map_too_large",
        GridMessageError: "bad_grid_message",
    }
    assert all(issubclass(cls, MapError) for cls in codes)


def test_loaded_grid_shares_no_writeable_memory(tmp_path, pgm_bytes):
    path = _write(tmp_path, "m.pgm", pgm_bytes(np.full((3, 3), 255), 255), "cell_size_m = 1\n")
    grid = load_map(path)
    assert not grid.classes.flags.writeable and grid.classes.flags.c_contiguous
