"""Clearance field and obstacle inflation for a disc-shaped vehicle.

Inflation is a threshold on a distance map in metres: compute, once, the distance from
every cell centre to the nearest blocked cell centre (:func:`clearance_field_m`), then
mark as blocked every cell whose clearance is below the disc radius plus a margin
(:func:`inflate`). The clearance field is kept for heuristics and costs.

Example: one blocked cell (``#``) in a 6 x 7 grid of 1 m cells; the map's outside counts
as blocked, so the border cells are 1 m from it. With ``radius_m = 0.5`` the threshold
is ``0.5 + sqrt(2) = 1.91`` m::

    classes          clearance_m (m)                      inflate(grid, 0.5).blocked
    . . . . . . .    1.  1.  1.   1.   1.  1.   1.        # # # # # # #
    . . . . # . .    1.  2.  2.   1.   0.  1.   1.        # . . # # # #
    . . . . . . .    1.  2.  2.24 1.41 1.  1.41 1.        # . . # # # #
    . . . . . . .    1.  2.  2.83 2.24 2.  2.   1.        # . . . . . #
    . . . . . . .    1.  2.  2.   2.   2.  2.   1.        # . . . . . #
    . . . . . . .    1.  1.  1.   1.   1.  1.   1.        # # # # # # #

>>> import numpy as np
>>> from veer.maps.grid import OccupancyGrid, OCCUPIED
>>> classes = np.zeros((6, 7), np.uint8); classes[1, 4] = OCCUPIED
>>> grid = OccupancyGrid(classes, cell_size_m=1.0, origin_m=(0.0, 0.0))
>>> np.round(clearance_field_m(grid)[2], 2)
array([1.  , 2.  , 2.24, 1.41, 1.  , 1.41, 1.  ], dtype=float32)
>>> inflate(grid, 0.5).blocked.astype(int)[2]
array([1, 0, 0, 1, 1, 1, 1])

References
----------
.. [FH12] P. F. Felzenszwalb and D. P. Huttenlocher, "Distance transforms of sampled
   functions", Theory of Computing 8(19):415-428, 2012, doi:10.4086/toc.2012.v008a019
   (first as Cornell CIS technical report TR2004-1963, 2004). OpenCV's
   ``cv2.distanceTransform`` with ``DIST_L2`` and ``DIST_MASK_PRECISE`` computes the
   exact Euclidean transform with this algorithm (lower envelope of parabolas, one pass
   per axis).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from . import _checks
from .errors import MapSettingsError
from .grid import OccupancyGrid

__all__ = ["InflatedGrid", "clearance_field_m", "inflate", "update_clearance_m"]


def clearance_field_m(grid: OccupancyGrid) -> np.ndarray:
    """Return the Euclidean distance from each cell centre to the nearest blocked cell centre.

    The grid is padded with one ring of blocked cells first, so the outside of the map
    counts as blocked. The transform is exact (not a chamfer approximation) [FH12]_.

    Parameters
    ----------
    grid : OccupancyGrid
        Its :attr:`~veer.maps.grid.OccupancyGrid.blocked` cells are the obstacles.

    Returns
    -------
    ndarray of float32, shape (rows, cols)
        Metres; 0 on blocked cells. Read-only.
    """
    rows, cols = grid.rows, grid.cols
    # distanceTransform measures the distance to the nearest zero pixel: 0 = blocked.
    padded = np.zeros((rows + 2, cols + 2), dtype=np.uint8)
    np.logical_not(grid.blocked, out=padded[1:-1, 1:-1].view(np.bool_))
    distance_cells = cv2.distanceTransform(padded, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    del padded
    clearance_m = np.multiply(distance_cells[1:-1, 1:-1], np.float32(grid.cell_size_m), dtype=np.float32)
    clearance_m.flags.writeable = False
    return clearance_m


@dataclass(frozen=True, eq=False)
class InflatedGrid:
    """A grid with its obstacles grown by a disc, ready for pose collision checks.

    Parameters
    ----------
    grid : OccupancyGrid
        The grid that was inflated.
    radius_m : float
        Radius of the vehicle disc, metres.
    margin_m : float
        ``cell_size_m * sqrt(2) + extra_margin_m``: the allowance that makes the mask
        hold for any point of a cell, not just its centre (see :func:`inflate`).
    clearance_m : ndarray of float32, shape (rows, cols)
        Centre-to-centre clearance, metres (:func:`clearance_field_m`).
    blocked : ndarray of bool, shape (rows, cols)
        True where a disc of ``radius_m`` centred anywhere in the cell could touch a
        blocked cell's square or leave the map. Read-only.
    """

    grid: OccupancyGrid
    radius_m: float
    margin_m: float
    clearance_m: np.ndarray
    blocked: np.ndarray

    @property
    def cell_size_m(self) -> float:
        """Edge of one cell, metres (that of :attr:`grid`)."""
        return self.grid.cell_size_m

    def is_free(self, x_m, y_m):
        """Return whether a disc centred at each world point is clear of obstacles and inside the map.

        Points off the map are never free. Scalars give a bool, arrays a bool array.
        """
        row, col = self.grid.world_to_cell(x_m, y_m)
        row = np.asarray(row)
        col = np.asarray(col)
        inside = (row >= 0) & (row < self.grid.rows) & (col >= 0) & (col < self.grid.cols)
        free = np.zeros(inside.shape, dtype=bool)
        free[inside] = ~self.blocked[row[inside], col[inside]]
        if free.ndim == 0:
            return bool(free)
        return free


def inflate(
    grid: OccupancyGrid,
    radius_m: float,
    *,
    extra_margin_m: float = 0.0,
    clearance_m: np.ndarray | None = None,
) -> InflatedGrid:
    """Grow the obstacles of ``grid`` by a disc of ``radius_m`` so cell lookups are conservative.

    A point anywhere in a cell is at most ``cs / sqrt(2)`` from the cell centre, and a
    blocked square reaches ``cs / sqrt(2)`` from its own centre. So if the
    centre-to-centre clearance is at least ``radius_m + cs * sqrt(2)``, every point of
    the cell is at least ``radius_m`` from every blocked square (and from the map's
    edge, whose outside is blocked). Hence

    ``blocked = clearance_m < radius_m + margin_m``, ``margin_m = cs * sqrt(2) + extra_margin_m``

    and a pose whose cell is not blocked is collision-free for the disc, wherever in
    the cell it lies. The price is up to ``cs * sqrt(2)`` of free space given away near
    obstacles.

    Parameters
    ----------
    grid : OccupancyGrid
        The grid to inflate.
    radius_m : float
        Disc radius, metres; finite and >= 0.
    extra_margin_m : float
        Additional safety margin, metres; finite and >= 0.
    clearance_m : ndarray of float32, shape (rows, cols), optional
        A clearance field already computed for ``grid`` (:func:`clearance_field_m`),
        reused instead of computed again.

    Returns
    -------
    InflatedGrid

    Raises
    ------
    MapSettingsError
        ``radius_m`` or ``extra_margin_m`` negative or not finite, or a ``clearance_m``
        of the wrong shape.

    Notes
    -----
    The comparison runs in float32; the threshold is rounded up to the next float32,
    never down, so rounding cannot shrink the margin.
    """
    radius_m = _checks.real_number(radius_m, "radius_m", MapSettingsError)
    if radius_m < 0.0:
        raise MapSettingsError(f"radius_m must be 0 or more, got {radius_m!r}")
    extra_margin_m = _checks.real_number(extra_margin_m, "extra_margin_m", MapSettingsError)
    if extra_margin_m < 0.0:
        raise MapSettingsError(f"extra_margin_m must be 0 or more, got {extra_margin_m!r}")
    if clearance_m is None:
        clearance_m = clearance_field_m(grid)
    else:
        clearance_m = np.asarray(clearance_m)
        if clearance_m.shape != grid.classes.shape:
            raise MapSettingsError(
                f"clearance_m has shape {clearance_m.shape}, but the grid is {grid.classes.shape}; "
                "compute it with clearance_field_m(grid)"
            )
        if clearance_m.dtype != np.float32:
            clearance_m = clearance_m.astype(np.float32)
            clearance_m.flags.writeable = False
    margin_m = grid.cell_size_m * math.sqrt(2.0) + extra_margin_m
    threshold = radius_m + margin_m
    threshold_32 = np.float32(threshold)
    if float(threshold_32) < threshold:
        threshold_32 = np.nextafter(threshold_32, np.float32(np.inf))
    blocked = clearance_m < threshold_32
    blocked.flags.writeable = False
    return InflatedGrid(grid=grid, radius_m=radius_m, margin_m=margin_m, clearance_m=clearance_m, blocked=blocked)


def update_clearance_m(
    old_grid: OccupancyGrid, old_clearance_m: np.ndarray, new_grid: OccupancyGrid, *, reach_m: float
) -> tuple[np.ndarray, tuple[int, int, int, int] | None]:
    """Clearance field of ``new_grid``, recomputed only around the cells that changed.

    The window of changed cells, grown by ``reach_m``, is recomputed from a patch grown
    by a further ``reach_m``: inside the window every clearance below ``reach_m`` is then
    exact (its nearest blocked cell lies within the patch), larger ones may read high.
    Callers that only compare clearances with thresholds up to ``reach_m`` (inflation,
    proximity costs) get the same answers as from :func:`clearance_field_m`.

    Returns
    -------
    (clearance_m, window)
        The new field (read-only) and the (row0, row1, col0, col1) window recomputed,
        or None when nothing changed. A grid of other geometry is computed in full.
    """
    reach_m = _checks.real_number(reach_m, "reach_m", MapSettingsError)
    same_geometry = (
        old_grid.classes.shape == new_grid.classes.shape
        and old_grid.cell_size_m == new_grid.cell_size_m
        and tuple(old_grid.origin_m) == tuple(new_grid.origin_m)
        and old_clearance_m.shape == new_grid.classes.shape
    )
    if not same_geometry:
        return clearance_field_m(new_grid), (0, new_grid.rows, 0, new_grid.cols)
    changed = old_grid.blocked != new_grid.blocked
    rows_changed = np.flatnonzero(changed.any(axis=1))
    if rows_changed.size == 0:
        return old_clearance_m, None
    cols_changed = np.flatnonzero(changed.any(axis=0))
    grow = int(math.ceil(reach_m / new_grid.cell_size_m)) + 1
    rows, cols = new_grid.rows, new_grid.cols
    r0, r1 = max(0, rows_changed[0] - grow), min(rows, rows_changed[-1] + 1 + grow)
    c0, c1 = max(0, cols_changed[0] - grow), min(cols, cols_changed[-1] + 1 + grow)
    p0, p1 = max(0, r0 - grow), min(rows, r1 + grow)
    q0, q1 = max(0, c0 - grow), min(cols, c1 + grow)
    # the patch and a ring around it: the ring is the map's (blocked) outside where the
    # patch meets the map's edge, and counts as open elsewhere (it lies beyond reach_m)
    patch = np.ones((p1 - p0 + 2, q1 - q0 + 2), dtype=np.uint8)
    np.logical_not(new_grid.blocked[p0:p1, q0:q1], out=patch[1:-1, 1:-1].view(np.bool_))
    if p0 == 0:
        patch[0, :] = 0
    if p1 == rows:
        patch[-1, :] = 0
    if q0 == 0:
        patch[:, 0] = 0
    if q1 == cols:
        patch[:, -1] = 0
    distance = cv2.distanceTransform(patch, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    clearance = np.array(old_clearance_m, dtype=np.float32, copy=True)
    inner = distance[1 + r0 - p0 : 1 + r1 - p0, 1 + c0 - q0 : 1 + c1 - q0]
    clearance[r0:r1, c0:c1] = inner * np.float32(new_grid.cell_size_m)
    clearance.flags.writeable = False
    return clearance, (int(r0), int(r1), int(c0), int(c1))
