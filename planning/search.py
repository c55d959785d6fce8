"""Hybrid A* search over continuous poses with a visited table of (row, col, heading bin).

After Dolgov, Thrun, Montemerlo & Diebel, "Practical search techniques in path planning
for autonomous driving" (AAAI STAIR workshop, 2008): A* whose nodes keep the continuous
pose that first reached their lattice cell, successors from arcs of the kinematic bicycle
model, the maximum of a holonomic-with-obstacles and a non-holonomic-without-obstacles
heuristic, and analytic Reeds-Shepp (or Dubins) shots to the exact goal pose.

Cost of a search: at most ``max_expansions`` expansions, each O(P x S) array work for
P primitives with S collision samples each, plus one heap push per open successor.

The :class:`Planner` keeps, per grid (by ``map_id``), the inflated collision mask and,
per (grid, goal cell), the holonomic field, so a long-lived caller that replans on the
same grid pays for them once. It holds no sockets and no messages.
"""

from __future__ import annotations

import heapq
from itertools import compress
import logging
import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass, replace

import cv2
import numpy as np

from veer.maps import OccupancyGrid, update_clearance_m
from veer.planning import curves
from veer.planning.assembly import _PathAssembly, _wrap
from veer.planning.collision import FootprintChecker
from veer.planning.errors import NoPath, PoseError
from veer.planning.heuristics import HolonomicField, coarse_max, coarse_open_mask, holonomic_field, turning_table
from veer.planning.path import PlannedPath
from veer.planning.primitives import PrimitiveTable, build_primitive_table
from veer.planning.settings import DEFAULT_SEARCH_SETTINGS, SearchSettings
from veer.planning.vehicle import Vehicle

__all__ = ["Planner", "GridContext", "plan_path"]

log = logging.getLogger("veer.planning")

_SAMPLE_STEP_CELLS = 0.5  # collision samples along a motion, in map cells
_SHOT_SLACK_CELLS = 0.0  # shot gate: curve estimate may fall this many lattice cells (+0.5 m) short
_TURNING_WINDOW_RADII = 6.0  # turning heuristic applied within this many turn radii of the goal


@dataclass
class GridContext:
    """What the planner derives from one grid for one vehicle: reused across plans."""

    grid: OccupancyGrid
    checker: FootprintChecker
    lattice_factor: int
    lattice_cell_m: float
    open_coarse: np.ndarray  # coarse cells open in the collision mask (guides the search)
    open_coarse_optimistic: np.ndarray  # coarse cells the vehicle might reach (proves enclosure)
    proximity_coarse: np.ndarray  # flat, per coarse cell: extra cost per metre (clearance cost)
    prepare_s: float


class Planner:
    """Plans paths for one vehicle on any number of grids.

    Parameters
    ----------
    vehicle : Vehicle
    settings : SearchSettings
    cache_size : int
        Grids (and goal fields) kept between calls.

    Examples
    --------
    >>> import numpy as np
    >>> from veer.maps import OccupancyGrid
    >>> grid = OccupancyGrid(np.zeros((200, 300), np.uint8), 0.1, (0.0, 0.0))
    >>> from veer.planning.vehicle import EXAMPLE_VEHICLE
    >>> path = Planner(EXAMPLE_VEHICLE).plan(grid, (5.0, 10.0, 0.0), (25.0, 10.0, 0.0))
    >>> round(path.length_m, 1)
    20.0
    """

    def __init__(self, vehicle: Vehicle, settings: SearchSettings = DEFAULT_SEARCH_SETTINGS, cache_size: int = 2):
        self.vehicle = vehicle
        self.settings = settings
        self.cache_size = cache_size
        self._grids: OrderedDict[str, GridContext] = OrderedDict()
        self._fields: OrderedDict[tuple, HolonomicField] = OrderedDict()
        self._lock = threading.Lock()

    # ------------------------------------------------------------------ caches
    def prepare(self, grid: OccupancyGrid, settings: SearchSettings | None = None) -> GridContext:
        """Inflate ``grid`` for this vehicle (cached by ``map_id`` and search step)."""
        settings = settings or self.settings
        step = _primitive_step(self.vehicle, settings, grid.cell_size_m)
        cache_key = (grid.map_id, step, settings.lattice_cell_m, settings.clearance_cost_factor, settings.clearance_range_m)
        with self._lock:
            context = self._grids.get(cache_key)
            if context is not None:
                self._grids.move_to_end(cache_key)
                return context
        t0 = time.perf_counter()
        cs = grid.cell_size_m
        sample_step = cs * _SAMPLE_STEP_CELLS
        clearance = self._refreshed_clearance(grid, settings)
        checker = FootprintChecker(grid, self.vehicle, sample_step_m=sample_step, reach_m=step, clearance_m=clearance)
        lattice = settings.lattice_cell_m or step / 2.0
        factor = max(1, int(round(lattice / cs)))
        open_coarse = coarse_open_mask(checker.inflated.blocked, factor)
        open_optimistic = coarse_open_mask(~_optimistic_open(checker, self.vehicle), factor)
        # clearance cost: rises linearly from 0 at clearance_range_m beyond the footprint to
        # clearance_cost_factor at contact; per coarse cell, from its tightest fine cell
        room = checker.inflated.clearance_m - np.float32(checker.circle_radius_m + checker.inflated.margin_m)
        if settings.clearance_range_m > 0 and settings.clearance_cost_factor > 0:
            tight = -coarse_max(-room, factor)
            prox = settings.clearance_cost_factor * np.clip(1.0 - tight / settings.clearance_range_m, 0.0, 1.0)
        else:
            prox = np.zeros(open_coarse.shape)
        proximity = np.ascontiguousarray(prox, dtype=np.float64).ravel()
        context = GridContext(
            grid, checker, factor, factor * cs, open_coarse, open_optimistic, proximity, time.perf_counter() - t0
        )
        with self._lock:
            self._grids[cache_key] = context
            while len(self._grids) > self.cache_size:
                self._grids.popitem(last=False)
        return context

    def inflated_grid(self, grid: OccupancyGrid, settings: SearchSettings | None = None):
        """The inflated grid (``veer.maps.InflatedGrid``) this planner checks ``grid`` against (cached)."""
        return self.prepare(grid, settings).checker.inflated

    def _refreshed_clearance(self, grid: OccupancyGrid, settings: SearchSettings) -> np.ndarray | None:
        """The clearance field of ``grid`` updated from the last grid of the same geometry.

        A robot's map mostly changes in a few places between updates; recomputing only
        around them (``veer.maps.update_clearance_m``) keeps a replan on a fresh grid
        cheap. Exact for every clearance the collision mask and costs read.
        """
        with self._lock:
            previous = next(
                (c for c in reversed(self._grids.values())
                 if c.grid.classes.shape == grid.classes.shape
                 and c.grid.cell_size_m == grid.cell_size_m and c.grid.origin_m == grid.origin_m),
                None,
            )
        if previous is None:
            return None
        checker = previous.checker
        # every threshold read later: the mask (radius + margin), the clearance cost (+ its
        # range) and the narrow-passage test (+ a quarter lattice cell, below one step)
        extra = max(settings.clearance_range_m, _primitive_step(self.vehicle, settings, grid.cell_size_m))
        reach = checker.circle_radius_m + checker.inflated.margin_m + extra + grid.cell_size_m
        clearance, _ = update_clearance_m(previous.grid, checker.inflated.clearance_m, grid, reach_m=reach)
        return clearance

    def _field(self, context: GridContext, goal_cell: tuple[int, int], optimistic: bool = False) -> HolonomicField:
        key = (context.grid.map_id, context.lattice_factor, goal_cell, optimistic)
        with self._lock:
            found = self._fields.get(key)
            if found is not None:
                self._fields.move_to_end(key)
                return found
        mask = context.open_coarse_optimistic if optimistic else context.open_coarse
        field = holonomic_field(mask, goal_cell, context.lattice_cell_m)
        with self._lock:
            self._fields[key] = field
            while len(self._fields) > 4 * self.cache_size:
                self._fields.popitem(last=False)
        return field

    # ------------------------------------------------------------------ checks
    def check_path(self, grid: OccupancyGrid, poses: np.ndarray) -> int | None:
        """Index of the first pose of an existing path that collides on ``grid``, else None.

        Poses further apart than the collision sample step are densified first, so the
        space between two poses is checked too; the index returned is into ``poses``.
        """
        context = self.prepare(grid)
        poses = np.asarray(poses, dtype=float)
        if len(poses) == 0:
            return None
        dense, owner = _densify(poses, context.checker.sample_step_m)
        hit = context.checker.first_collision(dense)
        return None if hit is None else int(owner[hit])

    def validate_pose(self, context: GridContext, pose, name: str) -> None:
        """Raise PoseError unless ``pose`` is on the map and its footprint is clear."""
        grid = context.grid
        x, y, h = (float(v) for v in pose)
        if not all(math.isfinite(v) for v in (x, y, h)):
            raise PoseError(f"{name} pose {pose} is not finite; give x_m, y_m, heading as numbers")
        if not grid.contains(x, y):
            raise PoseError(
                f"{name} ({x:.2f}, {y:.2f}) is off the map, which spans x {grid.origin_m[0]:.2f}.."
                f"{grid.origin_m[0] + grid.width_m:.2f} m, y {grid.origin_m[1]:.2f}..{grid.origin_m[1] + grid.height_m:.2f} m"
            )
        if not context.checker.poses_clear([x], [y], [h])[0]:
            row, col = grid.world_to_cell(x, y)
            what = "on a blocked cell" if grid.blocked[int(row), int(col)] else "too close to an obstacle for the vehicle"
            raise PoseError(
                f"{name} ({x:.2f}, {y:.2f}, {math.degrees(h):.0f} deg) at cell ({int(row)}, {int(col)}) is {what}; "
                f"move it into open space"
            )

    def _in_narrow_passage(self, context: GridContext, poses) -> bool:
        """True when a pose has less free room sideways than a quarter lattice cell.

        Room is the clearance left beyond the footprint's circles and margins; coarse
        steering cannot hold a line that tight, so such plans start at the finer resolution.
        """
        checker = context.checker
        inflated = checker.inflated
        need = checker.circle_radius_m + inflated.margin_m
        for x, y, _ in poses:
            row, col = context.grid.world_to_cell(x, y)
            if inflated.clearance_m[int(row), int(col)] - need < context.lattice_cell_m / 4.0:
                return True
        return False

    # ------------------------------------------------------------------ search
    def plan(
        self,
        grid: OccupancyGrid,
        start,
        goal,
        *,
        allow_reverse: bool | None = None,
        cancel: threading.Event | None = None,
        deadline_s: float | None = None,
        settings: SearchSettings | None = None,
    ) -> PlannedPath:
        """Plan from ``start`` to ``goal`` (x_m, y_m, heading_rad) on ``grid``.

        Raises
        ------
        PoseError
            Start or goal off the map or in collision.
        NoPath
            ``goal_enclosed`` (proven before any search), ``budget_exhausted``,
            ``deadline`` (``deadline_s`` seconds from the call, or ``max_time_s``),
            ``cancelled`` (``cancel`` was set) or ``no_path_at_resolution``.
        """
        t0 = time.perf_counter()
        settings = settings or self.settings
        if allow_reverse is not None and allow_reverse != settings.allow_reverse:
            settings = replace(settings, allow_reverse=allow_reverse)
        context = self.prepare(grid, settings)
        start = tuple(float(v) for v in start)
        goal = tuple(float(v) for v in goal)
        self.validate_pose(context, start, "start")
        self.validate_pose(context, goal, "goal")
        # headings in [-pi, pi): the search adds multiples of a bin to the start heading
        start = (start[0], start[1], _wrap(start[2]))
        goal = (goal[0], goal[1], _wrap(goal[2]))
        budget_s = settings.max_time_s if deadline_s is None else min(deadline_s, settings.max_time_s)
        deadline = t0 + budget_s
        finer = _finer(settings)
        if finer is not None and self._in_narrow_passage(context, (start, goal)):
            # a coarse search would only exhaust itself first: go straight to the finer one
            path = _Search(self, context, finer, start, goal, t0, deadline, cancel).run()
            path.stats["heading_bins"] = finer.heading_bins
            return path
        try:
            return _Search(self, context, settings, start, goal, t0, deadline, cancel).run()
        except NoPath as first:
            if first.reason != "no_path_at_resolution" or finer is None:
                raise
            log.debug("no path with %d heading bins; trying %d", settings.heading_bins, finer.heading_bins)
            search = _Search(self, context, finer, start, goal, t0, deadline, cancel)
            search.stats["coarse_expansions"] = first.stats.get("expansions", 0)
            try:
                path = search.run()
            except NoPath as second:
                second.stats["expansions"] += first.stats.get("expansions", 0)
                raise
            path.stats["expansions"] += first.stats.get("expansions", 0)
            path.stats["heading_bins"] = finer.heading_bins
            return path


def _finer(settings: SearchSettings) -> SearchSettings | None:
    """The same search at twice the heading and steering resolution (same step), if allowed."""
    if not settings.refine_on_exhaustion or settings.heading_bins * 2 > 720 or settings.steer_levels * 2 > 8:
        return None
    return replace(
        settings,
        heading_bins=settings.heading_bins * 2,
        steer_levels=settings.steer_levels * 2,
        refine_on_exhaustion=False,
    )


def plan_path(grid, vehicle, start, goal, settings: SearchSettings = DEFAULT_SEARCH_SETTINGS, **kwargs) -> PlannedPath:
    """One-shot convenience: ``Planner(vehicle, settings).plan(grid, start, goal, **kwargs)``."""
    return Planner(vehicle, settings, cache_size=1).plan(grid, start, goal, **kwargs)


def _optimistic_open(checker: FootprintChecker, vehicle: Vehicle) -> np.ndarray:
    """Cells where the reference point might still be, for any heading: never under-estimated.

    The collision mask is conservative (margins, covering circles); the proof that a goal
    is enclosed and the 2-D field need the opposite, so that they never close a passage
    the vehicle fits through. The footprint contains a disc (radius_m, or half the
    rectangle's shorter side around its centre); wherever that disc fits, the centre-to-centre
    clearance of its cell is at least its radius less half a cell diagonal. For a
    rectangle the reference point is then within the centre's offset (plus a cell
    diagonal for the two cells) of such a cell.
    """
    inflated = checker.inflated
    cs = inflated.grid.cell_size_m
    if vehicle.has_rectangle:
        inner_radius = min(vehicle.width_m, vehicle.length_m) / 2.0
        offset = abs(vehicle.length_m / 2.0 - vehicle.rear_overhang_or_default_m)
    else:
        inner_radius, offset = float(vehicle.radius_m), 0.0
    centre_open = inflated.clearance_m >= np.float32(inner_radius - cs / math.sqrt(2.0))
    if offset <= 0.0:
        return centre_open
    to_open_m = cv2.distanceTransform((~centre_open).astype(np.uint8), cv2.DIST_L2, cv2.DIST_MASK_PRECISE) * cs
    return to_open_m <= offset + cs * math.sqrt(2.0)


def _primitive_step(vehicle: Vehicle, settings: SearchSettings, cell_size_m: float) -> float:
    if settings.step_m:
        return settings.step_m
    if vehicle.turns_in_place:
        return max(4 * cell_size_m, 0.5)
    return settings.steer_levels * settings.heading_bin_rad * vehicle.min_turn_radius_m


def _densify(poses: np.ndarray, step_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Insert straight-line samples between poses further apart than ``step_m``.

    Returns the dense poses and, for each, the index of the original pose it leads to.
    """
    out = [poses[:1, :3]]
    owner = [np.zeros(1, dtype=np.intp)]
    for i in range(1, len(poses)):
        a, b = poses[i - 1, :3], poses[i, :3]
        n = max(1, int(math.ceil(math.hypot(b[0] - a[0], b[1] - a[1]) / step_m)))
        t = (np.arange(1, n + 1) / n)[:, None]
        dh = _wrap(b[2] - a[2])
        seg = np.column_stack((a[0] + t[:, 0] * (b[0] - a[0]), a[1] + t[:, 0] * (b[1] - a[1]), a[2] + t[:, 0] * dh))
        out.append(seg)
        owner.append(np.full(n, i, dtype=np.intp))
    return np.vstack(out), np.concatenate(owner)


@dataclass(frozen=True)
class _HeuristicTable:
    """h and shot-worthiness per coarse cell, with per-heading values in a window near the goal.

    Fields are memoryviews / bytes so the search loop reads plain Python numbers.
    """

    base_h: memoryview  # per cell
    base_worthy: bytes  # per cell
    window_offset: memoryview  # per cell: index of its first heading in window_*, or -1
    window_h: memoryview  # per window cell and heading
    window_worthy: bytes

    def h(self, cell: int, k: int) -> float:
        off = self.window_offset[cell]
        return self.window_h[off + k] if off >= 0 else self.base_h[cell]

    def worthy(self, cell: int, k: int) -> bool:
        off = self.window_offset[cell]
        return bool(self.window_worthy[off + k] if off >= 0 else self.base_worthy[cell])


class _Search(_PathAssembly):
    """One run of hybrid A*; all state local, so concurrent plans never share it."""

    def __init__(self, planner: Planner, context: GridContext, settings: SearchSettings, start, goal, t0, deadline, cancel):
        self.planner = planner
        self.vehicle = planner.vehicle
        self.context = context
        self.settings = settings
        self.start = start
        self.goal = goal
        self.t0 = t0
        self.deadline = deadline
        self.cancel = cancel
        self.stats = {"expansions": 0, "generated": 0, "shots_tried": 0}

    # -------------------------------------------------------------- helpers
    def _finish_stats(self, **extra) -> dict:
        stats = dict(self.stats)
        stats.update(extra)
        stats["plan_s"] = round(time.perf_counter() - self.t0, 6)
        return stats

    def _shot(self, x: float, y: float, h: float):
        """Analytic path from (x, y, h) to the goal: (curve or turn-in-place pieces, cost), or None."""
        vehicle, settings = self.vehicle, self.settings
        if vehicle.turns_in_place:
            return self._spin_drive_spin((x, y, h), self.goal)
        radius = vehicle.min_turn_radius_m
        few = curves.reeds_shepp_shortest_few if settings.allow_reverse else curves.dubins_shortest_few
        for path in few((x, y, h), self.goal, radius, settings.shot_candidates):
            found = self._curve_cost(path, (x, y, h))
            if found is not None:
                return path, found[0]
        return None

    # -------------------------------------------------------------- main loop
    def run(self) -> PlannedPath:
        settings, vehicle, context = self.settings, self.vehicle, self.context
        grid, checker = context.grid, context.checker
        sx, sy, sh = self.start
        gx, gy, gh = self.goal
        cs = grid.cell_size_m
        lattice_m = context.lattice_cell_m
        inv_lat = 1.0 / lattice_m
        ox = grid.origin_m[0]
        top = grid.origin_m[1] + grid.rows * cs
        rows_c, cols_c = context.open_coarse.shape

        def coarse_cell(x, y):
            return int((top - y) * inv_lat), int((x - ox) * inv_lat)

        # ---- the holonomic field, and the proof that the goal is enclosed
        t_field = time.perf_counter()
        goal_cell = coarse_cell(gx, gy)
        start_cell = coarse_cell(sx, sy)
        # the field over the collision mask guides best; where it cannot link start and
        # goal (tight margins, a rectangle the circles over-cover), the optimistic one
        # decides whether the goal is really walled in, and guides instead
        field = self.planner._field(context, goal_cell)
        if not field.reachable(*start_cell):
            field = self.planner._field(context, goal_cell, optimistic=True)
        field_s = time.perf_counter() - t_field
        if not field.reachable(*start_cell):
            raise NoPath(
                "goal_enclosed",
                "the goal cannot be reached from the start even ignoring the turning limit",
                self._finish_stats(field_s=round(field_s, 6)),
            )

        # ---- turning heuristic table (unit radius)
        radius = vehicle.min_turn_radius_m
        table = None
        if settings.use_turning_heuristic and radius > 0:
            # lower envelope over +-2 entries: the table step is 0.125 turning radii and a
            # pose lies within 0.21 radii of its lattice cell's nearest entry (see spread)
            table = turning_table("reeds_shepp" if settings.allow_reverse else "dubins", spread=2)

        # ---- primitives tabulated for this start heading
        prims: PrimitiveTable = build_primitive_table(
            vehicle, settings, sh, cell_size_m=cs, sample_step_m=checker.sample_step_m,
            circle_offsets_m=checker.circle_offsets_m,
        )
        n_prims = len(prims.primitives)
        bins = settings.heading_bins
        bin_rad = settings.heading_bin_rad
        inv_cell = checker.inv_cell
        circle_cols = prims.circle_dx_m * inv_cell  # (K, P, S*C) in cells
        circle_rows = prims.circle_dy_m * inv_cell
        end_dx, end_dy = prims.end_dx_m, prims.end_dy_m
        end_k = prims.end_heading_index
        rel_heading = (sh - gh + bin_rad * np.arange(bins))  # heading of index k relative to goal
        transition = prims.transition_cost.tolist()
        motion_len = prims.motion_length_m
        blocked_flat = checker.blocked_flat
        width_p = checker.padded_cols
        left_p, top_p = checker.left_x_m, checker.top_y_m
        prox_coarse = context.proximity_coarse
        weight = settings.heuristic_weight
        has_rect = vehicle.has_rectangle
        tol_m = settings.goal_tolerance_m
        tol_rad = math.radians(settings.goal_tolerance_deg)
        shot_near = settings.shot_near_m if settings.shot_near_m is not None else 4.0 * max(radius, lattice_m)
        shot_interval = settings.shot_interval
        use_shots = settings.use_analytic_shots
        shot_accept = settings.shot_accept_ratio
        max_exp = settings.max_expansions
        deadline, cancel = self.deadline, self.cancel

        # ---- node store: one tuple per node id, (x_m, y_m, heading index, g, parent id,
        # primitive, lattice key); primitive n_prims (a row of the transition table) = "no motion yet"
        start_key = (start_cell[0] * cols_c + start_cell[1]) * bins
        nodes = [(sx, sy, 0, 0.0, -1, n_prims, start_key)]
        add_node = nodes.append
        # lattice key -> node id of the best open node there, or CLOSED once expanded
        state: dict[int, int] = {start_key: 0}
        CLOSED = -1
        heur = self._heuristic_table(context, field, table, rel_heading)
        base_h, window_offset, window_h = heur.base_h, heur.window_offset, heur.window_h
        prox = memoryview(np.ascontiguousarray(prox_coarse, dtype=np.float64))
        h0 = heur.h(start_key // bins, 0)
        heap = [(h0, 0)]  # (f, node id): ids rise, so ties go to the older node, never compare poses
        heappush, heappop = heapq.heappush, heapq.heappop
        goal_key = None
        if settings.goal_test_lattice:
            goal_index = int(round(_wrap(gh - sh) / bin_rad)) % bins
            goal_key = (goal_cell[0] * cols_c + goal_cell[1]) * bins + goal_index
        # Collision samples as whole-cell flat offsets plus fractional thresholds: with the
        # parent at row r0 = ri + rf and a sample offset d = di + df (whole + fraction),
        # floor(r0 + d) = ri + di + (rf >= 1 - df); so each lookup is integer adds and two
        # comparisons, with no float-to-int conversion of the samples.
        samples_per_prim = circle_cols.shape[2]
        row_offsets = (-circle_rows).reshape(bins, -1)
        col_offsets = circle_cols.reshape(bins, -1)
        row_whole, col_whole = np.floor(row_offsets), np.floor(col_offsets)
        sample_flat = (row_whole * width_p + col_whole).astype(np.intp)
        row_step_at = 1.0 - (row_offsets - row_whole)  # parent fraction from which a row is added
        col_step_at = 1.0 - (col_offsets - col_whole)
        # per heading index, per primitive: (index, dx_m, dy_m, d_row, d_col in lattice
        # cells, end heading index, length_m), so the successor loop reads one tuple
        lengths = motion_len.tolist()
        prim_rows = [
            list(zip(range(n_prims), dx, dy, dr, dc, k2, lengths))
            for dx, dy, dr, dc, k2 in zip(
                end_dx.tolist(), end_dy.tolist(), (end_dy * inv_lat).tolist(), (end_dx * inv_lat).tolist(),
                end_k.tolist(),
            )
        ]
        t_loop = time.perf_counter()
        expansions = shots = 0
        state_get = state.get
        reason = "no_path_at_resolution"
        finish = None  # (node id, shot or None, cost of the shot)

        # collision-free shots become goal entries of the heap at their full cost, so a
        # shot is only taken once no open node promises better (weighted-A* bound)
        shot_solutions: list[tuple[int, object, float]] = []  # (parent id, curve, its cost); heap id -(j + 1)
        best_shot_cost = math.inf
        if cancel is not None and cancel.is_set():
            heap = []
            reason = "cancelled"
        while heap:
            f, i = heappop(heap)
            if i < 0:
                finish = shot_solutions[-i - 1]
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
            if dist_goal <= tol_m and abs(_wrap(heading - gh)) <= tol_rad:
                finish = (i, None, 0.0)
                break
            if key == goal_key:
                finish = (i, None, 0.0)
                break
            # shots from the start, then every shot_interval expansions, more often near the goal
            if use_shots and heur.worthy(key // bins, k) and (
                expansions == 1
                or expansions % (shot_interval if dist_goal > shot_near else
                                 max(1, int(shot_interval * dist_goal / shot_near))) == 0
            ):
                shots += 1
                shot = self._shot(x, y, heading)
                if shot is not None and g + shot[1] < best_shot_cost:
                    best_shot_cost = g + shot[1]
                    shot_solutions.append((i, shot[0], shot[1]))
                    if best_shot_cost <= shot_accept * f:  # close to the best any open node promises
                        finish = shot_solutions[-1]
                        break
                    heappush(heap, (best_shot_cost, -len(shot_solutions)))

            # ---- successors: collision samples of every primitive in one lookup
            r0 = (top_p - y) * inv_cell
            c0 = (x - left_p) * inv_cell
            ri, ci = int(r0), int(c0)
            cells = sample_flat[k] + (ri * width_p + ci)
            cells += (row_step_at[k] <= r0 - ri) * width_p
            cells += col_step_at[k] <= c0 - ci
            hit = blocked_flat[cells].reshape(n_prims, samples_per_prim).any(axis=1)
            if has_rect and hit.any():
                # the circles are conservative: test the doubtful primitives' rectangles exactly,
                # all samples of one expansion in one window
                doubtful = np.flatnonzero(hit)
                clear = checker.rectangles_clear(
                    (x + prims.sample_dx_m[k, doubtful]).ravel(), (y + prims.sample_dy_m[k, doubtful]).ravel(),
                    prims.sample_heading_rad[k, doubtful].ravel(), chunk=1 << 30,
                ).reshape(len(doubtful), -1).all(axis=1)
                hit[doubtful[clear]] = False
            trans = transition[prim_in]
            # y grows upwards, rows downwards: lattice row of y + dy is (a - dy) / lattice
            a = (top - y) * inv_lat
            b = (x - ox) * inv_lat
            for p, dx, dy, dr, dc, k2, length in compress(prim_rows[k], (~hit).tolist()):
                cell = int(a - dr) * cols_c + int(b + dc)
                key2 = cell * bins + k2
                other = state_get(key2)
                if other == CLOSED:
                    continue
                g2 = g + trans[p] + prox[cell] * length
                if other is not None and nodes[other][3] <= g2:
                    continue
                n = len(nodes)
                add_node((x + dx, y + dy, k2, g2, i, p, key2))
                state[key2] = n
                off = window_offset[cell]
                heappush(heap, (g2 + weight * (window_h[off + k2] if off >= 0 else base_h[cell]), n))

        self.stats.update(
            expansions=expansions, generated=len(nodes) - 1, shots_tried=shots,
            search_s=round(time.perf_counter() - t_loop, 6),
        )
        if finish is None and shot_solutions and reason in ("budget_exhausted", "deadline"):
            finish = shot_solutions[-1]  # out of budget: the best complete path found is still valid
            self.stats["stopped"] = reason
        if finish is None:
            if not heap and reason == "no_path_at_resolution":
                detail = "every pose reachable at this search resolution was tried without reaching the goal"
            else:
                detail = f"stopped after {expansions} expansions ({reason})"
            raise NoPath(reason, detail, self._finish_stats(field_s=round(field_s, 6)))
        path = self._assemble(finish, nodes, prims)
        path.stats = self._finish_stats(
            field_s=round(field_s, 6), prepare_s=round(context.prepare_s, 6), final_poses=len(path.poses)
        )
        log.debug("plan %s -> %s: %s", self.start, self.goal, path.stats)
        return path

    def _heuristic_table(self, context: GridContext, field: HolonomicField, table, rel_heading) -> "_HeuristicTable":
        """h, and whether a shot is worth trying, for every lattice cell and heading.

        h is the holonomic field (or, in plain mode, the straight-line distance) at each
        coarse cell, raised near the goal (a window of the turning table's reach) to the
        turning-table length for each heading. A shot is worth trying from a key when
        the shortest obstacle-free curve (table estimate, or the straight line beyond the
        window) is not clearly shorter than the obstacle-aware distance: otherwise
        obstacles stand in the curve's way and the shot would only be sampled to be
        rejected. Per-heading values exist only in the window, so a large map costs one
        value per cell, not one per cell and heading.
        """
        settings, vehicle = self.settings, self.vehicle
        grid = context.grid
        bins = settings.heading_bins
        rows_c, cols_c = context.open_coarse.shape
        lat = context.lattice_cell_m
        gx, gy, gh = self.goal
        top = grid.origin_m[1] + grid.rows * grid.cell_size_m
        centre_x = grid.origin_m[0] + (np.arange(cols_c) + 0.5) * lat
        centre_y = top - (np.arange(rows_c) + 0.5) * lat
        straight = np.hypot(centre_x[None, :] - gx, centre_y[:, None] - gy)
        base = field.lower_bound_flat.reshape(rows_c, cols_c) if settings.use_heuristic_field else straight
        slack_m = _SHOT_SLACK_CELLS * lat + 0.5
        if settings.use_heuristic_field:
            worthy = straight + slack_m >= base
        else:
            worthy = np.ones(base.shape, dtype=bool)
        window_offset = np.full((rows_c, cols_c), -1, dtype=np.int64)
        window_h = np.zeros(1)
        window_worthy = np.zeros(1, dtype=bool)
        if table is not None:
            radius = vehicle.min_turn_radius_m
            reach = min(_TURNING_WINDOW_RADII, table.pos_step * (table.lengths.shape[1] - 1)) * radius
            c0 = max(0, int((gx - reach - grid.origin_m[0]) / lat))
            c1 = min(cols_c, int((gx + reach - grid.origin_m[0]) / lat) + 1)
            r0 = max(0, int((top - gy - reach) / lat))
            r1 = min(rows_c, int((top - gy + reach) / lat) + 1)
            if r0 < r1 and c0 < c1:
                dx = centre_x[None, c0:c1] - gx
                dy = centre_y[r0:r1, None] - gy
                cg, sg = math.cos(gh), math.sin(gh)
                u = (cg * dx + sg * dy) / radius
                v = (-sg * dx + cg * dy) / radius
                turning = table.lookup_separable(u, v, rel_heading).astype(np.float64) * radius
                window_base = base[r0:r1, c0:c1, None]
                window_h = np.maximum(window_base, turning).ravel()
                estimate = np.maximum(straight[r0:r1, c0:c1, None], turning)
                if settings.use_heuristic_field:
                    window_worthy = (estimate + slack_m >= window_base).ravel()
                else:
                    window_worthy = np.ones(window_h.shape, dtype=bool)
                wr, wc = r1 - r0, c1 - c0
                window_offset[r0:r1, c0:c1] = (np.arange(wr * wc).reshape(wr, wc)) * bins
        return _HeuristicTable(
            base_h=memoryview(np.ascontiguousarray(base, dtype=np.float64).ravel()),
            base_worthy=np.ascontiguousarray(worthy, dtype=np.uint8).ravel().tobytes(),
            window_offset=memoryview(window_offset.ravel()),
            window_h=memoryview(np.ascontiguousarray(window_h, dtype=np.float64)),
            window_worthy=np.ascontiguousarray(window_worthy, dtype=np.uint8).tobytes(),
        )

    # -------------------------------------------------------------- output
