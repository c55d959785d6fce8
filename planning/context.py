"""What the planner derives from one grid for one vehicle, and the cache that keeps it between plans.

:class:`GridContext` holds the inflated collision grid (a
:class:`~veer.planning.collision.FootprintChecker`), the search lattice and its coarse
masks, and the clearance cost per lattice cell. :class:`GridCache` builds contexts on
demand, keeps the last few (keyed by ``map_id`` and the settings they depend on), keeps
the 2-D distance fields per (grid, goal cell), and refreshes the clearance field of a new
grid of the same geometry only around the cells that changed. A long-lived caller (the
node) replanning on a changing map therefore pays for inflation and fields once per
change, not once per plan. Thread-safe: the cache's tables are guarded by one lock, the
values are never changed once built.
"""

from __future__ import annotations

import math
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass

import cv2
import numpy as np

from veer.maps import InflatedGrid, OccupancyGrid, update_clearance_m
from veer.planning.collision import FootprintChecker
from veer.planning.costs import CostModel
from veer.planning.frame import GridFrame
from veer.planning.heuristics import HolonomicField, coarse_max, coarse_open_mask, holonomic_field
from veer.planning.primitives import primitive_step_m
from veer.planning.settings import SearchSettings
from veer.planning.vehicle import Vehicle

__all__ = ["GridContext", "GridCache", "SAMPLE_STEP_CELLS", "body_centre_m"]

#: Collision samples along a motion, in map cells.
SAMPLE_STEP_CELLS = 0.5


@dataclass(frozen=True)
class GridContext:
    """One grid prepared for one vehicle and search step: reused across plans."""

    grid: OccupancyGrid
    checker: FootprintChecker
    map_frame: GridFrame  # the map's own cells
    collision_frame: GridFrame  # the padded collision mask's cells (checker.blocked_flat)
    lattice: GridFrame  # cells of the visited table: blocks of lattice_factor map cells
    lattice_factor: int
    open_coarse: np.ndarray  # lattice cells open in the collision mask (guide the search)
    open_coarse_optimistic: np.ndarray  # lattice cells the vehicle might reach (prove enclosure)
    proximity_coarse: np.ndarray  # flat, per lattice cell: clearance cost per metre
    prepare_s: float
    # rectangles only: 8-connected components of the cells where the body centre may be
    body_components: np.ndarray | None = None

    @property
    def inflated(self) -> InflatedGrid:
        return self.checker.inflated

    @property
    def lattice_cell_m(self) -> float:
        return self.lattice.cell_m

    def proximity_at(self, x_m, y_m) -> np.ndarray:
        """Clearance cost per metre at world points (the lattice cell's value)."""
        return self.proximity_coarse[self.lattice.flat_of(x_m, y_m)]

    def room_m(self, x_m: float, y_m: float) -> float:
        """Free room beyond the footprint's circles and margins at a world point (metres)."""
        row, col = self.map_frame.cell_of(float(x_m), float(y_m))
        inflated = self.checker.inflated
        return float(inflated.clearance_m[row, col]) - (self.checker.circle_radius_m + inflated.margin_m)


class GridCache:
    """Grid contexts and 2-D fields for one vehicle, least recently used first out.

    Parameters
    ----------
    vehicle : Vehicle
    size : int
        Contexts kept (fields: four times as many).
    """

    def __init__(self, vehicle: Vehicle, size: int = 2):
        self.vehicle = vehicle
        self.size = max(1, int(size))
        self._contexts: OrderedDict[tuple, GridContext] = OrderedDict()
        self._fields: OrderedDict[tuple, HolonomicField] = OrderedDict()
        self._lock = threading.Lock()

    def context(self, grid: OccupancyGrid, settings: SearchSettings) -> GridContext:
        """The context of ``grid`` for these settings, built (about an inflation's cost) or cached."""
        step = primitive_step_m(self.vehicle, settings, grid.cell_size_m)
        key = (grid.map_id, step, settings.lattice_cell_m, settings.clearance_cost_factor, settings.clearance_range_m)
        with self._lock:
            found = self._contexts.get(key)
            if found is not None:
                self._contexts.move_to_end(key)
                return found
        t0 = time.perf_counter()
        cs = grid.cell_size_m
        clearance = self._refreshed_clearance(grid, settings, step)
        checker = FootprintChecker(
            grid, self.vehicle, sample_step_m=cs * SAMPLE_STEP_CELLS, reach_m=step, clearance_m=clearance
        )
        factor = max(1, int(round((settings.lattice_cell_m or step / 2.0) / cs)))
        map_frame = GridFrame.of_grid(grid)
        lattice = map_frame.coarsened(factor)
        inflated = checker.inflated
        open_coarse = coarse_open_mask(inflated.blocked, factor)
        centre_open = _centre_open(inflated, self.vehicle)
        open_optimistic = coarse_open_mask(~_optimistic_open(centre_open, inflated, self.vehicle), factor)
        components = None
        if self.vehicle.has_rectangle:
            components = cv2.connectedComponents(centre_open.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)[1]
        costs = CostModel.for_vehicle(self.vehicle, settings)
        if costs.prices_clearance:
            # per lattice cell, from its tightest map cell
            room = inflated.clearance_m - np.float32(checker.circle_radius_m + inflated.margin_m)
            proximity = costs.proximity_per_m(-coarse_max(-room, factor))
        else:
            proximity = np.zeros(open_coarse.shape)
        context = GridContext(
            grid, checker, map_frame, map_frame.padded(checker.pad_cells), lattice, factor, open_coarse, open_optimistic,
            np.ascontiguousarray(proximity, dtype=np.float64).ravel(), time.perf_counter() - t0, components,
        )
        with self._lock:
            self._contexts[key] = context
            while len(self._contexts) > self.size:
                self._contexts.popitem(last=False)
        return context

    def field(self, context: GridContext, goal_cell: tuple[int, int], optimistic: bool = False) -> HolonomicField:
        """2-D distance to ``goal_cell`` over the lattice (the optimistic mask when asked), cached."""
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
            while len(self._fields) > 4 * self.size:
                self._fields.popitem(last=False)
        return field

    def _refreshed_clearance(self, grid: OccupancyGrid, settings: SearchSettings, step_m: float) -> np.ndarray | None:
        """The clearance field of ``grid`` updated from the last grid of the same geometry, or None.

        A robot's map mostly changes in a few places between updates; recomputing only
        around them (``veer.maps.update_clearance_m``) keeps a replan on a fresh grid
        cheap. Exact for every clearance the collision mask and costs read.
        """
        with self._lock:
            previous = next(
                (c for c in reversed(self._contexts.values())
                 if c.grid.classes.shape == grid.classes.shape
                 and c.grid.cell_size_m == grid.cell_size_m and c.grid.origin_m == grid.origin_m),
                None,
            )
        if previous is None:
            return None
        checker = previous.checker
        # every threshold read later: the mask (radius + margin), the clearance cost (+ its
        # range) and the narrow-passage test (+ a quarter lattice cell, below one step)
        extra = max(settings.clearance_range_m, step_m)
        reach = checker.circle_radius_m + checker.inflated.margin_m + extra + grid.cell_size_m
        clearance, _ = update_clearance_m(previous.grid, checker.inflated.clearance_m, grid, reach_m=reach)
        return clearance


def _inner_disc(vehicle: Vehicle) -> tuple[float, float]:
    """(radius, offset ahead of the rear axle) of the largest disc inside the footprint."""
    if vehicle.has_rectangle:
        return min(vehicle.width_m, vehicle.length_m) / 2.0, vehicle.length_m / 2.0 - vehicle.rear_overhang_or_default_m
    return float(vehicle.radius_m), 0.0


def _centre_open(inflated: InflatedGrid, vehicle: Vehicle) -> np.ndarray:
    """Cells that may hold the centre of the footprint's inner disc, for some pose of the vehicle.

    Wherever that disc fits, the centre-to-centre clearance of its cell is at least its
    radius less half a cell diagonal; so a cell outside this mask never holds it.
    """
    radius, _ = _inner_disc(vehicle)
    cs = inflated.grid.cell_size_m
    return inflated.clearance_m >= np.float32(radius - cs / math.sqrt(2.0))


def body_centre_m(vehicle: Vehicle, pose) -> tuple[float, float]:
    """World position of the inner disc's centre (the body centre of a rectangle) at ``pose``."""
    _, offset = _inner_disc(vehicle)
    x, y, h = pose
    return x + offset * math.cos(h), y + offset * math.sin(h)


def _optimistic_open(centre_open: np.ndarray, inflated: InflatedGrid, vehicle: Vehicle) -> np.ndarray:
    """Cells where the reference point might still be, for any heading: never under-estimated.

    The collision mask is conservative (margins, covering circles); the 2-D field and the
    proof that a goal is enclosed need the opposite, so that they never close a passage
    the vehicle fits through. For a rectangle the reference point is within the inner
    disc's offset (plus a cell diagonal for the two cells) of a cell of ``centre_open``.
    """
    cs = inflated.grid.cell_size_m
    offset = abs(_inner_disc(vehicle)[1])
    if offset <= 0.0:
        return centre_open
    to_open_m = cv2.distanceTransform((~centre_open).astype(np.uint8), cv2.DIST_L2, cv2.DIST_MASK_PRECISE) * cs
    return to_open_m <= offset + cs * math.sqrt(2.0)
