"""What a long-lived caller relies on: cached grids refreshed locally, cancel from another
thread, shortcuts that keep the gears, and near-optimal forward-only paths."""

from __future__ import annotations

import math
import threading

import numpy as np
import pytest

from veer.maps import OCCUPIED
from veer.planning import EXAMPLE_VEHICLE, NoPath, Planner, SearchSettings, dubins_length
from veer.tools.scenarios import build_scenario

RADIUS_M = EXAMPLE_VEHICLE.min_turn_radius_m
LENGTH_ONLY = SearchSettings(
    reverse_cost_factor=1.0, gear_change_cost_m=0.0, steer_cost_factor=0.0,
    steer_change_cost_m=0.0, clearance_cost_factor=0.0, heuristic_weight=1.0,
)


@pytest.fixture(scope="module")
def warehouse():
    return build_scenario("warehouse")


def test_replan_on_a_locally_changed_grid_matches_a_fresh_planner(warehouse, geo):
    planner = Planner(EXAMPLE_VEHICLE)
    planner.plan(warehouse.grid, warehouse.start, warehouse.goal)  # caches the first grid
    classes = warehouse.grid.classes.copy()
    # a pallet dropped in the cross aisle, off the first path or on it
    row, col = warehouse.grid.world_to_cell(37.0, 30.0)
    classes[row - 8 : row + 8, col - 8 : col + 8] = OCCUPIED
    changed = warehouse.grid.with_classes(classes)
    again = planner.plan(changed, warehouse.start, warehouse.goal)
    fresh = Planner(EXAMPLE_VEHICLE).plan(changed, warehouse.start, warehouse.goal)
    np.testing.assert_array_equal(again.poses, fresh.poses)
    assert geo.path_problems(changed, EXAMPLE_VEHICLE, again.to_document(), warehouse.start, warehouse.goal) == []


def test_check_path_reports_a_new_obstacle_on_the_path(warehouse):
    planner = Planner(EXAMPLE_VEHICLE)
    path = planner.plan(warehouse.grid, warehouse.start, warehouse.goal)
    middle = path.poses[len(path.poses) // 2]
    classes = warehouse.grid.classes.copy()
    row, col = warehouse.grid.world_to_cell(middle[0], middle[1])
    classes[row - 2 : row + 3, col - 2 : col + 3] = OCCUPIED
    hit = planner.check_path(warehouse.grid.with_classes(classes), path.poses)
    assert hit is not None and hit <= len(path.poses) // 2
    # the poses before the reported one are still clear of the new box (disc of 1 m)
    assert np.hypot(*(path.poses[hit - 1, :2] - middle[:2])) > EXAMPLE_VEHICLE.radius_m


def test_cancel_from_another_thread_stops_a_long_search(warehouse):
    # plain mode expands some 10^5 nodes here: seconds of work, far more than the 0.2 s before the cancel
    settings = SearchSettings(max_expansions=5_000_000, max_time_s=120.0).plain()
    cancel = threading.Event()
    timer = threading.Timer(0.2, cancel.set)
    timer.start()
    try:
        with pytest.raises(NoPath) as caught:
            Planner(EXAMPLE_VEHICLE, settings).plan(warehouse.grid, warehouse.start, warehouse.goal, cancel=cancel)
    finally:
        timer.cancel()
        timer.join(timeout=10.0)
    assert caught.value.reason == "cancelled"
    assert cancel.is_set()  # the search ended because of the event, not before it
    assert 0 < caught.value.stats["expansions"] < settings.max_expansions


@pytest.mark.parametrize("name", ["open_yard", "warehouse", "parking_bay"])
def test_shortcuts_keep_gears_and_never_lengthen_much(name, geo):
    scenario = build_scenario(name)
    smooth = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    rough = Planner(EXAMPLE_VEHICLE, SearchSettings(smooth=False)).plan(scenario.grid, scenario.start, scenario.goal)
    assert smooth.gear_changes == rough.gear_changes
    assert smooth.length_m <= rough.length_m * 1.02
    assert geo.path_problems(scenario.grid, EXAMPLE_VEHICLE, smooth.to_document(), scenario.start, scenario.goal) == []


@pytest.mark.parametrize(
    "goal",
    [(16.0, 17.0, 0.0), (18.0, 12.0, -math.pi / 2), (12.0, 22.0, math.pi), (20.0, 15.0, math.pi / 3)],
)
def test_forward_only_comes_close_to_dubins_in_open_space(goal, geo):
    grid = geo.open_grid(30.0, 30.0)
    start = (10.0, 15.0, 0.0)
    path = Planner(EXAMPLE_VEHICLE, LENGTH_ONLY).plan(grid, start, goal, allow_reverse=False)
    # source: Dubins 1957, shortest forward-only path (via dubins_length)
    optimum = dubins_length(start, goal, RADIUS_M)
    assert path.length_m <= optimum * 1.05 + 0.5
    assert path.length_m >= optimum * (1 - 1e-3)


@pytest.mark.parametrize("name", ["open_yard", "warehouse", "parking_bay", "s_corridor"])
def test_output_headings_are_wrapped(name):
    scenario = build_scenario(name)
    path = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    headings = path.poses[:, 2]
    assert (headings >= -math.pi).all() and (headings < math.pi).all()


def test_unwrapped_headings_plan_like_wrapped_ones(geo):
    scenario = build_scenario("parking_bay")
    x, y, h = scenario.start
    gx, gy, gh = scenario.goal
    wrapped = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    unwrapped = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, (x, y, h + 4 * math.pi), (gx, gy, gh - 2 * math.pi))
    np.testing.assert_allclose(unwrapped.poses, wrapped.poses, atol=1e-9)


def test_any_finite_heading_is_an_angle(geo):
    # 1e300 rad is a definite (if meaningless) angle: the planner takes it as some heading in
    # [-pi, pi), plans a valid path from there, and plans the same path from that heading itself
    scenario = build_scenario("parking_bay")
    x, y, _ = scenario.start
    huge = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, (x, y, 1e300), scenario.goal)
    heading = float(huge.poses[0, 2])
    assert -math.pi <= heading < math.pi
    geo.assert_valid_path(scenario.grid, EXAMPLE_VEHICLE, huge, (x, y, heading), scenario.goal)
    again = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, (x, y, heading), scenario.goal)
    np.testing.assert_allclose(again.poses, huge.poses, atol=1e-9)
