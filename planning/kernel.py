"""The hybrid A* loop: pops, goal tests, goal curves and successors; nothing else.

Weighted A* (Pohl, "Heuristic search viewed as path finding in a graph", Artificial
Intelligence 1(3):193-204, 1970) over continuous poses whose visited table is keyed by
(lattice row, lattice column, heading index), after Dolgov, Thrun, Montemerlo & Diebel,
"Practical search techniques in path planning for autonomous driving" (AAAI STAIR
workshop 2008): a node keeps the continuous pose that first reached its key at the
lowest cost, successors are the primitives' arcs, and goal curves (analytic expansion)
end the search at the exact goal.

Everything the loop reads is built beforehand (:mod:`veer.planning.problem`); it returns a
plain :class:`SearchResult` and leaves path output to :mod:`veer.planning.assembly`.
Cost: at most ``max_expansions`` expansions, each one vectorised collision lookup of P
primitives x S samples and a Python pass over the free successors.
"""

from __future__ import annotations

import heapq
import math
import threading
import time
from dataclasses import dataclass, field
from itertools import compress
from typing import NamedTuple

from veer.planning.angles import wrap_angle
from veer.planning.problem import HeadingTables, SearchProblem

__all__ = ["SearchNode", "SearchResult", "run_search"]


class SearchNode(NamedTuple):
    """One node of the search tree (the loop stores plain tuples in this field order)."""

    x_m: float
    y_m: float
    heading_index: int  # heading = start heading + heading_index * bin
    cost_m: float  # g: cost from the start under the cost model
    parent: int  # node id, -1 for the start
    primitive: int  # index into the primitive table; len(primitives) for the start
    key: int  # visited-table key: (lattice row * lattice cols + lattice col) * bins + heading_index


@dataclass
class SearchResult:
    """What one search found: the node store, how it ended, and its figures.

    ``finish`` is ``(node id, final piece or None, cost of that piece)`` when a path was
    found (the piece is a goal curve from that node), else None with ``reason`` saying
    why (``no_path_at_resolution``, ``budget_exhausted``, ``deadline``, ``cancelled``).
    When the budget ran out after a goal curve had been found, ``finish`` holds the best
    such path and ``stopped`` the reason.
    """

    nodes: list
    finish: tuple | None
    reason: str | None
    stopped: str | None
    stats: dict = field(default_factory=dict)

    def chain(self) -> list[SearchNode]:
        """The nodes from the start to the finishing node."""
        if self.finish is None:
            return []
        out = []
        i = self.finish[0]
        while i >= 0:
            node = SearchNode._make(self.nodes[i])
            out.append(node)
            i = node.parent
        out.reverse()
        return out


def run_search(
    problem: SearchProblem,
    tables: HeadingTables,
    start,
    deadline: float,
    cancel: threading.Event | None = None,
) -> SearchResult:
    """Search from ``start`` (whose heading is ``tables.start_heading_rad``) to the problem's goal."""
    settings, context = problem.settings, problem.context
    checker = context.checker
    lattice, padded = context.lattice, context.collision_frame
    sx, sy, sh = start
    gx, gy, gh = problem.goal
    prims = tables.primitives
    n_prims = len(prims.primitives)
    bins = settings.heading_bins
    bin_rad = settings.heading_bin_rad
    cols_c = lattice.cols
    inv_lat, top, ox = lattice.inv_cell, lattice.top_y_m, lattice.left_x_m
    inv_cell, top_p, left_p, width_p = padded.inv_cell, padded.top_y_m, padded.left_x_m, padded.cols
    blocked_flat = checker.blocked_flat
    transition = prims.transition_cost.tolist()
    prox = memoryview(context.proximity_coarse)
    heur = tables.heuristic
    base_h, window_offset, window_h = heur.base_h, heur.window_offset, heur.window_h
    sample_flat, row_step_at, col_step_at = tables.sample_flat, tables.row_step_at, tables.col_step_at
    samples_per_prim = tables.samples_per_primitive
    prim_rows = tables.successor_rows
    prim_ends = tables.primitive_ends
    weight = settings.heuristic_weight
    has_rect = problem.vehicle.has_rectangle
    tol_m = settings.goal_tolerance_m
    tol_rad = math.radians(settings.goal_tolerance_deg)
    radius = problem.vehicle.min_turn_radius_m
    near_m = settings.goal_curve_near_m if settings.goal_curve_near_m is not None else 4.0 * max(radius, lattice.cell_m)
    every = settings.goal_curve_every
    use_curves = settings.use_goal_curves
    accept = settings.goal_curve_accept_ratio
    max_exp = settings.max_expansions
    to_goal = problem.goal_curves.from_pose

    start_row, start_col = lattice.cell_of(sx, sy)
    start_key = (start_row * cols_c + start_col) * bins
    # node store: one tuple per node id, fields as SearchNode
    nodes = [(sx, sy, 0, 0.0, -1, n_prims, start_key)]
    add_node = nodes.append
    # visited table: lattice key -> node id of the best open node there, or CLOSED once expanded
    state: dict[int, int] = {start_key: 0}
    state_get = state.get
    CLOSED = -1
    # open list of (f, node id): ids rise, so ties go to the older node and poses are never compared
    heap = [(weight * heur.h(start_key // bins, 0), 0)]
    heappush, heappop = heapq.heappush, heapq.heappop
    goal_key = None
    if settings.goal_test_lattice:
        goal_row, goal_col = problem.goal_cell
        goal_key = (goal_row * cols_c + goal_col) * bins + int(round(wrap_angle(gh - sh) / bin_rad)) % bins

    t_loop = time.perf_counter()
    expansions = curves_tried = 0
    reason = "no_path_at_resolution"
    finish = None
    # collision-free goal curves become goal entries of the heap at their full cost (heap
    # id -(j + 1)), so one is only taken once no open node promises better
    curve_solutions: list[tuple[int, tuple, float]] = []  # (node id, piece, piece cost)
    best_curve_cost = math.inf
    if cancel is not None and cancel.is_set():
        heap = []
        reason = "cancelled"
    while heap:
        f, i = heappop(heap)
        if i < 0:
            finish = curve_solutions[-i - 1]
            break
        x, y, k, g, _, prim_in, key = nodes[i]
        if state[key] != i:  # closed, or superseded by a cheaper node in the same key
            continue
        if expansions >= max_exp:
            reason = "budget_exhausted"
            break
        state[key] = CLOSED
        expansions += 1
        if expansions & 63 == 0:
            if time.perf_counter() > deadline:
                reason = "deadline"
                break
            if cancel is not None and cancel.is_set():
                reason = "cancelled"
                break
        heading = sh + k * bin_rad
        dist_goal = math.hypot(x - gx, y - gy)
        if (dist_goal <= tol_m and abs(wrap_angle(heading - gh)) <= tol_rad) or key == goal_key:
            finish = (i, None, 0.0)
            break
        # goal curves from the start always, then every `every` expansions (more often near
        # the goal) where obstacles do not clearly stand in the way
        if use_curves and (expansions == 1 or (
            expansions % (every if dist_goal > near_m else max(1, int(every * dist_goal / near_m))) == 0
            and heur.worthy(key // bins, k)
        )):
            curves_tried += 1
            # the next-cheapest curves too from the start and near the goal, where they pay
            found = to_goal(x, y, heading, prim_ends[prim_in] if prim_in < n_prims else None,
                            min(accept * f, best_curve_cost) - g if expansions == 1 or dist_goal <= near_m else -1.0)
            if found is not None and g + found[1] < best_curve_cost:
                best_curve_cost = g + found[1]
                curve_solutions.append((i, found[0], found[1]))
                if best_curve_cost <= accept * f:  # close to the best any open node promises
                    finish = curve_solutions[-1]
                    break
                heappush(heap, (best_curve_cost, -len(curve_solutions)))

        # ---- successors: collision samples of every primitive in one lookup
        r0 = (top_p - y) * inv_cell
        c0 = (x - left_p) * inv_cell
        ri, ci = int(r0), int(c0)  # r0, c0 > 0 inside the padded mask: int() is floor here
        cells = sample_flat[k] + (ri * width_p + ci)
        cells += (row_step_at[k] <= r0 - ri) * width_p
        cells += col_step_at[k] <= c0 - ci
        hit = blocked_flat[cells].reshape(n_prims, samples_per_prim).any(axis=1)
        if has_rect and hit.any():
            # the circles are conservative: test the doubtful primitives' rectangles exactly,
            # all samples of one expansion in one window
            doubtful = hit.nonzero()[0]
            clear = checker.rectangles_clear(
                (x + prims.sample_dx_m[k, doubtful]).ravel(), (y + prims.sample_dy_m[k, doubtful]).ravel(),
                prims.sample_heading_rad[k, doubtful].ravel(), chunk=1 << 30,
            ).reshape(len(doubtful), -1).all(axis=1)
            hit[doubtful[clear]] = False
        trans = transition[prim_in]
        # lattice row of y + dy is (top - y - dy) / lattice: rows grow downwards. Successors
        # that passed the collision lookup lie on the map, so int() is floor here too.
        a = (top - y) * inv_lat
        b = (x - ox) * inv_lat
        for p, dx, dy, dr, dc, k2, length in compress(prim_rows[k], (~hit).tolist()):
            cell = int(a - dr) * cols_c + int(b + dc)
            key2 = cell * bins + k2
            other = state_get(key2)
            if other == CLOSED:
                continue
            # clearance: the proximity of the cell it ends in, over its length (one sample)
            g2 = g + trans[p] + prox[cell] * length
            if other is not None and nodes[other][3] <= g2:
                continue
            n = len(nodes)
            add_node((x + dx, y + dy, k2, g2, i, p, key2))
            state[key2] = n
            off = window_offset[cell]
            heappush(heap, (g2 + weight * (window_h[off + k2] if off >= 0 else base_h[cell]), n))

    stats = {
        "expansions": expansions, "generated": len(nodes) - 1, "goal_curves_tried": curves_tried,
        "search_s": round(time.perf_counter() - t_loop, 6),
    }
    stopped = None
    if finish is None and curve_solutions and reason in ("budget_exhausted", "deadline"):
        finish = curve_solutions[-1]  # out of budget: the best complete path found is still valid
        stopped = reason
    if finish is not None:
        reason = None
    elif not heap and reason == "no_path_at_resolution":
        pass
    return SearchResult(nodes=nodes, finish=finish, reason=reason, stopped=stopped, stats=stats)
