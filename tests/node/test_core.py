"""The replan policy without sockets: NodeCore fed inputs by hand, jobs run inline.

Every path that comes out is checked with the shapely verifier (tests/verify.py) against
the grid it claims; the policy is checked by what is published (or not) and by where a
new path starts.
"""

from __future__ import annotations

import math
from collections import deque

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import verify
from veer.node.codec import ControlRequest, GridInput, PoseInput, WireError
from veer.node.config import NodeConfig
from veer.node.core import CancelJob, NodeCore, Publish, Reply, StartJob
from veer.node.jobs import changes_are_clear_of, clear_reach_m, run_job
from veer.planning import EXAMPLE_VEHICLE, Planner


class Driver:
    """Feeds a NodeCore and runs its jobs inline (or holds them, for supersede tests)."""

    def __init__(self, world, config: NodeConfig | None = None, run_jobs: bool = True):
        self.world = world
        self.core = NodeCore(config or world.node_config())
        self.planner = Planner(EXAMPLE_VEHICLE)
        self.now_s = 0.0
        self.run_jobs = run_jobs
        self.held: deque = deque()
        self.cancelled: set[int] = set()
        self.paths, self.events, self.statuses, self.replies, self.started = [], [], [], [], []
        self.grids = {}

    def feed(self, kind, message, dt_s: float = 0.01):
        self.now_s += dt_s
        self._apply(self.core.on_input(kind, message, self.now_s))

    def _apply(self, actions):
        for action in actions:
            if isinstance(action, Publish):
                {"path": self.paths, "event": self.events, "status": self.statuses}[action.topic].append(action.body)
            elif isinstance(action, Reply):
                self.replies.append(action.body)
            elif isinstance(action, StartJob):
                self.started.append(action.job)
                self.held.append(action.job)
            elif isinstance(action, CancelJob):
                self.cancelled.add(action.job_id)
        if self.run_jobs:
            self.finish_jobs()

    def finish_jobs(self):
        while self.held:
            job = self.held.popleft()
            result = run_job(self.planner, job)
            if job.job_id in self.cancelled:
                result.cancelled = True
            self.now_s += 0.01
            self._apply(self.core.on_input("job_done", result, self.now_s))

    def grid(self, map_id, classes):
        grid = self.world.as_grid(classes)
        self.grids[map_id] = grid
        self.feed("grid", GridInput(map_id, {}, classes.size, grid))
        return grid

    def pose(self, x_m, y_m, heading_rad, t_s=None):
        self.feed("pose", PoseInput(x_m, y_m, heading_rad, self.now_s if t_s is None else t_s))

    def control(self, op, **fields):
        self.feed("control", ControlRequest(op, fields))
        return self.replies[-1] if self.replies else None

    def goal(self, x_m, y_m, heading_rad, reverse=None):
        return self.control("goal", x_m=x_m, y_m=y_m, heading_rad=heading_rad, reverse=reverse)


def check_path(message, grid, start, goal):
    # source: shapely geometry (tests/verify.py) against the grid's blocked squares
    verify.assert_valid_path(grid, EXAMPLE_VEHICLE, message, start, goal)


WALL = (20.0, 6.0, 20.3, 24.0)  # across the straight line from START to GOAL, gaps above and below


@pytest.fixture
def driver(world):
    return Driver(world)


def started(driver, world):
    grid = driver.grid("m1", world.free_classes())
    driver.pose(*world.START)
    reply = driver.goal(*world.GOAL)
    assert reply == {"ok": True, "goal_id": 1}
    assert len(driver.paths) == 1
    return grid


def test_goal_grid_and_pose_give_one_verified_path(driver, world):
    grid = started(driver, world)
    path = driver.paths[0]
    assert (path["seq"], path["map_id"], path["goal_id"], path["trigger"]) == (1, "m1", 1, "goal")
    assert path["starts_ahead"] is False
    check_path(path, grid, world.START, world.GOAL)


def test_goal_waits_for_grid_and_pose(driver, world):
    driver.goal(*world.GOAL)
    assert driver.started == [] and driver.core.state() == "waiting"
    driver.grid("m1", world.free_classes())
    assert driver.started == []
    driver.pose(*world.START)
    assert len(driver.paths) == 1 and driver.paths[0]["status"] == "found"


def test_far_change_keeps_the_path_and_says_so(driver, world):
    started(driver, world)
    driver.grid("far", world.with_boxes(world.free_classes(), [(1.0, 1.0, 2.0, 2.0)]))
    assert len(driver.paths) == 1  # not republished
    assert driver.events[-1]["code"] == "path_kept" and driver.events[-1]["map_id"] == "far"
    assert driver.core.status(driver.now_s)["path_map_id"] == "m1"


def test_wall_across_the_path_gives_a_new_path_with_higher_seq_and_the_new_map(driver, world):
    started(driver, world)
    grid = driver.grid("wall", world.with_boxes(world.free_classes(), [WALL]))
    assert len(driver.paths) == 2
    new = driver.paths[1]
    assert new["seq"] > driver.paths[0]["seq"] and new["map_id"] == "wall" and new["trigger"] == "blocked"
    check_path(new, grid, world.START, world.GOAL)


def test_same_content_under_a_new_map_id_is_not_rechecked(driver, world):
    started(driver, world)
    driver.grid("same", world.free_classes())
    assert len(driver.paths) == 1 and len(driver.started) == 1
    assert driver.core.status(driver.now_s)["map_id"] == "same"


def test_robot_off_the_path_replans_from_its_pose(driver, world):
    grid = started(driver, world)
    off = (10.0, 19.0, 0.0)  # 4 m beside the straight path
    driver.pose(*off)
    assert len(driver.paths) == 2 and driver.paths[1]["trigger"] == "off_path"
    check_path(driver.paths[1], grid, off, world.GOAL)


def test_robot_turned_away_from_the_path_replans(driver, world):
    started(driver, world)
    driver.pose(6.0, 15.0, math.radians(60.0))  # on the path, heading 60 deg off (tolerance 30)
    assert len(driver.paths) == 2 and driver.paths[1]["trigger"] == "off_path"


def test_robot_following_the_path_does_not_replan(driver, world):
    started(driver, world)
    for i in range(40):
        driver.pose(5.0 + 0.5 * i, 15.0 + 0.1 * math.sin(i), 0.02, t_s=0.1 * i)
    assert len(driver.paths) == 1 and len(driver.started) == 1


def test_moving_robot_replans_from_a_pose_ahead_on_its_path(driver, world):
    started(driver, world)
    old = np.array(driver.paths[0]["poses"])
    for i in range(10):  # 1.5 m/s, poses at 20 Hz
        driver.pose(5.0 + 0.075 * i, 15.0, 0.0, t_s=0.05 * i)
    robot_x = 5.0 + 0.075 * 9
    grid = driver.grid("wall", world.with_boxes(world.free_classes(), [(robot_x + 10.0, 6.0, robot_x + 10.3, 24.0)]))
    new = driver.paths[-1]
    assert new["starts_ahead"] is True and new["seq"] == 2
    first = np.array(new["poses"][0])
    # the new start is a pose of the old path, start_ahead_m (1 m) or a step more ahead of the robot
    assert np.min(np.hypot(old[:, 0] - first[0], old[:, 1] - first[1])) < 1e-9
    assert 1.0 <= first[0] - robot_x <= 1.0 + 0.25 + 1e-9
    check_path(new, grid, tuple(first[:3]), world.GOAL)


def test_new_goal_cancels_a_plan_in_progress(world):
    driver = Driver(world, run_jobs=False)
    driver.grid("m1", world.free_classes())
    driver.pose(*world.START)
    driver.goal(*world.GOAL)
    first = driver.started[-1]
    driver.goal(30.0, 20.0, 0.0)
    assert first.job_id in driver.cancelled
    assert len(driver.started) == 1  # one worker: the next job waits for the cancelled one
    driver.run_jobs = True
    driver.finish_jobs()
    assert [p["goal_id"] for p in driver.paths] == [2]
    assert driver.started[-1].goal == (30.0, 20.0, 0.0)


def test_a_stream_of_grids_cancels_a_plan_at_most_max_supersedes_times(world):
    driver = Driver(world, world.node_config(max_supersedes=2), run_jobs=False)
    driver.grid("m0", world.free_classes())
    driver.pose(*world.START)
    driver.goal(*world.GOAL)
    job = driver.started[-1]
    for i in range(1, 6):
        driver.grid(f"m{i}", world.with_boxes(world.free_classes(), [(1.0, 1.0, 1.0 + 0.1 * i, 2.0)]))
    assert driver.cancelled == {job.job_id}  # one cancel per job...
    for _ in range(3):  # ...and two in a row at most
        driver.held.popleft()
        result = run_job(driver.planner, driver.started[-1])
        result.cancelled = driver.started[-1].job_id in driver.cancelled
        driver.feed("job_done", result)
        driver.grid(f"n{len(driver.started)}", world.with_boxes(world.free_classes(), [(1.0, 3.0, 1.0 + 0.01 * len(driver.started), 4.0)]))
    assert len(driver.cancelled) == 2
    assert len(driver.paths) >= 1 and driver.paths[0]["status"] == "found"


def test_no_path_is_published_and_retried_when_the_grid_changes(driver, world):
    enclosed = world.with_boxes(world.free_classes(), [(30.0, 10.0, 40.0, 10.3), (30.0, 19.7, 40.0, 20.0),
                                                       (30.0, 10.0, 30.3, 20.0)])
    driver.grid("closed", enclosed)
    driver.pose(*world.START)
    driver.goal(*world.GOAL)
    assert driver.paths[-1]["status"] == "no_path" and driver.paths[-1]["reason"] == "goal_enclosed"
    assert driver.core.state() == "no_path"
    driver.pose(5.1, 15.0, 0.0)  # a small move is no reason to try again
    assert len(driver.paths) == 1
    grid = driver.grid("open", world.free_classes())
    assert driver.paths[-1]["status"] == "found" and driver.paths[-1]["trigger"] == "retry_grid"
    check_path(driver.paths[-1], grid, (5.1, 15.0, 0.0), world.GOAL)


def test_no_path_is_retried_when_the_robot_moved(driver, world):
    driver.grid("m1", world.with_boxes(world.free_classes(), [(3.0, 13.0, 3.5, 17.0)]))
    driver.pose(3.2, 15.0, 0.0)  # on the box: the start is blocked
    driver.goal(*world.GOAL)
    assert driver.paths[-1]["status"] == "no_path" and driver.paths[-1]["reason"] == "bad_pose"
    driver.pose(*world.START)
    assert driver.paths[-1]["status"] == "found" and driver.paths[-1]["trigger"] == "retry_pose"


def test_plan_request_answers_and_publishes_nothing(driver, world):
    assert driver.control("plan", start=world.START, goal=world.GOAL, reverse=None)["code"] == "no_grid"
    grid = driver.grid("m1", world.free_classes())
    reply = driver.control("plan", start=world.START, goal=(30.0, 20.0, 1.0), reverse=True)
    assert reply["ok"] is True and reply["map_id"] == "m1" and driver.paths == []
    check_path(reply["path"], grid, world.START, (30.0, 20.0, 1.0))
    bad = driver.control("plan", start=(-5.0, 15.0, 0.0), goal=world.GOAL, reverse=None)
    assert bad["ok"] is False and bad["code"] == "bad_pose"


def test_cancel_drops_the_goal(driver, world):
    started(driver, world)
    assert driver.control("cancel") == {"ok": True, "goal_id": 1}
    assert driver.events[-1]["code"] == "goal_cancelled" and driver.core.state() == "idle"
    driver.grid("wall", world.with_boxes(world.free_classes(), [WALL]))
    assert len(driver.started) == 1
    assert driver.control("cancel") == {"ok": True, "goal_id": None}


def test_status_comes_at_the_configured_interval(driver, world):
    for _ in range(100):
        driver.feed("tick", None, dt_s=0.05)  # 5 s of ticks
    # interval 0.2 s: one status per 4 ticks (the first at once)
    assert 24 <= len(driver.statuses) <= 26
    body = driver.statuses[-1]
    assert {"state", "map_id", "goal_id", "path_seq", "last_plan_s"} <= set(body)  # docs/protocol.md, "status"


def test_rejected_inputs_become_events_and_keep_the_state(driver, world):
    started(driver, world)
    driver.feed("rejected", ("grid", WireError("bad_field", "grid message: rows must be an integer >= 1")))
    assert driver.events[-1] == {"code": "bad_field", "detail": "grid message: rows must be an integer >= 1",
                                 "topic": "grid"}
    status = driver.core.status(driver.now_s)
    assert status["state"] == "following" and status["counters"]["rejected"] == 1


def test_control_errors_are_answered(driver):
    driver.feed("control", WireError("unknown_op", "unknown op 'fly'"))
    assert driver.replies[-1] == {"ok": False, "error": "unknown op 'fly'", "code": "unknown_op"}


def test_the_same_inputs_give_the_same_outputs(world):
    """Time is an input: a replay of the same sequence publishes the same paths."""
    runs = []
    for _ in range(2):
        driver = Driver(world)
        started(driver, world)
        for i in range(10):
            driver.pose(5.0 + 0.075 * i, 15.0, 0.0, t_s=0.05 * i)
        driver.grid("wall", world.with_boxes(world.free_classes(), [WALL]))
        driver.pose(10.0, 19.0, 0.0, t_s=1.0)
        runs.append([(p["seq"], p["trigger"], p["map_id"], p["starts_ahead"], p["poses"]) for p in driver.paths])
    assert runs[0] == runs[1] and len(runs[0]) == 3


def test_a_change_beyond_the_footprints_reach_is_kept_without_the_planner(driver, world):
    started(driver, world)
    driver.grid("far", world.with_boxes(world.free_classes(), [(10.0, 17.5, 11.0, 18.0)]))  # 2.5 m beside the path
    assert driver.events[-1]["code"] == "path_kept" and driver.events[-1]["checked_by"] == "distance"
    # 1.2 m beside the path: within the distance test's reach, clear for the planner's check
    grid = driver.grid("near", world.with_boxes(world.free_classes(), [(10.0, 16.2, 11.0, 16.5)]))
    assert driver.events[-1]["code"] == "path_kept" and driver.events[-1]["checked_by"] == "planner"
    assert len(driver.paths) == 1
    check_path(driver.paths[0], grid, world.START, world.GOAL)


@settings(max_examples=40, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(boxes=st.lists(st.tuples(st.floats(0.0, 39.0), st.floats(0.0, 29.0), st.floats(0.05, 3.0),
                                st.floats(0.05, 3.0)), min_size=1, max_size=4))
def test_the_distance_test_only_keeps_paths_the_footprint_cannot_touch(world, boxes):
    """Whenever changes_are_clear_of says yes, shapely finds every changed square beyond the disc."""
    poses = np.column_stack((np.arange(5.0, 35.01, 0.25), np.full(121, 15.0), np.zeros(121), np.ones(121)))
    previous = world.as_grid(world.free_classes())
    grid = world.as_grid(world.with_boxes(world.free_classes(), [(x, y, x + w, y + h) for x, y, w, h in boxes]))
    planner = Planner(EXAMPLE_VEHICLE)
    if not changes_are_clear_of(previous, grid, poses, clear_reach_m(planner, grid, poses)):
        return
    # source: shapely (GEOS) distance between the path polyline and the changed cells' squares
    obstacles = verify.Obstacles.from_mask(grid.blocked, world.CELL_M)
    line = shapely.LineString(poses[:, :2])
    inside = [g for g in obstacles.geoms if g.bounds[0] >= 0 and g.bounds[2] <= world.WIDTH_M
              and g.bounds[1] >= 0 and g.bounds[3] <= world.HEIGHT_M]
    assert all(line.distance(g) > EXAMPLE_VEHICLE.radius_m for g in inside)


def test_a_robot_whose_poses_stopped_coming_does_not_count_as_moving(driver, world):
    started(driver, world)
    for i in range(10):  # 1.5 m/s ...
        driver.pose(5.0 + 0.075 * i, 15.0, 0.0, t_s=0.05 * i)
    driver.feed("tick", None, dt_s=2.0)  # ... then silence for 2 s
    driver.grid("wall", world.with_boxes(world.free_classes(), [(16.0, 6.0, 16.3, 24.0)]))
    assert driver.paths[-1]["starts_ahead"] is False and driver.paths[-1]["poses"][0][0] == pytest.approx(5.675)
