"""Tests for veer.planning.collision.FootprintChecker against exact shapely geometry."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely

from veer.planning import EXAMPLE_VEHICLE, Vehicle
from veer.planning.collision import FootprintChecker

SAMPLE_STEP_M = 0.05
RECT = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)
# boxes of different sizes, one thin, one a few cells from another
BOXES_M = [(4.0, 4.0, 5.0, 8.0), (8.0, 2.0, 8.35, 3.3), (7.05, 7.05, 9.1, 7.4), (2.0, 9.6, 2.1, 9.7)]


@pytest.fixture(scope="module")
def scene(geo):
    grid = geo.with_boxes(geo.open_grid(12.0, 12.0), BOXES_M)
    return grid, geo.Obstacles(grid)


def _random_poses(seed: int, n: int, low_m: float = -0.5, high_m: float = 12.5):
    rng = np.random.default_rng(seed)
    return rng.uniform(low_m, high_m, n), rng.uniform(low_m, high_m, n), rng.uniform(-math.pi, math.pi, n)


def test_disc_never_called_clear_when_it_touches(scene):
    grid, obstacles = scene
    checker = FootprintChecker(grid, EXAMPLE_VEHICLE, sample_step_m=SAMPLE_STEP_M)
    x, y, h = _random_poses(1, 4000)
    clear = checker.poses_clear(x, y, h)
    # source: shapely (GEOS) distance from the centre to the blocked squares and the map's outside
    room_m = obstacles.distance_m(shapely.points(np.column_stack((x, y)))) - EXAMPLE_VEHICLE.radius_m
    assert not np.any(clear & (room_m <= 0.0)), "a disc pose touching an obstacle was called clear"
    # heading never matters for a disc
    np.testing.assert_array_equal(clear, checker.poses_clear(x, y, h + 1.0))
    # conservative only near obstacles: cell-centre inflation (cell * sqrt 2), the query point's
    # offset in its cell (cell / sqrt 2) and the between-samples allowance (one sample step)
    # source: METHODS.md section 3 "Margins" (derived)
    cs = grid.cell_size_m
    allowance_m = cs * math.sqrt(2.0) + cs / math.sqrt(2.0) + SAMPLE_STEP_M
    assert not np.any(~clear & (room_m > allowance_m)), "a disc pose with ample room was called blocked"
    # both answers occur, so the sample exercises the boundary
    assert clear.sum() > 500 and (~clear).sum() > 500


def test_rectangle_agrees_with_shapely_near_obstacles(scene, geo):
    grid, obstacles = scene
    checker = FootprintChecker(grid, RECT, sample_step_m=SAMPLE_STEP_M)
    x, y, h = _random_poses(2, 1500, 0.5, 11.5)
    clear = checker.poses_clear(x, y, h)
    # source: shapely (GEOS) distance between the rectangle polygon and the blocked squares
    room_m = obstacles.distance_m(geo.rectangle_polygons(RECT, x, y, h))
    assert not np.any(clear & (room_m <= 0.0)), "a touching rectangle pose was called clear"
    # exact check: false "blocked" only within the growth that covers motion between samples,
    # at most one sample step times the speed-up of the farthest corner (1 + rho * kappa)
    allowance_m = SAMPLE_STEP_M * (1.0 + RECT.bounding_radius_m * RECT.max_curvature_per_m)
    too_cautious = ~clear & (room_m > allowance_m)
    assert not np.any(too_cautious), f"{too_cautious.sum()} rectangle poses with room > {allowance_m:.3f} m were called blocked"
    # the circles alone would reject many of the poses the exact test accepts
    circles = checker.circles_clear(x, y, h)
    assert np.all(circles <= clear)
    near = (room_m > allowance_m) & (room_m < 0.5)
    assert near.sum() > 50 and np.any(near & ~circles & clear)


def test_rectangle_in_a_gap_narrower_than_the_circles(geo):
    # a 2.0 m gap: the 1.6 m wide body fits straight through, its covering circles (r = 0.96 m) plus margin do not
    grid = geo.with_boxes(geo.open_grid(12.0, 8.0), [(5.0, 0.0, 6.0, 3.0), (5.0, 5.0, 6.0, 8.0)])
    checker = FootprintChecker(grid, RECT, sample_step_m=SAMPLE_STEP_M)
    obstacles = geo.Obstacles(grid)
    xs = np.linspace(3.0, 8.0, 51)
    ys = np.full_like(xs, 4.0)
    hs = np.zeros_like(xs)
    room_m = obstacles.distance_m(geo.rectangle_polygons(RECT, xs, ys, hs))
    assert room_m.min() > 0.15  # source: shapely distance: the straight pass is clear by 0.2 m
    assert checker.poses_clear(xs, ys, hs).all()
    assert not checker.circles_clear(xs, ys, hs).all()
    # turned 60 degrees inside the gap it must not fit
    mid = np.array([5.5])
    assert obstacles.distance_m(geo.rectangle_polygons(RECT, mid - 1.0, np.array([4.0]), np.array([1.05])))[0] == 0.0
    assert not checker.poses_clear(mid - 1.0, [4.0], [1.05])[0]


def test_outside_of_the_map_is_blocked(geo):
    grid = geo.open_grid(10.0, 10.0)
    checker = FootprintChecker(grid, EXAMPLE_VEHICLE, sample_step_m=SAMPLE_STEP_M)
    # contract: everything outside the image is blocked, so the disc must keep 1 m from the edge
    assert checker.poses_clear([5.0], [5.0], [0.0])[0]
    for x, y in [(0.9, 5.0), (5.0, 9.2), (-3.0, 5.0), (5.0, 14.0), (9.95, 9.95)]:
        assert not checker.poses_clear([x], [y], [0.0])[0], (x, y)


def test_first_collision_index(scene):
    grid, obstacles = scene
    checker = FootprintChecker(grid, EXAMPLE_VEHICLE, sample_step_m=SAMPLE_STEP_M)
    xs = np.arange(1.5, 11.0, SAMPLE_STEP_M)
    poses = np.column_stack((xs, np.full_like(xs, 6.0), np.zeros_like(xs)))
    hit = checker.first_collision(poses)
    # source: shapely distance: the first pose whose disc reaches the box at x = 4.0
    room_m = obstacles.distance_m(shapely.points(poses[:, :2])) - EXAMPLE_VEHICLE.radius_m
    exact = int(np.flatnonzero(room_m <= 0.0)[0])
    assert hit is not None and hit <= exact
    assert room_m[hit] <= grid.cell_size_m * 1.5 * math.sqrt(2.0) + SAMPLE_STEP_M
    assert checker.first_collision(poses[:10]) is None
