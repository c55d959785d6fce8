"""The planner's value types: the cell frame, the cost model, the input checks, the search result."""

from __future__ import annotations

import math

import numpy as np
import pytest

import verify
from veer.maps import OccupancyGrid
from veer.planning import EXAMPLE_VEHICLE, Planner, PoseError, SearchSettings
from veer.planning.angles import wrap_angle
from veer.planning.costs import CostModel
from veer.planning.curves import CurvePath
from veer.planning.frame import GridFrame
from veer.planning.kernel import SearchNode, run_search


# ------------------------------------------------------------------ frame


def test_frame_agrees_with_the_grid_on_every_cell_corner_and_centre():
    grid = OccupancyGrid(np.zeros((7, 11), np.uint8), 0.3, (-2.0, 5.0))
    frame = GridFrame.of_grid(grid)
    rng = np.random.default_rng(0)
    x = rng.uniform(-2.0, -2.0 + 11 * 0.3 - 1e-9, 500)
    y = rng.uniform(5.0 + 1e-9, 5.0 + 7 * 0.3, 500)
    rows, cols = frame.cell_of(x, y)
    grid_rows, grid_cols = grid.world_to_cell(x, y)
    assert np.array_equal(rows, grid_rows) and np.array_equal(cols, grid_cols)
    # centres map back onto their own cells
    r, c = np.meshgrid(np.arange(7), np.arange(11), indexing="ij")
    back = frame.cell_of(frame.centre_x_m(c.ravel()), frame.centre_y_m(r.ravel()))
    assert np.array_equal(back[0], r.ravel()) and np.array_equal(back[1], c.ravel())


def test_frame_floors_points_outside_rather_than_truncating():
    frame = GridFrame(0.0, 0.0, 1.0, 10, 10)  # top edge at y = 10
    assert frame.cell_of(-0.5, 10.5) == (-1, -1)  # truncation would say (0, 0)
    rows, cols = frame.cell_of(np.array([-0.5]), np.array([10.5]))
    assert rows[0] == -1 and cols[0] == -1
    assert frame.flat_of(np.array([-0.5]), np.array([10.5]))[0] == 0  # clipped to the corner cell
    assert frame.flat_of(-0.5, 10.5) == 0 and frame.flat_of(1.5, 2.5) == 7 * 10 + 1  # scalars too


def test_cell_edges_belong_where_the_grid_puts_them():
    """The bottom and left edges of a cell are in it, as ``OccupancyGrid.world_to_cell`` has it."""
    grid = OccupancyGrid(np.zeros((6, 5), np.uint8), 0.5, (1.0, 2.0))
    frame = GridFrame.of_grid(grid)
    edges_x = 1.0 + 0.5 * np.arange(5)
    edges_y = 2.0 + 0.5 * np.arange(6)
    x, y = np.meshgrid(edges_x, edges_y)
    assert np.array_equal(np.stack(frame.cell_of(x.ravel(), y.ravel())), np.stack(grid.world_to_cell(x.ravel(), y.ravel())))
    assert frame.cell_of(1.0, 2.0) == grid.world_to_cell(1.0, 2.0) == (5, 0)


def test_padded_and_coarse_frames_share_world_placement():
    frame = GridFrame(1.0, 1.0, 0.5, 16, 18)  # top edge at y = 9
    padded, coarse = frame.padded(3), frame.coarsened(4)
    x, y = 4.26, 3.1
    r, c = frame.cell_of(x, y)
    assert padded.cell_of(x, y) == (r + 3, c + 3)
    assert coarse.cell_of(x, y) == (r // 4, c // 4)
    assert coarse.shape == (4, 5)  # 18 columns make four whole blocks and a partial one
    assert coarse.top_y_m == frame.top_y_m


# ------------------------------------------------------------------ angles


@pytest.mark.parametrize("angle", [-math.pi, math.pi, 3 * math.pi, -3 * math.pi, 1e-17 - math.pi])
def test_one_wrap_for_scalars_and_arrays(angle):
    scalar = wrap_angle(angle)
    array = wrap_angle(np.array([angle]))[0]
    assert -math.pi <= scalar < math.pi
    assert scalar == array
    # common practice: wrapping keeps the direction
    assert math.cos(scalar) == pytest.approx(math.cos(angle)) and math.sin(scalar) == pytest.approx(math.sin(angle), abs=1e-12)


# ------------------------------------------------------------------ cost model


def test_curve_cost_by_hand():
    """L+ 2 m, S- 3 m, R- 1 m with every term switched on, summed by hand."""
    costs = CostModel(reverse_factor=2.0, gear_change_m=5.0, steer_factor=0.5, steer_change_m=0.25)
    curve = CurvePath("L+S-R-", (("L", 2.0), ("S", -3.0), ("R", -1.0)), 1.0)
    by_hand = (
        2.0 * 1.0 * 1.5  # forward arc: steering at full lock
        + 5.0 + 0.25 * 1.0 + 3.0 * 2.0  # gear change, wheel from +1 to 0, straight in reverse
        + 0.25 * 1.0 + 1.0 * 2.0 * 1.5  # wheel from 0 to -1, reverse arc
    )
    assert costs.curve(curve) == pytest.approx(by_hand)
    # the junction from a motion before: reverse with the wheel at -1 -> L+ is a gear change and 2 of steering
    assert costs.curve(curve, before=(-1, -1.0)) == pytest.approx(by_hand + 5.0 + 0.25 * 2.0)


def test_path_cost_of_a_sampled_curve_matches_the_curve_cost():
    costs = CostModel.for_vehicle(EXAMPLE_VEHICLE, SearchSettings())
    r = EXAMPLE_VEHICLE.min_turn_radius_m
    curve = CurvePath("L+S+R-", (("L", 4.0), ("S", 5.0), ("R", -2.5)), r)
    start = (1.0, 2.0, 0.3)
    samples = curve.sample(start, 0.05)
    # geometric curvature of each sample: heading change per metre travelled
    step = np.hypot(np.diff(samples[:, 0]), np.diff(samples[:, 1]))
    turn = wrap_angle(np.diff(samples[:, 2]))
    kappa = np.concatenate(([0.0], np.where(step > 0, turn / np.maximum(step, 1e-12), 0.0)))
    kappa[0] = kappa[1]
    # chords of 5 cm on a 3.46 m arc are shorter than the arc by 1e-5 of its length
    assert costs.path_cost(samples, kappa) == pytest.approx(costs.curve(curve), rel=1e-3)


def test_primitive_transition_costs_use_the_same_model():
    from veer.planning.primitives import build_primitive_table

    settings = SearchSettings(gear_change_cost_m=7.0, steer_change_cost_m=0.5, reverse_cost_factor=3.0)
    table = build_primitive_table(
        EXAMPLE_VEHICLE, settings, 0.0, cell_size_m=0.1, sample_step_m=0.05, circle_offsets_m=np.zeros(1)
    )
    costs = CostModel.for_vehicle(EXAMPLE_VEHICLE, settings)
    kmax = EXAMPLE_VEHICLE.max_curvature_per_m
    for q, before in enumerate(table.primitives):
        for p, after in enumerate(table.primitives):
            end_q = (before.gear, before.curvature_per_m / kmax)
            end_p = (after.gear, after.curvature_per_m / kmax)
            expected = costs.motion(after.length_m, after.gear, end_p[1]) + costs.junction(end_q, end_p)
            assert table.transition_cost[q, p] == pytest.approx(expected)


# ------------------------------------------------------------------ input checks


@pytest.mark.parametrize(
    ("start", "goal", "named"),
    [
        ((2.0, 5.0), (8.0, 5.0, 0.0), "start"),
        ((2.0, 5.0, 0.0), (8.0, 5.0), "goal"),
        ("2 5 0", (8.0, 5.0, 0.0), "start"),
        ((2.0, 5.0, 0.0), None, "goal"),
        ((2.0, "x", 0.0), (8.0, 5.0, 0.0), "start"),
        ((2.0, 5.0, True), (8.0, 5.0, 0.0), "start"),
        ((2.0, 5.0, 0.0), (8.0, math.inf, 0.0), "goal"),
    ],
)
def test_bad_pose_arguments_raise_the_projects_error_naming_the_argument(start, goal, named):
    grid = verify.open_grid(12.0, 10.0)
    with pytest.raises(PoseError, match=rf"^{named}\b") as caught:
        Planner(EXAMPLE_VEHICLE).plan(grid, start, goal)
    assert caught.value.code == "bad_pose"


def test_check_path_refuses_malformed_poses():
    grid = verify.open_grid(12.0, 10.0)
    with pytest.raises(PoseError, match="poses"):
        Planner(EXAMPLE_VEHICLE).check_path(grid, [[1.0, 2.0]])


# ------------------------------------------------------------------ search result


def test_search_result_chain_has_named_fields_and_links_start_to_finish():
    grid = verify.open_grid(30.0, 20.0)
    planner = Planner(EXAMPLE_VEHICLE)
    start, goal = (5.0, 10.0, 0.0), (24.0, 12.0, math.pi / 2)
    context = planner.prepare(grid)
    problem = planner.problem(context, planner.settings, start, goal)
    tables = problem.tables_for(start[2])
    result = run_search(problem, tables, start, deadline=math.inf)
    chain = result.chain()
    assert chain and all(isinstance(node, SearchNode) for node in chain)
    assert (chain[0].x_m, chain[0].y_m, chain[0].parent) == (5.0, 10.0, -1)
    assert all(b.parent == result.nodes.index(tuple(a)) for a, b in zip(chain, chain[1:]))
    assert all(b.cost_m >= a.cost_m for a, b in zip(chain, chain[1:]))  # costs only add up
