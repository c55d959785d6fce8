"""The one cost model of the planner: what a motion costs, in metres of plain forward driving.

Used by the search's motion primitives (their transition table), by the analytic curves
to the goal (which are ranked by it), by the shortcuts of path assembly (which may never
make a path dearer) and by :meth:`CostModel.path_cost`, which prices a finished path.

A motion driven ``s`` metres in gear ``g`` with the front wheels at the signed fraction
``u`` of full lock (+1 full left, -1 full right; the sign of the wheel angle, not of the
heading change, so a left lock driven in reverse is still ``u = +1``) costs::

    s * (reverse_factor if g < 0 else 1) * (1 + steer_factor * |u|)
      + clearance: the integral of proximity_per_m along the motion

a rotation on the spot (bases that turn in place) costs the distance its farthest
footprint point travels, ``|angle| * rotation_reach_m``; and the junction of two
consecutive motions costs ``gear_change_m`` when both drive and their gears differ, plus
``steer_change_m * |u_after - u_before|``. A rotation on the spot has no gear, so no gear
change is charged across it. Proximity rises linearly from 0 at ``clearance_range_m`` of
free room beyond the footprint to ``clearance_factor`` at contact.

Terms after Dolgov, Thrun, Montemerlo & Diebel, "Practical search techniques in path
planning for autonomous driving" (AAAI STAIR workshop 2008), section on the search:
penalties for reversing, for switching direction and for steering.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from veer.planning.angles import wrap_angle

__all__ = ["CostModel", "MotionEnd"]

#: How a motion starts or ends for the junction cost: (gear: +1, -1 or 0 for a rotation, wheel fraction u).
MotionEnd = tuple[int, float]

_STEER_OF_KIND = {"L": 1.0, "S": 0.0, "R": -1.0}


@dataclass(frozen=True)
class CostModel:
    """Prices motions; built from the search settings and the vehicle by :meth:`for_vehicle`."""

    reverse_factor: float = 1.5
    gear_change_m: float = 3.0
    steer_factor: float = 0.05
    steer_change_m: float = 0.1
    clearance_factor: float = 0.3
    clearance_range_m: float = 1.0
    max_curvature_per_m: float = math.inf
    rotation_reach_m: float = 0.0

    @classmethod
    def for_vehicle(cls, vehicle, settings) -> "CostModel":
        return cls(
            reverse_factor=settings.reverse_cost_factor,
            gear_change_m=settings.gear_change_cost_m,
            steer_factor=settings.steer_cost_factor,
            steer_change_m=settings.steer_change_cost_m,
            clearance_factor=settings.clearance_cost_factor,
            clearance_range_m=settings.clearance_range_m,
            max_curvature_per_m=vehicle.max_curvature_per_m,
            rotation_reach_m=vehicle.bounding_radius_m,
        )

    # ---------------------------------------------------------------- pieces
    def motion(self, length_m: float, gear: int, steer: float) -> float:
        """Driving ``|length_m|`` in ``gear`` at wheel fraction ``steer``, clearance aside."""
        return abs(length_m) * (self.reverse_factor if gear < 0 else 1.0) * (1.0 + self.steer_factor * abs(steer))

    def rotation(self, angle_rad: float) -> float:
        """Turning on the spot by ``angle_rad``."""
        return abs(angle_rad) * self.rotation_reach_m

    def junction(self, before: MotionEnd | None, after: MotionEnd | None) -> float:
        """Changing from the end of one motion to the start of the next (None: no motion there)."""
        if before is None or after is None:
            return 0.0
        cost = self.steer_change_m * abs(after[1] - before[1])
        if before[0] and after[0] and before[0] != after[0]:
            cost += self.gear_change_m
        return cost

    @property
    def prices_clearance(self) -> bool:
        return self.clearance_factor > 0.0 and self.clearance_range_m > 0.0

    def proximity_per_m(self, room_m: np.ndarray) -> np.ndarray:
        """Clearance cost per metre driven with ``room_m`` of free room beyond the footprint."""
        room_m = np.asarray(room_m, dtype=np.float64)
        if not self.prices_clearance:
            return np.zeros(room_m.shape)
        return self.clearance_factor * np.clip(1.0 - room_m / self.clearance_range_m, 0.0, 1.0)

    @staticmethod
    def clearance(proximity_per_m: np.ndarray, step_m: np.ndarray) -> float:
        """Clearance cost of a motion: proximity at each sample times the distance that reached it."""
        return float(np.dot(proximity_per_m, step_m))

    # ---------------------------------------------------------------- analytic curves
    @staticmethod
    def curve_ends(path) -> tuple[MotionEnd | None, MotionEnd | None]:
        """(start, end) of a Reeds-Shepp / Dubins curve's moving segments, for junctions."""
        moving = [(1 if length > 0 else -1, _STEER_OF_KIND[kind]) for kind, length in path.segments if length]
        return (moving[0], moving[-1]) if moving else (None, None)

    def curve(self, path, before: MotionEnd | None = None) -> float:
        """A curve of full-lock arcs and straights (``CurvePath``), clearance aside.

        ``before`` is the end of the motion the curve follows (its junction is included).
        """
        return self.segments(path.segments, before)

    def segments(self, segments, before: MotionEnd | None = None) -> float:
        """``(kind, signed length_m)`` segments, kind L / S / R, as one motion sequence."""
        cost = 0.0
        previous = before
        for kind, length in segments:
            if not length:
                continue
            end = (1 if length > 0 else -1, _STEER_OF_KIND[kind])
            cost += self.junction(previous, end) + self.motion(length, end[0], end[1])
            previous = end
        return cost

    def word_pricer(self, turn_radius_m: float, before: MotionEnd | None = None):
        """``price(pattern, unit_mags)`` for :func:`veer.planning.curves.cheapest_curves`.

        The same sum as :meth:`segments`, over a word given as ((kind, gear), ...) and
        unit-radius lengths, with the per-(kind, gear) factors worked out once.
        """
        factor = {
            (kind, gear): turn_radius_m * (self.reverse_factor if gear < 0 else 1.0) * (1.0 + self.steer_factor * abs(u))
            for kind, u in _STEER_OF_KIND.items() for gear in (1, -1)
        }
        steer_of, steer_change, gear_change = _STEER_OF_KIND, self.steer_change_m, self.gear_change_m

        def price(pattern, mags) -> float:
            cost = 0.0
            previous = before
            for (kind, gear), m in zip(pattern, mags):
                if m <= 1e-12:
                    continue
                u = steer_of[kind]
                cost += factor[kind, gear] * m
                if previous is not None:
                    cost += steer_change * abs(u - previous[1])
                    if previous[0] and previous[0] != gear:
                        cost += gear_change
                previous = (gear, u)
            return cost

        return price

    # ---------------------------------------------------------------- finished paths
    def path_cost(self, poses: np.ndarray, curvature_per_m: np.ndarray, proximity_at=None) -> float:
        """The cost of a finished path: poses (N, 4) x, y, heading, gear and the curvature reaching each.

        Steps of no length with a heading change are rotations on the spot; the wheel
        fraction of a step is its geometric curvature times its gear over the maximum
        curvature. ``proximity_at(x_m, y_m)``, when given, returns the clearance cost per
        metre at the poses and adds the clearance term.
        """
        poses = np.asarray(poses, dtype=float)
        if len(poses) < 2:
            return 0.0
        step = np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1]))
        turn = np.abs(wrap_angle(np.diff(poses[:, 2])))
        gears = poses[1:, 3]
        kappa = np.asarray(curvature_per_m, dtype=float)[1:]
        total = 0.0
        previous: MotionEnd | None = None
        for ds, dh, gear, k in zip(step.tolist(), turn.tolist(), gears.tolist(), kappa.tolist()):
            if ds <= 1e-9:
                if dh > 1e-9:
                    total += self.rotation(dh)
                    previous = (0, 0.0)
                continue
            u = 0.0 if (math.isinf(self.max_curvature_per_m) or not math.isfinite(k)) else k * gear / self.max_curvature_per_m
            u = max(-1.0, min(1.0, u))
            end = (1 if gear > 0 else -1, u)
            total += self.junction(previous, end) + self.motion(ds, end[0], u)
            previous = end
        if proximity_at is not None:
            total += self.clearance(proximity_at(poses[1:, 0], poses[1:, 1]), step)
        return total
