"""Fuzz the node's edge: input and control decoding (veer.node.codec) and NODE.toml (veer.node.config).

Frames are drawn as a socket could deliver them: valid messages with fields dropped,
retyped or out of range, msgpack bytes mutated, plain garbage, the wrong number of
frames. Property: a checked value, or WireError / ConfigError with a code and a one-line
message; nothing else, no hang.
"""

from __future__ import annotations

import math

import msgpack
import numpy as np
import pytest
from hypothesis import event, given
from hypothesis import strategies as st

import fuzzkit
from fuzzkit import fuzz_settings, mostly, mutated, outcome, toml_table, toml_values
from veer.maps import OccupancyGrid
from veer.node.codec import (
    CONTROL_OPS,
    ControlRequest,
    GridInput,
    PoseInput,
    WireError,
    decode_control,
    decode_grid,
    decode_input,
)
from veer.node.config import ConfigError, NodeConfig, config_from_mapping, load_config

MAX_CELLS = 4096


def wire_values():
    """Values msgpack can carry: no huge ints (msgpack stops at 64 bits)."""
    scalars = st.one_of(st.none(), st.booleans(), st.integers(-(2**63), 2**64 - 1), st.floats(),
                        fuzzkit.odd_floats(), st.text(max_size=8), st.binary(max_size=8))
    return st.recursive(scalars, lambda inner: st.lists(inner, max_size=3)
                        | st.dictionaries(st.text(max_size=6), inner, max_size=3), max_leaves=5)


def wire_numbers():
    """Mostly plain numbers (so that whole messages pass now and then), sometimes edge floats or junk."""
    plain = st.floats(-50.0, 50.0) | st.integers(-5, 50)
    return st.integers(0, 9).flatmap(lambda pick: plain if pick < 7 else fuzzkit.odd_floats() if pick < 8
                                     else wire_values())


@st.composite
def near_valid(draw, base: dict) -> dict:
    """``base`` with up to three fields dropped or given other values, and maybe an extra field."""
    message = dict(base)
    if draw(st.booleans()):
        return message
    for field in draw(st.lists(st.sampled_from(sorted(message)), min_size=1, max_size=3, unique=True)):
        if draw(st.booleans()):
            del message[field]
        else:
            message[field] = draw(wire_values())
    if draw(st.booleans()):
        message[draw(st.text(max_size=6))] = draw(wire_values())
    return message


@st.composite
def grid_payloads(draw) -> dict:
    rows, cols = draw(st.integers(1, 8)), draw(st.integers(1, 8))
    encoding = draw(st.sampled_from(["raw", "pgm", "png"]))
    samples = np.random.default_rng(draw(st.integers(0, 2**32 - 1))).integers(0, 256, (rows, cols))
    cells = {"raw": samples.astype(np.uint8).tobytes(), "pgm": fuzzkit.pgm_p5(samples, 255),
             "png": fuzzkit.png_file(samples, 8, 0)}[encoding]
    sometimes = st.integers(0, 3).map(lambda pick: pick == 0)  # one time in four
    if draw(sometimes):
        cells = draw(mutated(st.just(cells)))
    base = {"v": 1, "kind": "grid", "map_id": draw(st.integers(0, 9) | st.text(max_size=3)), "rows": rows,
            "cols": cols, "cell_size_m": draw(wire_numbers()) if draw(sometimes) else 0.1,
            "origin_m": draw(st.lists(wire_numbers(), max_size=3)) if draw(sometimes) else [0.0, -1.5],
            "encoding": encoding, "cells": cells}
    return draw(near_valid(base))


def pose_payloads():
    base = st.fixed_dictionaries({"v": st.just(1), "kind": st.just("pose"), "x_m": wire_numbers(),
                                  "y_m": wire_numbers(), "heading_rad": wire_numbers(), "t_s": wire_numbers()})
    return base.flatmap(near_valid)


def packed(messages):
    return messages.map(lambda m: msgpack.packb(m, use_bin_type=True))


@st.composite
def input_frames(draw) -> list:
    kind = draw(st.sampled_from(["grid", "pose"]))
    payload = draw(packed(grid_payloads() if kind == "grid" else pose_payloads()))
    choice = draw(st.sampled_from(["as is", "as is", "as is", "mutated", "garbage", "other topic", "frames"]))
    topic = kind.encode()
    if choice == "mutated":
        payload = draw(mutated(st.just(payload)))
    elif choice == "garbage":
        payload = draw(st.binary(max_size=64))
    elif choice == "other topic":
        topic = draw(st.sampled_from([b"grid", b"pose", b"path", b"", b"\xff\xfe", b"g" * 100]))
    elif choice == "frames":
        return draw(st.lists(st.binary(max_size=16), max_size=4))
    return [topic, payload]


def check_input(found) -> None:
    if isinstance(found, PoseInput):
        assert all(math.isfinite(v) for v in (found.x_m, found.y_m, found.heading_rad, found.t_s))
    else:
        assert isinstance(found, GridInput)
        assert isinstance(found.map_id, (int, str)) and not isinstance(found.map_id, bool)


@given(frames=input_frames(), max_bytes=st.sampled_from([1 << 20, 1 << 20, 1 << 20, 64]))
@fuzz_settings(ci=400, deep=5000)
def test_input_frames_decode_or_are_refused(frames, max_bytes):
    found, error = outcome(decode_input, frames, max_bytes=max_bytes, max_cells=MAX_CELLS, allowed=(WireError,))
    if found is None:
        event(f"input refused: {getattr(error, 'code', 'known bug')}")
        return
    check_input(found)
    if isinstance(found, GridInput):
        decoded, error = outcome(decode_grid, found, MAX_CELLS, allowed=(WireError,))
        event(f"grid {'decoded' if decoded is not None else 'refused: ' + getattr(error, 'code', 'known bug')}")
        if decoded is not None:
            assert isinstance(decoded.grid, OccupancyGrid)
            assert decoded.grid.classes.shape == (found.message["rows"], found.message["cols"])
    else:
        event("pose decoded")


def control_payloads():
    triple = st.lists(wire_numbers(), min_size=3, max_size=3) | wire_values()
    goal = st.fixed_dictionaries({"v": st.just(1), "op": st.just("goal"), "x_m": wire_numbers(),
                                  "y_m": wire_numbers(), "heading_rad": wire_numbers()},
                                 optional={"reverse": st.booleans() | wire_values()})
    plan = st.fixed_dictionaries({"v": st.just(1), "op": st.just("plan"), "start": triple, "goal": triple},
                                 optional={"reverse": st.booleans() | wire_values()})
    other = st.fixed_dictionaries({"v": st.just(1), "op": st.sampled_from(CONTROL_OPS) | wire_values()})
    return st.one_of(goal, plan, other).flatmap(near_valid)


@given(frames=st.one_of(packed(control_payloads()).map(lambda p: [p]), packed(control_payloads()).map(lambda p: [p]),
                        packed(control_payloads()).flatmap(lambda p: mutated(st.just(p))).map(lambda p: [p]),
                        st.lists(st.binary(max_size=32), max_size=3)),
       max_bytes=st.sampled_from([1 << 20, 1 << 20, 1 << 20, 64]))
@fuzz_settings(ci=400, deep=5000)
def test_control_requests_decode_or_are_refused(frames, max_bytes):
    found, error = outcome(decode_control, frames, max_bytes=max_bytes, allowed=(WireError,))
    if found is None:
        event(f"control refused: {getattr(error, 'code', 'known bug')}")
        return
    event(f"control decoded: {found.op}")
    assert isinstance(found, ControlRequest) and found.op in CONTROL_OPS
    for value in found.fields.values():
        if isinstance(value, float):
            assert math.isfinite(value)


# ------------------------------------------------------------------ NODE.toml

SECTION_KEYS = {
    "sockets": ["inputs", "outputs", "control"],
    "limits": ["max_message_bytes", "max_control_bytes", "max_grid_cells", "input_queue_messages",
               "drain_max_messages", "output_queue_messages", "control_queue_messages", "control_requests_per_s",
               "control_burst_requests"],
    "security": ["secret_key_file", "allowed_clients_dir", "allow_insecure_bind"],
    "replan": ["off_path_m", "off_path_deg", "start_ahead_m", "moving_above_m_per_s", "track_window_m",
               "max_supersedes", "plan_deadline_s", "retry_moved_m"],
    "status": ["interval_s"],
    "log": ["level"],
    "vehicle": ["file", "wheelbase_m", "max_steer_deg", "radius_m", "length_m", "width_m"],
    "search": ["max_expansions", "heading_bins", "max_time_s", "allow_reverse"],
    "record": ["path", "append", "fsync_every_s"],
}


def config_tables():
    section = mostly(st.sampled_from(sorted(SECTION_KEYS)), st.text(max_size=6))

    def table_for(name):
        keys = mostly(st.sampled_from(SECTION_KEYS.get(name, ["x"])), st.text(max_size=6))
        values = toml_values() | st.booleans() | st.sampled_from(["info", "tcp://127.0.0.1:*", "tcp://0.0.0.0:7401",
                                                                  "robot.toml", "keys", "", "a\x00b", "\n"])
        return mostly(st.dictionaries(keys, values, max_size=3), toml_values())

    return st.dictionaries(section, st.just(None), max_size=4).flatmap(
        lambda names: st.fixed_dictionaries({name: table_for(name) for name in names}))


def check_config(config) -> None:
    assert isinstance(config, NodeConfig)
    assert config.limits.max_control_bytes <= config.limits.max_message_bytes
    assert 0.05 <= config.status_interval_s <= 1.0


@pytest.fixture(scope="module")
def config_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz_node_config")
    (folder / "robot.toml").write_text("wheelbase_m = 1.0\nmax_steer_deg = 30\nradius_m = 0.5\n", encoding="utf-8")
    return folder


@given(table=config_tables())
@fuzz_settings(ci=300, deep=4000)
def test_node_config_tables_give_a_config_or_are_refused(config_dir, table):
    config, _ = outcome(config_from_mapping, table, base_dir=config_dir, allowed=(ConfigError,))
    if config is not None:
        check_config(config)


SEED_NODE_TOML = b"""[sockets]
inputs = "tcp://127.0.0.1:7401"
[limits]
max_grid_cells = 1000000
[replan]
off_path_m = 0.5
[status]
interval_s = 0.5
[log]
level = "info"
[vehicle]
file = "robot.toml"
[search]
max_expansions = 1000
"""


@given(content=mutated(st.just(SEED_NODE_TOML)) | config_tables().map(lambda t: node_toml(t))
       | st.binary(max_size=120))
@fuzz_settings(ci=200, deep=4000)
def test_node_toml_files_load_or_are_refused(config_dir, content):
    path = config_dir / "NODE.toml"
    path.write_bytes(content)
    config, _ = outcome(load_config, path, allowed=(ConfigError,))
    if config is not None:
        check_config(config)


def node_toml(table: dict) -> bytes:
    """Sections as [name] tables; a section that is not a table is written as a plain key."""
    plain = {name: value for name, value in table.items() if not isinstance(value, dict)}
    text = toml_table(plain)
    for name, value in table.items():
        if isinstance(value, dict):
            text += f"[{toml_table({name: 0}).split(' = ')[0]}]\n" + toml_table(value)
    return text.encode("utf-8", "surrogatepass")
