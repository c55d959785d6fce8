"""Tests for veer.planning.search: hybrid A* on small hand-made grids and built-in scenarios."""

from __future__ import annotations

import math
import threading

import networkx as nx
import numpy as np
import pytest
from scipy import ndimage

from veer.planning import (
    EXAMPLE_VEHICLE,
    NoPath,
    Planner,
    PoseError,
    SearchSettings,
    Vehicle,
    dubins_length,
    reeds_shepp_length,
)
from veer.tools.scenarios import build_scenario

RADIUS_M = EXAMPLE_VEHICLE.min_turn_radius_m
RECT = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)
SPINNER = Vehicle(wheelbase_m=0.5, max_steer_deg=30.0, radius_m=0.5, turns_in_place=True)
# length is the only cost, so the search should come close to the shortest curve
LENGTH_ONLY = SearchSettings(
    reverse_cost_factor=1.0, gear_change_cost_m=0.0, steer_cost_factor=0.0,
    steer_change_cost_m=0.0, clearance_cost_factor=0.0, heuristic_weight=1.0,
)
# a polyline of 0.25 m chords on a 3.46 m arc is shorter than the arc by 2e-4 of its length
CHORD_SLACK = 1e-3


@pytest.fixture(scope="module")
def open_30m(geo):
    return geo.open_grid(30.0, 30.0)


@pytest.fixture(scope="module")
def bay():
    return build_scenario("parking_bay")


def _plan_and_verify(geo, grid, vehicle, start, goal, settings=None, **kwargs):
    planner = Planner(vehicle, settings) if settings else Planner(vehicle)
    path = planner.plan(grid, start, goal, **kwargs)
    document = path.to_document()
    assert geo.path_problems(grid, vehicle, document, start, goal) == []
    return path, document


# ------------------------------------------------------------------ open space


@pytest.mark.parametrize(
    ("start", "goal"),
    [((4.0, 15.0, 0.0), (26.0, 15.0, 0.0)), ((5.0, 5.0, math.pi / 4), (24.0, 24.0, math.pi / 4)),
     ((25.0, 20.0, math.pi), (6.0, 20.0, math.pi))],
)
def test_straight_line_in_open_space(geo, open_30m, start, goal):
    path, _ = _plan_and_verify(geo, open_30m, EXAMPLE_VEHICLE, start, goal)
    distance_m = math.dist(start[:2], goal[:2])
    assert path.length_m == pytest.approx(distance_m, rel=0.01)
    assert path.reverse_m == 0.0 and path.gear_changes == 0


# goal offsets (dx, dy, heading) from a start at (10, 15, 0), in turning radii where it matters
TURNS = {
    "quarter_left": (RADIUS_M, RADIUS_M, math.pi / 2),
    "quarter_right": (RADIUS_M, -RADIUS_M, -math.pi / 2),
    "u_turn": (0.0, 2 * RADIUS_M, math.pi),
    "turn_back": (0.0, 0.0, math.pi),
    "side_step": (6.0, 2.0, 0.0),
    "behind": (-5.0, 1.0, 0.0),
    "behind_turned": (-4.0, -4.0, math.pi / 2),
    "far_diagonal": (12.0, 8.0, -math.pi / 2),
    "ahead_turned": (8.0, 0.0, math.pi),
}


@pytest.mark.parametrize("name", sorted(TURNS))
def test_turning_paths_come_close_to_reeds_shepp(geo, open_30m, name):
    dx, dy, heading = TURNS[name]
    start, goal = (10.0, 15.0, 0.0), (10.0 + dx, 15.0 + dy, heading)
    path, _ = _plan_and_verify(geo, open_30m, EXAMPLE_VEHICLE, start, goal, LENGTH_ONLY)
    # source: Reeds & Shepp 1990 (shortest forward/reverse path), via reeds_shepp_length
    to_goal_m = reeds_shepp_length(start, goal, RADIUS_M)
    to_end_m = reeds_shepp_length(start, tuple(path.poses[-1, :3]), RADIUS_M)
    assert path.length_m >= to_end_m * (1.0 - CHORD_SLACK)
    assert path.length_m <= to_goal_m * 1.06


@pytest.mark.parametrize("name", sorted(TURNS))
def test_forward_only_never_beats_dubins(geo, open_30m, name):
    dx, dy, heading = TURNS[name]
    start, goal = (10.0, 15.0, 0.0), (10.0 + dx, 15.0 + dy, heading)
    path, _ = _plan_and_verify(geo, open_30m, EXAMPLE_VEHICLE, start, goal, allow_reverse=False)
    assert path.reverse_m == 0.0 and path.gear_changes == 0
    assert (path.poses[:, 3] == 1).all()
    # source: Dubins 1957 (shortest forward-only path), via dubins_length
    assert path.length_m >= dubins_length(start, tuple(path.poses[-1, :3]), RADIUS_M) * (1.0 - CHORD_SLACK)
    # and reversing never makes the shortest forward/reverse path longer
    assert reeds_shepp_length(start, goal, RADIUS_M) <= dubins_length(start, goal, RADIUS_M) + 1e-9


# ------------------------------------------------------------------ obstacles


def _octile_lower_bound_m(grid, radius_m, start_xy, end_xy) -> float:
    """Shortest 8-connected path (networkx) between the cells of two points, over every cell
    a valid disc path can pass through: cells whose centre is at least r - cell/sqrt(2) from
    every blocked cell centre (scipy EDT, outside of the map blocked)."""
    cs = grid.cell_size_m
    padded = np.zeros((grid.rows + 2, grid.cols + 2), dtype=bool)
    padded[1:-1, 1:-1] = ~grid.blocked
    # source: scipy.ndimage.distance_transform_edt (exact Euclidean distance to the nearest 0)
    clearance_m = ndimage.distance_transform_edt(padded)[1:-1, 1:-1] * cs
    free = clearance_m >= radius_m - cs / math.sqrt(2.0)
    graph = nx.Graph()
    rows, cols = np.nonzero(free)
    for dr, dc, w in ((0, 1, 1.0), (1, 0, 1.0), (1, 1, math.sqrt(2.0)), (1, -1, math.sqrt(2.0))):
        r2, c2 = rows + dr, cols + dc
        ok = (r2 < free.shape[0]) & (c2 >= 0) & (c2 < free.shape[1])
        ok[ok] = free[r2[ok], c2[ok]]
        a = rows[ok] * free.shape[1] + cols[ok]
        b = r2[ok] * free.shape[1] + c2[ok]
        graph.add_weighted_edges_from(zip(a.tolist(), b.tolist(), [w] * int(ok.sum())))
    (sr, sc), (er, ec) = grid.world_to_cell(*start_xy), grid.world_to_cell(*end_xy)
    s, e = sr * free.shape[1] + sc, er * free.shape[1] + ec
    # source: networkx dijkstra_path_length
    return nx.dijkstra_path_length(graph, s, e) * cs


def test_wall_forces_a_detour_no_shorter_than_the_grid_path(geo):
    grid = geo.with_boxes(geo.open_grid(20.0, 16.0), [(9.5, 0.0, 10.5, 10.0)])
    start, goal = (4.0, 4.0, 0.0), (16.0, 4.0, 0.0)
    path, _ = _plan_and_verify(geo, grid, EXAMPLE_VEHICLE, start, goal)
    bound_m = _octile_lower_bound_m(grid, EXAMPLE_VEHICLE.radius_m, start[:2], path.poses[-1, :2])
    # an octile grid path over-reads a straight line by at most sqrt(4 - 2 sqrt 2) = 1.0824
    # (# common practice), plus a cell diagonal at each end
    lower_m = (bound_m - 2 * grid.cell_size_m * math.sqrt(2.0)) / math.sqrt(4 - 2 * math.sqrt(2.0))
    assert lower_m > math.dist(start[:2], goal[:2]) + 3.0  # the bound does see the wall
    assert path.length_m >= lower_m
    # the path really goes over the top of the wall
    assert path.poses[:, 1].max() >= 10.0 + EXAMPLE_VEHICLE.radius_m


@pytest.mark.parametrize(
    ("cell_m", "origin_m"), [(0.1, (-7.3, 12.1)), (0.2, (0.0, 0.0)), (0.05, (3.0, -4.0)), (0.25, (-100.0, -50.0))]
)
@pytest.mark.parametrize("vehicle", [EXAMPLE_VEHICLE, RECT], ids=["disc", "rectangle"])
def test_other_cell_sizes_and_origins(geo, cell_m, origin_m, vehicle):
    from veer.maps import OccupancyGrid

    ox, oy = origin_m
    base = OccupancyGrid(np.zeros((round(16.0 / cell_m), round(20.0 / cell_m)), np.uint8), cell_m, origin_m)
    grid = geo.with_boxes(base, [(ox + 9.5, oy, ox + 10.5, oy + 10.0)])
    start, goal = (ox + 4.0, oy + 4.0, 0.0), (ox + 16.0, oy + 4.0, 0.0)
    path, _ = _plan_and_verify(geo, grid, vehicle, start, goal)
    assert path.poses[:, 1].max() >= oy + 10.0 + 0.8


def test_dead_end_bay_needs_reverse(geo, bay):
    path, document = _plan_and_verify(geo, bay.grid, EXAMPLE_VEHICLE, bay.start, bay.goal)
    assert path.reverse_m > 0.0 and path.gear_changes >= 1
    # the last stretch into the bay is driven backwards (nose out at the goal)
    assert document["poses"][-1][3] == -1


# Forward only, the example car cannot park nose-out in a dead-end bay: it enters heading into the
# bay, and turning round inside needs a width of about 2 (r + radius) = 2 (3.46 + 1.0) = 8.9 m, but
# the bay is 3.2 m wide (derived from the turning radius of docs/reference.md, "Vehicle").
# An explicit lattice cell and a long time limit make the search run to exhaustion.
FORWARD_ONLY_LATTICE = SearchSettings(allow_reverse=False, lattice_cell_m=0.5, max_time_s=120.0)


@pytest.fixture(scope="module")
def forward_only_bay(bay):
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE, FORWARD_ONLY_LATTICE).plan(bay.grid, bay.start, bay.goal)
    return caught.value


def test_dead_end_bay_forward_only_has_no_path(forward_only_bay):
    # every pose reachable at both resolutions was tried: not a budget, deadline or enclosure answer
    assert forward_only_bay.reason == "no_path_at_resolution"
    assert forward_only_bay.stats["coarse_expansions"] > 0


def _lattice_keys_with_room(grid, radius_m: float, lattice_m: float) -> int:
    """Lattice cells of ``lattice_m`` that can hold a valid disc centre, padded by one cell all round.

    A map cell can hold a valid centre only if its centre keeps r - cell/sqrt(2) from every blocked
    cell centre (scipy EDT, outside of the map blocked); the padding covers any alignment of the
    search lattice with the map.
    """
    cs = grid.cell_size_m
    padded = np.zeros((grid.rows + 2, grid.cols + 2), dtype=bool)
    padded[1:-1, 1:-1] = ~grid.blocked
    # source: scipy.ndimage.distance_transform_edt (exact Euclidean distance to the nearest 0)
    clearance_m = ndimage.distance_transform_edt(padded)[1:-1, 1:-1] * cs
    rows, cols = np.nonzero(clearance_m >= radius_m - cs / math.sqrt(2.0))
    per = lattice_m / cs
    keys = np.zeros((int(grid.rows / per) + 3, int(grid.cols / per) + 3), dtype=bool)
    keys[(rows / per).astype(int) + 1, (cols / per).astype(int) + 1] = True
    # source: scipy.ndimage.binary_dilation (3 x 3: one lattice cell all round)
    return int(ndimage.binary_dilation(keys, structure=np.ones((3, 3), bool)).sum())


def test_visited_table_bounds_an_exhausted_search(bay, forward_only_bay):
    """A visited table keyed by (lattice cell, heading bin) expands each key at most once, so a search
    that runs out of poses stops after at most keys x heading bins expansions per resolution; a tree
    search without one would grow like 3^depth and never exhaust.
    # common practice (hybrid A* closed set)
    """
    keys = _lattice_keys_with_room(bay.grid, EXAMPLE_VEHICLE.radius_m, FORWARD_ONLY_LATTICE.lattice_cell_m)
    bins = FORWARD_ONLY_LATTICE.heading_bins
    coarse = forward_only_bay.stats["coarse_expansions"]
    fine = forward_only_bay.stats["expansions"] - coarse  # the retry at twice the heading resolution
    assert 0 < coarse <= keys * bins
    assert 0 < fine <= keys * 2 * bins


@pytest.mark.parametrize("vehicle", [EXAMPLE_VEHICLE, RECT], ids=["disc", "rectangle"])
def test_enclosed_goal_is_proven_before_searching(vehicle):
    scenario = build_scenario("enclosed_goal")
    with pytest.raises(NoPath) as caught:
        Planner(vehicle).plan(scenario.grid, scenario.start, scenario.goal)
    assert caught.value.reason == "goal_enclosed"
    assert caught.value.stats["expansions"] == 0
    assert "plan_s" in caught.value.stats


def test_rectangle_enclosure_proof_never_closes_a_door_it_fits_through(geo):
    """A room whose doorway is a hair wider than the rectangle: not enclosed, and planned."""
    width = RECT.width_m + 0.5
    grid = geo.with_boxes(geo.open_grid(30.0, 24.0), [
        (14.0, 0.0, 14.4, 10.0), (14.0, 10.0 + width, 14.4, 24.0),  # a wall with a doorway
    ])
    start, goal = (5.0, 12.0, 0.0), (24.0, 12.0, 0.0)
    path = Planner(RECT).plan(grid, start, goal)
    assert geo.path_problems(grid, RECT, path, start, goal) == []


# ------------------------------------------------------------------ bad poses


@pytest.mark.parametrize(
    ("which", "pose", "pattern"),
    [
        ("start", (-1.0, 8.0, 0.0), r"start \(-1\.00, 8\.00\) is off the map"),
        ("goal", (25.0, 8.0, 0.0), r"goal \(25\.00, 8\.00\) is off the map"),
        ("start", (8.0, -0.5, 0.0), r"start .* off the map"),
        ("goal", (8.0, 16.0, 0.0), r"goal .* off the map"),  # the top edge is outside
        ("goal", (12.5, 8.0, 0.0), r"goal .* on a blocked cell"),
        ("start", (11.4, 8.0, 0.0), r"start .* too close to an obstacle"),
        ("start", (0.5, 8.0, 0.0), r"start .* too close to an obstacle"),  # the outside is blocked
        ("goal", (5.0, 8.0, math.nan), r"goal .* not finite"),
    ],
)
def test_bad_start_or_goal_raises_pose_error(geo, which, pose, pattern):
    grid = geo.with_boxes(geo.open_grid(20.0, 16.0), [(12.0, 6.0, 13.0, 10.0)])
    good_start, good_goal = (4.0, 8.0, 0.0), (17.0, 3.0, 0.0)
    start, goal = (pose, good_goal) if which == "start" else (good_start, pose)
    with pytest.raises(PoseError, match=pattern) as caught:
        Planner(EXAMPLE_VEHICLE).plan(grid, start, goal)
    assert "\n" not in str(caught.value)
    assert caught.value.code == "bad_pose"


# ------------------------------------------------------------------ determinism and budgets


def test_same_input_gives_identical_poses(bay):
    first = Planner(EXAMPLE_VEHICLE).plan(bay.grid, bay.start, bay.goal)
    planner = Planner(EXAMPLE_VEHICLE)
    second = planner.plan(bay.grid, bay.start, bay.goal)
    third = planner.plan(bay.grid, bay.start, bay.goal)  # cached grid and field
    np.testing.assert_array_equal(first.poses, second.poses)
    np.testing.assert_array_equal(first.poses, third.poses)
    assert first.stats["expansions"] == second.stats["expansions"] == third.stats["expansions"]


def test_bay_needs_more_than_one_check_interval(bay):
    # deadlines and cancel requests are looked at every 64 expansions (the budget at every one)
    path = Planner(EXAMPLE_VEHICLE).plan(bay.grid, bay.start, bay.goal)
    assert path.stats["expansions"] > 128


def test_tiny_expansion_budget(bay):
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE, SearchSettings(max_expansions=1)).plan(bay.grid, bay.start, bay.goal)
    assert caught.value.reason == "budget_exhausted"
    assert caught.value.stats["expansions"] == 1


def test_cancel_already_set(bay):
    cancel = threading.Event()
    cancel.set()
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE).plan(bay.grid, bay.start, bay.goal, cancel=cancel)
    assert caught.value.reason == "cancelled"


def test_tiny_deadline(bay):
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE).plan(bay.grid, bay.start, bay.goal, deadline_s=1e-4)
    assert caught.value.reason == "deadline"
    # it stopped early: fewer expansions than the complete search needs
    complete = Planner(EXAMPLE_VEHICLE).plan(bay.grid, bay.start, bay.goal)
    assert caught.value.stats["expansions"] < complete.stats["expansions"]


# ------------------------------------------------------------------ check_path


@pytest.mark.parametrize("vehicle", [EXAMPLE_VEHICLE, RECT], ids=["disc", "rectangle"])
def test_check_path_finds_the_first_colliding_pose(geo, vehicle):
    grid = geo.with_boxes(geo.open_grid(20.0, 16.0), [(9.5, 0.0, 10.5, 10.0)])
    planner = Planner(vehicle)
    path = planner.plan(grid, (4.0, 4.0, 0.0), (16.0, 4.0, 0.0))
    assert planner.check_path(grid, path.poses) is None
    cs = grid.cell_size_m
    if vehicle.has_rectangle:
        # the exact check grows the body by about half a sample step (cs / 2) per side
        allowance_m = cs
    else:
        # cell-centre inflation, the query point's offset in its cell, the between-samples margin
        allowance_m = cs * math.sqrt(2.0) + cs / math.sqrt(2.0) + cs
    for k in (len(path.poses) // 3, (2 * len(path.poses)) // 3):
        x, y = path.poses[k, :2]
        blocked = geo.with_boxes(grid, [(x - 0.15, y - 0.15, x + 0.15, y + 0.15)])
        hit = planner.check_path(blocked, path.poses)
        # brute force with shapely: the first pose whose footprint (or the sweep to it) meets
        # the new box, and the first that comes within the checker's allowance of it
        obstacles = geo.Obstacles(blocked)
        exact = geo.first_exact_collision(obstacles, vehicle, path.poses)
        cautious = geo.first_exact_collision(obstacles, vehicle, path.poses, extra_m=allowance_m)
        assert exact is not None and exact <= k
        assert hit is not None and cautious <= hit <= exact, (cautious, hit, exact)
        # everything before the hit is still clear on the changed grid
        assert hit >= 1 and planner.check_path(blocked, path.poses[:hit]) is None


# ------------------------------------------------------------------ other footprints


@pytest.mark.parametrize(
    ("start", "goal"),
    [((4.0, 4.0, 0.0), (16.0, 4.0, 0.0)), ((4.0, 13.0, 0.0), (16.0, 4.0, math.pi / 2))],
)
def test_rectangle_vehicle_paths_are_valid(geo, start, goal):
    grid = geo.with_boxes(geo.open_grid(20.0, 16.0), [(9.5, 0.0, 10.5, 10.0)])
    path, _ = _plan_and_verify(geo, grid, RECT, start, goal)
    assert path.length_m > math.dist(start[:2], goal[:2])


def test_rectangle_vehicle_through_a_gap_the_circles_close(geo):
    # a 2.2 m door in a wall: the 1.6 m body fits with 0.3 m each side (the checker itself
    # calls every pose of the straight drive clear), its covering circles (r = 0.96 m) do not
    grid = geo.with_boxes(geo.open_grid(24.0, 14.0), [(11.5, 0.0, 12.5, 5.9), (11.5, 8.1, 12.5, 14.0)])
    start, goal = (4.0, 7.0, 0.0), (20.0, 7.0, 0.0)
    xs = np.arange(start[0], goal[0] + 1e-9, 0.25)
    straight = np.column_stack((xs, np.full_like(xs, 7.0), np.zeros_like(xs)))
    # source: shapely: the straight drive through the door is collision-free for the rectangle
    assert geo.first_exact_collision(geo.Obstacles(grid), RECT, straight) is None
    assert Planner(RECT).check_path(grid, np.column_stack((straight, np.ones(len(xs))))) is None
    path, _ = _plan_and_verify(geo, grid, RECT, start, goal)
    assert path.poses[:, 1].min() > 5.9 and path.poses[:, 1].max() < 8.1


def test_turn_in_place_vehicle_rotates_on_the_spot(geo):
    grid = geo.open_grid(20.0, 20.0)
    start, goal = (10.0, 10.0, 0.0), (10.0, 14.0, math.pi / 2)
    path, document = _plan_and_verify(geo, grid, SPINNER, start, goal, allow_reverse=False)
    assert geo.turns_on_spot(document)
    # straight there after turning: no longer than the distance plus slack
    assert path.length_m == pytest.approx(4.0, abs=0.05)


def test_turn_in_place_vehicle_in_a_tight_room(geo):
    # a 3 m room: too small to turn with a 3.46 m radius, enough to spin a 0.5 m disc
    grid = geo.with_boxes(geo.open_grid(10.0, 10.0), [(0.0, 0.0, 10.0, 3.5), (0.0, 6.5, 10.0, 10.0), (0.0, 0.0, 3.5, 10.0), (6.5, 0.0, 10.0, 10.0)])
    start, goal = (4.5, 5.0, 0.0), (5.5, 5.0, math.pi)
    path, document = _plan_and_verify(geo, grid, SPINNER, start, goal)
    assert geo.turns_on_spot(document, math.radians(90.0))
