"""Errors raised by :mod:`veer.maps`.

Every error is a :class:`ValueError` (bad input, never a bug in veer) and carries a
short ``code`` that the node copies into its answers and events::

    ValueError
    └── MapError                 code "bad_map"
        ├── MapFormatError       code "bad_image"         unreadable, truncated, wrong magic,
        │                                                 unsupported depth or type, empty image
        ├── MapSettingsError     code "bad_map_settings"  sidecar values or overrides
        ├── MapTooLargeError     code "map_too_large"     more cells than ``max_cells``
        └── GridMessageError     code "bad_grid_message"  a field of a grid message

Messages are one line: they name the file (or the message field) that is wrong and say
what veer accepts instead.
"""

from __future__ import annotations

__all__ = [
    "GridMessageError",
    "MapError",
    "MapFormatError",
    "MapSettingsError",
    "MapTooLargeError",
]


class MapError(ValueError):
    """A map image, sidecar, override or grid message that veer cannot use."""

    code: str = "bad_map"


class MapFormatError(MapError):
    """An image that is unreadable, truncated, of the wrong kind, or empty."""

    code = "bad_image"


class MapSettingsError(MapError):
    """A sidecar value or an override (cell size, origin, thresholds) that is out of range."""

    code = "bad_map_settings"


class MapTooLargeError(MapError):
    """An image or grid with more cells than the caller allows (``max_cells``)."""

    code = "map_too_large"


class GridMessageError(MapError):
    """A grid message with a missing, mistyped or inconsistent field."""

    code = "bad_grid_message"
