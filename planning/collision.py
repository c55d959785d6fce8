"""Collision checks of vehicle poses against an occupancy grid.

The footprint is covered by circles on the vehicle's long axis (one circle, the disc of
``radius_m``, when no rectangle is given). Each circle centre is looked up in a mask of
cells where a circle centred *anywhere* in the cell might touch a blocked square (see
``veer.maps.inflate``), so a pose whose circle cells are all clear is collision-free.
When the footprint is a rectangle and the circles are inconclusive, the rectangle is
tested exactly against every nearby blocked square with the separating-axis theorem
(Gottschalk, Lin & Manocha, "OBBTree", SIGGRAPH 1996), so no feasible pose is rejected
for the circles' bulge alone. Covering circles: Ziegler & Stiller, IEEE IV 2010.

Poses are checked at samples at most ``sample_step_m`` apart; the mask is inflated by a
further half step (plus the chord sagitta of the tightest arc), so the footprint is also
clear at every point between two samples.
"""

from __future__ import annotations

import math

import numpy as np

from veer.maps import OccupancyGrid, inflate
from veer.planning.vehicle import Vehicle

__all__ = ["FootprintChecker"]


class FootprintChecker:
    """Answers "is the footprint clear at these poses?" for one grid and one vehicle.

    Parameters
    ----------
    grid : OccupancyGrid
    vehicle : Vehicle
    sample_step_m : float
        Largest spacing of the poses that will be checked along a motion.
    reach_m : float
        How far beyond the map a checked position may lie (it then reads as blocked);
        sets the padding of the lookup table.
    clearance_m : ndarray, optional
        The grid's clearance field, when the caller already has it.
    """

    def __init__(
        self,
        grid: OccupancyGrid,
        vehicle: Vehicle,
        *,
        sample_step_m: float,
        reach_m: float = 0.0,
        clearance_m: np.ndarray | None = None,
    ):
        self.grid = grid
        self.vehicle = vehicle
        self.sample_step_m = float(sample_step_m)
        self.circle_offsets_m, self.circle_radius_m = vehicle.covering_circles()
        # A footprint point at distance rho from the reference point moves at most
        # (1 + rho * kappa) times as far as the reference point; turn-in-place motions are
        # sampled so that the farthest footprint point moves at most one step.
        curvature = vehicle.max_curvature_per_m
        if math.isinf(curvature):
            self.extra_margin_m = self.sample_step_m / 2.0
        else:
            reach = float(np.max(np.abs(self.circle_offsets_m)))
            sagitta_m = self.sample_step_m**2 * curvature / 8.0
            self.extra_margin_m = self.sample_step_m / 2.0 * (1.0 + reach * curvature) + sagitta_m
            rho = vehicle.bounding_radius_m
            self._rect_grow_m = self.sample_step_m / 2.0 * (1.0 + rho * curvature) + sagitta_m
        if math.isinf(curvature):
            self._rect_grow_m = self.sample_step_m / 2.0
        self.inflated = inflate(
            grid, self.circle_radius_m, extra_margin_m=self.extra_margin_m, clearance_m=clearance_m
        )
        cs = grid.cell_size_m
        reach_m = reach_m + float(np.max(np.abs(self.circle_offsets_m)))
        self.pad_cells = int(math.ceil(reach_m / cs)) + 2
        pad = self.pad_cells
        blocked = np.pad(self.inflated.blocked, pad, constant_values=True)
        self.padded_cols = blocked.shape[1]
        self.padded_rows = blocked.shape[0]
        self.blocked_flat = np.ascontiguousarray(blocked).ravel()
        self.inv_cell = 1.0 / cs
        self.left_x_m = grid.origin_m[0] - pad * cs
        self.top_y_m = grid.origin_m[1] + grid.rows * cs + pad * cs
        self._raw_blocked = None  # padded raw grid, built on first exact check
        self._raw_boundary = None  # its blocked squares that touch an open square

    # ------------------------------------------------------------------ lookups
    def flat_index(self, x_m, y_m) -> np.ndarray:
        """Index into ``blocked_flat`` of the cells holding world points (clipped to the border)."""
        col = np.clip(((np.asarray(x_m) - self.left_x_m) * self.inv_cell).astype(np.intp), 0, self.padded_cols - 1)
        row = np.clip(((self.top_y_m - np.asarray(y_m)) * self.inv_cell).astype(np.intp), 0, self.padded_rows - 1)
        return row * self.padded_cols + col

    def circles_clear(self, x_m, y_m, heading_rad) -> np.ndarray:
        """True where every covering circle of the pose lies in a clear cell (conservative)."""
        x_m, y_m, heading_rad = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (x_m, y_m, heading_rad))
        c, s = np.cos(heading_rad), np.sin(heading_rad)
        offsets = self.circle_offsets_m[:, None]
        idx = self.flat_index(x_m + offsets * c, y_m + offsets * s)
        return ~self.blocked_flat[idx].any(axis=0)

    def poses_clear(self, x_m, y_m, heading_rad) -> np.ndarray:
        """True where the footprint is clear: circles first, exact rectangle where they fail."""
        x_m, y_m, heading_rad = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (x_m, y_m, heading_rad))
        clear = self.circles_clear(x_m, y_m, heading_rad)
        if self.vehicle.has_rectangle and not clear.all():
            doubtful = np.flatnonzero(~clear)
            clear[doubtful] = self.rectangles_clear(x_m[doubtful], y_m[doubtful], heading_rad[doubtful])
        return clear

    def first_collision(self, poses: np.ndarray) -> int | None:
        """Index of the first pose of ``poses`` (N, >=3) whose footprint is not clear, else None.

        Consecutive poses must be at most ``sample_step_m`` apart for the space between
        them to be covered; use :func:`densify` first if they are not.
        """
        poses = np.asarray(poses, dtype=float)
        if len(poses) == 0:
            return None
        clear = self.poses_clear(poses[:, 0], poses[:, 1], poses[:, 2])
        bad = np.flatnonzero(~clear)
        return int(bad[0]) if bad.size else None

    # ------------------------------------------------------------ exact check
    def rectangles_clear(self, x_m, y_m, heading_rad, *, chunk: int = 32) -> np.ndarray:
        """Exact test of (margin-grown) rectangles against the blocked squares near them.

        Separating-axis theorem for two convex polygons: they are disjoint if and only if
        their projections are disjoint on one of the edge normals (two of the square, two
        of the rectangle). Vectorised over poses x blocked squares in the poses' window;
        ``chunk`` consecutive poses share one window (pass a large one for poses that lie
        close together, such as the samples of one expansion).
        """
        x_m, y_m, heading_rad = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (x_m, y_m, heading_rad))
        if len(x_m) > chunk:
            # one window per few consecutive poses keeps the poses x squares table small
            return np.concatenate([
                self.rectangles_clear(x_m[i : i + chunk], y_m[i : i + chunk], heading_rad[i : i + chunk], chunk=chunk)
                for i in range(0, len(x_m), chunk)
            ])
        grid = self.grid
        cs = grid.cell_size_m
        if self._raw_blocked is None:
            raw = np.pad(grid.blocked, self.pad_cells, constant_values=True)
            # boundary squares: blocked with an open 4-neighbour. A rectangle meets the
            # blocked union exactly when it meets a boundary square or lies inside the
            # union (then its centre's cell is blocked), so only these need the full test.
            inner = raw.copy()
            inner[1:-1, 1:-1] &= raw[:-2, 1:-1] & raw[2:, 1:-1] & raw[1:-1, :-2] & raw[1:-1, 2:]
            self._raw_boundary = raw & ~inner
            self._raw_blocked = raw
        vehicle = self.vehicle
        grow = self._rect_grow_m
        rear = -vehicle.rear_overhang_or_default_m - grow
        front = -vehicle.rear_overhang_or_default_m + vehicle.length_m + grow
        half_len = (front - rear) / 2.0
        half_wid = vehicle.width_m / 2.0 + grow
        mid = (rear + front) / 2.0
        c, s = np.cos(heading_rad), np.sin(heading_rad)
        cx, cy = x_m + mid * c, y_m + mid * s
        extent_x = half_len * np.abs(c) + half_wid * np.abs(s)
        extent_y = half_len * np.abs(s) + half_wid * np.abs(c)
        col_lo = (cx - extent_x - self.left_x_m) * self.inv_cell
        col_hi = (cx + extent_x - self.left_x_m) * self.inv_cell
        row_lo = (self.top_y_m - (cy + extent_y)) * self.inv_cell
        row_hi = (self.top_y_m - (cy - extent_y)) * self.inv_cell
        result = np.zeros(x_m.shape, dtype=bool)
        # a rectangle reaching beyond the padded border is blocked (the map's outside is)
        inside = (row_lo >= 0) & (col_lo >= 0) & (row_hi < self.padded_rows - 1) & (col_hi < self.padded_cols - 1)
        if not inside.all():
            if inside.any():
                result[inside] = self.rectangles_clear(x_m[inside], y_m[inside], heading_rad[inside], chunk=chunk)
            return result
        col0, col1 = int(col_lo.min()), int(col_hi.max())
        row0, row1 = int(row_lo.min()), int(row_hi.max())
        # a rectangle whose centre lies in a blocked square is blocked outright
        centre_blocked = self._raw_blocked[
            ((self.top_y_m - cy) * self.inv_cell).astype(np.intp), ((cx - self.left_x_m) * self.inv_cell).astype(np.intp)
        ]
        rows, cols = np.nonzero(self._raw_boundary[row0 : row1 + 1, col0 : col1 + 1])
        if rows.size == 0:
            return ~centre_blocked
        half = cs / 2.0
        # centres of the blocked squares relative to each rectangle's centre: (poses, squares)
        qx = (self.left_x_m + (cols + col0 + 0.5) * cs)[None, :] - cx[:, None]
        qy = (self.top_y_m - (rows + row0 + 0.5) * cs)[None, :] - cy[:, None]
        c2, s2 = c[:, None], s[:, None]
        separated = np.abs(qx) > (extent_x + half)[:, None]
        separated |= np.abs(qy) > (extent_y + half)[:, None]
        square_on_axis = half * (np.abs(c2) + np.abs(s2))
        separated |= np.abs(qx * c2 + qy * s2) > half_len + square_on_axis
        separated |= np.abs(-qx * s2 + qy * c2) > half_wid + square_on_axis
        return separated.all(axis=1) & ~centre_blocked
