"""Limits of the node: each in NODE.toml with a safe default, each hit an event with a code.

Sockets bind loopback on ports the OS picks; waits are bounded; no test asserts a
duration. Socket options are read back from libzmq, the reference for what they mean.
"""

from __future__ import annotations

import logging
import struct
import time
import zlib
from dataclasses import replace
from types import SimpleNamespace

import msgpack
import numpy as np
import pytest
import zmq

from veer.node.codec import WireError, unpack_control, unpack_input
from veer.node.config import ConfigError, LimitSettings, NodeConfig, config_from_mapping
from veer.node.server import ReportThrottle, TokenBucket
from veer.node.worker import MAX_QUEUED_JOBS, PlanWorker

WAIT_S = 15.0


def limited(world, **limits) -> NodeConfig:
    config = world.node_config()
    return replace(config, limits=replace(config.limits, **limits))


# ------------------------------------------------------------------ NODE.toml


def test_every_limit_has_a_safe_default():
    limits = LimitSettings()
    assert limits == NodeConfig().limits == config_from_mapping({}).limits
    for name in ("max_message_bytes", "max_control_bytes", "max_grid_cells", "input_queue_messages",
                 "drain_max_messages", "output_queue_messages", "control_queue_messages", "control_requests_per_s",
                 "control_burst_requests"):
        value = getattr(limits, name)
        assert 0 < value < 2**31, name  # finite and on: no limit is off by default
    assert limits.max_control_bytes <= limits.max_message_bytes
    assert LimitSettings().input_queue_messages < 1000  # common practice: below libzmq's default HWM of 1000


def test_new_limits_are_read_from_node_toml():
    config = config_from_mapping({"limits": {"output_queue_messages": 7, "control_queue_messages": 3,
                                             "control_requests_per_s": 2, "control_burst_requests": 5}})
    limits = config.limits
    assert (limits.output_queue_messages, limits.control_queue_messages, limits.control_burst_requests) == (7, 3, 5)
    assert limits.control_requests_per_s == 2.0 and isinstance(limits.control_requests_per_s, float)


@pytest.mark.parametrize(("key", "value", "word"), [
    ("output_queue_messages", 0, "between"), ("control_queue_messages", 1.5, "whole number"),
    ("control_requests_per_s", 0, "between"), ("control_requests_per_s", "fast", "number"),
    ("control_burst_requests", -1, "between"), ("input_queue_messages", 0, "between"),
])
def test_a_bad_limit_is_refused_in_one_line(key, value, word):
    with pytest.raises(ConfigError) as caught:
        config_from_mapping({"limits": {key: value}})
    assert key in str(caught.value) and word in str(caught.value) and "\n" not in str(caught.value)


# ------------------------------------------------------------------ building blocks


def test_the_token_bucket_allows_a_burst_then_the_rate():
    bucket = TokenBucket(rate_per_s=2.0, size=3, now_s=0.0)
    # common practice: a full bucket of size b passes b requests at once, then r per second
    assert [bucket.take(0.0) for _ in range(4)] == [True, True, True, False]
    assert bucket.take(0.25) is False  # half a token
    assert bucket.take(0.5) is True  # one token after 1 / rate seconds
    assert [bucket.take(100.0) for _ in range(4)] == [True, True, True, False]  # never more than the size


def test_the_report_throttle_reports_first_at_once_then_counts():
    throttle = ReportThrottle(every_s=1.0)
    assert throttle.hit(("rate_limited", ""), 0.0, "d") == 1
    assert [throttle.hit(("rate_limited", ""), 0.1 * i, "d") for i in range(1, 5)] == [0, 0, 0, 0]
    assert throttle.hit(("other", ""), 0.5, "d") == 1  # each code on its own
    assert throttle.due(0.9) == []
    assert throttle.due(1.0) == [(("rate_limited", ""), 4, "d", None)]  # held hits come out when due
    assert throttle.due(5.0) == []


def test_the_planning_queues_are_bounded():
    worker = PlanWorker(planner=None, context=None, wake_address="inproc://unused")  # not started
    jobs = [SimpleNamespace(job_id=i) for i in range(MAX_QUEUED_JOBS + 1)]
    assert [worker.start(job) for job in jobs] == [True] * MAX_QUEUED_JOBS + [False]
    assert worker.results.maxsize == MAX_QUEUED_JOBS


def test_the_codec_refuses_payloads_over_the_byte_limits():
    payload = msgpack.packb({"v": 1, "kind": "pose", "pad": b"\x00" * 200}, use_bin_type=True)
    with pytest.raises(WireError) as caught:
        unpack_input([b"pose", payload], max_bytes=100)
    assert caught.value.code == "too_large"
    with pytest.raises(WireError) as caught:
        unpack_control([payload], max_bytes=100)
    assert caught.value.code == "too_large"


# ------------------------------------------------------------------ on the wire


def test_every_socket_has_its_high_water_marks_and_size_limit(run_node, world):
    config = limited(world, input_queue_messages=5, output_queue_messages=6, control_queue_messages=7,
                     max_message_bytes=1 << 20)
    server = run_node(config).server
    # source: libzmq zmq_setsockopt(3) / zmq_getsockopt(3): ZMQ_RCVHWM, ZMQ_SNDHWM, ZMQ_MAXMSGSIZE
    assert server.sub.getsockopt(zmq.RCVHWM) == 5 and server.sub.getsockopt(zmq.MAXMSGSIZE) == 1 << 20
    assert server.pub.getsockopt(zmq.SNDHWM) == 6
    assert server.rep.getsockopt(zmq.RCVHWM) == 7 and server.rep.getsockopt(zmq.SNDHWM) == 7
    assert server.rep.getsockopt(zmq.MAXMSGSIZE) == 1 << 20


def test_control_requests_over_the_rate_are_answered_rate_limited_and_reported(run_node, world):
    node = run_node(limited(world, control_requests_per_s=1.0, control_burst_requests=3))
    client = node.client(timeout_s=WAIT_S)  # connecting sends no control request
    answers = [client.request({"v": 1, "op": "status"}) for _ in range(8)]
    refused = [a for a in answers if not a["ok"]]
    assert answers[0]["ok"] and 1 <= len(refused) <= 5  # 3 saved up, plus what ~1 per second refilled meanwhile
    assert all(a["code"] == "rate_limited" and "control_requests_per_s" in a["error"] for a in refused)
    event = client.wait_event("rate_limited", WAIT_S)
    assert event["count"] >= 1 and event["detail"]
    assert client.wait_status(WAIT_S)["state"] == "idle"  # outputs still flow
    end = time.monotonic() + WAIT_S
    while not client.request({"v": 1, "op": "status"})["ok"]:  # bounded: the bucket refills at 1 per second
        assert time.monotonic() < end, "the bucket never refilled"
        time.sleep(0.2)


def test_a_grid_over_the_cell_ceiling_is_refused_with_an_event(run_node, world):
    client = run_node(limited(world, max_grid_cells=1000)).client()
    client.send_grid(np.zeros((30, 40), np.uint8), map_id="big", cell_size_m=0.1, classes=True)  # 1200 cells
    event = client.wait_event("too_large", WAIT_S)
    assert event["topic"] == "grid" and "1000" in event["detail"]

    def chunk(kind: bytes, data: bytes) -> bytes:
        # source: PNG specification (ISO/IEC 15948), section 5.3: length, type, data, CRC-32 of type + data
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))

    # a tiny PNG whose header claims 30 x 30 pixels (900 cells, under the ceiling) but a 100000 x 100000 image
    header = struct.pack(">IIBBBBB", 100_000, 100_000, 8, 0, 0, 0, 0)  # source: PNG spec section 11.2.2 (IHDR)
    png = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(b"")) + chunk(b"IEND", b"")
    message = {"v": 1, "kind": "grid", "map_id": "liar", "rows": 30, "cols": 30, "cell_size_m": 0.1,
               "origin_m": [0.0, 0.0], "encoding": "png", "cells": png}
    client.send_raw(b"grid", msgpack.packb(message, use_bin_type=True))
    event = client.wait_for("event", WAIT_S, lambda m: m.get("topic") == "grid" and m.get("code") != "too_large")
    assert event["code"] in ("map_too_large", "bad_grid_message") and "1000" in event["detail"]
    assert client.status()["map_id"] is None  # neither was taken in


def test_a_control_message_over_the_socket_limit_gets_no_answer_and_an_event(run_node, world):
    client = run_node(limited(world, max_message_bytes=64 * 1024, max_control_bytes=1024)).client()
    from veer.node.client import NodeTimeout

    with pytest.raises(NodeTimeout):  # libzmq drops the sender (ZMQ_MAXMSGSIZE): no answer comes
        client.request(b"\x00" * (256 * 1024), timeout_s=1.0)
    assert client.wait_event("control_disconnected", WAIT_S)["detail"]
    assert client.status()["state"] == "idle"  # a new request socket is served again


def test_a_full_input_queue_is_reported(run_node, world, caplog):
    caplog.set_level(logging.INFO, logger="veer.node")
    node = run_node(limited(world, input_queue_messages=2, drain_max_messages=2))
    client = node.client()
    pose = msgpack.packb({"v": 1, "kind": "pose", "x_m": 5.0, "y_m": 15.0, "heading_rad": 0.0, "t_s": 1.0})
    for _ in range(200):  # bounded burst; the node reads at most 2 a pass
        client.send_raw(b"pose", pose)
    codes = set()
    end = time.monotonic() + WAIT_S
    while not {"input_queue_full", "input_backlog"} <= codes:
        assert time.monotonic() < end, f"events seen: {codes}"
        codes.add(client.wait_event(None, WAIT_S)["code"])
    assert any("input_queue_messages" in r.getMessage() for r in caplog.records)
    assert client.status()["pose"] == [5.0, 15.0, 0.0]


def test_a_plan_over_its_time_ceiling_is_reported(run_node, world):
    walls = [(10.0, 0.0, 10.3, 27.0), (17.0, 3.0, 17.3, 30.0), (24.0, 0.0, 24.3, 27.0), (31.0, 3.0, 31.3, 30.0)]
    classes = world.with_boxes(world.free_classes(), walls)  # a zig-zag: no path without a long search
    client = run_node(world.node_config(plan_deadline_s=0.01)).client()
    client.send_grid(classes, map_id="maze", cell_size_m=world.CELL_M, classes=True)
    client.send_pose(*world.START)
    client.wait_accepted("maze", world.START, WAIT_S)
    goal_id = client.set_goal(*world.GOAL)
    path = client.wait_for("path", WAIT_S, lambda m: m["goal_id"] == goal_id, keep_others=True)
    assert path["status"] == "no_path" and path["reason"] == "deadline"
    event = client.wait_event("plan_deadline", WAIT_S)
    assert "0.01" in event["detail"] and event["job"] == "plan"
