"""``veer record``: a recorder beside a running node, over loopback on free ports.

A node serves on a thread of this process; ``python -m veer.tools.record`` runs as a child
process; the robot's client connects its input socket to both the node's inputs and the
recorder's tap (one PUB socket, two connections: ZeroMQ RFC 29/PUBSUB sends every message
to every subscriber). The log is read back with ``LogReader`` and checked against what was sent.
"""

from __future__ import annotations

import math
import signal
import socket
import subprocess
import sys
import threading
import time
from types import SimpleNamespace

import numpy as np
import pytest
import zmq

from veer.node.client import NodeClient
from veer.node.config import NodeConfig, SocketSettings
from veer.node.recording import LogReader
from veer.node.server import NodeServer
from veer.tools import record
from veer.tools.cli import main as veer_main

CELL_M = 0.1
ROWS, COLS = 160, 300  # 16 m x 30 m
START = (3.0, 8.0, 0.0)
GOAL = (26.0, 8.0, 0.0)
WAIT_S = 20.0  # every wait below is bounded by this (generous on a shared machine)


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _shades() -> np.ndarray:
    """Grey levels of a yard with walls round it: 0 occupied, 254 free (docs/protocol.md, "grid")."""
    shades = np.full((ROWS, COLS), 254, np.uint8)
    shades[:3, :] = shades[-3:, :] = 0
    shades[:, :3] = shades[:, -3:] = 0
    return shades


@pytest.fixture
def node():
    config = NodeConfig(sockets=SocketSettings("tcp://127.0.0.1:*", "tcp://127.0.0.1:*", "tcp://127.0.0.1:*"),
                        status_interval_s=0.2)
    server = NodeServer(config)
    server.bind()
    stop = threading.Event()
    thread = threading.Thread(target=server.serve, args=(stop,), daemon=True)
    thread.start()
    yield server
    stop.set()
    thread.join(5.0)
    assert not thread.is_alive(), "the node did not stop within 5 s"
    server.close()


def _wait_for(predicate, what: str) -> None:
    end = time.monotonic() + WAIT_S
    while not predicate():
        assert time.monotonic() < end, f"timed out waiting for {what}"
        time.sleep(0.05)


def _counts(log_path) -> dict:
    try:
        reader = LogReader(log_path)
    except ValueError:  # header not written yet
        return {}
    for _ in reader.records(restore_grids=False):
        pass
    return dict(reader.counts)


def test_record_a_drive_and_stop_on_sigint(node, tmp_path):
    log_path = tmp_path / "drive.log"
    tap = f"tcp://127.0.0.1:{_free_port()}"
    child = subprocess.Popen([sys.executable, "-m", "veer.tools.record", str(log_path), "--outputs",
                              node.endpoints["outputs"], "--tap", tap],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    robot = None
    try:
        # one input socket connected to the node and to the tap; connect() waits for both subscriptions
        e = node.endpoints
        robot = NodeClient([e["inputs"], tap], e["outputs"], e["control"], timeout_s=WAIT_S)
        # the recorder is connected to the node's outputs once a status reaches it
        _wait_for(lambda: _counts(log_path).get("status", 0) >= 1, "a status in the log")
        shades = _shades()
        robot.send_grid(shades, map_id="yard", cell_size_m=CELL_M)
        poses = [(START[0] + 0.1 * i, START[1], 0.0, 100.0 + 0.05 * i) for i in range(3)]
        for pose in poses:
            robot.send_pose(*pose)
        robot.send_raw(b"pose", b"\xc1 not msgpack")  # source: msgpack spec (0xc1 is never used)
        robot.wait_accepted(map_id="yard", pose=poses[-1][:3])
        goal_id = robot.set_goal(*GOAL)
        path = robot.wait_path(goal_id=goal_id)
        assert path["status"] == "found"
        _wait_for(lambda: _counts(log_path).get("path", 0) >= 1 and _counts(log_path).get("control", 0) >= 1,
                  "the path and the inferred goal in the log")
        child.send_signal(signal.SIGINT)
        _out, err = child.communicate(timeout=WAIT_S)
    finally:
        if robot is not None:
            robot.close()
        if child.poll() is None:
            child.kill()
            child.communicate()
    assert child.returncode == 0, err
    assert "Traceback" not in err

    reader = LogReader(log_path)
    records = reader.read_all()
    assert reader.damage == []  # closed cleanly: nothing cut off
    grids = [r.message for r in records if r.kind == "grid"]
    assert len(grids) == 1 and grids[0]["map_id"] == "yard"
    np.testing.assert_array_equal(np.frombuffer(grids[0]["cells"], np.uint8).reshape(ROWS, COLS), shades)
    recorded_poses = [(r.message["x_m"], r.message["y_m"], r.message["heading_rad"], r.message["t_s"])
                      for r in records if r.kind == "pose"]
    assert recorded_poses == poses
    notes = [r.message for r in records if r.kind == "note"]
    assert len(notes) == 1 and "bad_msgpack" in notes[0]["text"]
    assert notes[0]["data"]["frames"] == [b"pose", b"\xc1 not msgpack"]  # kept, not dropped
    paths = [r.message for r in records if r.kind == "path"]
    assert [p["seq"] for p in paths] == [path["seq"]] and paths[0]["poses"] == path["poses"]
    goals = [r.message["request"] for r in records if r.kind == "control"]
    assert goals[0]["op"] == "goal" and goals[0]["inferred"] is True
    assert math.isclose(goals[0]["x_m"], GOAL[0]) and math.isclose(goals[0]["y_m"], GOAL[1])
    assert any(r.kind == "status" for r in records)
    times = [r.t_s for r in records]
    assert times == sorted(times)  # arrival times, one clock
    assert abs(times[-1] - time.time()) < 3600  # Unix seconds

    # the log replays: the inferred goal and the recorded inputs give a path again
    from veer.node.offline import replay

    run = replay(log_path)
    assert [r.status for r in run.replans][:1] == ["found"]


def test_duration_stops_and_closes_the_log(tmp_path):
    log_path = tmp_path / "short.log"
    args = SimpleNamespace(log=str(log_path), outputs=f"tcp://127.0.0.1:{_free_port()}",
                           tap="tcp://127.0.0.1:*", duration_s=0.3, append=False, fsync_every_s=None)
    threads_before = threading.active_count()
    assert record.run(args) == 0
    reader = LogReader(log_path)
    assert reader.read_all() == [] and reader.damage == []
    assert threading.active_count() == threads_before


def test_the_tap_port_is_free_again_after_a_recording(tmp_path):
    port = _free_port()
    for name in ("one.log", "two.log"):  # a second recording on the same tap binds again
        args = SimpleNamespace(log=str(tmp_path / name), outputs="tcp://127.0.0.1:9", tap=f"tcp://127.0.0.1:{port}",
                               duration_s=0.1, append=False, fsync_every_s=None)
        assert record.run(args) == 0


@pytest.mark.parametrize("flag, value, named", [
    ("--tap", "nonsense", "nonsense"),
    ("--outputs", "tcp://", "tcp://"),
])
def test_bad_address_is_one_line_exit_2(capsys, tmp_path, flag, value, named):
    code = veer_main(["record", str(tmp_path / "x.log"), flag, value, "--duration-s", "0.1"])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.splitlines()) == 1 and named in err and "Traceback" not in err
    assert not (tmp_path / "x.log").exists()


def test_tap_in_use_is_one_line_exit_2(capsys, tmp_path):
    with zmq.Context() as context, context.socket(zmq.SUB) as holder:
        holder.setsockopt(zmq.LINGER, 0)
        port = holder.bind_to_random_port("tcp://127.0.0.1")
        code = veer_main(["record", str(tmp_path / "x.log"), "--tap", f"tcp://127.0.0.1:{port}", "--duration-s", "0.1"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.splitlines()) == 1 and str(port) in err


def test_unwritable_log_is_one_line_exit_2(capsys, tmp_path):
    code = veer_main(["record", str(tmp_path / "no" / "such" / "folder" / "x.log"), "--tap", "tcp://127.0.0.1:*",
                      "--duration-s", "0.1"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.splitlines()) == 1 and "x.log" in err and "Traceback" not in err


def test_appending_to_a_file_that_is_not_a_log_is_refused(capsys, tmp_path):
    target = tmp_path / "notes.txt"
    target.write_text("shopping list\n")
    code = veer_main(["record", str(target), "--append", "--tap", "tcp://127.0.0.1:*", "--duration-s", "0.1"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.splitlines()) == 1 and "notes.txt" in err
    assert target.read_text() == "shopping list\n"
