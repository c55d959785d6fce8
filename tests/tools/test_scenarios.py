"""Tests for the built-in scenarios: geometry as stated, determinism, solvability, map files."""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
import scipy.ndimage as ndi
import shapely
from scipy.spatial import cKDTree

from veer.maps import FREE, OCCUPIED, inflate, load_map
from veer.planning.vehicle import EXAMPLE_VEHICLE
from veer.tools.scenarios import (
    CELL_SIZE_M,
    DEMO_SCENARIO,
    SCENARIO_NAMES,
    Scenario,
    ScenarioError,
    build_scenario,
    s_corridor_centreline,
    write_scenario_map,
)

FOUR = ndi.generate_binary_structure(2, 1)
EIGHT = ndi.generate_binary_structure(2, 2)


@pytest.fixture(scope="module")
def built() -> dict[str, tuple[Scenario, object]]:
    """Each scenario with its grid inflated for the example vehicle's 1.0 m disc."""
    out = {}
    for name in SCENARIO_NAMES:
        scenario = build_scenario(name)
        out[name] = (scenario, inflate(scenario.grid, EXAMPLE_VEHICLE.radius_m))
    return out


def _cell(grid, pose):
    return grid.world_to_cell(pose[0], pose[1])


def _free_run_m(free: np.ndarray, row: int, col: int, axis: int, step: int, cell_size_m: float) -> float:
    """Free distance from a cell's centre to the first blocked cell along one image axis."""
    n = 0
    r, c = row, col
    while True:
        r, c = (r + step, c) if axis == 0 else (r, c + step)
        if not (0 <= r < free.shape[0] and 0 <= c < free.shape[1]) or not free[r, c]:
            return (n + 0.5) * cell_size_m
        n += 1


def _cell_centres_m(grid) -> np.ndarray:
    rows, cols = np.indices((grid.rows, grid.cols))
    x, y = grid.cell_to_world(rows.ravel(), cols.ravel())
    return np.column_stack((x, y))


# ---------------------------------------------------------------------------------------------
# every scenario


def test_names_and_demo():
    assert SCENARIO_NAMES == ("open_yard", "parking_bay", "s_corridor", "warehouse", "enclosed_goal")
    assert DEMO_SCENARIO in SCENARIO_NAMES


@pytest.mark.parametrize("name", SCENARIO_NAMES)
def test_scenario_fields(built, name):
    scenario, _ = built[name]
    assert scenario.name == name
    assert scenario.description and "\n" not in scenario.description
    assert scenario.grid.cell_size_m == CELL_SIZE_M == 0.1
    assert scenario.grid.origin_m == (0.0, 0.0)
    for pose in (scenario.start, scenario.goal):
        assert len(pose) == 3 and all(math.isfinite(v) for v in pose)
        assert scenario.grid.contains(pose[0], pose[1])
    assert scenario.reverse is True
    assert scenario.expect_path is (name != "enclosed_goal")


@pytest.mark.parametrize("name", SCENARIO_NAMES)
def test_deterministic(built, name):
    first, _ = built[name]
    again = build_scenario(name)
    assert again.grid.map_id == first.grid.map_id
    np.testing.assert_array_equal(again.grid.classes, first.grid.classes)
    assert (again.start, again.goal) == (first.start, first.goal)


@pytest.mark.parametrize("name", SCENARIO_NAMES)
def test_start_and_goal_free_in_inflated_grid(built, name):
    scenario, inflated = built[name]
    for pose in (scenario.start, scenario.goal):
        row, col = _cell(scenario.grid, pose)
        assert not inflated.blocked[row, col], f"{name}: {pose} is blocked for the 1.0 m disc"


@pytest.mark.parametrize("name", SCENARIO_NAMES)
def test_reachability_matches_expect_path(built, name):
    # A path of the reference point stays on cells the inflated grid leaves free, so start and
    # goal must share a connected free region. 4-connectivity (the stricter) when a path is
    # expected, 8-connectivity (the looser) when none is.
    # source: scipy.ndimage.label connected-component labelling
    scenario, inflated = built[name]
    structure = FOUR if scenario.expect_path else EIGHT
    labels, _ = ndi.label(~inflated.blocked, structure=structure)
    same = labels[_cell(scenario.grid, scenario.start)] == labels[_cell(scenario.grid, scenario.goal)]
    assert same is np.bool_(scenario.expect_path)


def test_unknown_name_is_refused():
    with pytest.raises(ScenarioError, match="unknown scenario 'car_park'; choose one of: open_yard"):
        build_scenario("car_park")


# ---------------------------------------------------------------------------------------------
# per scenario


def test_open_yard(built):
    scenario, _ = built["open_yard"]
    grid = scenario.grid
    assert (grid.rows, grid.cols) == (400, 400)  # 40 x 40 m at 0.1 m
    blocked_centres = _cell_centres_m(grid)[grid.blocked.ravel()]
    tree = cKDTree(blocked_centres)  # source: scipy.spatial.cKDTree nearest neighbour
    for pose in (scenario.start, scenario.goal):
        distance_m, _ = tree.query(pose[:2])
        # Centre distance minus half a cell diagonal bounds the distance to the squares.
        assert distance_m - CELL_SIZE_M / math.sqrt(2) >= 2.0
    assert math.dist(scenario.start[:2], scenario.goal[:2]) >= 30.0
    assert not math.isclose(scenario.start[2], scenario.goal[2])
    # Scattered obstacles: a good number of separate boxes inside the fence.
    inner = grid.blocked[5:-5, 5:-5]
    _, count = ndi.label(inner, structure=EIGHT)
    assert count >= 20
    # Box sizes: each obstacle's bounding extent lies between 1 m and the 6 m containers.
    labels, count = ndi.label(inner, structure=EIGHT)
    for sl in ndi.find_objects(labels):
        extent_m = max(sl[0].stop - sl[0].start, sl[1].stop - sl[1].start) * CELL_SIZE_M
        assert 1.0 - 2 * CELL_SIZE_M <= extent_m <= 6.0 + 2 * CELL_SIZE_M


def test_parking_bay(built):
    scenario, _ = built["parking_bay"]
    grid = scenario.grid
    free = grid.classes == FREE
    g_row, g_col = _cell(grid, scenario.goal)
    cs = grid.cell_size_m
    # Goal inside a dead-end bay: walls left, right and behind (the bay is 3.2 m wide).
    left = _free_run_m(free, g_row, g_col, 1, -1, cs)
    right = _free_run_m(free, g_row, g_col, 1, +1, cs)
    assert left + right == pytest.approx(3.2, abs=cs + 1e-9)
    heading = scenario.goal[2]
    assert heading == pytest.approx(-math.pi / 2)  # nose out of a top-row bay, towards the aisle
    behind = _free_run_m(free, g_row, g_col, 0, -1, cs)  # image up = world +y = behind the goal
    ahead = _free_run_m(free, g_row, g_col, 0, +1, cs)
    assert behind < 2.5
    assert behind + ahead >= 6.0 + 8.0  # out through the bay mouth and across the aisle
    # The bay is 6 m deep: the side wall ends 6 m from the back wall, then the aisle opens.
    wall_col = g_col + int(round(right / cs - 0.5)) + 1  # first cell of the divider on the right
    assert grid.classes[g_row, wall_col] == OCCUPIED
    wall_len = _free_run_m(grid.classes == OCCUPIED, 1, wall_col, 0, +1, cs)  # from the fence down
    assert wall_len == pytest.approx(6.0 + 0.3, abs=2 * cs)
    # The robot starts in the aisle; the aisle is at least 8 m wide.
    s_row, s_col = _cell(grid, scenario.start)
    aisle_m = _free_run_m(free, s_row, s_col, 0, -1, cs) + _free_run_m(free, s_row, s_col, 0, +1, cs)
    assert aisle_m >= 8.0
    assert scenario.start[1] < scenario.goal[1] - 6.0


def test_s_corridor_centreline_geometry():
    line = s_corridor_centreline(0.5)
    length_m = float(np.hypot(*np.diff(line, axis=0).T).sum())
    assert 70.0 <= length_m <= 80.0
    # Radius of the circle through three consecutive points: R = abc / (4 * area).
    # source: circumradius of a triangle (Menger curvature), e.g. Weisstein, MathWorld "Circumradius"
    a, b, c = line[:-2], line[1:-1], line[2:]
    ab, bc, ca = (np.linalg.norm(p - q, axis=1) for p, q in ((a, b), (b, c), (c, a)))
    cross = (b - a)[:, 0] * (c - a)[:, 1] - (b - a)[:, 1] * (c - a)[:, 0]
    with np.errstate(divide="ignore"):
        radius_m = ab * bc * ca / (2 * np.abs(cross))
    assert radius_m.min() >= 10.0
    # S-shaped: the heading turns left and then right by the same amount.
    turn = np.diff(np.unwrap(np.arctan2(*np.diff(line, axis=0).T[::-1])))
    assert turn.max() > 0 and turn.min() < 0
    assert float(turn.sum()) == pytest.approx(0.0, abs=1e-6)


def test_s_corridor_is_a_swept_band(built):
    scenario, inflated = built["s_corridor"]
    grid = scenario.grid
    line = shapely.LineString(s_corridor_centreline())
    centres = _cell_centres_m(grid)
    # Cells within 1.25 m of the line are free, all others occupied. 64 segments per quarter
    # circle put the buffer's round joins within 1e-4 m of the true offset curve.
    # source: shapely buffer (offset polygon of a line) and contains_xy
    inner = shapely.buffer(line, 1.25 - 1e-3, quad_segs=64)
    outer = shapely.buffer(line, 1.25 + 1e-3, quad_segs=64)
    free = (grid.classes == FREE).ravel()
    assert free[shapely.contains_xy(inner, centres[:, 0], centres[:, 1])].all()
    assert not free[~shapely.contains_xy(outer, centres[:, 0], centres[:, 1])].any()
    assert free.sum() * CELL_SIZE_M**2 == pytest.approx(inner.area, rel=0.01)
    # Start and goal on the centreline near its ends, facing along it.
    points = np.asarray(line.coords)
    for pose, end in ((scenario.start, points[0]), (scenario.goal, points[-1])):
        assert line.distance(shapely.Point(pose[:2])) < 1e-6
        assert 1.0 <= math.dist(pose[:2], end) <= 5.0
        s = line.project(shapely.Point(pose[:2]))
        p0, p1 = line.interpolate(s - 0.2), line.interpolate(s + 0.2)
        tangent = math.atan2(p1.y - p0.y, p1.x - p0.x)
        assert math.cos(pose[2] - tangent) == pytest.approx(1.0, abs=1e-6)
    # The 1.0 m disc fits on every centreline cell.
    rows, cols = grid.world_to_cell(points[:, 0], points[:, 1])
    assert not inflated.blocked[rows, cols].any()


def test_warehouse(built):
    scenario, _ = built["warehouse"]
    grid = scenario.grid
    cs = grid.cell_size_m
    assert (grid.rows, grid.cols) == (600, 800)  # 80 x 60 m at 0.1 m
    free = grid.classes == FREE
    # A vertical scan through each rack block: racks 1.2 m deep, aisles between them >= 4 m.
    for x_m in (20.0, 53.0):
        col = grid.world_to_cell(x_m, 1.0)[1]
        column = grid.classes[3:-3, col] == OCCUPIED
        labels, count = ndi.label(column)
        assert count >= 6
        runs = ndi.find_objects(labels)
        depths = [(r[0].stop - r[0].start) * cs for r in runs]
        assert all(d == pytest.approx(1.2, abs=cs + 1e-9) for d in depths)
        gaps = [(b[0].start - a[0].stop) * cs for a, b in zip(runs[:-1], runs[1:])]
        assert min(gaps) >= 4.0
    # Racks 20-30 m long.
    row = grid.world_to_cell(1.0, 8.6)[0]
    labels, _ = ndi.label(grid.classes[row, 3:-3] == OCCUPIED)
    lengths = [(r[0].stop - r[0].start) * cs for r in ndi.find_objects(labels)]
    assert len(lengths) == 2 and all(20.0 <= length <= 30.0 for length in lengths)
    # A cross aisle: a column of free cells from the bottom aisle to the top aisle.
    cross = grid.world_to_cell(37.0, 1.0)[1]
    assert free[5:-5, cross].all()
    # The goal sits deep in an aisle (racks above and below, >= 10 m from either end).
    g_row, g_col = _cell(grid, scenario.goal)
    assert _free_run_m(free, g_row, g_col, 0, -1, cs) < 3.0
    assert _free_run_m(free, g_row, g_col, 0, +1, cs) < 3.0
    rack_row = g_row - int(round(2.6 / cs))
    assert (grid.classes[rack_row, g_col - 100 : g_col + 100] == OCCUPIED).all()
    # A long route from a corner.
    assert scenario.start[0] < 5.0 and scenario.start[1] < 5.0
    assert math.dist(scenario.start[:2], scenario.goal[:2]) >= 50.0


def test_enclosed_goal_is_walled_in(built):
    scenario, _ = built["enclosed_goal"]
    grid = scenario.grid
    # Even a point robot cannot get in: on the raw map the goal's 8-connected free region
    # is closed off from the start's. source: scipy.ndimage.label
    labels, _ = ndi.label(grid.classes == FREE, structure=EIGHT)
    assert labels[_cell(grid, scenario.start)] != labels[_cell(grid, scenario.goal)]
    assert labels[_cell(grid, scenario.goal)] != 0


# ---------------------------------------------------------------------------------------------
# map files


def _read_pgm_p5(data: bytes) -> tuple[int, int, int, np.ndarray]:
    """Parse a binary PGM: magic, whitespace/comment-separated width, height, maxval, one
    whitespace byte, then rows of 1-byte samples.  source: Netpbm PGM specification
    (https://netpbm.sourceforge.net/doc/pgm.html)"""
    assert data[:2] == b"P5"
    tokens, pos = [], 2
    while len(tokens) < 3:
        ch = data[pos : pos + 1]
        if ch == b"#":
            pos = data.index(b"\n", pos) + 1
        elif ch.isspace():
            pos += 1
        else:
            end = pos
            while not data[end : end + 1].isspace():
                end += 1
            tokens.append(int(data[pos:end]))
            pos = end
    pos += 1  # the single whitespace byte after maxval
    width, height, maxval = tokens
    pixels = np.frombuffer(data[pos:], np.uint8)
    assert pixels.size == width * height
    return width, height, maxval, pixels.reshape(height, width)


def test_write_scenario_map_round_trip(tmp_path, built):
    scenario, _ = built["parking_bay"]
    image_path = write_scenario_map(scenario, tmp_path)
    assert image_path == tmp_path / "parking_bay.pgm"
    width, height, maxval, pixels = _read_pgm_p5(image_path.read_bytes())
    assert (height, width, maxval) == (scenario.grid.rows, scenario.grid.cols, 255)
    # docs/files.md, "Built-in scenario maps": free 255, occupied 0, unknown 128
    expected = np.where(scenario.grid.classes == FREE, 255, np.where(scenario.grid.classes == OCCUPIED, 0, 128))
    np.testing.assert_array_equal(pixels, expected)
    sidecar = tomllib.loads((tmp_path / "parking_bay.toml").read_text())
    assert sidecar == {
        "cell_size_m": 0.1,
        "origin_m": [0.0, 0.0],
        "occupied_below": 100,
        "free_above": 200,
        "unknown_is": "blocked",
    }
    # The project's own loader reads back the very same grid.
    loaded = load_map(image_path)
    assert loaded.map_id == scenario.grid.map_id


def test_write_scenario_map_with_unknown_cells(tmp_path):
    # Unknown cells must be written with a shade between occupied_below and free_above, so that
    # the sidecar's own thresholds read them back as unknown (docs/files.md, "Map sidecar").
    from veer.maps import UNKNOWN, OccupancyGrid

    classes = np.zeros((4, 6), np.uint8)
    classes[1, 2] = UNKNOWN
    classes[2, 3] = OCCUPIED
    grid = OccupancyGrid(classes, cell_size_m=0.1, origin_m=(0.0, 0.0))
    scenario = Scenario("tiny", "a tiny map", grid, (0.05, 0.05, 0.0), (0.55, 0.05, 0.0), True, True)
    loaded = load_map(write_scenario_map(scenario, tmp_path))
    np.testing.assert_array_equal(loaded.classes, classes)


def test_write_scenario_map_missing_folder(tmp_path, built):
    scenario, _ = built["open_yard"]
    with pytest.raises(ScenarioError, match="does not exist; create it first"):
        write_scenario_map(scenario, tmp_path / "nowhere")
