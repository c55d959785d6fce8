"""The occupancy grid: cell classes in image order plus their place in the world.

Coordinate convention
---------------------
Cells are addressed ``(row, col)``; row 0 is the **top** edge of the map image and
columns run left to right, exactly as the image is stored. The world is ``(x_m, y_m)``
in metres with x to the right and **y up**. ``origin_m`` is the world point of the
grid's **lower-left** corner and ``cell_size_m`` the edge of one square cell, so::

    col = floor((x_m - origin_x) / cell_size_m)
    row = rows - 1 - floor((y_m - origin_y) / cell_size_m)

A cell owns its left and bottom edges: a point on the edge between two cells belongs to
the cell to its right (x) or above it (y); the right and top edges of the grid are
outside. Cell centres are at ``x = origin_x + (col + 0.5) * cell_size_m`` and
``y = origin_y + (rows - row - 0.5) * cell_size_m``.

Worked example: 2 rows x 3 columns, ``cell_size_m = 0.5``, ``origin_m = (1.0, 2.0)``;
the grid covers x in [1.0, 2.5) and y in [2.0, 3.0)::

    y_m = 3.0  +--------+--------+--------+
               | (0, 0) | (0, 1) | (0, 2) |      row 0 = top image row
    y_m = 2.5  +--------+--------+--------+
               | (1, 0) | (1, 1) | (1, 2) |
    y_m = 2.0  +--------+--------+--------+
             x_m=1.0   1.5      2.0      2.5

>>> import numpy as np
>>> grid = OccupancyGrid(np.zeros((2, 3), np.uint8), cell_size_m=0.5, origin_m=(1.0, 2.0))
>>> grid.world_to_cell(1.0, 2.0)        # lower-left corner -> bottom-left cell
(1, 0)
>>> grid.world_to_cell(2.2, 2.9)        # near the top-right corner
(0, 2)
>>> grid.world_to_cell(1.5, 2.5)        # on inner edges: the cell right of and above it
(0, 1)
>>> grid.cell_to_world(0, 0)            # centre of the top-left cell
(1.25, 2.75)
>>> bool(grid.contains(2.5, 2.0))       # the right edge is outside
False

Only this package converts between cells and the world; everything else uses
:meth:`OccupancyGrid.world_to_cell` and :meth:`OccupancyGrid.cell_to_world`.
"""

from __future__ import annotations

import hashlib
import struct
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from . import _checks
from ._checks import MAX_CELL_SIZE_M, MIN_CELL_SIZE_M
from .errors import MapFormatError, MapSettingsError

__all__ = ["DEFAULT_MAX_CELLS", "FREE", "MAX_CELL_SIZE_M", "MIN_CELL_SIZE_M", "OCCUPIED", "UNKNOWN", "OccupancyGrid"]

FREE = 0
"""Cell class of a free cell (uint8)."""
OCCUPIED = 1
"""Cell class of an obstacle cell (uint8)."""
UNKNOWN = 2
"""Cell class of a cell whose state is unknown (uint8); blocked or free per ``unknown_is``."""

DEFAULT_MAX_CELLS = 100_000_000
"""Largest number of cells a map image or grid message may have unless the caller says otherwise."""

# Beyond this an index is surely outside any grid; clipping keeps the int64 cast defined.
_INDEX_LIMIT = float(2**62)


def _as_class_array(classes: object) -> np.ndarray:
    """Return ``classes`` as a read-only, C-contiguous uint8 array of valid cell classes."""
    array = np.asarray(classes)
    if array.ndim != 2:
        raise MapFormatError(f"grid classes must be a 2-D array (rows, cols), got shape {array.shape}")
    if array.size == 0:
        raise MapFormatError(f"grid classes must not be empty, got shape {array.shape}")
    if array.dtype.kind not in "ui":
        raise MapFormatError(
            f"grid classes must be integers 0 (free), 1 (occupied), 2 (unknown), got dtype {array.dtype}"
        )
    # Check before any cast, so 258 cannot wrap round to a valid 2.
    if int(array.max()) > UNKNOWN or (array.dtype.kind == "i" and int(array.min()) < 0):
        raise MapFormatError("grid classes must hold only 0 (free), 1 (occupied) and 2 (unknown)")
    if array.dtype == np.uint8 and array.flags.c_contiguous and not array.flags.writeable:
        # Already frozen by its maker (the loaders do this): sharing it saves a copy of the map.
        return array
    owned = np.array(array, dtype=np.uint8, order="C", copy=True)
    owned.flags.writeable = False
    return owned


@dataclass(frozen=True, eq=False)
class OccupancyGrid:
    """Cell classes of a map with their size and place in the world.

    Parameters
    ----------
    classes : ndarray of uint8, shape (rows, cols)
        ``FREE``, ``OCCUPIED`` or ``UNKNOWN`` per cell, row 0 = top edge of the image.
        Stored read-only and C-contiguous (a writeable input is copied).
    cell_size_m : float
        Edge of one square cell, metres; finite and > 0.
    origin_m : tuple of float
        World ``(x_m, y_m)`` of the grid's lower-left corner.
    unknown_is : {"blocked", "free"}
        How :attr:`blocked` treats ``UNKNOWN`` cells.

    Raises
    ------
    MapFormatError
        When ``classes`` is not a non-empty 2-D array of 0, 1 and 2.
    MapSettingsError
        When ``cell_size_m``, ``origin_m`` or ``unknown_is`` is invalid.

    Notes
    -----
    Equality is identity (``eq=False``); compare :attr:`map_id` to tell whether two
    grids hold the same map.
    """

    classes: np.ndarray
    cell_size_m: float
    origin_m: tuple[float, float]
    unknown_is: str = "blocked"

    def __post_init__(self) -> None:
        setattr_ = object.__setattr__
        setattr_(self, "classes", _as_class_array(self.classes))
        setattr_(self, "cell_size_m", _checks.cell_size(self.cell_size_m, "cell_size_m", MapSettingsError))
        setattr_(self, "origin_m", _checks.point_2d(self.origin_m, "origin_m", MapSettingsError))
        setattr_(self, "unknown_is", _checks.unknown_is(self.unknown_is, "unknown_is", MapSettingsError))

    @property
    def rows(self) -> int:
        """Number of cell rows (image height)."""
        return int(self.classes.shape[0])

    @property
    def cols(self) -> int:
        """Number of cell columns (image width)."""
        return int(self.classes.shape[1])

    @property
    def width_m(self) -> float:
        """Extent along world x, metres (``cols * cell_size_m``)."""
        return self.cols * self.cell_size_m

    @property
    def height_m(self) -> float:
        """Extent along world y, metres (``rows * cell_size_m``)."""
        return self.rows * self.cell_size_m

    @cached_property
    def blocked(self) -> np.ndarray:
        """Read-only bool array (rows, cols): ``OCCUPIED``, plus ``UNKNOWN`` when ``unknown_is == "blocked"``."""
        if self.unknown_is == "blocked":
            mask = self.classes != FREE
        else:
            mask = self.classes == OCCUPIED
        mask.flags.writeable = False
        return mask

    @cached_property
    def map_id(self) -> str:
        """First 16 hex digits of a SHA-256 over shape, cell size, origin, ``unknown_is`` and the cells."""
        digest = hashlib.sha256()
        digest.update(b"veer-grid-1")
        digest.update(struct.pack("<qqddd", self.rows, self.cols, self.cell_size_m, *self.origin_m))
        digest.update(self.unknown_is.encode("ascii"))
        digest.update(memoryview(self.classes).cast("B"))
        return digest.hexdigest()[:16]

    def world_to_cell(self, x_m, y_m):
        """Return the ``(row, col)`` of the cell holding each world point.

        Parameters
        ----------
        x_m, y_m : float or array_like
            World coordinates, metres; arrays broadcast together.

        Returns
        -------
        row, col : int or ndarray of int64
            Plain ints for scalar input. Indices may lie outside the grid (see
            :meth:`contains`); a NaN coordinate gives -1.
        """
        scalar = np.ndim(x_m) == 0 and np.ndim(y_m) == 0
        x = np.asarray(x_m, dtype=np.float64)
        y = np.asarray(y_m, dtype=np.float64)
        ox, oy = self.origin_m
        cs = self.cell_size_m
        with np.errstate(invalid="ignore", over="ignore"):
            col_f = np.floor((x - ox) / cs)
            row_f = (self.rows - 1) - np.floor((y - oy) / cs)
        row = _to_index(row_f)
        col = _to_index(col_f)
        row, col = np.broadcast_arrays(row, col)
        if scalar:
            return int(row), int(col)
        return row.copy(), col.copy()

    def cell_to_world(self, row, col):
        """Return the world ``(x_m, y_m)`` of each cell centre.

        Parameters
        ----------
        row, col : int or array_like of int
            Cell indices (need not lie inside the grid).

        Returns
        -------
        x_m, y_m : float or ndarray of float64
            Metres; plain floats for scalar input.
        """
        scalar = np.ndim(row) == 0 and np.ndim(col) == 0
        r = np.asarray(row, dtype=np.float64)
        c = np.asarray(col, dtype=np.float64)
        ox, oy = self.origin_m
        cs = self.cell_size_m
        x = ox + (c + 0.5) * cs
        y = oy + (self.rows - r - 0.5) * cs
        x, y = np.broadcast_arrays(x, y)
        if scalar:
            return float(x), float(y)
        return x.copy(), y.copy()

    def contains(self, x_m, y_m):
        """Return whether each world point lies on the grid (bool, or bool array).

        The grid is the half-open box ``[ox, ox + width_m) x [oy, oy + height_m)``.
        """
        row, col = self.world_to_cell(x_m, y_m)
        inside = (np.asarray(row) >= 0) & (np.asarray(row) < self.rows)
        inside &= (np.asarray(col) >= 0) & (np.asarray(col) < self.cols)
        if np.ndim(inside) == 0:
            return bool(inside)
        return inside

    def with_classes(self, new_classes) -> OccupancyGrid:
        """Return a grid with the same geometry and ``unknown_is`` but new cell classes.

        Parameters
        ----------
        new_classes : array_like of uint8, shape (rows, cols)
            The new classes; same shape as :attr:`classes`.

        Raises
        ------
        MapFormatError
            When the shape differs or a value is not a cell class.
        """
        array = np.asarray(new_classes)
        if array.shape != self.classes.shape:
            raise MapFormatError(f"new classes must keep the grid shape {self.classes.shape}, got {array.shape}")
        return OccupancyGrid(array, self.cell_size_m, self.origin_m, self.unknown_is)


def _to_index(values: np.ndarray) -> np.ndarray:
    """Turn floored float indices into int64, NaN to -1, clipping far-away values."""
    values = np.where(np.isnan(values), -1.0, values)
    return np.clip(values, -_INDEX_LIMIT, _INDEX_LIMIT).astype(np.int64)
