"""The path JSON document: its keys and types, and every rule of docs/files.md checked on real plans.

The rules are checked by the suite's shapely verifier, tests/verify.py (``geo.path_problems``); the
first tests here show that the verifier itself catches each kind of broken path.
"""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
import shapely

from veer.planning import EXAMPLE_VEHICLE, NO_PATH_REASONS, NoPath, Planner, Vehicle, no_path_document
from veer.tools.scenarios import SCENARIO_NAMES, build_scenario

RECT = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)


@pytest.fixture(scope="module")
def bay_plan():
    scenario = build_scenario("parking_bay")
    path = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    return scenario, path


# ------------------------------------------------------------------ the verifier can fail


def test_verifier_accepts_the_bay_plan(bay_plan, geo):
    scenario, path = bay_plan
    assert geo.path_problems(scenario.grid, EXAMPLE_VEHICLE, path.to_document(), scenario.start, scenario.goal) == []


def _broken(document, edit):
    changed = copy.deepcopy(document)
    edit(changed)
    return changed


@pytest.mark.parametrize(
    ("edit", "complaint"),
    [
        (lambda d: d["poses"][0].__setitem__(0, d["poses"][0][0] + 0.05), "not the start"),
        (lambda d: d["poses"].pop(), "from the goal"),
        (lambda d: d["poses"].pop(40), "apart"),
        (lambda d: d["poses"][40].__setitem__(3, -d["poses"][40][3]), "gear"),
        (lambda d: d["poses"][30].__setitem__(3, 0), "gears must be"),
        (lambda d: d.__setitem__("reverse_m", d["reverse_m"] + 0.5), "reverse_m"),
        (lambda d: d.__setitem__("length_m", d["length_m"] - 0.5), "length_m"),
        (lambda d: d.__setitem__("gear_changes", d["gear_changes"] + 1), "gear_changes"),
        (lambda d: d["poses"][20].__setitem__(2, d["poses"][20][2] + 0.2), "curvature"),
    ],
    ids=["start", "goal", "gap", "gear", "gear_value", "reverse_m", "length_m", "gear_changes", "curvature"],
)
def test_verifier_catches_broken_documents(bay_plan, geo, edit, complaint):
    scenario, path = bay_plan
    document = _broken(path.to_document(), edit)
    problems = geo.path_problems(scenario.grid, EXAMPLE_VEHICLE, document, scenario.start, scenario.goal)
    assert any(complaint in p for p in problems), problems


def _straight_document(xs, y_m):
    poses = [[float(x), y_m, 0.0, 1] for x in xs]
    return {"status": "found", "reason": None, "poses": poses, "gear_changes": 0, "reverse_m": 0.0,
            "length_m": float(xs[-1] - xs[0]), "stats": {}}


def test_verifier_catches_a_collision_between_poses(geo):
    # one blocked square [5.0, 5.1] x [4.0, 4.1], 0.998 m above a line of poses 0.25 m apart
    # that straddle it: each pose keeps 1.0008 m from it, the sweep between two comes to 0.998 m
    grid = geo.with_boxes(geo.open_grid(10.0, 6.0), [(5.01, 4.01, 5.09, 4.09)])
    xs = 2.175 + 0.25 * np.arange(24)  # ..., 4.925, 5.175, ...
    document = _straight_document(xs, 3.002)
    poses = np.array(document["poses"], dtype=float)
    obstacles = geo.Obstacles(grid)
    # source: shapely distance: the poses alone are clear, the segment between them is not
    assert obstacles.distance_m(shapely.points(poses[:, :2])).min() > EXAMPLE_VEHICLE.radius_m
    problems = geo.path_problems(grid, EXAMPLE_VEHICLE, document, poses[0, :3], poses[-1, :3], obstacles)
    assert any("collides" in p for p in problems), problems


def test_verifier_catches_a_rectangle_overhang(geo):
    # a box 1.5-1.8 m ahead of the last pose: clear of the 1 m disc, not of the 3.2 m body
    grid = geo.with_boxes(geo.open_grid(12.0, 8.0), [(10.51, 3.51, 10.79, 4.49)])
    document = _straight_document(np.arange(2.0, 9.0001, 0.25), 4.0)
    start, goal = document["poses"][0][:3], document["poses"][-1][:3]
    assert geo.path_problems(grid, EXAMPLE_VEHICLE, document, start, goal) == []
    problems = geo.path_problems(grid, RECT, document, start, goal)
    assert any("collides" in p for p in problems), problems


# ------------------------------------------------------------------ document keys and types


def _check_found_document(document: dict) -> None:
    # docs/files.md, "Path JSON"
    for key in ("status", "reason", "length_m", "reverse_m", "gear_changes", "poses", "stats"):
        assert key in document, key
    assert document["status"] == "found"
    assert document["reason"] is None
    assert type(document["length_m"]) is float and type(document["reverse_m"]) is float
    assert type(document["gear_changes"]) is int
    assert isinstance(document["poses"], list) and document["poses"]
    for pose in document["poses"]:
        assert isinstance(pose, list) and len(pose) == 4
        assert all(type(v) is float for v in pose[:3])
        assert type(pose[3]) is int and pose[3] in (1, -1)
    assert type(document["stats"]["expansions"]) is int
    assert type(document["stats"]["plan_s"]) is float and document["stats"]["plan_s"] >= 0.0
    # plain JSON: no numpy scalars, no NaN or infinity
    assert json.loads(json.dumps(document, allow_nan=False)) == document


def test_found_document_has_the_documented_keys_and_types(bay_plan):
    _, path = bay_plan
    document = path.to_document()
    _check_found_document(document)
    assert document["reverse_m"] > 0.0 and document["gear_changes"] >= 1


def test_found_document_of_a_turn_in_place_path_is_plain_json(geo):
    # a rotation on the spot has infinite curvature; the document must still be strict JSON
    vehicle = Vehicle(wheelbase_m=0.5, max_steer_deg=30.0, radius_m=0.5, turns_in_place=True)
    path = Planner(vehicle).plan(geo.open_grid(10.0, 10.0), (5.0, 5.0, 0.0), (5.0, 5.0, math.pi / 2))
    _check_found_document(path.to_document())


def test_no_path_document_has_the_documented_keys_and_types():
    scenario = build_scenario("enclosed_goal")
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    error = caught.value
    document = no_path_document(error.reason, error.detail, error.stats)
    for key in ("status", "reason", "length_m", "reverse_m", "gear_changes", "poses", "stats"):
        assert key in document, key
    assert document["status"] == "no_path"
    assert document["reason"] == "goal_enclosed" and document["reason"] in NO_PATH_REASONS
    assert document["poses"] == []
    assert type(document["stats"]["expansions"]) is int
    assert type(document["stats"]["plan_s"]) is float
    assert json.loads(json.dumps(document, allow_nan=False)) == document


# ------------------------------------------------------------------ the built-in scenarios

PATH_SCENARIOS = [name for name in SCENARIO_NAMES if name != "enclosed_goal"]


@pytest.mark.parametrize("name", PATH_SCENARIOS)
def test_scenario_paths_keep_every_path_rule(name, geo):
    scenario = build_scenario(name)
    assert scenario.expect_path
    path = Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal, allow_reverse=scenario.reverse)
    document = path.to_document()
    _check_found_document(document)
    assert geo.path_problems(scenario.grid, EXAMPLE_VEHICLE, document, scenario.start, scenario.goal) == []
    # never shorter than the straight line between the end poses
    assert document["length_m"] >= math.dist(scenario.start[:2], document["poses"][-1][:2]) - 1e-6


def test_enclosed_scenario_has_no_path():
    scenario = build_scenario("enclosed_goal")
    assert not scenario.expect_path
    with pytest.raises(NoPath) as caught:
        Planner(EXAMPLE_VEHICLE).plan(scenario.grid, scenario.start, scenario.goal)
    assert caught.value.reason == "goal_enclosed"
