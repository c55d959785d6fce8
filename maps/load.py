"""Turn a map image file, or a grid message, into an :class:`~veer.maps.grid.OccupancyGrid`.

Pixels are compared with the thresholds on the 8-bit scale (a sample of an image with
another maxval counts as ``value * 255 / maxval``): below ``occupied_below`` is
``OCCUPIED``, above ``free_above`` is ``FREE``, anything from one to the other
(both included) is ``UNKNOWN``.

>>> import numpy as np
>>> classify(np.array([[0.0, 99.0, 100.0], [200.0, 201.0, 255.0]]), MapSettings())
array([[1, 1, 2],
       [2, 0, 0]], dtype=uint8)
"""

from __future__ import annotations

import dataclasses
import numbers
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from . import _checks
from .errors import GridMessageError, MapError, MapFormatError, MapSettingsError
from .grid import DEFAULT_MAX_CELLS, FREE, OCCUPIED, UNKNOWN, OccupancyGrid
from .images import pixels_on_8bit_scale, read_image, read_pgm, read_png
from .settings import MapSettings, read_sidecar, sidecar_path_for

__all__ = ["GRID_ENCODINGS", "classify", "grid_from_message", "load_map"]

GRID_ENCODINGS = ("raw", "png", "pgm")
"""Values the ``encoding`` field of a grid message may take."""


def classify(pixels_8bit: np.ndarray, settings: MapSettings) -> np.ndarray:
    """Sort pixels into cell classes by the thresholds of ``settings``.

    Parameters
    ----------
    pixels_8bit : ndarray, shape (rows, cols)
        Pixel values on the 0..255 scale (see
        :func:`~veer.maps.images.pixels_on_8bit_scale`).
    settings : MapSettings
        Supplies ``occupied_below`` and ``free_above``.

    Returns
    -------
    ndarray of uint8, shape (rows, cols)
        ``OCCUPIED`` where value < occupied_below, ``FREE`` where value > free_above,
        ``UNKNOWN`` elsewhere.
    """
    pixels = np.asarray(pixels_8bit)
    classes = np.full(pixels.shape, UNKNOWN, dtype=np.uint8)
    classes[pixels < settings.occupied_below] = OCCUPIED
    classes[pixels > settings.free_above] = FREE
    return classes


def _grid_from_samples(samples: np.ndarray, maxval: int, settings: MapSettings) -> OccupancyGrid:
    """Classify decoded samples and wrap them in a grid (no copy of the classes)."""
    # 8-bit samples already sit on the threshold scale: comparing them directly saves a
    # float32 copy of the whole image.
    pixels = samples if maxval == 255 else pixels_on_8bit_scale(samples, maxval)
    classes = classify(pixels, settings)
    classes.flags.writeable = False
    return OccupancyGrid(classes, settings.cell_size_m, settings.origin_m, settings.unknown_is)


def load_map(
    image_path, *, cell_size_m: float | None = None, max_cells: int = DEFAULT_MAX_CELLS
) -> OccupancyGrid:
    """Load a map image (PGM or PNG) and its sidecar into an occupancy grid.

    Parameters
    ----------
    image_path : str or path-like
        The image. Its sidecar ``NAME.toml`` is read when it exists.
    cell_size_m : float, optional
        Edge of one cell, metres; overrides the sidecar's ``cell_size_m``.
    max_cells : int
        Largest number of pixels accepted (checked from the image header).

    Returns
    -------
    OccupancyGrid
        Row 0 is the top row of the image; ``origin_m`` is the lower-left corner.

    Raises
    ------
    MapFormatError
        The image is missing, unreadable or not a PGM/PNG veer can read.
    MapSettingsError
        Bad sidecar or override, or no cell size from either.
    MapTooLargeError
        The image has more than ``max_cells`` pixels.
    """
    path = Path(image_path)
    shown = _checks.path_text(path)
    max_cells = _checks.cell_count_limit(max_cells)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise MapFormatError(f"{shown}: no such map image; give the path of a PGM or PNG file") from None
    except IsADirectoryError:
        raise MapFormatError(f"{shown}: is a directory; give the path of a PGM or PNG file") from None
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the name
        raise MapFormatError(f"{shown}: cannot read the map image ({getattr(exc, 'strerror', None) or exc})") from None
    sidecar = sidecar_path_for(path)
    settings = read_sidecar(sidecar) if sidecar.is_file() else MapSettings()
    if cell_size_m is not None:
        cell_size_m = _checks.cell_size(cell_size_m, "cell_size_m override", MapSettingsError)
        settings = dataclasses.replace(settings, cell_size_m=cell_size_m)
    if settings.cell_size_m is None:
        found = "has no cell_size_m" if sidecar.is_file() else "does not exist"
        raise MapSettingsError(
            f"{shown}: no cell size: pass a cell size (--cell-size) or write cell_size_m in the sidecar "
            f"{_checks.path_text(sidecar)} (it {found})"
        )
    samples, maxval = read_image(data, shown, max_cells=max_cells)
    del data
    return _grid_from_samples(samples, maxval, settings)


def _message_int(message: Mapping, field: str) -> int:
    value = message[field]
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise GridMessageError(f"grid message: {field} must be an integer, got {type(value).__name__} {value!r}")
    if value < 1:
        raise GridMessageError(f"grid message: {field} must be at least 1, got {value}")
    return int(value)


def grid_from_message(message: Mapping, *, max_cells: int = DEFAULT_MAX_CELLS) -> OccupancyGrid:
    """Build a grid from a grid message (docs/protocol.md, ``kind = "grid"``).

    Parameters
    ----------
    message : mapping
        Decoded msgpack map with ``rows``, ``cols`` (ints >= 1), ``cell_size_m``
        (number > 0), ``origin_m`` ([x, y]), ``encoding`` (``"raw"``, ``"png"`` or
        ``"pgm"``) and ``cells`` (bytes): ``raw`` is rows * cols uint8 shades in image
        order (row 0 top); ``png`` and ``pgm`` are the bytes of such a file, whose size
        must be cols x rows. veer also reads the optional fields ``occupied_below``,
        ``free_above`` and ``unknown_is`` (defaults as in :class:`MapSettings`). Other
        fields (``v``, ``kind``, ``map_id``) are the caller's to check and are ignored.
    max_cells : int
        Largest ``rows * cols`` accepted, checked before anything is allocated.

    Returns
    -------
    OccupancyGrid

    Raises
    ------
    GridMessageError
        A field missing, of the wrong type (a bool is not an int) or inconsistent;
        the message names the field. Decoder errors are reported as ``cells`` errors.
    """
    max_cells = _checks.cell_count_limit(max_cells)
    if not isinstance(message, Mapping):
        raise GridMessageError(f"grid message must be a map of fields, got {type(message).__name__}")
    for field in ("rows", "cols", "cell_size_m", "origin_m", "encoding", "cells"):
        if field not in message:
            raise GridMessageError(
                f"grid message: missing field {field!r}; a grid needs rows, cols, cell_size_m, origin_m, "
                "encoding, cells"
            )
    rows = _message_int(message, "rows")
    cols = _message_int(message, "cols")
    if rows * cols > max_cells:
        raise GridMessageError(
            f"grid message: rows x cols = {rows} x {cols} = {rows * cols} cells, more than the {max_cells} veer accepts"
        )
    where = "grid message: "
    cell_size_m = _checks.cell_size(message["cell_size_m"], "cell_size_m", GridMessageError, where)
    encoding = message["encoding"]
    if not isinstance(encoding, str) or encoding not in GRID_ENCODINGS:
        raise GridMessageError(f'{where}encoding must be "raw", "png" or "pgm", got {encoding!r}')
    cells = message["cells"]
    if not isinstance(cells, (bytes, bytearray, memoryview)):
        raise GridMessageError(f"{where}cells must be bytes, got {type(cells).__name__}")
    cells = bytes(cells)
    optional = {name: message[name] for name in ("occupied_below", "free_above", "unknown_is") if name in message}
    try:
        settings = MapSettings(cell_size_m, message["origin_m"], **optional)
    except MapSettingsError as exc:
        raise GridMessageError(f"{where}{exc}") from None

    if encoding == "raw":
        if len(cells) != rows * cols:
            raise GridMessageError(
                f"{where}cells holds {len(cells)} bytes, but raw encoding needs rows * cols = {rows * cols}"
            )
        samples = np.frombuffer(cells, dtype=np.uint8).reshape(rows, cols)
        maxval = 255
    else:
        reader = read_png if encoding == "png" else read_pgm
        try:
            samples, maxval = reader(cells, f"grid message cells ({encoding})", max_cells=max_cells)
        except MapError as exc:
            raise GridMessageError(str(exc)) from None
        if samples.shape != (rows, cols):
            raise GridMessageError(
                f"{where}cells decode to {samples.shape[1]} x {samples.shape[0]} pixels (cols x rows), "
                f"but the message says rows={rows}, cols={cols}"
            )
    return _grid_from_samples(samples, maxval, settings)
