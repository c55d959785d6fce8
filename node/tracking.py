"""Where the robot is along its path: nearest point, distance off the path, the stretch ahead.

Plain numpy on a pose array (N, 4: x_m, y_m, heading_rad, gear); no sockets, no planner.
The robot's place is the nearest point of the polyline through the poses (orthogonal
projection onto each segment, clamped to its ends), looked for from its last known
place forward over a window, so a path that crosses itself is followed in order.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Place", "cumulative_m", "locate", "wrap_rad", "index_ahead"]


def wrap_rad(angle: float) -> float:
    """Angle wrapped to [-pi, pi)."""
    return (angle + math.pi) % (2.0 * math.pi) - math.pi


def cumulative_m(poses: np.ndarray) -> np.ndarray:
    """Distance along the poses from the first, metres (N,)."""
    if len(poses) < 2:
        return np.zeros(len(poses))
    steps = np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1]))
    return np.concatenate(([0.0], np.cumsum(steps)))


@dataclass(frozen=True)
class Place:
    """The robot's place on a path.

    segment : index i of the segment (pose i to pose i + 1) holding the nearest point
    fraction : where on that segment, 0 at pose i, 1 at pose i + 1
    along_m : distance along the path to the nearest point
    off_m : distance from the robot to the nearest point
    heading_off_rad : robot heading minus the path heading there, wrapped (absolute value)
    """

    segment: int
    fraction: float
    along_m: float
    off_m: float
    heading_off_rad: float
    point: tuple[float, float, float]


def locate(poses: np.ndarray, along_m: np.ndarray, pose, from_segment: int, window_m: float) -> Place:
    """Nearest point of the path to ``pose`` (x, y, heading) from segment ``from_segment`` on.

    Segments are searched from one before ``from_segment`` up to ``window_m`` of path
    beyond it (at least one segment).
    """
    x, y, heading = (float(v) for v in pose[:3])
    n = len(poses)
    if n == 1:
        off = math.hypot(x - poses[0, 0], y - poses[0, 1])
        return Place(0, 0.0, 0.0, off, abs(wrap_rad(heading - poses[0, 2])), tuple(poses[0, :3]))
    first = max(0, min(from_segment, n - 2) - 1)
    last = int(np.searchsorted(along_m, along_m[first + 1] + window_m, side="right"))
    last = min(max(last, first + 1), n - 1)  # segments first .. last - 1
    a = poses[first:last, :2]
    b = poses[first + 1 : last + 1, :2]
    d = b - a
    length2 = (d * d).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(length2 > 0, ((x - a[:, 0]) * d[:, 0] + (y - a[:, 1]) * d[:, 1]) / length2, 0.0)
    t = np.clip(t, 0.0, 1.0)
    px = a[:, 0] + t * d[:, 0]
    py = a[:, 1] + t * d[:, 1]
    dist = np.hypot(px - x, py - y)
    k = int(np.argmin(dist))
    i = first + k
    frac = float(t[k])
    # heading of the nearer end (a segment's heading change is small: <= 0.25 m of a turn)
    path_heading = float(poses[i + 1, 2] if frac >= 0.5 else poses[i, 2])
    point_heading = float(poses[i, 2] + frac * wrap_rad(poses[i + 1, 2] - poses[i, 2]))
    return Place(
        i, frac, float(along_m[i] + frac * (along_m[i + 1] - along_m[i])), float(dist[k]),
        abs(wrap_rad(heading - path_heading)), (float(px[k]), float(py[k]), wrap_rad(point_heading)),
    )


def index_ahead(along_m: np.ndarray, from_m: float, distance_m: float) -> int | None:
    """First pose index at least ``distance_m`` beyond ``from_m`` along the path, or None past the end."""
    index = int(np.searchsorted(along_m, from_m + distance_m, side="left"))
    return index if index < len(along_m) else None
