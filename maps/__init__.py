"""veer.maps: map images and grid messages in, occupancy grids and inflated grids out.

Data flows one way: a PGM/PNG image with its sidecar (:func:`load_map`) or a grid
message (:func:`grid_from_message`) becomes an :class:`OccupancyGrid` (cells in image
order, row 0 at the top, placed in the world by ``origin_m`` and ``cell_size_m``), which
:func:`inflate` turns into an :class:`InflatedGrid` for disc collision checks. The
cell/world convention is written down in :mod:`veer.maps.grid`.

This package imports no other veer package.
"""

from .errors import GridMessageError, MapError, MapFormatError, MapSettingsError, MapTooLargeError
from .grid import DEFAULT_MAX_CELLS, FREE, MAX_CELL_SIZE_M, MIN_CELL_SIZE_M, OCCUPIED, UNKNOWN, OccupancyGrid
from .images import PNG_SIGNATURE, pixels_on_8bit_scale, read_image, read_pgm, read_png
from .inflate import InflatedGrid, clearance_field_m, inflate, update_clearance_m
from .load import GRID_ENCODINGS, classify, grid_from_message, load_map
from .settings import SIDECAR_KEYS, MapSettings, read_sidecar, sidecar_path_for

__all__ = [
    "DEFAULT_MAX_CELLS",
    "FREE",
    "GRID_ENCODINGS",
    "GridMessageError",
    "InflatedGrid",
    "MapError",
    "MapFormatError",
    "MapSettings",
    "MapSettingsError",
    "MapTooLargeError",
    "MAX_CELL_SIZE_M",
    "MIN_CELL_SIZE_M",
    "OCCUPIED",
    "OccupancyGrid",
    "PNG_SIGNATURE",
    "SIDECAR_KEYS",
    "UNKNOWN",
    "update_clearance_m",
    "classify",
    "clearance_field_m",
    "grid_from_message",
    "inflate",
    "load_map",
    "pixels_on_8bit_scale",
    "read_image",
    "read_pgm",
    "read_png",
    "read_sidecar",
    "sidecar_path_for",
]
