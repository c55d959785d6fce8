"""Map settings: the sidecar ``NAME.toml`` that gives a map image its size, place and thresholds.

A sidecar sits next to its image (``yard.toml`` beside ``yard.pgm`` or ``yard.png``)::

    cell_size_m = 0.1        # edge of one square cell
    origin_m = [0.0, 0.0]    # world x, y of the image's lower-left corner
    occupied_below = 100     # a pixel value below this is an obstacle (8-bit scale)
    free_above = 200         # a pixel value above this is free; between: unknown
    unknown_is = "blocked"   # or "free"

Every key is optional; a missing key takes the default of :class:`MapSettings`. A key
that is not listed above is an error, so a typo never passes silently.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, fields
from pathlib import Path

from . import _checks
from .errors import MapSettingsError

__all__ = ["SIDECAR_KEYS", "MapSettings", "read_sidecar", "sidecar_path_for"]


@dataclass(frozen=True)
class MapSettings:
    """How to turn a map image into a grid.

    Parameters
    ----------
    cell_size_m : float or None
        Edge of one square cell, metres; finite and > 0. None: not given (the caller
        must then supply one).
    origin_m : tuple of float
        World ``(x_m, y_m)`` of the image's lower-left corner, metres.
    occupied_below : float
        A pixel below this value (0..255 scale) is ``OCCUPIED``.
    free_above : float
        A pixel above this value (0..255 scale) is ``FREE``; pixels from
        ``occupied_below`` to ``free_above`` inclusive are ``UNKNOWN``.
    unknown_is : {"blocked", "free"}
        How the planner treats ``UNKNOWN`` cells.

    Raises
    ------
    MapSettingsError
        A value out of range or of the wrong type; the message names the field.
    """

    cell_size_m: float | None = None
    origin_m: tuple[float, float] = (0.0, 0.0)
    occupied_below: float = 100.0
    free_above: float = 200.0
    unknown_is: str = "blocked"

    def __post_init__(self) -> None:
        setattr_ = object.__setattr__
        if self.cell_size_m is not None:
            setattr_(self, "cell_size_m", _checks.cell_size(self.cell_size_m, "cell_size_m", MapSettingsError))
        setattr_(self, "origin_m", _checks.point_2d(self.origin_m, "origin_m", MapSettingsError))
        for name in ("occupied_below", "free_above"):
            value = _checks.real_number(getattr(self, name), name, MapSettingsError)
            if not 0.0 <= value <= 255.0:
                raise MapSettingsError(f"{name} must be on the 8-bit scale 0 to 255, got {getattr(self, name)!r}")
            setattr_(self, name, value)
        if self.occupied_below > self.free_above:
            raise MapSettingsError(
                f"occupied_below ({self.occupied_below:g}) must not be above free_above ({self.free_above:g})"
            )
        setattr_(self, "unknown_is", _checks.unknown_is(self.unknown_is, "unknown_is", MapSettingsError))


SIDECAR_KEYS = tuple(f.name for f in fields(MapSettings))
"""The keys a sidecar may hold, in documentation order."""


def sidecar_path_for(image_path) -> Path:
    """Return the sidecar path for a map image: ``NAME.toml`` beside ``NAME.pgm`` / ``NAME.png``.

    >>> sidecar_path_for("maps/yard.pgm").as_posix()
    'maps/yard.toml'
    """
    return Path(image_path).with_suffix(".toml")


def read_sidecar(path) -> MapSettings:
    """Read a map sidecar (TOML) into :class:`MapSettings`.

    Parameters
    ----------
    path : str or path-like
        The sidecar file.

    Returns
    -------
    MapSettings
        Keys missing from the file take their defaults.

    Raises
    ------
    MapSettingsError
        Unreadable file, TOML syntax error, unknown key, wrong type or value; the
        message names the file and the key.
    """
    path = Path(path)
    shown = _checks.path_text(path)
    try:
        raw = path.read_bytes()
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the name
        raise MapSettingsError(f"{shown}: cannot read the map sidecar ({getattr(exc, 'strerror', None) or exc})") from None
    try:
        table = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise MapSettingsError(f"{shown}: the map sidecar is not UTF-8 text; write it as TOML") from None
    except tomllib.TOMLDecodeError as exc:
        raise MapSettingsError(f"{shown}: not valid TOML ({exc})") from None
    unknown = sorted(set(table) - set(SIDECAR_KEYS))
    if unknown:
        raise MapSettingsError(
            f"{shown}: unknown key {unknown[0]!r} in the map sidecar; accepted keys: {', '.join(SIDECAR_KEYS)}"
        )
    try:
        return MapSettings(**table)
    except MapSettingsError as exc:
        raise MapSettingsError(f"{shown}: {exc}") from None
