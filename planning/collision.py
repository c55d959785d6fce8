"""Collision checks of vehicle poses against an occupancy grid.

The footprint is covered by circles on the vehicle's long axis (one circle, the disc of
``radius_m``, when no rectangle is given). Each circle centre is looked up in a mask of
cells where a circle centred *anywhere* in the cell might touch a blocked square (see
``veer.maps.inflate``), so a pose whose circle cells are all clear is collision-free.
Covering circles: Ziegler & Stiller, "Fast collision checking for intelligent vehicle
motion planning", IEEE IV 2010.

When the footprint is a rectangle and the circles are inconclusive, the rectangle is
tested exactly, so no feasible pose is rejected for the circles' bulge alone. The test
has the two phases of collision detection (LaValle, *Planning Algorithms*, 2006,
section 5.3.1): a broad phase that finds the obstacles near a batch of poses, and an
exact narrow phase.

- **Obstacles as boxes.** The blocked cells (with the map's outside, as a blocked
  border) are merged once per grid into axis-aligned boxes whose union is exactly the
  union of the blocked squares: each row's runs of blocked cells, then runs with the
  same columns in consecutive rows joined (:func:`obstacle_boxes`). Walls and racks
  become a handful of boxes instead of hundreds of squares.
- **Broad phase.** The boxes are listed per tile of ``_TILE_CELLS`` cells (a uniform
  grid, Ericson, *Real-Time Collision Detection*, 2005, section 7.1); a batch of poses
  gathers the boxes of the tiles within the footprint's reach of its poses.
- **Narrow phase.** Each (margin-grown) rectangle against each of those boxes with the
  separating-axis theorem: two convex polygons are disjoint if and only if their
  projections are disjoint on one of their edge normals, here the box's x and y and the
  rectangle's two axes (Gottschalk, Lin & Manocha, "OBBTree", SIGGRAPH 1996; Ericson
  2005, section 4.4.1). Touching counts as a collision. The answer is exact for every
  pose; no lookup table stands between it and the geometry. With a few boxes (the
  usual case) all eight inequalities of all pose x box pairs come from one matrix
  product of pose features and box features (:func:`_separating_axis_tensor`).

Configuration-space obstacle masks per heading bucket (Lozano-Perez, "Spatial planning:
a configuration space approach", IEEE Trans. Computers C-32(2), 1983; LaValle 2006,
section 4.3) were measured as the alternative and not used: on 0.1 m cells a 3.2 m body
needs a dilation kernel of about 700 cells per bucket, a band of doubt of a cell plus
the bucket's sweep remains for the exact test, and building the masks lazily cost more
than the exact test they would save on the built-in scenarios.

Poses are checked at samples at most ``sample_step_m`` apart; the mask is inflated by a
further half step (plus the chord sagitta of the tightest arc), and the rectangle grown
by the distance its farthest corner moves in half a step, so the footprint is also
clear at every point between two samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from veer.maps import OccupancyGrid, inflate
from veer.planning.frame import GridFrame
from veer.planning.errors import VehicleError
from veer.planning.vehicle import Vehicle

__all__ = ["FootprintChecker", "ObstacleBoxes", "obstacle_boxes"]

_min, _max = np.minimum.reduce, np.maximum.reduce


def _as_1d(values) -> np.ndarray:
    """``values`` as a 1-D float64 array (no copy when it already is one)."""
    if type(values) is np.ndarray and values.ndim == 1 and values.dtype == np.float64:
        return values
    return np.atleast_1d(np.asarray(values, dtype=float))


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
        self.blocked_flat = np.ascontiguousarray(blocked).ravel()
        # the padded mask's cells (veer.planning.frame); its numbers copied out for the hot paths
        self.frame = GridFrame.of_grid(grid).padded(pad)
        self.padded_rows, self.padded_cols = self.frame.shape
        self.inv_cell = self.frame.inv_cell
        self.left_x_m, self.top_y_m = self.frame.left_x_m, self.frame.top_y_m
        # one circle on the rear axle (the disc): a pose's cell is its position's cell
        self._single_centre = len(self.circle_offsets_m) == 1 and self.circle_offsets_m[0] == 0.0
        self._boxes: ObstacleBoxes | None = None  # blocked cells as boxes, built on first exact check
        # the rectangle grown by the between-samples allowance, about its centre on the long axis
        if vehicle.has_rectangle:
            rear_m = -vehicle.rear_overhang_or_default_m - self._rect_grow_m
            front_m = -vehicle.rear_overhang_or_default_m + vehicle.length_m + self._rect_grow_m
            self._rect_mid_m = (rear_m + front_m) / 2.0
            self._rect_half_len_m = (front_m - rear_m) / 2.0
            self._rect_half_wid_m = vehicle.width_m / 2.0 + self._rect_grow_m
            self._rect_reach_m = abs(self._rect_mid_m) + math.hypot(self._rect_half_len_m, self._rect_half_wid_m)
            self._pose_box_tensor = _separating_axis_tensor(self._rect_mid_m, self._rect_half_len_m, self._rect_half_wid_m)
        self._box_weights: dict[bytes, np.ndarray] = {}

    @property
    def rectangle_margin_m(self) -> float:
        """How far the rectangle is grown on every side for the exact test (motion between samples)."""
        return self._rect_grow_m

    # ------------------------------------------------------------------ lookups
    def flat_index(self, x_m, y_m) -> np.ndarray:
        """Index into ``blocked_flat`` of the cells holding world points (clipped to the border)."""
        return self.frame.flat_of(x_m, y_m)

    def circles_clear(self, x_m, y_m, heading_rad) -> np.ndarray:
        """True where every covering circle of the pose lies in a clear cell (conservative)."""
        if self._single_centre:
            return ~self.blocked_flat[np.atleast_1d(self.frame.flat_of(x_m, y_m))]
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
            clear[doubtful] = self.rectangles_clear(x_m[doubtful], y_m[doubtful], heading_rad[doubtful], chunk=128)
        return clear

    def first_collision(self, poses: np.ndarray) -> int | None:
        """Index of the first pose of ``poses`` (N, >=3) whose footprint is not clear, else None.

        Consecutive poses must be at most ``sample_step_m`` apart for the space between
        them to be covered; use :func:`densify` first if they are not.
        """
        poses = np.asarray(poses, dtype=float)
        if len(poses) == 0:
            return None
        return self._first_blocked(poses[:, 0], poses[:, 1], poses[:, 2])

    def all_clear(self, x_m, y_m, heading_rad) -> bool:
        """True when the footprint is clear at every pose: ``poses_clear(...).all()``, stopping at the first blocked one."""
        return self._first_blocked(x_m, y_m, heading_rad) is None

    def _first_blocked(self, x_m, y_m, heading_rad) -> int | None:
        """Index of the first blocked pose, else None: circles for all, then exact checks in order."""
        x_m, y_m, heading_rad = _as_1d(x_m), _as_1d(y_m), _as_1d(heading_rad)
        doubtful = np.flatnonzero(~self.circles_clear(x_m, y_m, heading_rad))
        if doubtful.size == 0:
            return None
        if not self.vehicle.has_rectangle:
            return int(doubtful[0])
        for i in range(0, len(doubtful), _ORDERED_CHUNK):
            idx = doubtful[i : i + _ORDERED_CHUNK]
            clear = self._rectangles_clear_window(x_m[idx], y_m[idx], heading_rad[idx])
            if not clear.all():
                return int(idx[np.argmin(clear)])
        return None

    # ------------------------------------------------------------ exact check
    def rectangles_clear(self, x_m, y_m, heading_rad, *, chunk: int = 32) -> np.ndarray:
        """Exact test of (margin-grown) rectangles against the obstacle boxes near them.

        Separating-axis theorem for two convex polygons: they are disjoint if and only if
        their projections are disjoint on one of the edge normals (two of the box, two of
        the rectangle). The blocked cells are merged into axis-aligned boxes once per grid
        (:func:`obstacle_boxes`), so a pose meets a few boxes instead of every blocked
        square near it. Vectorised over poses x boxes in the poses' window; ``chunk``
        consecutive poses share one window (pass a large one for poses that lie close
        together, such as the samples of one expansion).
        """
        if not self.vehicle.has_rectangle:
            raise VehicleError("rectangles_clear needs a vehicle with a rectangle footprint (length_m and width_m)")
        x_m, y_m, heading_rad = _as_1d(x_m), _as_1d(y_m), _as_1d(heading_rad)
        n = len(x_m)
        if n <= chunk:
            return self._rectangles_clear_window(x_m, y_m, heading_rad)
        result = np.empty(n, dtype=bool)
        for i in range(0, n, chunk):
            result[i : i + chunk] = self._rectangles_clear_window(
                x_m[i : i + chunk], y_m[i : i + chunk], heading_rad[i : i + chunk]
            )
        return result

    def _rectangles_clear_window(self, x_m: np.ndarray, y_m: np.ndarray, heading_rad: np.ndarray) -> np.ndarray:
        """:meth:`rectangles_clear` for poses that share one window of boxes."""
        if len(x_m) == 0:
            return np.ones(0, dtype=bool)
        boxes = self._boxes if self._boxes is not None else self._build_boxes()
        # window: every rectangle lies within reach of its reference point
        reach = self._rect_reach_m
        x_lo, x_hi = float(_min(x_m)) - reach, float(_max(x_m)) + reach
        y_lo, y_hi = float(_min(y_m)) - reach, float(_max(y_m)) + reach
        frame = boxes.frame_m
        if x_lo <= frame[0] or y_lo <= frame[1] or x_hi >= frame[2] or y_hi >= frame[3]:
            return self._rectangles_clear_border(x_m, y_m, heading_rad)
        ids = boxes.near(x_lo, y_lo, x_hi, y_hi)
        if len(ids) <= _FEW_BOXES:
            return self._separated_few(x_m, y_m, heading_rad, ids)
        return self._separated(x_m, y_m, heading_rad, ids)

    def _separated_few(self, x_m: np.ndarray, y_m: np.ndarray, heading_rad: np.ndarray, ids: np.ndarray) -> np.ndarray:
        """:meth:`_separated` for a few boxes, as one product of pose and box features.

        Every separating-axis inequality ``|L| <= R`` is the pair ``L - R <= 0``,
        ``-L - R <= 0``, and each side is bilinear in features of the pose
        (1, x, y, cos, sin, |cos|, |sin|, x cos + y sin, y cos - x sin) and of the box
        (centre x, centre y, half sizes, 1). So one matrix product, with the box side
        worked out once per set of boxes, gives all eight values for all pairs.
        """
        if ids.size == 0:
            return np.ones(len(x_m), dtype=bool)
        weights = self._box_weights.get(ids.tobytes())
        if weights is None:
            weights = self._weights_of(ids)
        n = len(x_m)
        c, s = np.cos(heading_rad), np.sin(heading_rad)
        frame = self._boxes.frame_m
        xr, yr = x_m - frame[0], y_m - frame[1]  # small numbers: coordinates from the frame's corner
        features = np.empty((n, 9))
        features[:, 0] = 1.0
        features[:, 1] = xr
        features[:, 2] = yr
        features[:, 3] = c
        features[:, 4] = s
        np.abs(c, out=features[:, 5])
        np.abs(s, out=features[:, 6])
        features[:, 7] = xr * c + yr * s
        features[:, 8] = yr * c - xr * s
        below = (features @ weights) <= 0.0  # (n, boxes * 8), each box's eight values side by side
        # a box meets the rectangle when all eight are true: read each eight bools as one word
        meets = below.view(np.uint64) == _EIGHT_TRUE
        return ~meets.any(axis=1)

    def _weights_of(self, ids: np.ndarray) -> np.ndarray:
        """Box side of :meth:`_separated_few` for the boxes ``ids``: (9 pose features, 8 * boxes)."""
        boxes = self._boxes
        frame = boxes.frame_m
        box_features = np.stack((
            boxes.centre_x_m[ids] - frame[0], boxes.centre_y_m[ids] - frame[1],
            boxes.half_x_m[ids], boxes.half_y_m[ids], np.ones(len(ids)),
        ))
        weights = np.einsum("prq,qj->pjr", self._pose_box_tensor, box_features).reshape(9, -1)
        if len(self._box_weights) >= _NEAR_CACHE_SIZE:
            self._box_weights.clear()
        self._box_weights[ids.tobytes()] = weights
        return weights

    def _separated(self, x_m: np.ndarray, y_m: np.ndarray, heading_rad: np.ndarray, ids: np.ndarray) -> np.ndarray:
        """True where the rectangle meets none of the boxes ``ids`` (separating-axis test)."""
        if ids.size == 0:
            return np.ones(len(x_m), dtype=bool)
        boxes = self._boxes
        c, s = np.cos(heading_rad), np.sin(heading_rad)
        ac, as_ = np.abs(c), np.abs(s)
        mid, half_len, half_wid = self._rect_mid_m, self._rect_half_len_m, self._rect_half_wid_m
        c2, s2, ac2, as2 = c[:, None], s[:, None], ac[:, None], as_[:, None]
        # box centres relative to each rectangle's centre: (poses, boxes)
        dx = boxes.centre_x_m[ids] - (x_m + mid * c)[:, None]
        dy = boxes.centre_y_m[ids] - (y_m + mid * s)[:, None]
        bhx, bhy = boxes.half_x_m[ids], boxes.half_y_m[ids]
        # separating axes: x and y (the box's edge normals), then the rectangle's two
        meets = np.abs(dx) <= (half_len * ac + half_wid * as_)[:, None] + bhx
        meets &= np.abs(dy) <= (half_len * as_ + half_wid * ac)[:, None] + bhy
        if meets.size > _DENSE_PAIRS:
            # many boxes: test the rectangle's axes only on the pairs whose bounding boxes meet
            pose, box = np.nonzero(meets)
            dxp, dyp, cp, sp, acp, asp = dx[pose, box], dy[pose, box], c[pose], s[pose], ac[pose], as_[pose]
            bhxp, bhyp = bhx[box], bhy[box]
            hit = np.abs(dxp * cp + dyp * sp) <= bhxp * acp + bhyp * asp + half_len
            hit &= np.abs(dyp * cp - dxp * sp) <= bhxp * asp + bhyp * acp + half_wid
            clear = np.ones(len(x_m), dtype=bool)
            clear[pose[hit]] = False
            return clear
        meets &= np.abs(dx * c2 + dy * s2) <= bhx * ac2 + bhy * as2 + half_len
        meets &= np.abs(dy * c2 - dx * s2) <= bhx * as2 + bhy * ac2 + half_wid
        return ~meets.any(axis=1)

    def _rectangles_clear_border(self, x_m: np.ndarray, y_m: np.ndarray, heading_rad: np.ndarray) -> np.ndarray:
        """Poses near the padded border: a rectangle reaching the border is blocked (the map's outside is)."""
        frame = self._boxes.frame_m
        c, s = np.cos(heading_rad), np.sin(heading_rad)
        cx, cy = x_m + self._rect_mid_m * c, y_m + self._rect_mid_m * s
        extent_x = self._rect_half_len_m * np.abs(c) + self._rect_half_wid_m * np.abs(s)
        extent_y = self._rect_half_len_m * np.abs(s) + self._rect_half_wid_m * np.abs(c)
        lo_x, lo_y, hi_x, hi_y = cx - extent_x, cy - extent_y, cx + extent_x, cy + extent_y
        inside = (lo_x > frame[0]) & (lo_y > frame[1]) & (hi_x < frame[2]) & (hi_y < frame[3])
        result = np.zeros(len(x_m), dtype=bool)
        if inside.any():
            ids = self._boxes.near(float(lo_x[inside].min()), float(lo_y[inside].min()),
                                   float(hi_x[inside].max()), float(hi_y[inside].max()))
            result[inside] = self._separated(x_m[inside], y_m[inside], heading_rad[inside], ids)
        return result

    def _build_boxes(self) -> "ObstacleBoxes":
        raw = np.pad(self.grid.blocked, self.pad_cells, constant_values=True)
        self._boxes = obstacle_boxes(raw, self.grid.cell_size_m, self.left_x_m, self.top_y_m)
        return self._boxes


@dataclass(frozen=True)
class ObstacleBoxes:
    """Blocked cells merged into axis-aligned boxes, with a coarse index for window queries.

    ``centre_x_m``, ``centre_y_m``, ``half_x_m``, ``half_y_m`` describe each box;
    ``frame_m`` is (x_lo, y_lo, x_hi, y_hi) of the grid they were built from. The index
    lists, for each tile of ``tile_cells`` x ``tile_cells`` cells, the boxes that overlap it
    (a box may be listed in several tiles; a repeated box only repeats a test).
    """

    centre_x_m: np.ndarray
    centre_y_m: np.ndarray
    half_x_m: np.ndarray
    half_y_m: np.ndarray
    frame_m: tuple[float, float, float, float]
    tile_m: float
    tile_cols: int
    tile_rows: int
    tile_start: np.ndarray  # (tiles + 1,) CSR offsets into tile_boxes, tiles in row-major order, row 0 at the top
    tile_boxes: np.ndarray
    cache: dict = field(default_factory=dict, repr=False, compare=False)  # tile range -> box ids

    def near(self, x_lo: float, y_lo: float, x_hi: float, y_hi: float) -> np.ndarray:
        """Ids of boxes that may overlap the window [x_lo, x_hi] x [y_lo, y_hi]: all that do, and few others."""
        left, _, _, top = self.frame_m
        inv = 1.0 / self.tile_m
        c0 = max(0, int((x_lo - left) * inv))
        c1 = min(self.tile_cols - 1, int((x_hi - left) * inv))
        r0 = max(0, int((top - y_hi) * inv))
        r1 = min(self.tile_rows - 1, int((top - y_lo) * inv))
        key = (r0, r1, c0, c1)
        ids = self.cache.get(key)
        if ids is None:
            start, listed = self.tile_start, self.tile_boxes
            cols = self.tile_cols
            ids = np.unique(np.concatenate([listed[start[r * cols + c0] : start[r * cols + c1 + 1]] for r in range(r0, r1 + 1)]))
            if len(self.cache) >= _NEAR_CACHE_SIZE:
                self.cache.clear()
            self.cache[key] = ids
        if len(ids) <= _FEW_BOXES:
            return ids
        keep = np.abs(self.centre_x_m[ids] - 0.5 * (x_lo + x_hi)) <= self.half_x_m[ids] + 0.5 * (x_hi - x_lo)
        keep &= np.abs(self.centre_y_m[ids] - 0.5 * (y_lo + y_hi)) <= self.half_y_m[ids] + 0.5 * (y_hi - y_lo)
        return ids[keep]


def _separating_axis_tensor(mid_m: float, half_len_m: float, half_wid_m: float) -> np.ndarray:
    """(9 pose features, 8 inequalities, 5 box features) coefficients of the separating-axis test.

    Pose features p: 1, x, y, c, s, |c|, |s|, u = x c + y s, v = y c - x s (x, y of the
    reference point, heading (c, s)); box features q: centre x, centre y, half x, half y, 1.
    With the rectangle centre (x + mid c, y + mid s) and d = box centre - rectangle centre,
    the four axes give |L_k| <= R_k:

    - x: L = d_x, R = hl |c| + hw |s| + half_x
    - y: L = d_y, R = hl |s| + hw |c| + half_y
    - rectangle's long axis: L = d_x c + d_y s = bx c + by s - u - mid, R = hl + half_x |c| + half_y |s|
    - rectangle's cross axis: L = d_y c - d_x s = by c - bx s - v, R = hw + half_x |s| + half_y |c|

    and the eight rows are L_k - R_k and -L_k - R_k: the shapes meet when all eight are <= 0.
    """
    one, x, y, c, s, ac, as_, u, v = range(9)
    bx, by, hx, hy, unit = range(5)
    left = np.zeros((9, 4, 5))
    right = np.zeros((9, 4, 5))
    left[one, 0, bx], left[x, 0, unit], left[c, 0, unit] = 1.0, -1.0, -mid_m
    left[one, 1, by], left[y, 1, unit], left[s, 1, unit] = 1.0, -1.0, -mid_m
    left[c, 2, bx], left[s, 2, by], left[u, 2, unit], left[one, 2, unit] = 1.0, 1.0, -1.0, -mid_m
    left[c, 3, by], left[s, 3, bx], left[v, 3, unit] = 1.0, -1.0, -1.0
    right[ac, 0, unit], right[as_, 0, unit], right[one, 0, hx] = half_len_m, half_wid_m, 1.0
    right[as_, 1, unit], right[ac, 1, unit], right[one, 1, hy] = half_len_m, half_wid_m, 1.0
    right[one, 2, unit], right[ac, 2, hx], right[as_, 2, hy] = half_len_m, 1.0, 1.0
    right[one, 3, unit], right[as_, 3, hx], right[ac, 3, hy] = half_wid_m, 1.0, 1.0
    return np.stack((left - right, -left - right), axis=2).reshape(9, 8, 5)


_EIGHT_TRUE = np.frombuffer(np.ones(8, dtype=np.bool_).tobytes(), dtype=np.uint64)[0]
_ORDERED_CHUNK = 48  # poses per exact check when stopping at the first blocked one
_DENSE_PAIRS = 2048  # above this many pose x box pairs, the rectangle's axes are tested on the few that matter
_NEAR_CACHE_SIZE = 4096  # tile ranges remembered per grid
_FEW_BOXES = 16  # up to this many boxes, testing them all is cheaper than filtering
_TILE_CELLS = 32


def obstacle_boxes(blocked: np.ndarray, cell_size_m: float, left_x_m: float, top_y_m: float,
                   tile_cells: int = _TILE_CELLS) -> ObstacleBoxes:
    """Cover the blocked cells of ``blocked`` (row 0 at the top) exactly by axis-aligned boxes.

    Each row's maximal runs of blocked cells are found first; runs with the same columns
    in consecutive rows are then merged into one box. The union of the boxes is exactly
    the union of the blocked squares, so a convex shape meets the obstacles if and only if
    it meets a box. Vectorised: one pass over the grid and one sort of the runs.
    """
    rows, cols = blocked.shape
    edges = np.diff(np.pad(np.asarray(blocked, dtype=bool), ((0, 0), (1, 1))).view(np.int8), axis=1)
    run_row, run_c0 = (a.astype(np.int32) for a in np.nonzero(edges == 1))
    run_c1 = np.nonzero(edges == -1)[1].astype(np.int32)  # exclusive ends, same row-major order as the starts
    del edges
    order = np.lexsort((run_row, run_c1, run_c0))
    run_row, run_c0, run_c1 = run_row[order], run_c0[order], run_c1[order]
    new_box = np.ones(len(run_row), dtype=bool)
    new_box[1:] = (run_c0[1:] != run_c0[:-1]) | (run_c1[1:] != run_c1[:-1]) | (run_row[1:] != run_row[:-1] + 1)
    first = np.flatnonzero(new_box)
    last = np.append(first[1:], len(run_row)) - 1
    r0, r1 = run_row[first], run_row[last] + 1  # rows [r0, r1)
    c0, c1 = run_c0[first], run_c1[first]  # cols [c0, c1)
    cs = float(cell_size_m)
    half_x = 0.5 * (c1 - c0) * cs
    half_y = 0.5 * (r1 - r0) * cs
    centre_x = left_x_m + 0.5 * (c0 + c1) * cs
    centre_y = top_y_m - 0.5 * (r0 + r1) * cs
    # tile index: every box in each tile it overlaps
    tile_rows = -(-rows // tile_cells)
    tile_cols = -(-cols // tile_cells)
    tr0, tr1 = r0 // tile_cells, (r1 - 1) // tile_cells
    tc0, tc1 = c0 // tile_cells, (c1 - 1) // tile_cells
    span_r, span_c = tr1 - tr0 + 1, tc1 - tc0 + 1
    count = span_r * span_c
    box_id = np.repeat(np.arange(len(r0)), count)
    k = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)
    tile = (tr0[box_id] + k // span_c[box_id]) * tile_cols + tc0[box_id] + k % span_c[box_id]
    order = np.argsort(tile, kind="stable")
    tile_start = np.searchsorted(tile[order], np.arange(tile_rows * tile_cols + 1))
    return ObstacleBoxes(
        centre_x_m=centre_x, centre_y_m=centre_y, half_x_m=half_x, half_y_m=half_y,
        frame_m=(left_x_m, top_y_m - rows * cs, left_x_m + cols * cs, top_y_m),
        tile_m=tile_cells * cs, tile_cols=tile_cols, tile_rows=tile_rows,
        tile_start=tile_start, tile_boxes=box_id[order],
    )
