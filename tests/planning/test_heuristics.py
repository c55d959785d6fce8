"""Tests for veer.planning.heuristics: the holonomic field and the turning tables."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest

from veer.planning import dubins_length, reeds_shepp_length
from veer.planning.heuristics import coarse_open_mask, holonomic_field, turning_table

SQRT2 = math.sqrt(2.0)
KINDS = {"reeds_shepp": reeds_shepp_length, "dubins": dubins_length}


# ------------------------------------------------------------------ holonomic field


def _octile_graph(open_mask: np.ndarray) -> nx.Graph:
    """8-connected graph of the open cells, sqrt(2) diagonals (corners may be cut, as documented)."""
    rows, cols = open_mask.shape
    graph = nx.Graph()
    for r, c in zip(*np.nonzero(open_mask)):
        graph.add_node((int(r), int(c)))
        for dr, dc, w in ((0, 1, 1.0), (1, 0, 1.0), (1, 1, SQRT2), (1, -1, SQRT2)):
            r2, c2 = r + dr, c + dc
            if 0 <= r2 < rows and 0 <= c2 < cols and open_mask[r2, c2]:
                graph.add_edge((int(r), int(c)), (int(r2), int(c2)), weight=w)
    return graph


@pytest.mark.parametrize("seed", [3, 11])
def test_holonomic_field_matches_networkx_dijkstra(seed):
    rng = np.random.default_rng(seed)
    open_mask = rng.random((24, 31)) > 0.3
    open_mask[:, 15] = False  # a wall with one door, so some distances wind round it
    open_mask[20, 15] = True
    open_mask[2:5, 25:29] = False
    open_mask[3, 26] = True  # an open cell sealed off on all eight sides
    goal = (12, 4)
    open_mask[goal] = True
    cell_m = 0.3
    field = holonomic_field(open_mask, goal, cell_m)
    # source: networkx single_source_dijkstra_path_length on the same 8-connected lattice
    lengths = nx.single_source_dijkstra_path_length(_octile_graph(open_mask), goal)
    expected = np.full(open_mask.shape, np.inf)
    for (r, c), d in lengths.items():
        expected[r, c] = d * cell_m
    assert field.distance_m.shape == open_mask.shape
    np.testing.assert_allclose(field.distance_m, expected, rtol=1e-9, atol=1e-9)
    # unreachable and blocked cells are inf
    assert np.isinf(field.distance_m[~open_mask]).all()
    assert np.isinf(field.distance_m[3, 26])
    assert field.reachable(*goal) and not field.reachable(0, 15)
    # the lower bound is one coarse diagonal less, never negative
    lower = field.lower_bound_flat.reshape(open_mask.shape)
    np.testing.assert_allclose(lower, np.maximum(expected - SQRT2 * cell_m, 0.0), rtol=1e-9, atol=1e-9)


def test_holonomic_field_with_blocked_goal_reaches_nothing():
    open_mask = np.ones((6, 7), dtype=bool)
    open_mask[2, 3] = False
    field = holonomic_field(open_mask, (2, 3), 1.0)
    assert np.isinf(field.distance_m).all()


def test_holonomic_field_never_exceeds_the_straight_line():
    # on an open mask the octile distance lies between the Euclidean and 1.0824 times it
    # source: octile metric max + (sqrt2 - 1) min >= Euclidean, ratio <= sqrt(4 - 2 sqrt 2) (# common practice)
    open_mask = np.ones((40, 40), dtype=bool)
    field = holonomic_field(open_mask, (5, 7), 1.0)
    rr, cc = np.indices(open_mask.shape)
    euclid = np.hypot(rr - 5, cc - 7)
    assert np.all(field.distance_m >= euclid - 1e-9)
    assert np.all(field.distance_m <= euclid * math.sqrt(4 - 2 * SQRT2) + 1e-9)


def test_coarse_open_mask_keeps_any_open_fine_cell():
    blocked = np.ones((7, 9), dtype=bool)
    blocked[0, 0] = False
    blocked[6, 8] = False
    coarse = coarse_open_mask(blocked, 3)
    assert coarse.shape == (3, 3)
    assert coarse.tolist() == [[True, False, False], [False, False, False], [False, False, True]]


# ------------------------------------------------------------------ turning tables


def _random_goal_frame_poses(seed: int, n: int, reach: float = 5.5):
    rng = np.random.default_rng(seed)
    return rng.uniform(-reach, reach, n), rng.uniform(-reach, reach, n), rng.uniform(-math.pi, math.pi, n)


def _exact(kind: str, u, v, phi, radius_m: float = 1.0) -> np.ndarray:
    # length from the pose (u, v, phi), in the goal's frame, to the goal at the origin
    length = KINDS[kind]
    return np.array([length((a, b, c), (0.0, 0.0, 0.0), radius_m) for a, b, c in zip(u, v, phi)])


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_table_entries_equal_the_exact_lengths(kind):
    table = turning_table(kind)
    step, bin_rad = table.pos_step, 2 * math.pi / table.heading_bins
    rng = np.random.default_rng(7)
    # poses exactly on table entries, in all four quadrants of the goal frame
    u = rng.integers(-44, 45, 300) * step
    v = rng.integers(-44, 45, 300) * step
    phi = rng.integers(0, table.heading_bins, 300) * bin_rad
    # source: Reeds & Shepp 1990 / Dubins 1957, through the scalar solvers
    np.testing.assert_allclose(table.lookup(u, v, phi), _exact(kind, u, v, phi), rtol=2e-6, atol=2e-6)


@pytest.mark.parametrize(("kind", "mean_m", "median_m"), [("reeds_shepp", 0.05, 0.05), ("dubins", 0.1, 0.05)])
def test_table_lookup_is_close_to_the_exact_length(kind, mean_m, median_m):
    u, v, phi = _random_goal_frame_poses(21, 500)
    error = turning_table(kind).lookup(u, v, phi) - _exact(kind, u, v, phi)
    # nearest entry: 0.0625 radii and 2.5 degrees away at most; Dubins jumps by 2 pi near
    # its discontinuities, so only the mean and median are bounded
    assert np.abs(error).mean() < mean_m
    assert np.median(np.abs(error)) < median_m


def test_table_scales_with_the_turning_radius():
    radius_m = 3.464
    u, v, phi = _random_goal_frame_poses(5, 200, reach=5.5 * radius_m)
    looked_up = turning_table("reeds_shepp").lookup(u / radius_m, v / radius_m, phi) * radius_m
    exact = _exact("reeds_shepp", u, v, phi, radius_m)
    assert np.abs(looked_up - exact).mean() < 0.05 * radius_m


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_spread_table_never_over_estimates(kind):
    spread = turning_table(kind, spread=2)
    u, v, phi = _random_goal_frame_poses(33, 600)
    exact = _exact(kind, u, v, phi)
    assert np.all(spread.lookup(u, v, phi) <= exact + 1e-5)


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_spread_entry_bounds_poses_around_it(kind):
    # the search reads the envelope at a lattice cell centre's nearest entry and relies on
    # it for any pose within 0.21 radii (and one table heading bin) of that entry
    table = turning_table(kind)
    spread = turning_table(kind, spread=2)
    step, bin_rad = table.pos_step, 2 * math.pi / table.heading_bins
    rng = np.random.default_rng(44)
    n = 300
    eu = rng.integers(-40, 41, n) * step
    ev = rng.integers(-40, 41, n) * step
    eh = rng.integers(0, table.heading_bins, n) * bin_rad
    bound = spread.lookup(eu, ev, eh)
    for _ in range(3):
        r, a = rng.uniform(0.0, 0.21, n), rng.uniform(0.0, 2 * math.pi, n)
        qu, qv, qh = eu + r * np.cos(a), ev + r * np.sin(a), eh + rng.uniform(-1.0, 1.0, n) * bin_rad
        assert np.all(bound <= _exact(kind, qu, qv, qh) + 1e-5)


def test_lookup_beyond_the_table_is_the_straight_line():
    u = np.array([7.0, -9.0, 0.5, 20.0])
    v = np.array([0.5, 3.0, -8.0, 20.0])
    phi = np.array([1.0, -2.0, 3.0, 0.0])
    for kind in KINDS:
        values = turning_table(kind).lookup(u, v, phi)
        np.testing.assert_allclose(values, np.hypot(u, v))
        # a lower bound: no curve is shorter than the straight line
        assert np.all(values <= _exact(kind, u, v, phi) + 1e-9)


def test_coarse_max_equals_block_maximum():
    from veer.planning.heuristics import coarse_max

    rng = np.random.default_rng(0)
    for _ in range(40):
        rows, cols, factor = (int(v) for v in rng.integers((5, 5, 1), (70, 70, 9)))
        for values in (rng.random((rows, cols)) > 0.7, rng.standard_normal((rows, cols)).astype(np.float32)):
            rows_c, cols_c = -(-rows // factor), -(-cols // factor)
            padded = np.full((rows_c * factor, cols_c * factor), -np.inf)
            padded[:rows, :cols] = values
            # reference: numpy's maximum over each (partial) block
            expected = padded.reshape(rows_c, factor, cols_c, factor).max(axis=(1, 3)).astype(values.dtype)
            np.testing.assert_array_equal(coarse_max(values, factor), expected)
