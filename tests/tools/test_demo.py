"""``veer demo``: the drive on the loading yard, end to end, and the built-in scenarios.

The drive runs the real node on loopback ports the system picks, with the simulated
clock at 25x real time. Every path the node published is checked with the suite's
shapely verifier on the grid it was planned on (tests/verify.py), never with the
planner's own collision code.
"""

from __future__ import annotations

import csv
import json
import math
import threading

import numpy as np
import pytest

import verify
from veer.node.recording import LogReader
from veer.tools.cli import main
from veer.tools.demo import CUSP_DWELL_S, Route, drive_demo

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (ISO/IEC 15948), section 5.2


@pytest.fixture(scope="module")
def drive(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    threads_before = {t.ident for t in threading.enumerate()}
    lines: list[str] = []
    demo = drive_demo(out, speed=25.0, say=lines.append)
    left = [t.name for t in threading.enumerate() if t.ident not in threads_before and t.is_alive()]
    return demo, lines, left


def test_the_tractor_reaches_the_loading_point(drive):
    demo, _lines, _left = drive
    assert demo.reached
    gx, gy, gh = demo.site.goal
    fx, fy, fh = demo.final_pose
    # docs/files.md, "Path JSON": the last pose within 0.2 m and 5 degrees of the goal
    assert math.hypot(fx - gx, fy - gy) <= verify.GOAL_TOLERANCE_M
    assert abs(verify.wrap(fh - gh)) <= math.radians(verify.GOAL_TOLERANCE_DEG)


def test_it_leaves_the_bay_in_reverse(drive):
    demo, _lines, _left = drive
    first = demo.paths[0]
    assert first["trigger"] == "goal" and first["poses"][0][3] == -1 and first["reverse_m"] > 0
    gears = [row[4] for row in demo.trace]
    assert gears[1] == -1 and 1 in gears  # backs out first, drives forward later


def test_both_map_changes_got_an_answer(drive):
    demo, _lines, _left = drive
    (t1, truck, first), (t2, gate, second) = demo.map_changes
    assert (truck, gate) == ("site+truck", "site+truck+gate_open") and t1 < t2
    by_map = {p["map_id"]: p for p in demo.paths}
    # the trailer blocks the first route: a replan on its map
    assert by_map["site+truck"]["trigger"] == "blocked"
    # the open gate leaves the detour free: the node keeps it (its policy), the goal sent again takes the gate
    kept = [e for e in demo.events if e.get("code") == "path_kept" and e["map_id"] == gate]
    after_gate = by_map[gate]
    assert len(kept) == 1 and after_gate["trigger"] == "goal"
    assert after_gate["length_m"] < by_map["site+truck"]["length_m"]
    replans = [p for p in demo.paths if p["trigger"] != "goal" or p["map_id"] != "site"]
    assert len(replans) >= 2


def test_every_published_path_is_valid_on_its_grid(drive):
    demo, _lines, _left = drive
    assert len(demo.paths) >= 3
    for path in demo.paths:
        grid = demo.grids[path["map_id"]]
        start = tuple(path["poses"][0][:3])
        problems = verify.path_problems(grid, demo.site.vehicle, path, start, demo.site.goal)
        assert problems == [], (path["seq"], problems)


def test_the_robot_drove_on_the_paths(drive):
    demo, _lines, _left = drive
    trace = np.array([row[1:4] for row in demo.trace])
    steps = np.hypot(np.diff(trace[:, 0]), np.diff(trace[:, 1]))
    assert steps.max() <= 1.8 * 0.05 + 1e-6  # at most 1.8 m/s at 20 Hz
    # every pose sent is on the union of the published paths (the robot followed them)
    poses = np.vstack([np.array(p["poses"])[:, :2] for p in demo.paths])
    for x, y in trace[:: 10, :2]:
        assert np.hypot(poses[:, 0] - x, poses[:, 1] - y).min() < 0.3


def test_the_log_and_the_report(drive):
    demo, _lines, _left = drive
    reader = LogReader(demo.log_path)
    records = reader.read_all()
    assert reader.damage == []
    kinds = {r.kind for r in records}
    assert {"grid", "pose", "control", "path", "event"} <= kinds
    assert sum(r.kind == "pose" for r in records) == len(demo.trace)
    index = demo.report.index_html
    assert index == demo.out_dir / "report" / "index.html" and index.is_file()
    with open(demo.out_dir / "report" / "replans.csv", newline="") as file:
        rows = list(csv.DictReader(file))
    # the replay gives the drive's replans again, in the same order
    assert [r["trigger"] for r in rows] == [p["trigger"] for p in demo.paths]
    assert [r["map_id"] for r in rows] == [str(p["map_id"]) for p in demo.paths]
    for row in rows:
        assert (demo.out_dir / "report" / row["picture"]).read_bytes()[:8] == PNG_SIGNATURE
    summary = json.loads((demo.out_dir / "report" / "summary.json").read_text())
    assert summary["totals"]["found"] == len(rows) and summary["totals"]["damage"] == 0
    assert demo.picture.read_bytes()[:8] == PNG_SIGNATURE
    assert demo.map_image.read_bytes()[:2] == b"P5"  # source: Netpbm PGM specification


def test_progress_lines_and_where_to_look(drive):
    demo, lines, _left = drive
    assert any("trailer" in line for line in lines) and any("gate" in line for line in lines)
    tail = lines[-len(demo.files):]
    assert [line.split()[0] for line in tail] == [str(path) for path, _what in demo.files]
    assert str(demo.report.index_html) in tail[0]


def test_nothing_left_running(drive):
    demo, _lines, left = drive
    assert left == []
    import socket

    # the node's ports (named in a progress line) are free again: bind each, as a new node would
    endpoints = _lines_with_endpoints(_lines)
    assert len(endpoints) == 3
    for endpoint in endpoints:
        port = int(endpoint.rsplit(":", 1)[1])
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
            sock.bind(("127.0.0.1", port))


def _lines_with_endpoints(lines):
    words = [w.strip(",()") for line in lines if "node on" in line for w in line.split()]
    return [w for w in words if w.startswith("tcp://")]


def test_route_stops_at_cusps():
    # a straight 2 m in reverse, then 2 m forward: the robot stands still between them
    back = [[-0.25 * i, 0.0, 0.0, -1] for i in range(9)]
    ahead = [[-2.0 + 0.25 * i, 0.0, 0.0, 1] for i in range(1, 9)]
    route = Route(back + ahead)
    positions, speeds = [], []
    for _ in range(400):
        route.step(0.05)
        positions.append(route.pose()[0])
        speeds.append(route.speed_m_per_s)
        if route.finished:
            break
    assert route.finished and abs(positions[-1]) < 1e-9
    turn = int(np.argmin(positions))
    assert abs(positions[turn] + 2.0) < 1e-9
    still = sum(1 for p in positions[turn:] if abs(p + 2.0) < 1e-9)
    assert still * 0.05 >= CUSP_DWELL_S - 1e-9
    assert max(speeds) <= 1.8 + 1e-9


def test_scenarios_flag_writes_the_built_in_scenarios(capsys, tmp_path):
    out = tmp_path / "scenarios"
    code = main(["demo", "--scenarios", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 0, err
    for name in ("open_yard", "parking_bay", "s_corridor", "warehouse", "enclosed_goal"):
        assert (out / f"{name}.png").read_bytes()[:8] == PNG_SIGNATURE
        assert (out / "maps" / f"{name}.pgm").read_bytes()[:2] == b"P5"  # source: Netpbm PGM specification
        assert str(out / f"{name}.png") in err


def test_bad_out_folder_is_one_line(capsys, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("")
    code = main(["demo", "--out", str(blocker / "sub")])
    err = capsys.readouterr().err
    assert code == 2 and len(err.splitlines()) == 1 and "Traceback" not in err
