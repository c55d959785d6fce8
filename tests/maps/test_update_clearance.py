"""Local refresh of the clearance field against a full recomputation and scipy's exact transform."""

import numpy as np
import pytest
from scipy import ndimage

from veer.maps import OCCUPIED, OccupancyGrid, clearance_field_m, update_clearance_m


def _scipy_clearance(grid):
    # source: scipy.ndimage.distance_transform_edt (exact Euclidean transform), map outside blocked
    open_padded = np.pad(~grid.blocked, 1, constant_values=False)
    return ndimage.distance_transform_edt(open_padded, sampling=grid.cell_size_m)[1:-1, 1:-1]


@pytest.mark.parametrize("seed", range(12))
def test_local_update_matches_full_transform_below_reach(seed):
    rng = np.random.default_rng(seed)
    rows, cols = (int(v) for v in rng.integers(15, 90, 2))
    cell = float(rng.choice([0.05, 0.1, 0.37]))
    classes = (rng.random((rows, cols)) < 0.04).astype(np.uint8) * OCCUPIED
    grid = OccupancyGrid(classes, cell, (1.5, -2.0))
    changed = classes.copy()
    r0, c0 = int(rng.integers(0, rows)), int(rng.integers(0, cols))
    changed[r0 : r0 + int(rng.integers(1, 6)), c0 : c0 + int(rng.integers(1, 6))] = OCCUPIED * int(rng.integers(0, 2))
    new_grid = grid.with_classes(changed)
    reach = 8 * cell
    updated, window = update_clearance_m(grid, clearance_field_m(grid), new_grid, reach_m=reach)
    exact = _scipy_clearance(new_grid)
    below = exact < reach
    np.testing.assert_allclose(updated[below], exact[below], atol=1e-4)
    # above the reach it may read high, never low: thresholds below reach are decided right
    assert (updated >= exact - 1e-4).all()
    if window is None:
        assert np.array_equal(grid.blocked, new_grid.blocked)


def test_no_change_returns_the_same_field():
    grid = OccupancyGrid(np.zeros((10, 12), np.uint8), 0.1, (0.0, 0.0))
    field = clearance_field_m(grid)
    same, window = update_clearance_m(grid, field, grid.with_classes(grid.classes.copy()), reach_m=0.5)
    assert window is None and same is field


def test_other_geometry_is_computed_in_full():
    grid = OccupancyGrid(np.zeros((10, 12), np.uint8), 0.1, (0.0, 0.0))
    other = OccupancyGrid(np.zeros((11, 12), np.uint8), 0.1, (0.0, 0.0))
    field, window = update_clearance_m(grid, clearance_field_m(grid), other, reach_m=0.5)
    assert window == (0, 11, 0, 12)
    np.testing.assert_allclose(field, _scipy_clearance(other), atol=1e-4)
