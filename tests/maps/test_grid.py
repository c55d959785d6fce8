"""OccupancyGrid: cell/world conversion on hand-worked corners, validation, blocked mask, map_id."""

from __future__ import annotations

import math

import numpy as np
import pytest

from veer.maps import FREE, OCCUPIED, UNKNOWN, MapFormatError, MapSettingsError, OccupancyGrid

# A 3 x 4 grid of 0.25 m cells whose lower-left corner is at (-1.5, 2.0): it covers
# x in [-1.5, -0.5) and y in [2.0, 2.75). All values below are exact in binary.
# worked by hand from the rules of docs/files.md, "Map image" (row 0 is the top edge, origin_m is
# the world point of the lower-left corner, y up)
ROWS, COLS, CS, ORIGIN = 3, 4, 0.25, (-1.5, 2.0)


@pytest.fixture
def grid():
    return OccupancyGrid(np.zeros((ROWS, COLS), np.uint8), cell_size_m=CS, origin_m=ORIGIN)


@pytest.mark.parametrize(
    ("x_m", "y_m", "cell"),
    [
        (-1.5, 2.0, (2, 0)),  # lower-left corner: bottom row, first column
        (-1.4, 2.1, (2, 0)),
        (-0.51, 2.74, (0, 3)),  # just inside the top-right corner
        (-1.25, 2.25, (1, 1)),  # on two inner edges: the cell right of and above the point
        (-1.0, 2.5, (0, 2)),
        (-1.5, 2.7, (0, 0)),  # left edge, top row
        (-0.5, 2.0, (2, 4)),  # right edge of the grid: outside
        (-1.5, 2.75, (-1, 0)),  # top edge of the grid: outside
        (-1.6, 1.9, (3, -1)),  # below and left: outside
    ],
)
def test_world_to_cell_hand_worked(grid, x_m, y_m, cell):
    assert grid.world_to_cell(x_m, y_m) == cell
    row, col = cell
    assert grid.contains(x_m, y_m) is (0 <= row < ROWS and 0 <= col < COLS)


@pytest.mark.parametrize(
    ("cell", "centre"),
    [((0, 0), (-1.375, 2.625)), ((2, 0), (-1.375, 2.125)), ((2, 3), (-0.625, 2.125)), ((1, 2), (-0.875, 2.375))],
)
def test_cell_to_world_hand_worked(grid, cell, centre):
    # source: worked by hand (centre = origin + (col + 0.5, rows - row - 0.5) * cell size)
    assert grid.cell_to_world(*cell) == centre


def test_geometry(grid):
    assert (grid.rows, grid.cols) == (ROWS, COLS)
    assert grid.width_m == 1.0 and grid.height_m == 0.75


def test_vectorised_matches_scalar(rng):
    grid = OccupancyGrid(np.zeros((17, 29), np.uint8), cell_size_m=0.37, origin_m=(3.1, -7.9))
    x = rng.uniform(2.0, 3.1 + 29 * 0.37 + 1.0, size=200)
    y = rng.uniform(-9.0, -7.9 + 17 * 0.37 + 1.0, size=200)
    rows, cols = grid.world_to_cell(x, y)
    assert rows.dtype == np.int64 and cols.dtype == np.int64 and rows.shape == (200,)
    for i in range(200):
        assert grid.world_to_cell(float(x[i]), float(y[i])) == (rows[i], cols[i])
        # source: definition of the cell (point lies inside the half-open square of its cell)
        left = 3.1 + cols[i] * 0.37
        bottom = -7.9 + (17 - 1 - rows[i]) * 0.37
        assert left - 1e-9 <= x[i] < left + 0.37 + 1e-9
        assert bottom - 1e-9 <= y[i] < bottom + 0.37 + 1e-9
    inside = grid.contains(x, y)
    assert inside.dtype == bool
    np.testing.assert_array_equal(inside, (rows >= 0) & (rows < 17) & (cols >= 0) & (cols < 29))
    # Broadcasting a scalar against an array.
    r, c = grid.world_to_cell(x[:5], 0.0)
    assert r.shape == (5,) and c.shape == (5,)


def test_centres_round_trip():
    grid = OccupancyGrid(np.zeros((11, 7), np.uint8), cell_size_m=0.05, origin_m=(-0.3, 12.35))
    rows, cols = np.mgrid[0:11, 0:7]
    x, y = grid.cell_to_world(rows, cols)
    back_rows, back_cols = grid.world_to_cell(x, y)
    np.testing.assert_array_equal(back_rows, rows)
    np.testing.assert_array_equal(back_cols, cols)


def test_non_finite_points_are_outside(grid):
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert grid.world_to_cell(math.nan, 2.1) == (2, -1)
        assert grid.contains(math.nan, 2.1) is False
        assert grid.contains(math.inf, 2.1) is False
        assert grid.contains(-1.0, -math.inf) is False
        assert grid.contains(1e300, 1e300) is False


def test_classes_are_read_only_copies():
    source = np.array([[FREE, OCCUPIED], [UNKNOWN, FREE]], dtype=np.uint8)
    grid = OccupancyGrid(source, 1.0, (0.0, 0.0))
    assert source.flags.writeable  # the caller's array is left alone
    source[0, 0] = OCCUPIED
    assert grid.classes[0, 0] == FREE
    assert not grid.classes.flags.writeable and grid.classes.flags.c_contiguous
    with pytest.raises(ValueError):
        grid.classes[0, 0] = 1
    wide = OccupancyGrid(np.array([[0, 1], [2, 0]], dtype=np.int64).T, 1.0, (0, 0))
    assert wide.classes.dtype == np.uint8 and wide.classes.flags.c_contiguous


def test_blocked_follows_unknown_is():
    classes = np.array([[FREE, OCCUPIED, UNKNOWN]], dtype=np.uint8)
    blocked = OccupancyGrid(classes, 1.0, (0, 0), unknown_is="blocked")
    free = OccupancyGrid(classes, 1.0, (0, 0), unknown_is="free")
    np.testing.assert_array_equal(blocked.blocked, [[False, True, True]])
    np.testing.assert_array_equal(free.blocked, [[False, True, False]])
    assert blocked.blocked is blocked.blocked  # computed once
    assert not blocked.blocked.flags.writeable


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"classes": np.zeros(4, np.uint8)}, MapFormatError, r"2-D array .*got shape \(4,\)"),
        ({"classes": np.zeros((0, 3), np.uint8)}, MapFormatError, "must not be empty"),
        ({"classes": np.full((2, 2), 3, np.uint8)}, MapFormatError, "only 0 \\(free\\), 1 \\(occupied\\) and 2"),
        ({"classes": np.full((2, 2), 258, np.int16)}, MapFormatError, "only 0 \\(free\\)"),
        ({"classes": np.full((2, 2), -1, np.int8)}, MapFormatError, "only 0 \\(free\\)"),
        ({"classes": np.zeros((2, 2), np.float32)}, MapFormatError, "got dtype float32"),
        ({"cell_size_m": 0.0}, MapSettingsError, "cell_size_m must be greater than 0"),
        ({"cell_size_m": -0.1}, MapSettingsError, "cell_size_m must be greater than 0"),
        ({"cell_size_m": math.nan}, MapSettingsError, "cell_size_m must be a finite number"),
        ({"cell_size_m": True}, MapSettingsError, "cell_size_m must be a number, got bool"),
        ({"origin_m": (0.0, math.inf)}, MapSettingsError, r"origin_m\[1\] must be a finite number"),
        ({"origin_m": (0.0, 1.0, 2.0)}, MapSettingsError, r"origin_m must be a list of two numbers"),
        ({"origin_m": "ab"}, MapSettingsError, r"origin_m must be a list of two numbers"),
        ({"unknown_is": "maybe"}, MapSettingsError, 'unknown_is must be "blocked" or "free"'),
    ],
)
def test_bad_grid_is_refused(kwargs, error, match):
    args = {"classes": np.zeros((2, 3), np.uint8), "cell_size_m": 0.1, "origin_m": (0.0, 0.0)} | kwargs
    with pytest.raises(error, match=match):
        OccupancyGrid(**args)


def test_map_id_equal_for_equal_content_and_changes_with_one_cell(rng):
    classes = rng.integers(0, 3, size=(40, 30)).astype(np.uint8)
    a = OccupancyGrid(classes, 0.1, (1.0, 2.0))
    b = OccupancyGrid(classes.copy(), 0.1, (1.0, 2.0))
    assert a.map_id == b.map_id
    assert len(a.map_id) == 16 and int(a.map_id, 16) >= 0
    changed = classes.copy()
    changed[17, 3] = (changed[17, 3] + 1) % 3
    c = a.with_classes(changed)
    assert c.map_id != a.map_id
    assert (c.cell_size_m, c.origin_m, c.unknown_is) == (a.cell_size_m, a.origin_m, a.unknown_is)
    assert OccupancyGrid(classes, 0.2, (1.0, 2.0)).map_id != a.map_id
    assert OccupancyGrid(classes, 0.1, (1.0, 2.5)).map_id != a.map_id
    assert OccupancyGrid(classes, 0.1, (1.0, 2.0), unknown_is="free").map_id != a.map_id
    assert OccupancyGrid(classes.reshape(30, 40), 0.1, (1.0, 2.0)).map_id != a.map_id
    assert OccupancyGrid(classes, 0.1, (-0.0, 2.0)).map_id == OccupancyGrid(classes, 0.1, (0.0, 2.0)).map_id


def test_with_classes_keeps_shape(grid):
    with pytest.raises(MapFormatError, match=r"keep the grid shape \(3, 4\)"):
        grid.with_classes(np.zeros((4, 3), np.uint8))
