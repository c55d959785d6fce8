"""A search problem: everything one hybrid A* search reads, built before the loop starts.

:class:`SearchProblem` is fixed per (grid context, goal, settings): the lattice frame,
the cost model, the 2-D distance field to the goal, the turning-heuristic table and the
goal curves. :meth:`SearchProblem.tables_for` adds what also depends on the start heading
(every primitive turns whole heading bins, so a search from heading theta0 only holds
headings theta0 + k * bin; Dolgov, Thrun, Montemerlo & Diebel, AAAI STAIR workshop 2008):
the primitive table, the successor rows and collision offsets of every heading index,
and the heuristic per lattice cell and heading. The loop itself is in
:mod:`veer.planning.kernel`; nothing here changes once built.
"""

from __future__ import annotations

import math
import threading
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from veer.planning.analytic import GoalCurves
from veer.planning.angles import wrap_angle
from veer.planning.context import GridCache, GridContext
from veer.planning.costs import CostModel, MotionEnd
from veer.planning.heuristics import HolonomicField, TurningTable, turning_table
from veer.planning.primitives import PrimitiveTable, build_primitive_table
from veer.planning.settings import SearchSettings
from veer.planning.vehicle import Vehicle

__all__ = ["SearchProblem", "HeadingTables", "HeuristicTable", "build_problem"]

_WORTHY_SLACK_M = 0.5  # a goal curve is tried where its estimate is at most this short of the 2-D distance
_TURNING_WINDOW_RADII = 6.0  # turning heuristic applied within this many turn radii of the goal


@dataclass(frozen=True)
class HeuristicTable:
    """h and goal-curve worthiness per lattice cell, with per-heading values in a window near the goal.

    Fields are memoryviews / bytes so the search loop reads plain Python numbers.
    """

    base_h: memoryview  # per lattice cell
    base_worthy: bytes  # per lattice cell
    window_offset: memoryview  # per lattice cell: index of its first heading in window_*, or -1
    window_h: memoryview  # per window cell and heading
    window_worthy: bytes

    def h(self, cell: int, k: int) -> float:
        off = self.window_offset[cell]
        return self.window_h[off + k] if off >= 0 else self.base_h[cell]

    def worthy(self, cell: int, k: int) -> bool:
        off = self.window_offset[cell]
        return bool(self.window_worthy[off + k] if off >= 0 else self.base_worthy[cell])


@dataclass(frozen=True)
class HeadingTables:
    """What a search from one start heading reads per heading index k (K = heading bins)."""

    start_heading_rad: float
    primitives: PrimitiveTable
    heuristic: HeuristicTable
    # per k: [(primitive, dx_m, dy_m, d_row, d_col in lattice cells, end heading index, length_m), ...]
    successor_rows: list
    # collision samples per k as whole-cell flat offsets into the padded mask plus the
    # fractional thresholds from which a row / column is added (see kernel)
    sample_flat: np.ndarray
    row_step_at: np.ndarray
    col_step_at: np.ndarray
    samples_per_primitive: int
    primitive_ends: list  # MotionEnd of each primitive, for the junction into a goal curve


@dataclass
class SearchProblem:
    """One (grid, goal, settings) for one vehicle; :meth:`tables_for` per start heading."""

    context: GridContext
    vehicle: Vehicle
    settings: SearchSettings
    costs: CostModel
    goal: tuple[float, float, float]
    goal_cell: tuple[int, int]
    field: HolonomicField
    turning: TurningTable | None
    goal_curves: GoalCurves

    def __post_init__(self):
        self._tables: OrderedDict[float, HeadingTables] = OrderedDict()
        self._lock = threading.Lock()

    @property
    def lattice(self):
        return self.context.lattice

    def tables_for(self, start_heading_rad: float) -> HeadingTables:
        """The per-heading tables of a search from ``start_heading_rad`` (the last few kept)."""
        key = round(float(start_heading_rad), 12)
        with self._lock:
            found = self._tables.get(key)
            if found is not None:
                return found
        tables = self._build_tables(float(start_heading_rad))
        with self._lock:
            self._tables[key] = tables
            while len(self._tables) > 4:
                self._tables.popitem(last=False)
        return tables

    def _build_tables(self, sh: float) -> HeadingTables:
        settings, context = self.settings, self.context
        checker = context.checker
        prims = build_primitive_table(
            self.vehicle, settings, sh, cell_size_m=context.grid.cell_size_m, sample_step_m=checker.sample_step_m,
            circle_offsets_m=checker.circle_offsets_m, costs=self.costs,
        )
        bins = settings.heading_bins
        n_prims = len(prims.primitives)
        padded = context.collision_frame
        # Collision samples as whole-cell flat offsets plus fractional thresholds: with the
        # parent at row r0 = ri + rf and a sample offset d = di + df (whole + fraction),
        # floor(r0 + d) = ri + di + (rf >= 1 - df); so each lookup is integer adds and two
        # comparisons, with no float-to-int conversion of the samples.
        row_offsets = (-prims.circle_dy_m * padded.inv_cell).reshape(bins, -1)
        col_offsets = (prims.circle_dx_m * padded.inv_cell).reshape(bins, -1)
        row_whole, col_whole = np.floor(row_offsets), np.floor(col_offsets)
        sample_flat = (row_whole * padded.cols + col_whole).astype(np.intp)
        inv_lat = self.lattice.inv_cell
        lengths = prims.motion_length_m.tolist()
        successor_rows = [
            list(zip(range(n_prims), dx, dy, dr, dc, k2, lengths))
            for dx, dy, dr, dc, k2 in zip(
                prims.end_dx_m.tolist(), prims.end_dy_m.tolist(), (prims.end_dy_m * inv_lat).tolist(),
                (prims.end_dx_m * inv_lat).tolist(), prims.end_heading_index.tolist(),
            )
        ]
        max_curvature = self.vehicle.max_curvature_per_m
        ends = [
            (p.gear if p.length_m else 0,
             0.0 if p.rotation_rad or math.isinf(max_curvature) else p.curvature_per_m / max_curvature)
            for p in prims.primitives
        ]
        rel_heading = sh - self.goal[2] + settings.heading_bin_rad * np.arange(bins)
        return HeadingTables(
            start_heading_rad=sh,
            primitives=prims,
            heuristic=self._heuristic_table(rel_heading),
            successor_rows=successor_rows,
            sample_flat=sample_flat,
            row_step_at=1.0 - (row_offsets - row_whole),
            col_step_at=1.0 - (col_offsets - col_whole),
            samples_per_primitive=prims.circle_dx_m.shape[2],
            primitive_ends=ends,
        )

    def _heuristic_table(self, rel_heading: np.ndarray) -> HeuristicTable:
        """h, and whether a goal curve is worth trying, for every lattice cell and heading.

        h is the 2-D field (or, in plain mode, the straight-line distance) at each
        lattice cell, raised near the goal (a window of the turning table's reach) to the
        turning-table length for each heading. A goal curve is worth trying from a key
        when the shortest obstacle-free curve (table estimate, or the straight line
        beyond the window) is not clearly shorter than the obstacle-aware distance:
        otherwise obstacles stand in the curve's way and it would only be sampled to be
        rejected. Per-heading values exist only in the window, so a large map costs one
        value per cell, not one per cell and heading.
        """
        settings, lattice = self.settings, self.lattice
        bins = settings.heading_bins
        rows_c, cols_c = lattice.shape
        gx, gy, gh = self.goal
        centre_x, centre_y = lattice.centre_x_m(), lattice.centre_y_m()
        straight = np.hypot(centre_x[None, :] - gx, centre_y[:, None] - gy)
        use_field = settings.use_heuristic_field
        base = self.field.lower_bound_flat.reshape(rows_c, cols_c) if use_field else straight
        # the 8-connected field reads up to 8 % above the straight line on open ground, so
        # some diagonal stretches read as blocked: the search tries from the start always
        worthy = straight + _WORTHY_SLACK_M >= base if use_field else np.ones(base.shape, dtype=bool)
        window_offset = np.full((rows_c, cols_c), -1, dtype=np.int64)
        window_h = np.zeros(1)
        window_worthy = np.zeros(1, dtype=bool)
        table = self.turning
        if table is not None:
            radius = self.vehicle.min_turn_radius_m
            reach = min(_TURNING_WINDOW_RADII, table.pos_step * (table.lengths.shape[1] - 1)) * radius
            r0, c0 = lattice.cell_of(gx - reach, gy + reach)
            r1, c1 = lattice.cell_of(gx + reach, gy - reach)
            r0, c0 = max(0, r0), max(0, c0)
            r1, c1 = min(rows_c, r1 + 1), min(cols_c, c1 + 1)
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
                if use_field:
                    window_worthy = (estimate + _WORTHY_SLACK_M >= window_base).ravel()
                else:
                    window_worthy = np.ones(window_h.shape, dtype=bool)
                wr, wc = r1 - r0, c1 - c0
                window_offset[r0:r1, c0:c1] = np.arange(wr * wc).reshape(wr, wc) * bins
        return HeuristicTable(
            base_h=memoryview(np.ascontiguousarray(base, dtype=np.float64).ravel()),
            base_worthy=np.ascontiguousarray(worthy, dtype=np.uint8).ravel().tobytes(),
            window_offset=memoryview(window_offset.ravel()),
            window_h=memoryview(np.ascontiguousarray(window_h, dtype=np.float64)),
            window_worthy=np.ascontiguousarray(window_worthy, dtype=np.uint8).tobytes(),
        )


def build_problem(cache: GridCache, context: GridContext, vehicle: Vehicle, settings: SearchSettings, goal,
                  field: HolonomicField) -> SearchProblem:
    """A search problem for ``goal`` on ``context``, guided by ``field`` (a 2-D field to the goal's lattice cell)."""
    radius = vehicle.min_turn_radius_m
    turning = None
    if settings.use_turning_heuristic and radius > 0:
        # lower envelope over +-2 entries: the table step is 0.125 turning radii and a
        # pose lies within 0.21 radii of its lattice cell's nearest entry (see spread)
        turning = turning_table("reeds_shepp" if settings.allow_reverse else "dubins", spread=2)
    costs = CostModel.for_vehicle(vehicle, settings)
    goal = (float(goal[0]), float(goal[1]), wrap_angle(float(goal[2])))
    return SearchProblem(
        context=context, vehicle=vehicle, settings=settings, costs=costs, goal=goal,
        goal_cell=context.lattice.cell_of(goal[0], goal[1]), field=field, turning=turning,
        goal_curves=GoalCurves(context, vehicle, costs, goal, reverse=settings.allow_reverse,
                               candidates=settings.goal_curve_candidates),
    )
