"""Clearance field and inflation against scipy's exact transform, brute force and shapely."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from scipy import ndimage

from veer.maps import (
    FREE,
    OCCUPIED,
    UNKNOWN,
    InflatedGrid,
    MapSettingsError,
    OccupancyGrid,
    clearance_field_m,
    inflate,
)


def _random_grid(rng, rows, cols, cell_size_m, *, density=0.08, unknown_is="blocked"):
    classes = np.full((rows, cols), FREE, dtype=np.uint8)
    classes[rng.random((rows, cols)) < density] = OCCUPIED
    classes[rng.random((rows, cols)) < density / 2] = UNKNOWN
    return OccupancyGrid(classes, cell_size_m, (rng.uniform(-5, 5), rng.uniform(-5, 5)), unknown_is)


def _scipy_clearance(grid):
    # source: scipy.ndimage.distance_transform_edt (exact Euclidean distance to the nearest zero,
    # `sampling` = cell size), on the grid padded with one ring of blocked cells
    free_padded = np.pad(~grid.blocked, 1, constant_values=False)
    return ndimage.distance_transform_edt(free_padded, sampling=grid.cell_size_m)[1:-1, 1:-1]


@pytest.mark.parametrize(
    ("rows", "cols", "cell_size_m", "unknown_is"),
    [(23, 41, 0.05, "blocked"), (50, 17, 0.37, "free"), (9, 64, 1.0, "blocked"), (64, 3, 2.5, "free")],
)
def test_clearance_matches_scipy(rng, rows, cols, cell_size_m, unknown_is):
    grid = _random_grid(rng, rows, cols, cell_size_m, unknown_is=unknown_is)
    clearance = clearance_field_m(grid)
    assert clearance.dtype == np.float32 and clearance.shape == (rows, cols)
    assert not clearance.flags.writeable
    expected = _scipy_clearance(grid)
    np.testing.assert_allclose(clearance, expected, rtol=1e-6, atol=1e-6 * cell_size_m)
    assert np.all(clearance[grid.blocked] == 0.0)


def test_empty_map_clearance_is_distance_to_the_outside():
    # source: scipy.ndimage.distance_transform_edt (the outside ring is the only obstacle), and by hand:
    # cell (r, c) of an all-free map is min(r + 1, rows - r, c + 1, cols - c) cells from the ring
    grid = OccupancyGrid(np.zeros((6, 9), np.uint8), 0.37, (0.0, 0.0))
    r, c = np.mgrid[0:6, 0:9]
    by_hand = np.minimum.reduce([r + 1, 6 - r, c + 1, 9 - c]) * 0.37
    np.testing.assert_allclose(clearance_field_m(grid), by_hand, rtol=1e-6)
    np.testing.assert_allclose(clearance_field_m(grid), _scipy_clearance(grid), rtol=1e-6)


def _square_distance(px, py, cx, cy, half):
    """Exact distance from points (px, py) to axis-aligned squares (centre cx, cy, half-edge half)."""
    # common practice: distance to a box = norm of the per-axis excess over the half-edges
    dx = np.maximum(np.abs(px[:, None] - cx[None, :]) - half, 0.0)
    dy = np.maximum(np.abs(py[:, None] - cy[None, :]) - half, 0.0)
    return np.hypot(dx, dy)


@pytest.mark.parametrize(
    ("rows", "cols", "cell_size_m", "radius_m", "extra_margin_m"),
    [(19, 27, 0.37, 0.6, 0.0), (31, 45, 0.05, 0.08, 0.0), (15, 22, 1.0, 0.0, 0.0), (40, 36, 0.25, 0.3, 0.1)],
)
def test_unblocked_cells_are_collision_free_anywhere_inside(rng, rows, cols, cell_size_m, radius_m, extra_margin_m):
    grid = _random_grid(rng, rows, cols, cell_size_m, density=0.03)
    inflated = inflate(grid, radius_m, extra_margin_m=extra_margin_m)
    assert isinstance(inflated, InflatedGrid)
    assert inflated.margin_m == pytest.approx(cell_size_m * math.sqrt(2) + extra_margin_m)
    free_rows, free_cols = np.nonzero(~inflated.blocked)
    assert free_rows.size > 0.1 * rows * cols  # the check below must have cells to look at
    # World centres of blocked squares, the outside ring included (the map's outside is blocked).
    ring_blocked = np.pad(grid.blocked, 1, constant_values=True)
    br, bc = np.nonzero(ring_blocked)
    bx, by = grid.cell_to_world(br - 1, bc - 1)
    half = cell_size_m / 2
    for row, col in zip(free_rows, free_cols):
        cx, cy = grid.cell_to_world(row, col)
        px = cx + rng.uniform(-half, half, size=25)
        py = cy + rng.uniform(-half, half, size=25)
        # include the cell's corners, the worst case for the margin
        px = np.concatenate([px, cx + half * np.array([-1, -1, 1, 1])])
        py = np.concatenate([py, cy + half * np.array([-1, 1, -1, 1])])
        nearest = _square_distance(px, py, bx, by, half).min(axis=1)
        assert nearest.min() >= radius_m - 1e-9, (row, col)


def test_inflation_is_no_more_conservative_than_the_rule(rng):
    # source: scipy.ndimage.distance_transform_edt; blocked exactly where clearance < radius + cs * sqrt(2)
    grid = _random_grid(rng, 40, 33, 0.37)
    radius_m = 0.9
    inflated = inflate(grid, radius_m)
    threshold = radius_m + 0.37 * math.sqrt(2)
    expected = _scipy_clearance(grid)
    clear_cut = np.abs(expected - threshold) > 1e-5
    np.testing.assert_array_equal(inflated.blocked[clear_cut], (expected < threshold)[clear_cut])


def test_against_shapely_buffers(rng):
    # source: shapely (disc = Point.buffer, obstacle = union of blocked squares and the outside of the map)
    grid = _random_grid(rng, 14, 18, 0.37, density=0.05)
    radius_m = 0.45
    inflated = inflate(grid, radius_m)
    ox, oy = grid.origin_m
    half = grid.cell_size_m / 2
    rows, cols = np.nonzero(grid.blocked)
    x, y = grid.cell_to_world(rows, cols)
    squares = [shapely.box(a - half, b - half, a + half, b + half) for a, b in zip(x, y)]
    inside = shapely.box(ox, oy, ox + grid.width_m, oy + grid.height_m)
    obstacles = shapely.union_all(squares + [shapely.box(ox - 10, oy - 10, ox + 50, oy + 50).difference(inside)])
    free_rows, free_cols = np.nonzero(~inflated.blocked)
    assert free_rows.size > 20
    for row, col in zip(free_rows, free_cols):
        cx, cy = grid.cell_to_world(row, col)
        for _ in range(5):
            point = shapely.Point(cx + rng.uniform(-half, half), cy + rng.uniform(-half, half))
            assert point.distance(obstacles) >= radius_m - 1e-9
            assert not point.buffer(radius_m * 0.999, quad_segs=16).intersects(obstacles)


def test_reuses_a_given_clearance(rng):
    grid = _random_grid(rng, 30, 40, 0.2, density=0.01)
    clearance = clearance_field_m(grid)
    first = inflate(grid, 0.3, clearance_m=clearance)
    assert first.clearance_m is clearance
    np.testing.assert_array_equal(first.blocked, inflate(grid, 0.3).blocked)
    wider = inflate(grid, 0.6, clearance_m=clearance)
    assert np.all(wider.blocked >= first.blocked) and wider.blocked.sum() > first.blocked.sum()
    assert not first.blocked.flags.writeable


def test_zero_radius_still_blocks_blocked_cells(rng):
    grid = _random_grid(rng, 10, 10, 0.1)
    inflated = inflate(grid, 0.0)
    assert np.all(inflated.blocked[grid.blocked])
    assert np.all(inflated.blocked[[0, -1], :]) and np.all(inflated.blocked[:, [0, -1]])


def test_is_free(rng):
    grid = OccupancyGrid(np.zeros((10, 10), np.uint8), 1.0, (0.0, 0.0))
    inflated = inflate(grid, 1.0)
    assert inflated.is_free(5.0, 5.0) is True
    assert inflated.is_free(0.5, 5.0) is False  # within radius of the map's edge
    assert inflated.is_free(-3.0, 5.0) is False  # off the map
    np.testing.assert_array_equal(inflated.is_free(np.array([5.0, 50.0]), np.array([5.0, 5.0])), [True, False])


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"radius_m": -0.1}, "radius_m must be 0 or more"),
        ({"radius_m": math.nan}, "radius_m must be a finite number"),
        ({"radius_m": math.inf}, "radius_m must be a finite number"),
        ({"radius_m": True}, "radius_m must be a number, got bool"),
        ({"radius_m": "1"}, "radius_m must be a number, got str"),
        ({"extra_margin_m": -0.01}, "extra_margin_m must be 0 or more"),
        ({"extra_margin_m": math.nan}, "extra_margin_m must be a finite number"),
        ({"clearance_m": np.zeros((3, 3), np.float32)}, r"clearance_m has shape \(3, 3\), but the grid is \(4, 5\)"),
    ],
)
def test_bad_inflate_arguments(kwargs, match):
    grid = OccupancyGrid(np.zeros((4, 5), np.uint8), 0.1, (0.0, 0.0))
    args = {"radius_m": 0.5} | kwargs
    with pytest.raises(MapSettingsError, match=match):
        inflate(grid, **args)


def test_large_map_loads_and_inflates_exactly(tmp_path, rng):
    # source: scipy.spatial.cKDTree (nearest blocked centre, padded ring included) at sampled cells.
    # Time and memory on a 4000 x 4000 map are figures of tools/bench_maps.py (docs/benchmarks.md);
    # here: a large map reads back with compact types (no float64 copy of the map) and exact clearance.
    from scipy.spatial import cKDTree

    from veer.maps import load_map

    size = 1500
    shades = np.full((size, size), 255, dtype=np.uint8)
    dots = rng.integers(0, size, size=(600, 2))
    shades[dots[:, 0], dots[:, 1]] = 0
    path = tmp_path / "large.pgm"
    path.write_bytes(f"P5 {size} {size} 255\n".encode() + shades.tobytes())
    del shades
    grid = load_map(path, cell_size_m=0.05)
    inflated = inflate(grid, 0.5)
    assert grid.classes.dtype == np.uint8 and grid.classes.shape == (size, size)
    assert inflated.clearance_m.dtype == np.float32 and inflated.blocked.dtype == bool
    ring = np.concatenate([
        np.stack([np.full(size + 2, -1), np.arange(-1, size + 1)], axis=1),
        np.stack([np.full(size + 2, size), np.arange(-1, size + 1)], axis=1),
        np.stack([np.arange(size), np.full(size, -1)], axis=1),
        np.stack([np.arange(size), np.full(size, size)], axis=1),
    ])
    tree = cKDTree(np.concatenate([dots, ring]).astype(float))
    probe = rng.integers(0, size, size=(2000, 2))
    nearest, _ = tree.query(probe.astype(float))
    np.testing.assert_allclose(inflated.clearance_m[probe[:, 0], probe[:, 1]], nearest * 0.05, rtol=1e-6)
