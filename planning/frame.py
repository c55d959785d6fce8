"""Square cell frames in the world: the one place where planning converts cells and metres.

A :class:`GridFrame` places ``rows x cols`` square cells of edge ``cell_m`` with the
lower-left corner of the frame at world ``(left_x_m, bottom_y_m)`` (world y up, rows
down, as in ``veer.maps``). Cell ``(row, col)`` covers the half-open square::

    x in [left_x_m + col * cell_m,  left_x_m + (col + 1) * cell_m)
    y in [bottom_y_m + (rows - 1 - row) * cell_m,  bottom_y_m + (rows - row) * cell_m)

so a world point lies in column ``floor((x - left_x_m) / cell_m)`` and row
``rows - 1 - floor((y - bottom_y_m) / cell_m)``: the same arithmetic as
``OccupancyGrid.world_to_cell``, floor (not truncation) on both axes, so points outside
get indices outside ``[0, rows) x [0, cols)`` and a point on a cell edge belongs to the
cell on its right / above, as in ``veer.maps``.

The planner uses three frames of one grid, all derived here:

* the map's own cells (:meth:`GridFrame.of_grid`);
* the padded collision grid, ``pad`` blocked cells around the map, so looking up a
  motion sample never needs a bounds check (:meth:`GridFrame.padded`);
* the search lattice, blocks of ``factor x factor`` map cells sharing the map's top-left
  corner, whose cells key the visited table (:meth:`GridFrame.coarsened`; partial blocks
  at the bottom and right edges count as whole cells).

The search loop (``veer.planning.kernel``) inlines the conversion from the top edge,
``floor((top_y_m - y) / cell_m)``, for speed; it differs from :meth:`cell_of` only for a
point exactly on a horizontal cell edge, where the collision mask's margin (at least half
a cell diagonal) makes either neighbour safe.

Worked example: a 3 x 4 grid of 0.5 m cells with ``origin_m = (10, 20)`` (lower-left
corner) has its top edge at y = 21.5; the point (10.6, 21.4) is in row 0, column 1; its
padded frame with ``pad = 2`` puts it at row 2, column 3; its lattice with ``factor = 2``
is 2 x 2 cells of 1 m, the point in lattice cell (0, 0).

>>> import numpy as np
>>> from veer.maps import OccupancyGrid
>>> frame = GridFrame.of_grid(OccupancyGrid(np.zeros((3, 4), np.uint8), 0.5, (10.0, 20.0)))
>>> frame.cell_of(10.6, 21.4), frame.padded(2).cell_of(10.6, 21.4), frame.coarsened(2).cell_of(10.6, 21.4)
((0, 1), (2, 3), (0, 0))
>>> frame.cell_of(10.0, 20.0)  # the lower-left corner belongs to the bottom-left cell
(2, 0)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["GridFrame"]


@dataclass(frozen=True)
class GridFrame:
    """``rows x cols`` square cells of ``cell_m`` whose lower-left corner is (left_x_m, bottom_y_m)."""

    left_x_m: float
    bottom_y_m: float
    cell_m: float
    rows: int
    cols: int

    @classmethod
    def of_grid(cls, grid) -> "GridFrame":
        """The frame of an ``OccupancyGrid``'s own cells (``origin_m`` is its lower-left corner)."""
        return cls(float(grid.origin_m[0]), float(grid.origin_m[1]), float(grid.cell_size_m), grid.rows, grid.cols)

    def padded(self, pad: int) -> "GridFrame":
        """The same cells with ``pad`` more on every side."""
        return GridFrame(
            self.left_x_m - pad * self.cell_m, self.bottom_y_m - pad * self.cell_m, self.cell_m,
            self.rows + 2 * pad, self.cols + 2 * pad,
        )

    def coarsened(self, factor: int) -> "GridFrame":
        """Blocks of ``factor x factor`` cells from the top-left corner (partial blocks at the far edges count)."""
        rows, cols = -(-self.rows // factor), -(-self.cols // factor)
        cell = self.cell_m * factor
        return GridFrame(self.left_x_m, self.top_y_m - rows * cell, cell, rows, cols)

    @property
    def top_y_m(self) -> float:
        """World y of the top edge of row 0."""
        return self.bottom_y_m + self.rows * self.cell_m

    @property
    def inv_cell(self) -> float:
        """Cells per metre (the search loop multiplies by it instead of dividing)."""
        return 1.0 / self.cell_m

    @property
    def shape(self) -> tuple[int, int]:
        return self.rows, self.cols

    def cell_of(self, x_m, y_m):
        """(row, col) of world points; Python ints for scalars, intp arrays otherwise."""
        if isinstance(x_m, (float, int)) and isinstance(y_m, (float, int)):
            return (
                self.rows - 1 - math.floor((y_m - self.bottom_y_m) / self.cell_m),
                math.floor((x_m - self.left_x_m) / self.cell_m),
            )
        rows = (self.rows - 1) - np.floor((np.asarray(y_m, dtype=float) - self.bottom_y_m) / self.cell_m).astype(np.intp)
        cols = np.floor((np.asarray(x_m, dtype=float) - self.left_x_m) / self.cell_m).astype(np.intp)
        return rows, cols

    def flat_of(self, x_m, y_m):
        """Row-major index of the cells holding world points, clipped to the frame's border cells.

        A scalar for scalar input. Hot in collision checks: floors and clips in place.
        """
        inv = 1.0 / self.cell_m
        col = np.asarray(np.floor((np.asarray(x_m, dtype=float) - self.left_x_m) * inv), dtype=np.intp)
        up = np.asarray(np.floor((np.asarray(y_m, dtype=float) - self.bottom_y_m) * inv), dtype=np.intp)
        # clip with two ufuncs in place (np.clip's wrapper costs more than the work here)
        np.minimum(np.maximum(col, 0, out=col), self.cols - 1, out=col)
        np.minimum(np.maximum(up, 0, out=up), self.rows - 1, out=up)
        row = (self.rows - 1) - up
        row *= self.cols
        row += col
        return row[()]

    def centre_x_m(self, cols=None) -> np.ndarray:
        """World x of column centres (all columns by default)."""
        cols = np.arange(self.cols) if cols is None else np.asarray(cols)
        return self.left_x_m + (cols + 0.5) * self.cell_m

    def centre_y_m(self, rows=None) -> np.ndarray:
        """World y of row centres (all rows by default)."""
        rows = np.arange(self.rows) if rows is None else np.asarray(rows)
        return self.bottom_y_m + (self.rows - rows - 0.5) * self.cell_m
