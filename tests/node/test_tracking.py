"""Where the robot is on its path, checked against shapely's projection and distance."""

from __future__ import annotations

import math

import numpy as np
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from veer.node.tracking import cumulative_m, index_ahead, locate


def polyline(seed: int, n: int = 30) -> np.ndarray:
    rng = np.random.default_rng(seed)
    heading = np.cumsum(rng.normal(0.0, 0.2, n))
    steps = rng.uniform(0.05, 0.25, n)
    xy = np.cumsum(np.column_stack((steps * np.cos(heading), steps * np.sin(heading))), axis=0)
    return np.column_stack((xy, heading, np.ones(n)))


@settings(max_examples=60, deadline=None, database=None)
@given(seed=st.integers(0, 10_000), x=st.floats(-3, 8), y=st.floats(-3, 8), h=st.floats(-3.1, 3.1))
def test_locate_matches_shapely_over_the_whole_path(seed, x, y, h):
    poses = polyline(seed)
    along = cumulative_m(poses)
    place = locate(poses, along, (x, y, h), 0, window_m=1e6)
    line = shapely.LineString(poses[:, :2])
    point = shapely.Point(x, y)
    # source: shapely (GEOS) distance and linear referencing (project)
    assert math.isclose(place.off_m, line.distance(point), abs_tol=1e-9)
    on_line = shapely.Point(place.point[:2])
    assert line.distance(on_line) < 1e-9
    assert math.isclose(on_line.distance(point), place.off_m, abs_tol=1e-9)
    assert math.isclose(place.along_m, line.project(on_line), abs_tol=1e-6)
    assert 0.0 <= place.heading_off_rad <= math.pi


def test_locate_follows_a_path_that_crosses_itself_in_order():
    # a loop: out along y = 0, back along y = 0.1 (in the other direction)
    out = np.column_stack((np.arange(0, 10.01, 0.25), np.zeros(41), np.zeros(41), np.ones(41)))
    back = np.column_stack((np.arange(10, -0.01, -0.25), np.full(41, 0.1), np.full(41, math.pi), np.ones(41)))
    poses = np.vstack((out, back))
    along = cumulative_m(poses)
    near_start = locate(poses, along, (2.0, 0.05, 0.0), 0, window_m=5.0)
    assert near_start.segment < 41 and near_start.heading_off_rad < 0.1
    later = locate(poses, along, (2.0, 0.05, math.pi), 60, window_m=5.0)
    assert later.segment >= 41 and later.heading_off_rad < 0.1


def test_index_ahead():
    along = np.array([0.0, 0.25, 0.5, 0.75, 1.0, 1.25])
    assert index_ahead(along, 0.1, 0.5) == 3
    assert index_ahead(along, 0.0, 1.0) == 4
    assert index_ahead(along, 0.5, 2.0) is None
