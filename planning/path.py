"""The planner's answer: a resampled pose sequence with gear and curvature, as the path JSON of docs/files.md."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["PlannedPath", "no_path_document", "path_metrics"]


def path_metrics(poses: np.ndarray) -> tuple[float, float, int]:
    """(length_m, reverse_m, gear_changes) of poses (N, 4): x, y, heading, gear."""
    if len(poses) < 2:
        return 0.0, 0.0, 0
    step = np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1]))
    gears = poses[1:, 3]
    length = float(step.sum())
    reverse = float(step[gears < 0].sum())
    moving = gears[step > 1e-9]
    changes = int(np.count_nonzero(moving[1:] != moving[:-1])) if moving.size else 0
    return length, reverse, changes


@dataclass
class PlannedPath:
    """A found path.

    Attributes
    ----------
    poses : ndarray (N, 4)
        x_m, y_m, heading_rad, gear (+1 forward, -1 reverse: direction of travel from the
        previous pose; the first pose carries the gear of the first step).
    curvature_per_m : ndarray (N,)
        Signed curvature of the motion that reached each pose (left > 0; ``inf`` for a
        turn on the spot).
    length_m, reverse_m : float
        Distance along the poses, and the part of it driven in reverse.
    gear_changes : int
    stats : dict
        ``expansions``, ``plan_s`` and further search figures.
    """

    poses: np.ndarray
    curvature_per_m: np.ndarray
    length_m: float
    reverse_m: float
    gear_changes: int
    stats: dict = field(default_factory=dict)

    @classmethod
    def from_poses(cls, poses: np.ndarray, curvature_per_m: np.ndarray, stats: dict) -> "PlannedPath":
        length, reverse, changes = path_metrics(poses)
        return cls(poses, curvature_per_m, length, reverse, changes, stats)

    def to_document(self) -> dict:
        """The path JSON of docs/files.md (status "found")."""
        curvature = [None if not math.isfinite(c) else round(float(c), 6) for c in self.curvature_per_m]
        return {
            "status": "found",
            "reason": None,
            "length_m": round(self.length_m, 4),
            "reverse_m": round(self.reverse_m, 4),
            "gear_changes": int(self.gear_changes),
            "poses": [[float(x), float(y), float(h), int(g)] for x, y, h, g in self.poses.tolist()],
            "curvature_per_m": curvature,
            "stats": dict(self.stats),
        }


def no_path_document(reason: str, detail: str, stats: dict) -> dict:
    """The path JSON of docs/files.md for a valid request with no path."""
    return {
        "status": "no_path",
        "reason": reason,
        "detail": detail,
        "length_m": None,
        "reverse_m": None,
        "gear_changes": None,
        "poses": [],
        "stats": dict(stats),
    }
