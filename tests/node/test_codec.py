"""The wire codec: what it accepts, what it refuses (with which code), and that garbage never escapes as anything else."""

from __future__ import annotations

import math

import cv2
import msgpack
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from veer.node.codec import (
    PROTOCOL_VERSION,
    GridInput,
    PoseInput,
    WireError,
    decode_control,
    decode_grid,
    decode_input,
    encode,
    encode_output,
)

LIMITS = {"max_bytes": 1 << 20, "max_cells": 1 << 20}


def pack(message) -> bytes:
    return msgpack.packb(message, use_bin_type=True)


POSE = {"v": 1, "kind": "pose", "x_m": 1.5, "y_m": -2.0, "heading_rad": 0.5, "t_s": 12.0}


def grid_message(shades: np.ndarray, **fields) -> dict:
    return {"v": 1, "kind": "grid", "map_id": 7, "rows": shades.shape[0], "cols": shades.shape[1],
            "cell_size_m": 0.1, "origin_m": [1.0, 2.0], "encoding": "raw", "cells": shades.tobytes(), **fields}


def code_of(frames, **limits) -> str:
    with pytest.raises(WireError) as caught:
        decode_input(frames, **{**LIMITS, **limits})
    assert caught.value.detail and "\n" not in caught.value.detail
    return caught.value.code


def test_a_pose_decodes_and_integers_count_as_floats():
    assert decode_input([b"pose", pack(POSE)], **LIMITS) == PoseInput(1.5, -2.0, 0.5, 12.0)
    # docs/protocol.md: any msgpack integer is accepted where a float is expected (2.0 is often written as 2)
    pose = decode_input([b"pose", pack({**POSE, "x_m": 2, "t_s": 0})], **LIMITS)
    assert pose.x_m == 2.0 and isinstance(pose.x_m, float)


@pytest.mark.parametrize("value", [True, "1.0", None, [1.0], math.nan, math.inf, -math.inf])
def test_a_pose_field_that_is_no_finite_number_is_refused(value):
    # docs/protocol.md: booleans are not numbers; NaN and infinities are out of range
    assert code_of([b"pose", pack({**POSE, "heading_rad": value})]) == "bad_field"


@pytest.mark.parametrize(
    ("frames", "code"),
    [
        ([b"pose"], "bad_frames"),
        ([b"pose", pack(POSE), b""], "bad_frames"),
        ([b"wheel_speeds", pack(POSE)], "unknown_topic"),
        ([b"pose", b"\xc1"], "bad_msgpack"),  # source: msgpack spec, 0xc1 is "never used"
        ([b"pose", pack(POSE) + b"\x00"], "bad_msgpack"),
        ([b"pose", pack([1, 2])], "bad_message"),
        ([b"pose", pack({k: v for k, v in POSE.items() if k != "v"})], "bad_version"),
        ([b"pose", pack({**POSE, "v": 2})], "bad_version"),
        ([b"pose", pack({**POSE, "v": True})], "bad_version"),
        ([b"pose", pack({**POSE, "kind": "grid"})], "bad_kind"),
        ([b"pose", pack({k: v for k, v in POSE.items() if k != "t_s"})], "missing_field"),
        ([b"pose", pack({1: 2})], "bad_msgpack"),  # map keys must be strings
    ],
)
def test_malformed_inputs_get_their_code(frames, code):
    assert code_of(frames) == code


def test_a_message_over_the_byte_limit_is_refused_before_decoding():
    assert code_of([b"pose", pack(POSE)], max_bytes=10) == "too_large"


def test_a_raw_grid_decodes_to_the_classes_of_its_shades():
    shades = np.full((3, 4), 254, np.uint8)
    shades[0, 1] = 0  # dark: occupied; mid grey: unknown (docs/files.md, "Map image")
    shades[2, 3] = 150
    checked = decode_input([b"grid", pack(grid_message(shades))], **LIMITS)
    assert isinstance(checked, GridInput) and checked.grid is None and checked.map_id == 7
    grid = decode_grid(checked, LIMITS["max_cells"]).grid
    assert grid.classes.tolist() == [[0, 1, 0, 0], [0, 0, 0, 0], [0, 0, 0, 2]]
    assert grid.origin_m == (1.0, 2.0) and grid.cell_size_m == 0.1


def test_a_png_grid_made_by_opencv_decodes_the_same():
    rng = np.random.default_rng(3)
    shades = np.where(rng.random((20, 30)) < 0.3, 0, 254).astype(np.uint8)
    ok, png = cv2.imencode(".png", shades)  # source: OpenCV's PNG encoder (libpng)
    assert ok
    raw = decode_grid(decode_input([b"grid", pack(grid_message(shades))], **LIMITS), 10**6).grid
    message = grid_message(shades, encoding="png", cells=png.tobytes())
    from_png = decode_grid(decode_input([b"grid", pack(message)], **LIMITS), 10**6).grid
    assert np.array_equal(raw.classes, from_png.classes)


@pytest.mark.parametrize(
    ("fields", "code"),
    [
        ({"rows": 4}, "bad_field"),  # raw cells do not match rows * cols
        ({"rows": 0}, "bad_field"),
        ({"rows": True}, "bad_field"),
        ({"rows": 5000, "cols": 5000}, "too_large"),
        ({"cell_size_m": "0.1"}, "bad_field"),
        ({"origin_m": [0.0, math.nan]}, "bad_field"),
        ({"origin_m": 3}, "bad_field"),
        ({"encoding": "bmp"}, "bad_field"),
        ({"cells": "abc"}, "bad_field"),
        ({"map_id": 1.5}, "bad_field"),
        ({"map_id": ""}, "bad_field"),
        ({"map_id": None}, "bad_field"),
    ],
)
def test_grid_envelopes_are_checked_before_any_decoding(fields, code):
    shades = np.full((3, 4), 254, np.uint8)
    assert code_of([b"grid", pack(grid_message(shades, **fields))], max_cells=10**6) == code


def test_corrupt_image_cells_are_refused_with_the_maps_code():
    shades = np.full((3, 4), 254, np.uint8)
    message = grid_message(shades, encoding="png", cells=b"\x89PNG\r\n\x1a\n" + b"\x00" * 30)
    checked = decode_input([b"grid", pack(message)], **LIMITS)
    with pytest.raises(WireError) as caught:
        decode_grid(checked, 10**6)
    assert caught.value.code in ("bad_grid_message", "bad_image")


@settings(max_examples=300, deadline=None, database=None, suppress_health_check=[HealthCheck.too_slow])
@given(topic=st.sampled_from([b"grid", b"pose", b"x"]), payload=st.binary(max_size=200))
def test_random_bytes_only_ever_raise_wire_errors(topic, payload):
    try:
        item = decode_input([topic, payload], **LIMITS)
    except WireError:
        return
    if isinstance(item, GridInput):
        try:
            decode_grid(item, LIMITS["max_cells"])
        except WireError:
            pass


@settings(max_examples=200, deadline=None, database=None)
@given(st.dictionaries(st.sampled_from(["v", "op", "x_m", "y_m", "heading_rad", "start", "goal", "reverse"]),
                       st.one_of(st.none(), st.booleans(), st.integers(-5, 5), st.floats(allow_nan=True),
                                 st.text(max_size=6), st.lists(st.floats(), max_size=4))))
def test_random_control_maps_only_ever_raise_wire_errors(message):
    try:
        request = decode_control([pack(message)], max_bytes=1 << 16)
    except WireError:
        return
    for value in request.fields.values():
        if isinstance(value, float):
            assert math.isfinite(value)


def test_control_requests_decode_to_typed_fields():
    goal = decode_control([pack({"v": 1, "op": "goal", "x_m": 1, "y_m": 2.5, "heading_rad": 0})], max_bytes=4096)
    assert goal.op == "goal" and goal.fields == {"x_m": 1.0, "y_m": 2.5, "heading_rad": 0.0, "reverse": None}
    plan = decode_control([pack({"v": 1, "op": "plan", "start": [0, 1, 2], "goal": [3.0, 4.0, 5.0],
                                 "reverse": False})], max_bytes=4096)
    assert plan.fields == {"start": (0.0, 1.0, 2.0), "goal": (3.0, 4.0, 5.0), "reverse": False}
    for op in ("cancel", "status", "path"):
        assert decode_control([pack({"v": 1, "op": op})], max_bytes=4096).op == op


def test_outputs_are_two_frames_with_version_and_kind_and_plain_numbers():
    topic, payload = encode_output("status", {"state": "idle", "n": np.int64(3), "x": np.float32(0.5),
                                              "a": np.arange(2), "t": (1, 2)})
    assert topic == b"status"
    # source: msgpack reference implementation (msgpack-python) reads it back
    assert msgpack.unpackb(payload, raw=False) == {"v": PROTOCOL_VERSION, "kind": "status", "state": "idle",
                                                   "n": 3, "x": 0.5, "a": [0, 1], "t": [1, 2]}
    assert msgpack.unpackb(encode({"cells": b"\x00\x01"}), raw=False) == {"cells": b"\x00\x01"}
