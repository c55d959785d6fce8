"""Faults the node must survive: a publisher that dies, a subscriber that stops reading,
half a multipart message, and a SIGKILL while recording.

Loopback only, ports picked free; every wait and every loop is bounded. The node runs
on a thread of this process where only its sockets matter, and as a `veer node`
subprocess (``veer.tools.soak.NodeProcess``) where its own resident memory is read or
where it is killed outright. No test asserts a duration; the memory bound is a
behaviour (no unbounded queue), set very generously.
"""

from __future__ import annotations

import math
import threading
import time

import msgpack
import numpy as np
import zmq

import verify
from veer.node.recording import INPUT_KINDS, OUTPUT_KINDS, RECORD_OVERHEAD_BYTES, LogReader
from veer.planning import EXAMPLE_VEHICLE
from veer.tools.soak import NodeLink, NodeProcess

WAIT_S = 15.0  # generous: the node answers in milliseconds
WALL_A = (20.0, 6.0, 20.3, 24.0)  # across the straight line from start to goal
WALL_B = (20.0, 2.0, 20.3, 13.0)  # lower, so the path over WALL_A's gap is blocked in turn


def _packed(message: dict) -> bytes:
    return msgpack.packb(message, use_bin_type=True)


def _pose_frames(x_m, y_m, heading_rad, t_s) -> list[bytes]:
    return [b"pose", _packed({"v": 1, "kind": "pose", "x_m": x_m, "y_m": y_m, "heading_rad": heading_rad,
                              "t_s": t_s})]


def _grid_frames(classes, map_id, world) -> list[bytes]:
    from veer.node.client import grid_message

    return [b"grid", _packed(grid_message(classes, map_id=map_id, cell_size_m=world.CELL_M, classes=True))]


class _Publisher:
    """A robot's input publisher with a context of its own (XPUB: waits for the node's subscription)."""

    def __init__(self, address: str):
        self.context = zmq.Context()
        self.socket = self.context.socket(zmq.XPUB)
        self.socket.setsockopt(zmq.LINGER, 0)
        self.socket.connect(address)
        assert self.socket.poll(int(1000 * WAIT_S)), "the node did not subscribe to the new publisher"
        assert self.socket.recv()[:1] == b"\x01"  # a subscription message (ZeroMQ RFC 29/PUBSUB)

    def send(self, frames: list[bytes]) -> None:
        self.socket.send_multipart(frames)

    def close(self) -> None:
        self.socket.close(linger=0)
        self.context.term()


def _events(client, codes: set[str], count: int) -> list[dict]:
    """The next ``count`` events whose code is in ``codes`` (others dropped), each within WAIT_S."""
    return [client.wait_for("event", WAIT_S, lambda m: m.get("code") in codes) for _ in range(count)]


# ---------------------------------------------------------------------- a publisher that dies


def test_a_publisher_that_dies_and_reconnects_keeps_the_node_state(run_node, world):
    node = run_node()
    client = node.client(WAIT_S)
    inputs = node.server.endpoints["inputs"]

    first = _Publisher(inputs)
    first.send(_grid_frames(world.free_classes(), "m1", world))
    first.send(_pose_frames(*world.START, 100.0))
    client.wait_accepted("m1", world.START, WAIT_S)
    goal_id = client.set_goal(*world.GOAL)
    path = client.wait_path(WAIT_S, goal_id=goal_id)
    before = client.status()

    first.close()  # the robot's process dies: its socket and context are gone
    client.wait_event("input_disconnected", WAIT_S)  # documented in docs/protocol.md, "event"
    after = client.status()
    for key in ("state", "map_id", "goal_id", "path_seq", "path_map_id", "pose", "goal"):
        assert after[key] == before[key], key  # nothing the node had taken in is lost
    assert after["state"] == "following"

    second = _Publisher(inputs)  # the robot comes back with a new context
    try:
        moved = (5.2, 15.0, 0.0)
        second.send(_pose_frames(*moved, 200.0))  # 0.2 m in 100 s of the sender's clock: standing
        walled = world.with_boxes(world.free_classes(), [WALL_A])
        second.send(_grid_frames(walled, "wall", world))
        new = client.wait_path(WAIT_S, goal_id=goal_id, after_seq=path["seq"], map_id="wall")
        assert new["trigger"] == "blocked" and new["status"] == "found"
        # source: shapely geometry (tests/verify.py) against the grid's blocked squares
        verify.assert_valid_path(world.as_grid(walled), EXAMPLE_VEHICLE, new, moved, world.GOAL)
        status = client.status()
        assert status["pose"] == list(moved) and status["map_id"] == "wall"
        assert status["counters"]["poses"] == before["counters"]["poses"] + 1
        assert status["counters"]["rejected"] == 0
    finally:
        second.close()


# ---------------------------------------------------------------------- a subscriber that stops reading


def test_a_subscriber_that_stops_reading_neither_blocks_nor_grows_the_node(tmp_path, world):
    flood_bursts, burst_size = 160, 250  # 40 000 refused inputs -> 40 000 events, plus paths and status
    total = flood_bursts * burst_size
    extra = "[status]\ninterval_s = 0.05\n[limits]\ninput_queue_messages = 100000\n"
    with NodeProcess(tmp_path, extra_toml=extra) as node:
        context = zmq.Context()
        stuck = context.socket(zmq.SUB)  # connects, subscribes to everything, never reads
        stuck.setsockopt(zmq.LINGER, 0)
        stuck.setsockopt(zmq.RCVHWM, 1)
        stuck.setsockopt(zmq.RCVBUF, 4096)
        stuck.setsockopt(zmq.SUBSCRIBE, b"")
        stuck.connect(node.addresses["outputs"])
        reader = _Reader(node.addresses["outputs"])  # a subscriber that keeps reading, on its own thread
        link = NodeLink(node.addresses, timeout_s=WAIT_S)  # the robot: inputs and control
        try:
            rss_start_mb = node.memory_mb()["VmRSS"]
            link.inputs.send_multipart(_grid_frames(world.free_classes(), 0, world))
            link.inputs.send_multipart(_pose_frames(*world.START, 0.0))
            assert _wait_status(link, lambda s: s["map_id"] == 0 and s["pose"] == list(world.START))
            assert link.request({"op": "goal", "x_m": world.GOAL[0], "y_m": world.GOAL[1],
                                 "heading_rad": world.GOAL[2]}, WAIT_S)["ok"]
            walls = [world.with_boxes(world.free_classes(), [wall]) for wall in (WALL_A, WALL_B)]
            grids = [_grid_frames(walls[i % 2], i + 1, world) for i in range(2)]
            bad = _packed({"v": 1, "kind": "pose", "x_m": "not a number", "y_m": 0.0, "heading_rad": 0.0, "t_s": 0.0})
            for burst in range(flood_bursts):
                link.inputs.send_multipart(grids[burst % 2])  # alternating walls: replans
                for _ in range(burst_size):
                    link.inputs.send_multipart([b"pose", bad])
                answer = link.request({"op": "status"}, WAIT_S)
                assert answer is not None and answer["ok"], f"no control reply within {WAIT_S} s in burst {burst}"
            assert _wait_status(link, lambda s: s["counters"]["rejected"] == total), \
                "the node did not take in every input of the flood"
            # the reading subscriber still hears the node after the flood: publishing never stalled
            assert reader.wait(lambda m: m["kind"] == "status" and m["counters"]["rejected"] == total)
            rss_end_mb = node.memory_mb()["VmRSS"]  # shown below; the memory figure belongs to the soak run
            assert node.alive()
            published = reader.stop()
            # the stuck subscriber reads at last: what was queued for it, up to a status sent after the flood
            stuck_events, caught_up, end = 0, False, time.monotonic() + WAIT_S
            while not caught_up and time.monotonic() < end and stuck.poll(1000):
                topic, payload = stuck.recv_multipart()
                message = msgpack.unpackb(payload, raw=False)
                stuck_events += topic == b"event"
                caught_up = topic == b"status" and message["counters"]["rejected"] == total
            assert caught_up
            # high-water marks (ZeroMQ guide, chapter 2) bound what is queued for the stuck
            # subscriber: the node dropped for it instead of keeping everything it published
            assert stuck_events < total, "nothing was dropped for the subscriber that stopped reading"
            print(f"slow subscriber: node RSS {rss_start_mb:.1f} -> {rss_end_mb:.1f} MB; {total} events published; "
                  f"the reading subscriber got {published}, the stuck one {stuck_events} events")
        finally:
            reader.stop()
            link.close()
            stuck.close(linger=0)
            context.term()


class _Reader:
    """A SUB socket read without pause on a thread of its own; counts what it gets by topic and event code."""

    def __init__(self, address: str):
        self.address = address
        self.counts: dict[str, int] = {}
        self.latest: list[dict] = []
        self._stop = threading.Event()
        self._ready = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()
        assert self._ready.wait(WAIT_S), "the reading subscriber heard nothing"

    def _run(self) -> None:
        context = zmq.Context()
        sub = context.socket(zmq.SUB)
        sub.setsockopt(zmq.LINGER, 0)
        sub.setsockopt(zmq.SUBSCRIBE, b"")
        sub.connect(self.address)
        try:
            while not self._stop.is_set():  # bounded by stop(), called in the test's finally
                if not sub.poll(50):
                    continue
                topic, payload = sub.recv_multipart()
                message = msgpack.unpackb(payload, raw=False)
                key = topic.decode()
                self.counts[key] = self.counts.get(key, 0) + 1
                if key == "event":
                    self.counts[message["code"]] = self.counts.get(message["code"], 0) + 1
                self.latest = [message]
                self._ready.set()
        finally:
            sub.close(linger=0)
            context.term()

    def wait(self, predicate) -> bool:
        end = time.monotonic() + WAIT_S
        while time.monotonic() < end:
            if self.latest and predicate(self.latest[0]):
                return True
            time.sleep(0.01)
        return False

    def stop(self) -> dict:
        self._stop.set()
        self._thread.join(WAIT_S)
        return {key: self.counts.get(key, 0) for key in ("path", "status", "event")}


def _wait_status(link: NodeLink, predicate) -> dict | None:
    end = time.monotonic() + WAIT_S
    while time.monotonic() < end:
        answer = link.request({"op": "status"}, WAIT_S)
        if answer is not None and answer.get("ok") and predicate(answer):
            return answer
        time.sleep(0.02)
    return None


# ---------------------------------------------------------------------- half a multipart message


def test_half_a_multipart_input_is_reported_and_the_node_keeps_working(run_node, world):
    node = run_node()
    client = node.client(WAIT_S)
    inputs = node.server.endpoints["inputs"]

    dying = _Publisher(inputs)
    dying.socket.send(b"grid", zmq.SNDMORE)  # the first frame of two, then the sender dies:
    dying.close()  # ZeroMQ delivers whole messages only (libzmq zmq_send(3)), so the node sees nothing

    publisher = _Publisher(inputs)
    try:
        pose = _packed({"v": 1, "kind": "pose", "x_m": 5.0, "y_m": 15.0, "heading_rad": 0.0, "t_s": 1.0})
        publisher.send([b"grid"])  # a topic and no payload
        publisher.send([b"pose", b""])  # a topic and an empty payload
        publisher.send([b"pose", pose, b"extra"])  # three frames
        events = _events(client, {"bad_frames", "bad_msgpack"}, 3)
        assert [(e["code"], e["topic"]) for e in events] == [("bad_frames", "grid"), ("bad_msgpack", "pose"),
                                                             ("bad_frames", "pose")]
        assert all(e["detail"] and "\n" not in e["detail"] for e in events)

        publisher.send(_grid_frames(world.free_classes(), "m1", world))
        publisher.send(_pose_frames(*world.START, 2.0))
        status = client.wait_accepted("m1", world.START, WAIT_S)
        assert status["counters"]["rejected"] == 3  # the three above; the cut-off message never arrived
        assert status["counters"]["poses"] == 1 and status["counters"]["grids"] == 1
        goal_id = client.set_goal(*world.GOAL)
        path = client.wait_path(WAIT_S, goal_id=goal_id)
        # source: shapely geometry (tests/verify.py) against the grid's blocked squares
        verify.assert_valid_path(world.as_grid(world.free_classes()), EXAMPLE_VEHICLE, path, world.START, world.GOAL)
    finally:
        publisher.close()


def test_half_a_multipart_control_request_gets_an_answer_or_is_dropped_and_the_node_keeps_answering(run_node):
    node = run_node()
    client = node.client(WAIT_S)
    control = node.server.endpoints["control"]
    context = zmq.Context()
    try:
        request = context.socket(zmq.REQ)
        request.setsockopt(zmq.LINGER, 0)
        request.setsockopt(zmq.SNDTIMEO, int(1000 * WAIT_S))  # bounded, like every wait here
        request.connect(control)
        request.send_multipart([_packed({"v": 1, "op": "status"}), b"extra"])  # two frames
        assert request.poll(int(1000 * WAIT_S))
        answer = msgpack.unpackb(request.recv(), raw=False)
        assert answer["ok"] is False and answer["code"] == "bad_frames"

        # a DEALER may send what a REQ cannot: a bare delimiter, or no delimiter at all.
        # The REP socket drops such envelopes itself (libzmq zmq_socket(3), ZMQ_REP), so no
        # answer comes, and the node must not be left waiting to send one
        dealer = context.socket(zmq.DEALER)
        dealer.setsockopt(zmq.LINGER, 0)
        dealer.connect(control)
        dealer.send_multipart([b""])
        dealer.send_multipart([b"no delimiter"])
        assert not dealer.poll(1000)
        for _ in range(3):
            assert client.status()["ok"]
        dealer.send_multipart([b"", _packed({"v": 1, "op": "status"})])  # a well-formed one is served
        assert dealer.poll(int(1000 * WAIT_S))
        delimiter, body = dealer.recv_multipart()
        assert delimiter == b"" and msgpack.unpackb(body, raw=False)["ok"] is True
    finally:
        context.destroy(linger=0)


# ---------------------------------------------------------------------- SIGKILL while recording


def test_a_node_killed_while_recording_leaves_a_log_readable_to_the_last_whole_record(tmp_path):
    rows = cols = 1000  # 1 MB of cells per grid content record: long writes, so a kill may cut one
    extra = '[record]\npath = "drive.log"\n'
    node = NodeProcess(tmp_path, extra_toml=extra)
    sent_poses = 0
    try:
        link = NodeLink(node.addresses, timeout_s=WAIT_S, send_hwm=8)  # 8 MB of grids queued here at most
        try:
            shades = np.full((rows, cols), 254, np.uint8)
            for i in range(400):  # bounded; the kill comes after about 1.5 s of it
                shades[i, :] = 0  # every grid of new content
                link.send("grid", {"v": 1, "kind": "grid", "map_id": i, "rows": rows, "cols": cols,
                                   "cell_size_m": 0.05, "origin_m": [0.0, 0.0], "encoding": "raw",
                                   "cells": shades.tobytes()})
                for _ in range(5):
                    link.send("pose", {"v": 1, "kind": "pose", "x_m": 5.0, "y_m": 15.0, "heading_rad": 0.0,
                                       "t_s": float(sent_poses)})
                    sent_poses += 1
                if i % 20 == 0:
                    assert link.request({"op": "status"}, WAIT_S) is not None
                if i == 30:
                    kill_at = time.monotonic() + 1.5
                if i > 30 and time.monotonic() >= kill_at:
                    break
                time.sleep(0.01)
            node.kill()  # SIGKILL: no clean-up runs in the node
            assert node.process.returncode == -9
        finally:
            link.close()
    finally:
        node.kill()

    log_path = tmp_path / "drive.log"
    size_bytes = log_path.stat().st_size
    reader = LogReader(log_path)
    records = reader.read_all()
    assert records, "nothing was recorded"
    # only the record being written at the kill may be lost: damage, if any, is one cut-off tail
    assert len(reader.damage) <= 1
    for damage in reader.damage:
        assert damage.at_tail and damage.reason == "cut_off"
        assert damage.offset > records[-1].offset and damage.offset + damage.length == size_bytes
        assert damage.length < RECORD_OVERHEAD_BYTES + rows * cols + 1000  # one grid record at most
    assert reader.skipped_tail_bytes == sum(d.length for d in reader.damage)
    # every record read is whole: the message each kind holds, with the fields it was written with
    last_pose_t_s = -math.inf
    for record in records:
        message = record.message
        if record.kind == "grid":
            assert len(message["cells"]) == message["rows"] * message["cols"] == rows * cols
        elif record.kind == "pose":
            assert message["t_s"] > last_pose_t_s  # in the order sent, none twice
            last_pose_t_s = message["t_s"]
        elif record.kind == "control":
            assert message["request"]["op"] == "status" and message["reply"]["ok"] is True
        else:
            assert record.kind in OUTPUT_KINDS and message["kind"] == record.kind
    kinds = {record.kind for record in records}
    assert set(INPUT_KINDS) <= kinds and "status" in kinds
    print(f"SIGKILL while recording: {len(records)} whole records of {size_bytes} bytes read; "
          f"{reader.skipped_tail_bytes} tail bytes skipped ({[d.describe() for d in reader.damage]})")

    # A kill rarely lands inside a write (most of the node's time goes to other work), so
    # the log is also given the state a kill mid-write leaves: the first part of a record.
    whole_end = size_bytes - reader.skipped_tail_bytes
    with open(log_path, "rb") as log_file:
        log_file.seek(records[-1].offset)
        last_record = log_file.read(whole_end - records[-1].offset)
    with open(log_path, "r+b") as log_file:
        log_file.truncate(whole_end)
        log_file.seek(whole_end)
        log_file.write(last_record[: len(last_record) // 2])
    torn = LogReader(log_path)
    torn_records = torn.read_all()
    assert [(r.offset, r.kind) for r in torn_records] == [(r.offset, r.kind) for r in records]
    assert len(torn.damage) == 1 and torn.damage[0].at_tail and torn.damage[0].reason == "cut_off"
    assert torn.skipped_tail_bytes == len(last_record) // 2
    log_path.unlink()  # over 100 MB
