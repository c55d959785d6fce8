"""Tests for the plan picture: a valid PNG, the map placed right, path and markers in their colours."""

from __future__ import annotations

import math
import struct
import zlib

import cv2
import numpy as np
import pytest

from veer.maps import FREE, OCCUPIED, UNKNOWN, OccupancyGrid, inflate
from veer.planning.vehicle import EXAMPLE_VEHICLE, Vehicle
from veer.tools.picture import (
    FORWARD_BGR,
    FREE_BGR,
    GEAR_CHANGE_BGR,
    GOAL_BGR,
    MARGIN_BGR,
    OCCUPIED_BGR,
    PictureError,
    REVERSE_BGR,
    START_BGR,
    UNKNOWN_BGR,
    _choose_scale_bar_m,
    render_plan_picture,
)

CELL_M = 0.1
ORIGIN_M = (-5.0, 2.0)
ROWS, COLS = 200, 300  # 20 m tall, 30 m wide
LONE_CELL = (150, 220)  # an occupied cell standing alone, far from everything else
UNKNOWN_BOX = (slice(20, 40), slice(20, 60))


def _grid() -> OccupancyGrid:
    classes = np.full((ROWS, COLS), FREE, np.uint8)
    classes[0, :] = classes[-1, :] = OCCUPIED  # a one-cell frame to find the map by
    classes[:, 0] = classes[:, -1] = OCCUPIED
    classes[LONE_CELL] = OCCUPIED
    classes[UNKNOWN_BOX] = UNKNOWN
    return OccupancyGrid(classes, cell_size_m=CELL_M, origin_m=ORIGIN_M)


def _straight(a, b, gear, step_m=0.2):
    """Poses from a to b (excluding a); the heading faces travel for gear +1, away for -1."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    n = int(math.ceil(np.linalg.norm(b - a) / step_m))
    direction = math.atan2(b[1] - a[1], b[0] - a[0])
    heading = direction if gear > 0 else direction + math.pi
    t = np.linspace(0.0, 1.0, n + 1)[1:, None]
    xy = a + t * (b - a)
    return np.column_stack((xy, np.full(n, heading), np.full(n, float(gear))))


START = (0.0, 10.0, 0.0)
CUSP = (15.0, 10.0)
GOAL = (15.0, 16.0, -math.pi / 2)


def _poses() -> np.ndarray:
    forward = _straight(START[:2], CUSP, +1)
    reverse = _straight(CUSP, GOAL[:2], -1)
    first = np.array([[START[0], START[1], START[2], 1.0]])
    return np.vstack((first, forward, reverse))


@pytest.fixture(scope="module")
def inflated():
    return inflate(_grid(), 1.0)


@pytest.fixture(scope="module")
def picture(tmp_path_factory, inflated):
    out = tmp_path_factory.mktemp("pictures") / "plan.png"
    written = render_plan_picture(
        out, inflated, EXAMPLE_VEHICLE, START, GOAL, _poses(),
        title="test plan", notes=("length 21.0 m, reverse 6.0 m, 1 gear change",),
    )
    assert written == out
    return out, cv2.imread(str(out), cv2.IMREAD_UNCHANGED)


def _map_box(image: np.ndarray) -> tuple[int, int, int, int]:
    """(left, top, right, bottom) pixel bounds (inclusive) of the occupied frame of the map."""
    dark = np.all(image == OCCUPIED_BGR, axis=2)
    rows = np.flatnonzero(dark.sum(axis=1) > 0.9 * dark.sum(axis=1).max())
    cols = np.flatnonzero(dark.sum(axis=0) > 0.9 * dark.sum(axis=0).max())
    return int(cols[0]), int(rows[0]), int(cols[-1]), int(rows[-1])


def _world_to_pixel(image: np.ndarray, x_m: float, y_m: float) -> tuple[int, int]:
    """Pixel (row, col) where a world point must land, from the map frame found in the image."""
    left, top, right, bottom = _map_box(image)
    px_per_m_x = (right - left + 1) / (COLS * CELL_M)
    px_per_m_y = (bottom - top + 1) / (ROWS * CELL_M)
    col = left + (x_m - ORIGIN_M[0]) * px_per_m_x
    row = top + (ROWS * CELL_M - (y_m - ORIGIN_M[1])) * px_per_m_y
    return int(math.floor(row)), int(math.floor(col))


def test_file_is_a_valid_png(picture):
    out, image = picture
    data = out.read_bytes()
    # source: PNG specification (W3C / ISO/IEC 15948:2004) 5.2 signature, 5.3 chunk layout
    # and CRC-32, 11.2.2 IHDR
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    length, kind = struct.unpack(">I4s", data[8:16])
    assert (length, kind) == (13, b"IHDR")
    body = data[16 : 16 + length]
    (crc,) = struct.unpack(">I", data[16 + length : 20 + length])
    assert zlib.crc32(kind + body) == crc
    width, height, depth, colour_type = struct.unpack(">IIBB", body[:10])
    assert (depth, colour_type) == (8, 2)  # 8-bit truecolour
    assert data[-12:] == b"\x00\x00\x00\x00IEND\xaeB`\x82"
    assert image.shape == (height, width, 3)


def test_map_size_and_aspect(picture):
    _, image = picture
    left, top, right, bottom = _map_box(image)
    width_px, height_px = right - left + 1, bottom - top + 1
    assert 1200 <= max(width_px, height_px) <= 1600
    # Square cells: the map keeps the grid's aspect ratio, each cell the same whole number of pixels.
    assert width_px * ROWS == height_px * COLS
    assert width_px % COLS == 0
    # Bands for the title and the legend around the map.
    assert top >= 40 and image.shape[0] - bottom >= 60
    assert image.shape[1] >= width_px


def test_world_point_lands_on_its_cell(picture):
    _, image = picture
    grid = _grid()
    x_m, y_m = grid.cell_to_world(*LONE_CELL)
    row, col = _world_to_pixel(image, x_m, y_m)
    assert tuple(image[row, col]) == OCCUPIED_BGR
    # One cell to each side is not the obstacle but its inflated margin.
    cell_px = (_map_box(image)[2] - _map_box(image)[0] + 1) / COLS
    for d_row, d_col in ((0, 1), (0, -1), (1, 0), (-1, 0)):
        neighbour = image[int(row + d_row * cell_px), int(col + d_col * cell_px)]
        assert tuple(neighbour) == MARGIN_BGR


def test_cell_classes_in_their_colours(picture):
    _, image = picture
    grid = _grid()
    x_m, y_m = grid.cell_to_world(30, 40)  # inside the unknown box
    assert tuple(image[_world_to_pixel(image, x_m, y_m)]) == UNKNOWN_BGR
    assert tuple(image[_world_to_pixel(image, 20.0, 5.0)]) == FREE_BGR


def test_forward_and_reverse_in_their_colours(picture):
    _, image = picture
    assert tuple(image[_world_to_pixel(image, 7.3, 10.0)]) == FORWARD_BGR
    assert tuple(image[_world_to_pixel(image, 15.0, 12.7)]) == REVERSE_BGR


def test_gear_change_marked(picture):
    _, image = picture
    assert tuple(image[_world_to_pixel(image, *CUSP)]) == GEAR_CHANGE_BGR


def test_start_and_goal_arrows(picture):
    _, image = picture
    # The start arrow begins at the start and points along its heading (+x here).
    assert tuple(image[_world_to_pixel(image, START[0], START[1])]) == START_BGR
    assert tuple(image[_world_to_pixel(image, START[0] + 0.6, START[1])]) == START_BGR
    assert tuple(image[_world_to_pixel(image, START[0] - 0.6, START[1])]) != START_BGR
    # The goal arrow points along -y.
    assert tuple(image[_world_to_pixel(image, GOAL[0], GOAL[1] - 0.6)]) == GOAL_BGR


def test_no_path_picture(tmp_path, inflated):
    out = render_plan_picture(
        tmp_path / "none.png", inflated, EXAMPLE_VEHICLE, START, GOAL, None,
        title="no route", notes=("no path: goal_enclosed", "1201 expansions"),
    )
    image = cv2.imread(str(out))
    left, top, right, bottom = _map_box(image)
    band = image[:top].astype(int)
    red = (band[..., 2] > 150) & (band[..., 1] < 60) & (band[..., 0] < 60)
    assert red.sum() > 200  # the "no path: ..." banner
    # Map and markers are there; no path colours anywhere on the map.
    on_map = image[top : bottom + 1, left : right + 1]
    assert tuple(image[_world_to_pixel(image, START[0], START[1])]) == START_BGR
    assert not np.all(on_map == FORWARD_BGR, axis=2).any()
    assert not np.all(on_map == REVERSE_BGR, axis=2).any()


def test_path_picture_has_no_banner(picture):
    _, image = picture
    top = _map_box(image)[1]
    band = image[:top].astype(int)
    red = (band[..., 2] > 150) & (band[..., 1] < 60) & (band[..., 0] < 60)
    assert red.sum() == 0


def test_rectangle_footprint_drawn(tmp_path, inflated):
    car = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)
    out = render_plan_picture(tmp_path / "car.png", inflated, car, START, GOAL, _poses())
    image = cv2.imread(str(out))
    # The start outline is the rectangle: green near its front-left corner, away from the arrow.
    corner = car.footprint_corners(*START)[2]
    row, col = _world_to_pixel(image, *corner)
    window = image[row - 3 : row + 4, col - 3 : col + 4].astype(int)
    greenish = (window[..., 1] > 100) & (window[..., 0] < 80) & (window[..., 2] < 80)
    assert greenish.any()


def test_missing_folder_is_an_oserror(tmp_path, inflated):
    target = tmp_path / "absent" / "plan.png"
    with pytest.raises(PictureError, match="folder .*absent does not exist") as caught:
        render_plan_picture(target, inflated, EXAMPLE_VEHICLE, START, GOAL)
    assert isinstance(caught.value, OSError)
    with pytest.raises(PictureError, match=r"must end in \.png"):
        render_plan_picture(tmp_path / "plan.jpg", inflated, EXAMPLE_VEHICLE, START, GOAL)


def test_bad_poses_are_refused(tmp_path, inflated):
    with pytest.raises(ValueError, match=r"\(N, 4\) array"):
        render_plan_picture(tmp_path / "p.png", inflated, EXAMPLE_VEHICLE, START, GOAL, np.zeros((5, 3)))
    bad_gear = _poses()
    bad_gear[3, 3] = 0.0
    with pytest.raises(ValueError, match="gear"):
        render_plan_picture(tmp_path / "p.png", inflated, EXAMPLE_VEHICLE, START, GOAL, bad_gear)


@pytest.mark.parametrize("px_per_m", [3.0, 17.0, 40.0, 160.0])
def test_scale_bar_is_a_round_length(px_per_m):
    length_m = _choose_scale_bar_m(px_per_m, 300.0)
    mantissa = length_m / 10 ** math.floor(math.log10(length_m) + 1e-9)
    assert round(mantissa, 9) in (1.0, 2.0, 5.0)  # common practice: 1-2-5 scale bar steps
    assert length_m * px_per_m <= 300.0
    # The next round length up would not fit.
    bigger = {1: 2, 2: 5, 5: 10}[int(round(mantissa))] * length_m / mantissa
    assert bigger * px_per_m > 300.0
