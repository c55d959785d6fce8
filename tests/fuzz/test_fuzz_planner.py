"""Fuzz the planner's inputs: Planner(vehicle).plan(grid, start, goal) with any start and goal.

Property: a path that the suite's independent verifier accepts, or NoPath with a known
reason, or a PlanningError (PoseError) with a code and a one-line message; nothing else,
no hang. The search budget is small, so a plan ends in at most a few seconds.
"""

from __future__ import annotations

import decimal
import fractions
import math

import numpy as np
import pytest
from hypothesis import event, given
from hypothesis import strategies as st

import verify
from fuzzkit import fuzz_settings, huge_ints, odd_floats, outcome
from veer.planning import NO_PATH_REASONS, NoPath, Planner, PlanningError, SearchSettings, Vehicle

WIDTH_M, HEIGHT_M = 8.0, 6.0
VEHICLE = Vehicle(wheelbase_m=0.5, max_steer_deg=35.0, radius_m=0.3)
BUDGET = SearchSettings(max_expansions=2000, max_time_s=2.0)


@pytest.fixture(scope="module")
def small_map():
    """An 8 m x 6 m map, 0.1 m cells, with one wall in the middle."""
    grid = verify.with_boxes(verify.open_grid(WIDTH_M, HEIGHT_M), [(3.8, 0.0, 4.2, 3.5)])
    return grid, Planner(VEHICLE, BUDGET)


def coordinates():
    return st.one_of(
        st.floats(-1.0, WIDTH_M + 1.0),
        odd_floats(),
        huge_ints(),
        st.integers(-3, 10),
        st.sampled_from(["2.5", "nan", "x", "", "1e999"]),
        st.none(),
        st.booleans(),
        st.builds(decimal.Decimal, st.sampled_from(["1.5", "NaN", "1e999", "-0"])),
        st.builds(fractions.Fraction, huge_ints(), st.integers(1, 3)),
        st.complex_numbers(max_magnitude=10, allow_nan=False),
        st.just(np.float32(1.5)) | st.just(np.int64(2)) | st.just(np.float64("nan")),
    )


def poses():
    on_map = st.tuples(st.floats(0.2, WIDTH_M - 0.2), st.floats(0.2, HEIGHT_M - 0.2), st.floats(-10.0, 10.0))
    junk = st.one_of(
        on_map.map(list),
        on_map.map(np.array),
        st.tuples(coordinates(), coordinates(), coordinates()),
        st.lists(coordinates(), max_size=5),
        st.none(),
        st.text(max_size=4),
        st.binary(min_size=3, max_size=3),
        st.floats(),
        st.dictionaries(st.sampled_from(["x", "y", "heading", "0", "1", "2"]), coordinates(), min_size=3, max_size=3),
        st.just(np.zeros((3, 2))) | st.just(np.zeros(0)) | st.just(range(3)),
    )
    # half the poses on the map, so that about a quarter of the calls plan
    return st.booleans().flatmap(lambda plain: on_map if plain else junk)


@given(start=poses(), goal=poses())
@fuzz_settings(ci=200, deep=2000)
def test_any_start_and_goal_give_a_valid_path_or_a_project_error(small_map, start, goal):
    grid, planner = small_map
    try:
        path, error = outcome(planner.plan, grid, start, goal, allowed=(PlanningError,))
    except NoPath as no_path:
        event(f"no path: {no_path.reason}")
        assert no_path.reason in NO_PATH_REASONS
        return
    if path is None:
        event(f"refused: {getattr(error, 'code', 'known bug')}")
        return
    event("path")
    as_floats = [tuple(float(v) for v in pose) for pose in (start, goal)]
    assert all(math.isfinite(v) for pose in as_floats for v in pose)
    if any(abs(pose[2]) >= 1e15 for pose in as_floats):
        # open bug: test_regressions.py::test_a_huge_goal_heading_is_refused_or_reached (and the
        # verifier's own wrap loses such headings too)
        event("known bug, see test_regressions.py::test_a_huge_goal_heading_is_refused_or_reached")
        return
    assert verify.path_problems(grid, VEHICLE, path, *as_floats) == []
