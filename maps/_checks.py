"""Small shared validators whose messages name the field the user typed."""

from __future__ import annotations

import math
import numbers

import numpy as np

from .errors import MapError, MapSettingsError


def real_number(value: object, field: str, error: type[MapError], where: str = "") -> float:
    """Return ``value`` as a finite float, refusing bools, strings and NaN/inf.

    Parameters
    ----------
    value : object
        The value to check.
    field : str
        Name of the field as the user typed it (``cell_size_m``).
    error : type of MapError
        Error class to raise.
    where : str
        Prefix naming the file or message, e.g. ``"map.toml: "``.

    Raises
    ------
    MapError
        Of class ``error``, when ``value`` is not a finite real number.
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise error(f"{where}{field} must be a number, got {type(value).__name__} {value!r}")
    try:
        number = float(value)
    except OverflowError:  # an int (TOML allows any size) beyond the float range
        number = math.inf
    if not math.isfinite(number):
        raise error(f"{where}{field} must be a finite number, got {_brief(value)}")
    return number


def _brief(value: object, limit: int = 60) -> str:
    """``repr(value)`` on one line, shortened to ``limit`` characters."""
    text = " ".join(repr(value).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def path_text(path) -> str:
    """A name (file, chunk) as it can stand in a one-line message: as typed, or quoted when it holds control characters."""
    text = str(path)
    return text if text.isprintable() else repr(text)


def positive_number(value: object, field: str, error: type[MapError], where: str = "") -> float:
    """Return ``value`` as a finite float > 0 (see :func:`real_number`)."""
    number = real_number(value, field, error, where)
    if number <= 0.0:
        raise error(f"{where}{field} must be greater than 0, got {value!r}")
    return number


#: Cell sizes veer accepts, metres: a millimetre to a hundred metres. Outside that range
#: a map is almost surely mis-scaled (a typo in the sidecar or on the command line), and
#: the planner's per-cell work would overflow memory or floating point.
MIN_CELL_SIZE_M = 1e-3
MAX_CELL_SIZE_M = 100.0


def cell_size(value: object, field: str, error: type[MapError], where: str = "") -> float:
    """Return ``value`` as a cell size in metres within [MIN_CELL_SIZE_M, MAX_CELL_SIZE_M]."""
    number = positive_number(value, field, error, where)
    if not MIN_CELL_SIZE_M <= number <= MAX_CELL_SIZE_M:
        raise error(
            f"{where}{field} must be between {MIN_CELL_SIZE_M} and {MAX_CELL_SIZE_M:g} metres, got {value!r}; "
            f"check the map's scale"
        )
    return number


def point_2d(value: object, field: str, error: type[MapError], where: str = "") -> tuple[float, float]:
    """Return ``value`` (a list or tuple of two finite numbers) as a tuple of floats."""
    flat = isinstance(value, (list, tuple)) or (isinstance(value, np.ndarray) and value.ndim == 1)
    if not flat or len(value) != 2:
        raise error(f"{where}{field} must be a list of two numbers [x, y] in metres, got {_brief(value)}")
    x, y = value
    # "+ 0.0" turns -0.0 into 0.0 so equal origins hash alike.
    return (
        real_number(x, f"{field}[0]", error, where) + 0.0,
        real_number(y, f"{field}[1]", error, where) + 0.0,
    )


def unknown_is(value: object, field: str, error: type[MapError], where: str = "") -> str:
    """Return ``value`` when it is ``"blocked"`` or ``"free"``."""
    if value not in ("blocked", "free") or not isinstance(value, str):
        raise error(f'{where}{field} must be "blocked" or "free", got {value!r}')
    return value


def cell_count_limit(value: object, field: str = "max_cells") -> int:
    """Return ``value`` when it is a positive int (bool refused)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise MapSettingsError(f"{field} must be a positive integer, got {value!r}")
    return int(value)
