"""Tests for veer.planning.collision.FootprintChecker against exact shapely geometry."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely

from veer.maps import FREE, OCCUPIED, OccupancyGrid
from veer.planning import EXAMPLE_VEHICLE, Vehicle
from veer.planning.collision import FootprintChecker, obstacle_boxes

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
    # common practice (derived): the three allowances of a centre-to-centre clearance lookup
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
    # docs/files.md: everything outside the image is blocked, so the disc must keep 1 m from the edge
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


def _random_map(geo, seed: int, width_m: float, height_m: float, cell_m: float, origin_m=(0.0, 0.0)):
    """A map of random boxes, random single cells and a rotated bar, on an odd origin."""
    rng = np.random.default_rng(seed)
    rows, cols = int(round(height_m / cell_m)), int(round(width_m / cell_m))
    blocked = np.zeros((rows, cols), dtype=bool)
    blocked[rng.integers(0, rows, 12), rng.integers(0, cols, 12)] = True
    for _ in range(5):
        r, c = rng.integers(0, rows), rng.integers(0, cols)
        blocked[r : r + rng.integers(1, 12), c : c + rng.integers(1, 12)] = True  # cells, so sizes vary with the cell
    rr, cc = np.mgrid[0:rows, 0:cols]
    blocked |= np.abs((rr - rows / 2) * 0.6 - (cc - cols / 3) * 0.8) < 1.0  # a diagonal wall, one to two cells thick
    return OccupancyGrid(np.where(blocked, OCCUPIED, FREE).astype(np.uint8), cell_m, origin_m)


def _grown(vehicle: Vehicle, margin_m: float) -> Vehicle:
    """The same rectangle grown by ``margin_m`` on every side."""
    return Vehicle(
        wheelbase_m=vehicle.wheelbase_m, max_steer_deg=vehicle.max_steer_deg, radius_m=vehicle.radius_m,
        length_m=vehicle.length_m + 2 * margin_m, width_m=vehicle.width_m + 2 * margin_m,
        rear_overhang_m=vehicle.rear_overhang_or_default_m + margin_m,
    )


@pytest.mark.parametrize("seed, cell_m, origin_m", [(3, 0.1, (0.0, 0.0)), (4, 0.2, (-3.7, 12.35)), (5, 0.05, (1.0, -2.0))])
def test_obstacle_boxes_cover_exactly_the_blocked_squares(geo, seed, cell_m, origin_m):
    grid = _random_map(geo, seed, 8.0, 6.0, cell_m, origin_m)
    top_m = origin_m[1] + grid.rows * cell_m
    boxes = obstacle_boxes(grid.blocked, cell_m, origin_m[0], top_m)
    polys = shapely.box(
        boxes.centre_x_m - boxes.half_x_m, boxes.centre_y_m - boxes.half_y_m,
        boxes.centre_x_m + boxes.half_x_m, boxes.centre_y_m + boxes.half_y_m,
    )
    rows, cols = np.nonzero(grid.blocked)
    squares = shapely.box(
        origin_m[0] + cols * cell_m, top_m - (rows + 1) * cell_m, origin_m[0] + (cols + 1) * cell_m, top_m - rows * cell_m
    )
    # source: shapely (GEOS) union and symmetric difference: the boxes cover the blocked squares, no more, no less
    difference = shapely.symmetric_difference(shapely.union_all(polys), shapely.union_all(squares))
    assert difference.area < 1e-9 * cell_m**2 * len(squares)
    assert shapely.union_all(polys).area == pytest.approx(len(squares) * cell_m**2, rel=1e-9)
    # boxes do not overlap: their areas add up to the union's
    assert shapely.area(polys).sum() == pytest.approx(len(squares) * cell_m**2, rel=1e-9)
    assert len(polys) < len(squares)
    # every box is listed in the index tile of each of its corners
    for i in np.random.default_rng(seed).choice(len(polys), 40):
        found = boxes.near(
            boxes.centre_x_m[i] - boxes.half_x_m[i], boxes.centre_y_m[i] - boxes.half_y_m[i],
            boxes.centre_x_m[i] + boxes.half_x_m[i], boxes.centre_y_m[i] + boxes.half_y_m[i],
        )
        assert i in found


@pytest.mark.parametrize("seed, cell_m, origin_m, chunk", [(6, 0.1, (0.0, 0.0), 1 << 30), (7, 0.2, (-3.7, 12.35), 32), (8, 0.05, (1.0, -2.0), 7)])
def test_rectangles_clear_equals_shapely_on_random_maps(geo, seed, cell_m, origin_m, chunk):
    grid = _random_map(geo, seed, 20.0, 14.0, cell_m, origin_m)
    checker = FootprintChecker(grid, RECT, sample_step_m=SAMPLE_STEP_M, reach_m=1.0)
    obstacles = geo.Obstacles(grid)
    rng = np.random.default_rng(seed)
    n = 3000
    # poses over the map and a margin outside it (outside counts as blocked), some axis-aligned headings
    x = origin_m[0] + rng.uniform(-1.0, 21.0, n)
    y = origin_m[1] + rng.uniform(-1.0, 15.0, n)
    h = rng.uniform(-math.pi, math.pi, n)
    h[::5] = rng.integers(-2, 3, len(h[::5])) * (math.pi / 2)
    # poses close together, as the samples of one expansion: a short arc
    t = np.linspace(0.0, 1.5, 200)
    x[:200], y[:200], h[:200] = origin_m[0] + 6.0 + 3.0 * np.sin(t), origin_m[1] + 4.0 + 3.0 * (1 - np.cos(t)), t
    clear = checker.rectangles_clear(x, y, h, chunk=chunk)
    # source: shapely (GEOS) distance between the grown rectangle and the blocked squares plus the map's outside
    grown = _grown(RECT, checker.rectangle_margin_m)
    room_m = obstacles.distance_m(geo.rectangle_polygons(grown, x, y, h))
    np.testing.assert_array_equal(clear, room_m > 0.0)
    # both answers, and many of each within 0.1 m of the boundary
    shrunk_room_m = obstacles.distance_m(geo.rectangle_polygons(_grown(RECT, checker.rectangle_margin_m - 0.1), x, y, h))
    assert clear.sum() > 300 and (~clear).sum() > 1000
    assert np.sum(clear & (room_m < 0.1)) > 40 and np.sum(~clear & (shrunk_room_m > 0.0)) > 40
    # the same answers one pose at a time (each its own window)
    for i in rng.choice(n, 60, replace=False):
        assert checker.rectangles_clear(x[i], y[i], h[i])[0] == clear[i]


def test_poses_clear_is_exact_where_the_circles_are_inconclusive(geo):
    grid = _random_map(geo, 9, 20.0, 20.0, 0.1)
    checker = FootprintChecker(grid, RECT, sample_step_m=SAMPLE_STEP_M)
    obstacles = geo.Obstacles(grid)
    x, y, h = _random_poses(9, 3000, 0.0, 20.0)
    clear = checker.poses_clear(x, y, h)
    circles = checker.circles_clear(x, y, h)
    # source: shapely (GEOS) distances, grown rectangle (the exact test) and the bare rectangle
    room_grown_m = obstacles.distance_m(geo.rectangle_polygons(_grown(RECT, checker.rectangle_margin_m), x, y, h))
    room_m = obstacles.distance_m(geo.rectangle_polygons(RECT, x, y, h))
    np.testing.assert_array_equal(clear[~circles], room_grown_m[~circles] > 0.0)
    assert not np.any(clear & (room_m <= 0.0)), "a touching rectangle pose was called clear"
    assert (~circles & clear).sum() > 100 and (~clear).sum() > 100
    first = checker.first_collision(np.column_stack((x, y, h)))
    assert first == int(np.flatnonzero(~clear)[0])
    # all_clear stops at the first blocked pose but answers as poses_clear(...).all()
    for lo in range(0, 3000, 150):
        span = slice(lo, lo + int(np.random.default_rng(lo).integers(1, 40)))
        assert checker.all_clear(x[span], y[span], h[span]) == bool(clear[span].all())
    assert checker.all_clear(x[clear], y[clear], h[clear]) and not checker.all_clear(x, y, h)


def test_rectangles_clear_needs_a_rectangle(scene):
    grid, _ = scene
    checker = FootprintChecker(grid, EXAMPLE_VEHICLE, sample_step_m=SAMPLE_STEP_M)
    with pytest.raises(ValueError, match="rectangle footprint"):
        checker.rectangles_clear([5.0], [5.0], [0.0])
