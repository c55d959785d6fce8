"""In open space the planner's path never costs more than the cheapest analytic curve to the goal.

The search tries goal curves (analytic expansion) from the start; every word of the
Reeds-Shepp (or, forward only, Dubins) family is priced with the search's own cost model
and the cheapest collision-free one is taken unless the search finds better. Checked
here against a brute-force minimum over every word, priced independently per curve with
``CostModel.curve`` (the search prices words through ``CostModel.word_pricer``), and the
path priced from its output poses with ``CostModel.path_cost``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import verify
from veer.planning import EXAMPLE_VEHICLE, Planner, SearchSettings
from veer.planning.costs import CostModel
from veer.planning.curves import all_curves, dubins_length

MAP_M = 100.0
CELL_M = 0.25
# A curve is comparable when the disc stays this far inside the map: the vehicle's radius,
# the clearance-cost range and the collision mask's margins (a few cells).
BORDER_M = EXAMPLE_VEHICLE.radius_m + 1.0 + 4 * CELL_M
# The path is priced from its 0.25 m output chords, which are shorter than the arcs they
# stand for (2e-4 of the length on a 3.46 m radius); anything above that is a real excess.
PRICE_SLACK = 1e-3


@pytest.fixture(scope="module")
def open_map():
    return verify.open_grid(MAP_M, MAP_M, CELL_M)


def _cheapest_word_cost(costs: CostModel, start, goal, reverse: bool) -> float:
    """min over every solved word that stays clear of the map border (disc vehicle, empty map)."""
    radius = EXAMPLE_VEHICLE.min_turn_radius_m
    best = math.inf
    for curve in all_curves(start, goal, radius, reverse=reverse):
        samples = curve.sample(start, 0.1)
        x, y = samples[:, 0], samples[:, 1]
        if min(x.min(), y.min()) < BORDER_M or max(x.max(), y.max()) > MAP_M - BORDER_M:
            continue
        best = min(best, costs.curve(curve))
    return best


def _random_pairs(seed: int, count: int):
    rng = np.random.default_rng(seed)
    pairs = []
    while len(pairs) < count:
        xy = rng.uniform(30.0, 70.0, size=4)
        heading = rng.uniform(-math.pi, math.pi, size=2)
        if math.hypot(xy[2] - xy[0], xy[3] - xy[1]) < 1.0:
            continue
        pairs.append(((xy[0], xy[1], heading[0]), (xy[2], xy[3], heading[1])))
    return pairs


@pytest.mark.parametrize("reverse", [True, False], ids=["reverse", "forward_only"])
def test_path_costs_no_more_than_the_cheapest_curve(open_map, reverse):
    # source: Reeds & Shepp, Pacific J. Math. 145(2):367-393, 1990 and Dubins, Am. J. Math.
    # 79(3):497-516, 1957: the solved word family holds the optimal curve between two poses,
    # so the brute-force minimum below is the cheapest analytic curve under these costs
    settings = SearchSettings(allow_reverse=reverse)
    planner = Planner(EXAMPLE_VEHICLE, settings)
    costs = CostModel.for_vehicle(EXAMPLE_VEHICLE, settings)
    context = planner.prepare(open_map)
    excess = []
    for start, goal in _random_pairs(7 if reverse else 11, 200):
        path = planner.plan(open_map, start, goal)
        paid = costs.path_cost(path.poses, path.curvature_per_m, context.proximity_at)
        cheapest = _cheapest_word_cost(costs, start, goal, reverse)
        if paid > cheapest * (1.0 + PRICE_SLACK) + 1e-6:
            excess.append((start, goal, round(paid, 3), round(cheapest, 3)))
    assert excess == []


def test_worked_example_prefers_forward_curve_to_shorter_reversing_one(open_map):
    """Start (44.05, 46.34, -49 deg), goal (40.95, 58.37, 178 deg), wheelbase 2.0 m, 30 deg.

    The shortest Reeds-Shepp word, L-S-L-R+ of 15.47 m, drives 13.96 m in reverse with a
    gear change: 26.4 m of cost under the default model. The single-gear words of about
    16.6 m drive wholly in reverse (25.8). The cheapest is the forward L+S+L+ of 22.31 m
    (cost 23.19), and the planner drives it: all forward, no gear change.
    """
    start = (44.05, 46.34, math.radians(-49.0))
    goal = (40.95, 58.37, math.radians(178.0))
    radius = EXAMPLE_VEHICLE.min_turn_radius_m
    costs = CostModel.for_vehicle(EXAMPLE_VEHICLE, SearchSettings())
    words = all_curves(start, goal, radius, reverse=True)
    shortest = min(words, key=lambda c: c.length_m)
    cheapest = min(words, key=costs.curve)
    # source: Reeds & Shepp, Pacific J. Math. 145(2):367-393, 1990 (the family), evaluated here:
    # the shortest word mostly reverses, the cheapest one does not reverse at all
    assert shortest.length_m == pytest.approx(15.47, abs=0.01)
    assert shortest.reverse_length_m > 0.8 * shortest.length_m
    assert cheapest.reverse_length_m == 0.0
    assert cheapest.length_m == pytest.approx(22.31, abs=0.01)
    # source: Dubins, Am. J. Math. 79(3):497-516, 1957: no forward-only curve is shorter
    assert cheapest.length_m == pytest.approx(dubins_length(start, goal, radius), abs=1e-6)
    path = Planner(EXAMPLE_VEHICLE).plan(open_map, start, goal)
    verify.assert_valid_path(open_map, EXAMPLE_VEHICLE, path, start, goal)
    assert path.reverse_m == 0.0
    assert path.gear_changes == 0
    paid = costs.path_cost(path.poses, path.curvature_per_m)
    assert paid <= costs.curve(cheapest) * (1.0 + PRICE_SLACK)
    assert paid < costs.curve(shortest)


def test_word_pricer_agrees_with_curve_cost():
    """The search's fast pricing of words and the plain per-curve cost are the same sum."""
    costs = CostModel(reverse_factor=2.0, gear_change_m=5.0, steer_factor=0.3, steer_change_m=0.7,
                      max_curvature_per_m=1 / 3.0)
    rng = np.random.default_rng(3)
    for _ in range(50):
        start = (0.0, 0.0, 0.0)
        goal = (*rng.uniform(-8.0, 8.0, 2), rng.uniform(-math.pi, math.pi))
        before = ((1, 0.5), (-1, -1.0), None)[rng.integers(3)]
        price = costs.word_pricer(3.0, before)
        for curve in all_curves(start, goal, 3.0):
            pattern = tuple((kind, 1 if length >= 0 else -1) for kind, length in curve.segments)
            mags = tuple(abs(length) / 3.0 for _, length in curve.segments)
            # gears of zero-length segments do not matter to either sum
            assert price(pattern, mags) == pytest.approx(costs.curve(curve, before), rel=1e-9, abs=1e-9)
