"""Square cell frames in the world: the one place where planning converts cells and metres.

A :class:`GridFrame` places ``rows x cols`` square cells of edge ``cell_m`` with the top
edge of row 0 at world ``y = top_y_m`` and the left edge of column 0 at ``x = left_x_m``
(world y up, rows down, as in ``veer.maps``). Cell ``(row, col)`` covers::

    x in [left_x_m + col * cell_m,  left_x_m + (col + 1) * cell_m)
    y in (top_y_m - (row + 1) * cell_m,  top_y_m - row * cell_m]

and a world point lies in row ``floor((top_y_m - y) / cell_m)``, column
``floor((x - left_x_m) / cell_m)``: floor, not truncation, so points above or left of
the frame get negative indices rather than row or column 0.

The planner uses three frames of one grid, all derived here:

* the map's own cells (:meth:`GridFrame.of_grid`, the same placement as
  ``OccupancyGrid.world_to_cell``);
* the padded collision grid, ``pad`` blocked cells around the map, so looking up a
  motion sample never needs a bounds check (:meth:`GridFrame.padded`);
* the search lattice, blocks of ``factor x factor`` map cells sharing the map's top-left
  corner, whose cells key the visited table (:meth:`GridFrame.coarsened`).

Worked example: a 3 x 4 grid of 0.5 m cells with ``origin_m = (10, 20)`` (lower-left
corner) has ``top_y_m = 21.5``; the point (10.6, 21.4) is in row 0, column 1; its
padded frame with ``pad = 2`` puts it at row 2, column 3; its lattice with ``factor = 2``
is 2 x 2 cells of 1 m, the point in lattice cell (0, 0).

>>> import numpy as np
>>> from veer.maps import OccupancyGrid
>>> frame = GridFrame.of_grid(OccupancyGrid(np.zeros((3, 4), np.uint8), 0.5, (10.0, 20.0)))
>>> frame.cell_of(10.6, 21.4), frame.padded(2).cell_of(10.6, 21.4), frame.coarsened(2).cell_of(10.6, 21.4)
((0, 1), (2, 3), (0, 0))
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["GridFrame"]


@dataclass(frozen=True)
class GridFrame:
    """``rows x cols`` square cells of ``cell_m`` whose top-left corner is (left_x_m, top_y_m)."""

    left_x_m: float
    top_y_m: float
    cell_m: float
    rows: int
    cols: int

    @classmethod
    def of_grid(cls, grid) -> "GridFrame":
        """The frame of an ``OccupancyGrid``'s own cells."""
        cs = float(grid.cell_size_m)
        return cls(float(grid.origin_m[0]), float(grid.origin_m[1]) + grid.rows * cs, cs, grid.rows, grid.cols)

    def padded(self, pad: int) -> "GridFrame":
        """The same cells with ``pad`` more on every side."""
        return GridFrame(
            self.left_x_m - pad * self.cell_m, self.top_y_m + pad * self.cell_m, self.cell_m,
            self.rows + 2 * pad, self.cols + 2 * pad,
        )

    def coarsened(self, factor: int) -> "GridFrame":
        """Blocks of ``factor x factor`` cells from the top-left corner (partial blocks at the far edges count)."""
        return GridFrame(
            self.left_x_m, self.top_y_m, self.cell_m * factor, -(-self.rows // factor), -(-self.cols // factor)
        )

    @property
    def inv_cell(self) -> float:
        """Cells per metre (the search loop multiplies by it instead of dividing)."""
        return 1.0 / self.cell_m

    @property
    def shape(self) -> tuple[int, int]:
        return self.rows, self.cols

    def cell_of(self, x_m, y_m):
        """(row, col) of world points, floor semantics; Python ints for scalars, intp arrays otherwise."""
        if isinstance(x_m, (float, int)) and isinstance(y_m, (float, int)):
            return (
                math.floor((self.top_y_m - y_m) / self.cell_m),
                math.floor((x_m - self.left_x_m) / self.cell_m),
            )
        rows = np.floor((self.top_y_m - np.asarray(y_m, dtype=float)) / self.cell_m).astype(np.intp)
        cols = np.floor((np.asarray(x_m, dtype=float) - self.left_x_m) / self.cell_m).astype(np.intp)
        return rows, cols

    def flat_of(self, x_m, y_m):
        """Row-major index of the cells holding world points, clipped to the frame's border cells.

        A scalar for scalar input. Hot in collision checks: floors and clips in place.
        """
        inv = 1.0 / self.cell_m
        col = np.asarray(np.floor((np.asarray(x_m, dtype=float) - self.left_x_m) * inv), dtype=np.intp)
        row = np.asarray(np.floor((self.top_y_m - np.asarray(y_m, dtype=float)) * inv), dtype=np.intp)
        # clip with two ufuncs in place (np.clip's wrapper costs more than the work here)
        np.minimum(np.maximum(col, 0, out=col), self.cols - 1, out=col)
        np.minimum(np.maximum(row, 0, out=row), self.rows - 1, out=row)
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
        return self.top_y_m - (rows + 0.5) * self.cell_m

    def contains_cell(self, row: int, col: int) -> bool:
        return 0 <= row < self.rows and 0 <= col < self.cols
