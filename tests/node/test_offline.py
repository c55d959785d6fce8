"""Tests for the offline replay driver (veer.node.offline): a recorded drive through a fresh node.

The drive (tests/replay_world.py) is written with ``LogWriter`` as the node records it: a
goal, poses along the way, a grid change away from the path (the path is kept) and one
that blocks it (replanned). Paths are checked with the suite's shapely verifier against
the cell mask the test drew itself, never with the planner's own collision code.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
import shapely
import replay_world as world
from verify import Obstacles, path_problems

from veer.node.config import NodeConfig
from veer.node.offline import DRIVE_FILE, DriveError, OfflineNode, SourceError, TimedInput, replay
from veer.node.recording import LogWriter
from veer.planning import EXAMPLE_VEHICLE


def _published(run, topic):
    return [(t, action.body) for t, action in run.outputs if getattr(action, "topic", None) == topic]


@pytest.fixture(scope="module")
def drive_log(tmp_path_factory):
    return world.write_drive_log(tmp_path_factory.mktemp("offline") / "drive.log")


@pytest.fixture(scope="module")
def drive_run(drive_log):
    return replay(drive_log)


def test_the_drive_plans_keeps_and_replans(drive_run):
    # goal -> plan; the far box (3 s) -> path kept; the wall across the path (5 s) -> replan
    triggers = [(r.t_s, r.trigger, r.status) for r in drive_run.replans]
    assert triggers == [(pytest.approx(0.1), "goal", "found"), (pytest.approx(5.0), "blocked", "found")]
    kept = [body for _, body in _published(drive_run, "event") if body["code"] == "path_kept"]
    assert [body["map_id"] for body in kept] == [2]
    assert drive_run.checks_kept == 1
    assert drive_run.damage == []
    assert drive_run.inputs == len(world.drive_events())


def test_replanned_path_is_free_on_the_new_grid_and_reaches_the_goal(drive_run):
    blocked = drive_run.replans[1]
    cells = world.classes([world.FAR_BOX_M, world.BLOCKING_WALL_M])
    # source: shapely (GEOS) intersection tests of the footprint against the cells drawn by the test
    obstacles = Obstacles(blocked=cells == 1, cell_size_m=world.CELL_M, origin_m=(0.0, 0.0))
    path = [body for _, body in _published(drive_run, "path") if body["seq"] == 2][0]
    start = tuple(path["poses"][0][:3])  # starts ahead on the old path: its first pose
    assert path["starts_ahead"] is True
    assert path_problems(obstacles, EXAMPLE_VEHICLE, path, start, world.GOAL) == []
    # the straight first path runs through the wall: the replan was needed
    first = np.array(drive_run.replans[0].poses)
    discs = shapely.buffer(shapely.points(first[:, :2]), EXAMPLE_VEHICLE.radius_m)
    assert obstacles.hits(discs).size > 0
    # the new one goes round the wall's top end: the disc's centre passes above the wall plus its radius
    poses = np.array(blocked.poses)
    crossing = poses[np.abs(poses[:, 0] - 18.5) < 0.5]
    assert crossing[:, 1].min() >= world.BLOCKING_WALL_M[3] + EXAMPLE_VEHICLE.radius_m


def test_the_same_log_gives_the_same_answers_twice(drive_log, drive_run):
    again = replay(drive_log)

    def answers(run):
        return [{k: v for k, v in r.row().items() if k != "plan_s"} for r in run.replans]

    assert answers(again) == answers(drive_run)
    for a, b in zip(again.replans, drive_run.replans):
        np.testing.assert_array_equal(a.poses, b.poses)
    # every published path message is the same but for its timing stats
    strip = lambda body: {k: v for k, v in body.items() if k != "stats"}  # noqa: E731
    assert [strip(b) for _, b in _published(again, "path")] == [strip(b) for _, b in _published(drive_run, "path")]
    assert [t for t, _ in again.outputs] == [t for t, _ in drive_run.outputs]


def test_time_is_the_recorded_time(drive_run):
    # status is published on ticks every status_interval_s of recorded time, never of the wall clock
    times = [t for t, _ in _published(drive_run, "status")]
    assert times == sorted(times)
    gaps = np.diff(times)
    assert gaps.min() >= NodeConfig().status_interval_s - 1e-9
    assert times[-1] == pytest.approx(5.5)
    assert max(t for t, _ in drive_run.outputs) == pytest.approx(5.5)


def test_rejected_inputs_are_answered_as_the_node_does(tmp_path):
    path = tmp_path / "bad.log"
    with LogWriter(path) as log:
        log.write_input("pose", {"v": 1, "kind": "pose", "x_m": 1.0, "y_m": 2.0}, 10.0)  # no heading, no t_s
        log.write_input("grid", {**world.grid_message(world.classes(), 1), "kind": "pose"}, 10.1)  # kind != topic
        log.write_control({"v": 1, "op": "fly"}, {"ok": False, "code": "unknown_op"}, 10.2)
        log.write_control(None, {"ok": False, "code": "bad_msgpack", "error": "not msgpack"}, 10.3)
    run = replay(path)
    events = [body["code"] for _, body in _published(run, "event")]
    # docs/protocol.md error codes: a missing field, a kind that does not match its topic
    assert events == ["missing_field", "bad_kind"]
    replies = [action.body for _, action in run.outputs if type(action).__name__ == "Reply"]
    assert [(r["ok"], r["code"]) for r in replies] == [(False, "unknown_op"), (False, "bad_msgpack")]
    assert run.rejected == 2 and run.replans == []


def test_a_plan_request_is_a_replan_of_its_own(tmp_path):
    path = tmp_path / "request.log"
    with LogWriter(path) as log:
        log.write_input("grid", world.grid_message(world.classes(), "yard"), 0.0)
        log.write_control({"v": 1, "op": "plan", "start": list(world.START), "goal": list(world.GOAL)},
                          {"ok": True}, 0.5)
    run = replay(path)
    assert [(r.trigger, r.kind, r.status, r.map_id) for r in run.replans] == [("request", "request", "found", "yard")]
    # a straight drive along y = 8 in an empty yard: the length is the distance
    assert run.replans[0].length_m == pytest.approx(math.dist(world.START[:2], world.GOAL[:2]), abs=0.05)  # common practice


def _cut(data: bytes, offset: int) -> bytes:
    return data[:offset]


def _record_offsets(path):
    from veer.node.recording import LogReader

    return [(r.offset, r.kind, r.t_s - world.T0_S) for r in LogReader(path)]


def test_a_log_cut_off_mid_write_replays_up_to_the_cut(drive_log, tmp_path):
    records = _record_offsets(drive_log)
    # cut inside the grid record of 5 s (the blocking wall): everything before it replays
    wall_offset = [o for o, kind, t in records if kind == "grid" and t == pytest.approx(5.0)][0]
    data = drive_log.read_bytes()
    cut = tmp_path / "cut.log"
    cut.write_bytes(data[: wall_offset + 30])
    run = replay(cut)
    assert [r.trigger for r in run.replans] == ["goal"]
    assert run.checks_kept == 1  # the kept check at 3 s came before the cut
    assert len(run.damage) == 1 and "at the tail" in run.damage[0] and "cut off" in run.damage[0]


def test_a_corrupted_record_in_the_middle_is_skipped_and_the_rest_replays(drive_log, tmp_path):
    records = _record_offsets(drive_log)
    pose_offset = [o for o, kind, t in records if kind == "pose" and 1.0 < t < 2.0][0]
    data = bytearray(drive_log.read_bytes())
    data[pose_offset + 30] ^= 0xFF  # a byte of the payload: its CRC no longer holds
    bad = tmp_path / "flipped.log"
    bad.write_bytes(bytes(data))
    run = replay(bad)
    assert [r.trigger for r in run.replans] == ["goal", "blocked"]  # past the damage
    assert run.inputs == len(world.drive_events()) - 1
    assert len(run.damage) == 1 and "in the middle" in run.damage[0] and "checksum" in run.damage[0]


def test_not_a_log_is_one_line(tmp_path):
    junk = tmp_path / "junk.log"
    junk.write_bytes(b"hello, not a log at all")
    with pytest.raises(SourceError) as info:
        replay(junk)
    assert "not a veer recording log" in str(info.value) and "\n" not in str(info.value)
    with pytest.raises(SourceError, match="does not exist"):
        replay(tmp_path / "missing.log")


def _write_drive_folder(folder, *, shades_free=254):
    """The drive as map images + drive.toml (PNG at 0 s and 5 s, a PGM at 3 s)."""
    folder.mkdir()
    maps = {0.0: world.classes(), 3.0: world.classes([world.FAR_BOX_M]),
            5.0: world.classes([world.FAR_BOX_M, world.BLOCKING_WALL_M])}
    lines = [f"cell_size_m = {world.CELL_M}", "origin_m = [0.0, 0.0]", ""]
    for i, (t, cells) in enumerate(maps.items()):
        image = np.where(cells == 1, 0, shades_free).astype(np.uint8)
        name = f"map_{i}.{'pgm' if t == 3.0 else 'png'}"
        assert cv2.imwrite(str(folder / name), image)
        lines += ["[[map]]", f"t_s = {t}", f'image = "{name}"', f"map_id = {i + 1}", ""]
    for t, kind, message in world.drive_events():
        if kind == "pose":
            lines += ["[[pose]]", f"t_s = {t}", f"x_m = {message['x_m']}", f"y_m = {message['y_m']}",
                      f"heading_deg = {math.degrees(message['heading_rad'])}", ""]
        elif kind == "control":
            request = message["request"]
            lines += ["[[goal]]", f"t_s = {t}", f"x_m = {request['x_m']}", f"y_m = {request['y_m']}",
                      f"heading_deg = {math.degrees(request['heading_rad'])}", ""]
    (folder / DRIVE_FILE).write_text("\n".join(lines), encoding="utf-8")
    return folder


def test_a_drive_folder_replays_like_the_log(tmp_path, drive_run):
    folder = _write_drive_folder(tmp_path / "drive")
    run = replay(folder)
    rows = lambda r: [(x.trigger, x.status, x.map_id, x.length_m, x.gear_changes) for x in r.replans]  # noqa: E731
    assert rows(run) == rows(drive_run)
    assert run.checks_kept == 1
    assert replay(folder / DRIVE_FILE).replans[1].length_m == run.replans[1].length_m


def test_a_map_sidecar_beside_an_image_wins_over_drive_toml(tmp_path):
    folder = _write_drive_folder(tmp_path / "drive")
    # the same images at twice the cell size: a drive twice as long (sidecar keys: docs/files.md)
    for name in ("map_0", "map_1", "map_2"):
        (folder / f"{name}.toml").write_text(f"cell_size_m = {2 * world.CELL_M}\n", encoding="utf-8")
    text = (folder / DRIVE_FILE).read_text(encoding="utf-8")
    scaled = []
    for line in text.splitlines():
        key, _, value = line.partition(" = ")
        scaled.append(f"{key} = {2 * float(value)}" if key in ("x_m", "y_m") else line)
    (folder / DRIVE_FILE).write_text("\n".join(scaled), encoding="utf-8")
    run = replay(folder)
    assert run.replans[0].length_m == pytest.approx(2 * 24.0, abs=0.1)  # twice the straight 24 m


@pytest.mark.parametrize("text, expected", [
    ("cell_size_m = 0.1\nspeed = 3\n", "unknown key 'speed'"),
    ("cell_size_m = 0.1\n[[map]]\nt_s = 0\nimage = \"nope.png\"\n", "cannot read map image"),
    ("cell_size_m = 0.1\n[[pose]]\nt_s = 0\nx_m = 1\ny_m = 2\n", "heading_deg must be a finite number"),
    ("cell_size_m = 0.1\n[[goal]]\nt_s = 0\nx_m = 1\ny_m = 2\nheading_deg = 0\nreverse = 1\n", "reverse must be"),
    ("[[map]\n", "not valid TOML"),
])
def test_a_bad_drive_file_is_one_line(tmp_path, text, expected):
    (tmp_path / DRIVE_FILE).write_text(text, encoding="utf-8")
    with pytest.raises(DriveError) as info:
        replay(tmp_path)
    assert expected in str(info.value) and "\n" not in str(info.value)


def test_a_folder_without_drive_toml_says_so(tmp_path):
    with pytest.raises(DriveError, match="drive.toml"):
        replay(tmp_path)


def test_deadlines_off_lifts_the_time_budgets_only_when_asked():
    node = OfflineNode(NodeConfig())
    assert node.planner.settings.max_time_s > NodeConfig().search.max_time_s
    kept = OfflineNode(NodeConfig(), deadlines=True)
    assert kept.planner.settings.max_time_s == NodeConfig().search.max_time_s
    with pytest.raises(ValueError, match="grid, pose or control"):
        node.feed(TimedInput(0.0, "path", {}))


def test_realtime_paces_the_inputs_at_their_recorded_spacing(drive_log, monkeypatch):
    import veer.node.offline as offline

    clock = [0.0]
    slept = []

    def fake_sleep(seconds):  # a clock that only moves when the replay waits: no real waiting
        slept.append(seconds)
        clock[0] += seconds

    monkeypatch.setattr(offline.time, "sleep", fake_sleep)
    monkeypatch.setattr(offline.time, "monotonic", lambda: clock[0])
    run = replay(drive_log, realtime=True)
    assert sum(slept) == pytest.approx(5.5)  # the span of the recorded inputs
    assert [r.trigger for r in run.replans] == ["goal", "blocked"]


def test_progress_runs_to_the_size_of_the_log(drive_log):
    seen = []
    replay(drive_log, progress=lambda done, total: seen.append((done, total)))
    size = drive_log.stat().st_size
    assert seen[-1] == (size, size)
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)
