"""Planning's input checks, in one place: each names the argument it rejects.

Every public entry point of ``veer.planning`` (the planner, the curves, the path check)
passes its arguments through these before any work, so a bad call fails with the
project's own error (a :class:`~veer.planning.errors.PlanningError`) that says which
argument is wrong and what to give instead, never with a bare unpacking or type error.
"""

from __future__ import annotations

import math

import numpy as np

from veer.planning.errors import PlanningError, PoseError

__all__ = ["pose_argument", "positive_length", "poses_argument", "brief", "finite_number"]


def brief(value, limit: int = 60) -> str:
    """``repr(value)`` on one line, shortened to ``limit`` characters: fit for a one-line error."""
    text = " ".join(repr(value).split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def finite_number(value) -> bool:
    """``math.isfinite(value)``, False (not OverflowError) for an int beyond the float range."""
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def _number(value) -> float:
    """``float(value)``; values beyond the float range become inf (then refused as not finite)."""
    try:
        return float(value)
    except OverflowError:
        return math.inf


def pose_argument(value, name: str) -> tuple[float, float, float]:
    """``value`` as a finite (x_m, y_m, heading_rad), or PoseError naming ``name``.

    Examples
    --------
    >>> pose_argument((2.0, 5.0), "start")
    Traceback (most recent call last):
    ...
    veer.planning.errors.PoseError: start must be three numbers (x_m, y_m, heading_rad), got (2.0, 5.0)
    """
    wrong = f"{name} must be three numbers (x_m, y_m, heading_rad), got {brief(value)}"
    if isinstance(value, (str, bytes)) or not hasattr(value, "__len__") or len(value) != 3:
        raise PoseError(wrong)
    out = []
    for part in value:
        if isinstance(part, bool):
            raise PoseError(wrong)
        try:
            number = _number(part)
        except (TypeError, ValueError):
            raise PoseError(wrong) from None
        if not math.isfinite(number):
            raise PoseError(f"{name} {brief(tuple(value))} is not finite; give x_m, y_m, heading_rad as finite numbers")
        out.append(number)
    return out[0], out[1], out[2]


def positive_length(value, name: str) -> float:
    """``value`` as a finite number > 0 (metres), or PlanningError naming ``name``."""
    try:
        number = _number(value)
    except (TypeError, ValueError):
        number = float("nan")
    if isinstance(value, bool) or not (math.isfinite(number) and number > 0.0):
        raise PlanningError(f"{name} must be a finite number > 0, got {brief(value)}")
    return number


def poses_argument(value, name: str = "poses") -> np.ndarray:
    """``value`` as a finite float array (N, >=3) of x_m, y_m, heading_rad rows, or PoseError."""
    try:
        poses = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise PoseError(f"{name} must be rows of (x_m, y_m, heading_rad[, gear]) numbers") from None
    if poses.size == 0:
        return np.zeros((0, 3))
    if poses.ndim != 2 or poses.shape[1] < 3:
        raise PoseError(f"{name} must be rows of (x_m, y_m, heading_rad[, gear]), got shape {poses.shape}")
    if not np.isfinite(poses[:, :3]).all():
        raise PoseError(f"{name} holds a non-finite number; give finite x_m, y_m, heading_rad")
    return poses
