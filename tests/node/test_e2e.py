"""The node end to end over real loopback sockets (ports picked by the OS), driven by NodeClient.

Every wait is bounded and generous (seconds, where the node needs tens of milliseconds);
no test asserts a duration. Paths are checked with the shapely verifier (tests/verify.py).
"""

from __future__ import annotations

import math
import threading
import time

import msgpack
import numpy as np
import pytest

import verify
from veer.node.client import NodeTimeout
from veer.planning import EXAMPLE_VEHICLE

WAIT_S = 15.0
WALL = (20.0, 6.0, 20.3, 24.0)


def check_path(message, grid, start, goal):
    # source: shapely geometry (tests/verify.py) against the grid's blocked squares
    verify.assert_valid_path(grid, EXAMPLE_VEHICLE, message, start, goal)


def first_path(client, world, classes=None, map_id="m1"):
    classes = world.free_classes() if classes is None else classes
    client.send_grid(classes, map_id=map_id, cell_size_m=world.CELL_M, classes=True)
    client.send_pose(*world.START)
    client.wait_accepted(map_id, world.START, WAIT_S)  # inputs and control are not ordered across sockets
    goal_id = client.set_goal(*world.GOAL)
    path = client.wait_path(WAIT_S, goal_id=goal_id, map_id=map_id)
    check_path(path, world.as_grid(classes), world.START, world.GOAL)
    return path


def test_grid_pose_goal_then_a_wall_then_a_far_change(run_node, world):
    client = run_node().client()
    path = first_path(client, world)
    assert (path["v"], path["kind"], path["map_id"], path["goal_id"]) == (1, "path", "m1", 1)

    walled = world.with_boxes(world.free_classes(), [WALL])
    client.send_grid(walled, map_id="wall", cell_size_m=world.CELL_M, classes=True)
    new = client.wait_path(WAIT_S, after_seq=path["seq"])
    assert new["seq"] > path["seq"] and new["map_id"] == "wall"
    check_path(new, world.as_grid(walled), world.START, world.GOAL)

    far = world.with_boxes(walled, [(1.0, 1.0, 2.0, 2.0)])
    client.send_grid(far, map_id="far", cell_size_m=world.CELL_M, classes=True)
    kept = client.wait_for("event", WAIT_S, lambda m: m.get("code") == "path_kept", keep_others=True)
    assert kept["map_id"] == "far" and kept["path_seq"] == new["seq"]
    assert not [m for t, m in client.drain(0.5) if t == "path"]  # the path is kept, not replaced
    status = client.status()
    assert (status["map_id"], status["path_seq"], status["path_map_id"]) == ("far", new["seq"], "wall")
    assert client.current_path()["seq"] == new["seq"]


def test_robot_moved_off_the_path_gets_a_path_from_its_pose(run_node, world):
    client = run_node().client()
    path = first_path(client, world)
    off = (12.0, 20.0, 0.3)
    client.send_pose(*off)
    new = client.wait_path(WAIT_S, after_seq=path["seq"])
    assert new["trigger"] == "off_path" and new["starts_ahead"] is False
    check_path(new, world.as_grid(world.free_classes()), off, world.GOAL)


def _along(poses: np.ndarray) -> np.ndarray:
    return np.concatenate(([0.0], np.cumsum(np.hypot(*np.diff(poses[:, :2], axis=0).T))))


def _pose_at(poses: np.ndarray, along: np.ndarray, s_m: float):
    """Pose at distance s along the polyline (linear between poses)."""
    i = int(np.clip(np.searchsorted(along, s_m) - 1, 0, len(poses) - 2))
    t = (s_m - along[i]) / max(along[i + 1] - along[i], 1e-12)
    return tuple(poses[i, :3] + t * (poses[i + 1, :3] - poses[i, :3]))


def test_driving_robot_gets_a_new_path_at_or_ahead_of_it_never_behind(run_node, world):
    # start 2 m ahead: the robot needs 1.3 s to get there, a generous bound on the node's latency
    client = run_node(world.node_config(start_ahead_m=2.0)).client()
    path = first_path(client, world)
    old = np.array(path["poses"])
    along = _along(old)
    speed_m_per_s, rate_hz = 1.5, 20.0  # the robot: 1.5 m/s, poses at 20 Hz
    driven = {"s_m": 0.0}
    outbox = {}  # frames for the driving thread to send (it alone owns the input socket)
    stop = threading.Event()

    def drive():
        t0 = time.monotonic()
        for _ in range(int(20 * rate_hz)):  # bounded: at most 20 s of poses
            if stop.is_set():
                return
            s_m = min(speed_m_per_s * (time.monotonic() - t0), along[-1])
            driven["s_m"] = s_m
            client.send_pose(*_pose_at(old, along, s_m), t_s=time.time())
            if "frames" in outbox and "sent_s_m" not in outbox:
                client.send_frames(outbox["frames"])
                outbox["sent_s_m"] = s_m
            time.sleep(1.0 / rate_hz)

    thread = threading.Thread(target=drive, daemon=True)
    thread.start()
    try:
        time.sleep(1.0)  # some 1.5 m driven
        x_wall = float(_pose_at(old, along, driven["s_m"] + 10.0)[0])  # a wall 10 m ahead
        walled = world.with_boxes(world.free_classes(), [(x_wall, 6.0, x_wall + 0.3, 24.0)])
        message = {"v": 1, "kind": "grid", "map_id": "wall10", "rows": walled.shape[0], "cols": walled.shape[1],
                   "cell_size_m": world.CELL_M, "origin_m": [0.0, 0.0], "encoding": "raw",
                   "cells": np.where(walled == 1, 0, 254).astype(np.uint8).tobytes()}
        outbox["frames"] = [b"grid", msgpack.packb(message, use_bin_type=True)]
        new = client.wait_path(WAIT_S, after_seq=path["seq"], map_id="wall10")
        s_at_receipt = driven["s_m"]
    finally:
        stop.set()
        thread.join(5.0)
    first = np.array(new["poses"][0])
    distance_to_old = np.hypot(old[:, 0] - first[0], old[:, 1] - first[1])
    nearest = int(np.argmin(distance_to_old))
    if new["starts_ahead"]:
        # on the old path, at a pose ahead of the robot when the path arrives
        assert distance_to_old[nearest] < 1e-6
        assert along[nearest] >= s_at_receipt >= outbox["sent_s_m"]
    else:
        # at the robot: a pose it sent after the wall appeared (it drives on the old path)
        assert distance_to_old.min() < 0.05
        assert along[nearest] >= outbox["sent_s_m"] - 0.25
    check_path(new, world.as_grid(walled), tuple(first[:3]), world.GOAL)


def _burst_classes(world, i: int) -> np.ndarray:
    """Grid i of the burst: a wall with its gap above (even i) or below (odd i), plus a mark unique to i."""
    wall = (20.0, 0.0, 20.3, 22.0) if i % 2 == 0 else (20.0, 8.0, 20.3, 30.0)
    x_m, y_m = 0.5 + 0.1 * (i % 30), 0.3 + 0.1 * (i // 30)
    mark = (x_m, y_m, x_m + 0.1, y_m + 0.1)  # one cell, a different one for each i
    return world.with_boxes(world.free_classes(), [wall, mark])


def test_a_burst_of_200_grids_gives_few_replans_and_the_last_map_wins(run_node, world):
    node = run_node()
    client = node.client()
    path = first_path(client, world)
    for i in range(200):  # each grid blocks the path planned on the one before
        client.send_grid(_burst_classes(world, i), map_id=i, cell_size_m=world.CELL_M, classes=True)
    deadline = time.monotonic() + WAIT_S * 2
    while True:  # bounded: until the node reports map 199 and is done planning
        status = client.status()
        if status["map_id"] == 199 and status["state"] == "following" and status["path_map_id"] is not None:
            break
        assert time.monotonic() < deadline, f"the node did not settle on map 199: {status}"
        time.sleep(0.05)
    paths = [m for t, m in client.drain(0.3) if t == "path" and m["seq"] > path["seq"]]
    assert 1 <= len(paths) <= 20, f"{len(paths)} paths for a burst of 200 grids"
    last = client.current_path()
    final_grid = world.as_grid(_burst_classes(world, 199))
    # the path held is free on the last grid (planned on it, or checked on it and kept)
    assert last["map_id"] == 199 or status["counters"]["kept"] >= 1
    start = tuple(last["poses"][0][:3])
    check_path(last, final_grid, start, world.GOAL)
    assert status["counters"]["grids"] + status["counters"]["grids_skipped"] <= 201


def _malformed_inputs(world) -> list[list[bytes]]:
    """50 bad inputs: (frames) each the node must report with an event."""
    rng = np.random.default_rng(5)
    pack = lambda m: msgpack.packb(m, use_bin_type=True)  # noqa: E731
    ok_pose = {"v": 1, "kind": "pose", "x_m": 5.0, "y_m": 15.0, "heading_rad": 0.0, "t_s": 1.0}
    cells = np.full((30, 40), 254, np.uint8)
    ok_grid = {"v": 1, "kind": "grid", "map_id": "bad", "rows": 30, "cols": 40, "cell_size_m": 0.1,
               "origin_m": [0.0, 0.0], "encoding": "raw", "cells": cells.tobytes()}
    png_signature = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (ISO/IEC 15948), section 5.2
    bad = []
    for i in range(10):  # random bytes (a few start like a msgpack map)
        junk = rng.integers(0, 256, int(rng.integers(1, 300)), dtype=np.uint8).tobytes()
        bad.append([b"grid" if i % 2 else b"pose", (b"\x85" if i < 3 else b"") + junk])
    for field, value in [("x_m", "5"), ("y_m", True), ("heading_rad", [0.0]), ("t_s", None), ("x_m", {"a": 1})]:
        bad.append([b"pose", pack({**ok_pose, field: value})])  # wrong types
    for field, value in [("x_m", math.nan), ("y_m", math.inf), ("heading_rad", -math.inf), ("t_s", math.nan)]:
        bad.append([b"pose", pack({**ok_pose, field: value})])  # NaN / inf
    bad.append([b"pose", pack({k: v for k, v in ok_pose.items() if k != "y_m"})])  # missing field
    for rows, cols in [(31, 40), (30, 41), (1, 1)]:
        bad.append([b"grid", pack({**ok_grid, "rows": rows, "cols": cols})])  # rows*cols vs cells
    for rows, cols in [(10**6, 10**6), (2**40, 2**20), (0, 40), (-3, 40)]:
        bad.append([b"grid", pack({**ok_grid, "rows": rows, "cols": cols})])  # absurd sizes
    bad.append([b"map", pack({**ok_grid, "kind": "map"})])  # unknown kinds / topics
    bad.append([b"grid", pack({**ok_grid, "kind": "pose"})])
    bad.append([b"pose", pack({k: v for k, v in ok_pose.items() if k != "kind"})])
    bad.append([b"\xff\xfe", pack(ok_pose)])
    for payload in [png_signature + b"\x00" * 40, png_signature, b"P5\n40 30\n255\n" + b"\x00" * 10]:
        bad.append([b"grid", pack({**ok_grid, "encoding": "pgm" if payload[:2] == b"P5" else "png",
                                   "cells": payload})])  # corrupt / truncated images
    for version in [None, 2, "1"]:
        message = {**ok_pose, "v": version} if version is not None else {k: v for k, v in ok_pose.items() if k != "v"}
        bad.append([b"pose", pack(message)])
    bad.append([b"pose"])  # one frame
    bad.append([b"pose", pack(ok_pose), b"extra"])  # three frames
    bad.append([b"pose", pack([1, 2, 3])])  # not a map
    bad.append([b"grid", pack(7)])
    for field, value in [("cell_size_m", 0), ("cell_size_m", -0.1), ("cell_size_m", math.nan), ("origin_m", [0.0]),
                         ("encoding", "jpeg"), ("cells", "text"), ("map_id", 1.5), ("map_id", "x" * 300),
                         ("origin_m", [0.0, math.inf])]:
        bad.append([b"grid", pack({**ok_grid, field: value})])
    assert len(bad) == 50
    return bad


def _malformed_requests() -> list[bytes]:
    pack = lambda m: msgpack.packb(m, use_bin_type=True)  # noqa: E731
    return [
        b"", b"\xc1", b"\x92\x01", b"\x85\xa1v\x01", pack("status"), pack({"op": "status"}),
        pack({"v": 2, "op": "status"}), pack({"v": 1}), pack({"v": 1, "op": "fly"}), pack({"v": 1, "op": 5}),
        pack({"v": 1, "op": "goal", "x_m": 1.0, "y_m": 2.0}),
        pack({"v": 1, "op": "goal", "x_m": "1", "y_m": 2.0, "heading_rad": 0.0}),
        pack({"v": 1, "op": "goal", "x_m": math.nan, "y_m": 2.0, "heading_rad": 0.0}),
        pack({"v": 1, "op": "goal", "x_m": 1.0, "y_m": math.inf, "heading_rad": 0.0}),
        pack({"v": 1, "op": "goal", "x_m": True, "y_m": 2.0, "heading_rad": 0.0}),
        pack({"v": 1, "op": "goal", "x_m": 1.0, "y_m": 2.0, "heading_rad": 0.0, "reverse": "yes"}),
        pack({"v": 1, "op": "plan", "start": [1.0, 2.0], "goal": [3.0, 4.0, 0.0]}),
        pack({"v": 1, "op": "plan", "start": [1.0, 2.0, math.nan], "goal": [3.0, 4.0, 0.0]}),
        pack({"v": 1, "op": "plan", "start": "here", "goal": [3.0, 4.0, 0.0]}),
        pack({"v": 1, "op": "status", "pad": b"\x00" * (2 * 1024 * 1024)}),  # over max_control_bytes
    ]


def test_malformed_inputs_and_requests_are_reported_and_the_node_still_plans(run_node, world):
    client = run_node().client()
    for frames in _malformed_inputs(world):
        client.send_frames(frames)
        # a rejected input's event names its topic; other events (a peer's disconnect) do not
        event = client.wait_for("event", WAIT_S, lambda m: "topic" in m)
        assert event["code"] and event["detail"], event
    requests = _malformed_requests()
    assert len(requests) == 20
    codes = []
    for payload in requests:
        answer = client.request(payload, timeout_s=WAIT_S)
        assert answer["ok"] is False and answer["error"], answer
        codes.append(answer["code"])
    assert {"bad_msgpack", "bad_version", "unknown_op", "missing_field", "bad_field", "too_large"} <= set(codes)
    status = client.status()
    assert status["counters"]["rejected"] == 50
    first_path(client, world)  # and it still plans correctly


def test_oversized_input_is_refused_at_the_socket_and_reported(run_node, world):
    from dataclasses import replace

    config = world.node_config()
    config = replace(config, limits=replace(config.limits, max_message_bytes=64 * 1024, max_control_bytes=1024))
    client = run_node(config).client()
    client.send_frames([b"grid", b"\x00" * (256 * 1024)])
    event = client.wait_event("input_disconnected", WAIT_S)
    assert "65536" in event["detail"]
    time.sleep(0.5)  # the client's socket reconnects by itself (ZMQ_RECONNECT_IVL, 100 ms by default)
    # source: libzmq zmq_setsockopt(3), ZMQ_MAXMSGSIZE and ZMQ_RECONNECT_IVL
    client.send_pose(*world.START)
    assert client.wait_status(WAIT_S, lambda m: m["pose"] is not None)["pose"] == list(world.START)


def test_a_request_without_an_answer_times_out_in_the_client(world):
    from veer.node.client import NodeClient

    port = world.free_port()
    with pytest.raises(NodeTimeout):
        NodeClient(f"tcp://127.0.0.1:{port}", f"tcp://127.0.0.1:{port}", f"tcp://127.0.0.1:{port}", timeout_s=0.3)


def test_the_node_records_inputs_control_and_outputs_when_told(run_node, world, tmp_path):
    from dataclasses import replace

    from veer.node.config import RecordSettings
    from veer.node.recording import LogReader

    log_path = tmp_path / "drive.log"
    node = run_node(replace(world.node_config(), record=RecordSettings(path=str(log_path))))
    client = node.client()
    path = first_path(client, world)
    client.send_frames([b"pose", b"\xc1"])
    client.wait_event("bad_msgpack", WAIT_S)
    assert client.request({"v": 1, "op": "fly"})["code"] == "unknown_op"
    node.close()
    records = LogReader(log_path).read_all()
    kinds = [r.kind for r in records]
    assert {"grid", "pose", "control", "path", "status", "event"} <= set(kinds)
    grids = [r.message for r in records if r.kind == "grid"]
    assert grids[0]["map_id"] == "m1" and len(grids[0]["cells"]) == 300 * 400  # cells come back whole
    controls = [r.message for r in records if r.kind == "control"]
    assert controls[-1] == {"request": {"v": 1, "op": "fly"}, "reply": {
        "ok": False, "code": "unknown_op", "error": "unknown op 'fly'; use one of goal, cancel, plan, status, path"}}
    assert [r.message["seq"] for r in records if r.kind == "path"] == [path["seq"]]
    assert all(b >= a for a, b in zip([r.t_s for r in records], [r.t_s for r in records][1:]))
