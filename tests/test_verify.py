"""The suite's path verifier (tests/verify.py) can fail: each rule is broken once on purpose.

tests/planning/test_path_validity.py breaks a real plan's document field by field; here the
geometry: leaving the map, a rectangle side clipping a block, turning on the
spot, a map read as a plain mask, and documents read back from rounded JSON.
"""

from __future__ import annotations

import json
import math
from types import SimpleNamespace

import numpy as np
import pytest
import verify

from veer.planning import EXAMPLE_VEHICLE, Planner, Vehicle

RECT = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)


def _document(poses) -> dict:
    """A found document whose metrics add up from ``poses`` (N, 4)."""
    poses = np.asarray(poses, dtype=float)
    steps = np.hypot(*np.diff(poses[:, :2], axis=0).T)
    return {
        "status": "found", "reason": None, "poses": poses.tolist(),
        "length_m": float(steps.sum()), "reverse_m": float(steps[poses[1:, 3] < 0].sum()),
        "gear_changes": verify.gear_flips(steps, poses[1:, 3]), "stats": {},
    }


def _straight(x0, x1, y, heading=0.0, gear=1.0, step=0.25):
    xs = np.arange(x0, x1 + 1e-9, step)
    return np.column_stack((xs, np.full_like(xs, y), np.full_like(xs, heading), np.full_like(xs, gear)))


def test_a_clear_straight_passes():
    grid = verify.open_grid(10.0, 6.0)
    poses = _straight(2.0, 8.0, 3.0)
    assert verify.path_problems(grid, EXAMPLE_VEHICLE, _document(poses), (2.0, 3.0, 0.0), (8.0, 3.0, 0.0)) == []


def test_leaving_the_map_is_a_collision():
    # the outside of the map is blocked (docs/files.md, "Map image"): a 1 m disc 0.9 m from the edge
    grid = verify.open_grid(10.0, 6.0)
    poses = _straight(2.0, 8.0, 0.9)
    problems = verify.path_problems(grid, EXAMPLE_VEHICLE, _document(poses), (2.0, 0.9, 0.0), (8.0, 0.9, 0.0))
    assert any("collides at or just before pose 0" in p for p in problems), problems


def test_a_rectangle_side_clipping_a_block():
    # a 0.1 m block [5.0, 5.1] x [3.8, 3.9] beside the path: the 1.6 m wide body driving at
    # y = 2.99 passes 1 cm below it, at y = 3.01 its side overlaps the block by 1 cm
    grid = verify.with_boxes(verify.open_grid(12.0, 6.0), [(5.01, 3.81, 5.09, 3.89)])
    below = _straight(2.0, 9.0, 2.99)
    assert verify.path_problems(grid, RECT, _document(below), (2.0, 2.99, 0.0), (9.0, 2.99, 0.0)) == []
    into = _straight(2.0, 9.0, 3.01)
    problems = verify.path_problems(grid, RECT, _document(into), (2.0, 3.01, 0.0), (9.0, 3.01, 0.0))
    assert any("collides" in p for p in problems), problems


def test_turning_on_the_spot_needs_a_base_that_can():
    # turn 0.5 rad without moving, then drive 0.25 m along the new heading
    poses = np.array([[3.0, 3.0, 0.0, 1.0], [3.0, 3.0, 0.5, 1.0], [3.0 + 0.25 * math.cos(0.5), 3.0 + 0.25 * math.sin(0.5), 0.5, 1.0]])
    grid = verify.open_grid(8.0, 6.0)
    start, goal = (3.0, 3.0, 0.0), tuple(poses[-1, :3])
    problems = verify.path_problems(grid, EXAMPLE_VEHICLE, _document(poses), start, goal)
    assert any("turns on the spot" in p for p in problems), problems
    spinner = SimpleNamespace(wheelbase_m=0.5, max_steer_deg=30.0, radius_m=0.5, length_m=None, turns_in_place=True)
    assert verify.path_problems(grid, spinner, _document(poses), start, goal) == []
    assert verify.turns_on_spot(_document(poses), math.radians(25.0))


def test_curvature_is_measured_against_tan_steer_over_wheelbase():
    # source: LaValle, Planning Algorithms, 2006, section 13.1.2.1: 1 / r = tan(30 deg) / 2.0 m
    assert verify.max_curvature_per_m(EXAMPLE_VEHICLE) == pytest.approx(math.tan(math.radians(30.0)) / 2.0)
    # an arc 2 % tighter than the car can turn
    radius_m = EXAMPLE_VEHICLE.min_turn_radius_m / 1.02
    angles = np.arange(0.0, 1.0, 0.2 / radius_m)
    poses = np.column_stack((5 + radius_m * np.sin(angles), 2 + radius_m * (1 - np.cos(angles)), angles, np.ones_like(angles)))
    grid = verify.open_grid(12.0, 8.0)
    problems = verify.path_problems(grid, EXAMPLE_VEHICLE, _document(poses), (5.0, 2.0, 0.0), tuple(poses[-1, :3]))
    assert any("curvature" in p for p in problems), problems


def test_a_mask_gives_the_same_obstacles_as_its_grid():
    grid = verify.with_boxes(verify.open_grid(10.0, 6.0), [(4.0, 0.0, 5.0, 3.5)])
    grid = type(grid)(grid.classes, 0.1, (-3.0, 7.5))
    from_grid = verify.Obstacles(grid)
    from_mask = verify.Obstacles.from_mask(grid.blocked, 0.1, (-3.0, 7.5))
    # source: shapely equals (same point set)
    assert from_grid.union.equals(from_mask.union)


def test_a_planned_path_and_its_rounded_json_both_pass():
    grid = verify.with_boxes(verify.open_grid(20.0, 16.0), [(9.5, 0.0, 10.5, 10.0)])
    start, goal = (4.0, 4.0, 0.0), (16.0, 4.0, 0.0)
    path = Planner(EXAMPLE_VEHICLE).plan(grid, start, goal)
    verify.assert_valid_path(grid, EXAMPLE_VEHICLE, path, start, goal)
    # veer plan writes x, y to 0.1 mm and headings to 1e-5 rad
    rounded = json.loads(json.dumps(path.to_document()))
    rounded["poses"] = [[round(x, 4), round(y, 4), round(h, 5), g] for x, y, h, g in rounded["poses"]]
    rounded["poses"][0][0] += 3e-5
    assert any("not the start" in p for p in verify.path_problems(grid, EXAMPLE_VEHICLE, rounded, start, goal))
    verify.assert_valid_path(grid, EXAMPLE_VEHICLE, rounded, start, goal, position_tol_m=1e-4, heading_tol_rad=1e-5)
