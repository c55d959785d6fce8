"""Analytic expansion: curves that reach the exact goal, chosen by the search's own costs.

Hybrid A* (Dolgov, Thrun, Montemerlo & Diebel, AAAI STAIR workshop 2008) tries, from some
expanded nodes, an obstacle-free Reeds-Shepp curve (Reeds & Shepp, Pacific J. Math.
145(2):367-393, 1990) or, forward only, a Dubins curve (Dubins, Am. J. Math.
79(3):497-516, 1957) to the goal. Here every word of the family is priced with the one
:class:`~veer.planning.costs.CostModel` (reverse factor, gear changes, steering and
steering changes, including the junction with the motion the curve follows) and the
cheapest few are checked for collisions, cheapest first, so a short curve that mostly
reverses does not beat a slightly longer forward one. Bases that turn in place get the
rotate-drive-rotate move instead (driving forward to the goal, or, with reverse allowed,
backing to it), priced the same way.

A piece returned here is ``("curve", CurvePath)`` or ``("turn_in_place", [(part,
amount, dense poses), ...])`` with its full cost (clearance included).
"""

from __future__ import annotations

import math

import numpy as np

from veer.planning import curves
from veer.planning.angles import wrap_angle
from veer.planning.context import GridContext
from veer.planning.costs import CostModel, MotionEnd
from veer.planning.primitives import arc_poses
from veer.planning.vehicle import Vehicle

__all__ = ["GoalCurves"]


class GoalCurves:
    """Curves to one goal on one grid, priced by ``costs`` and checked against ``context``."""

    def __init__(self, context: GridContext, vehicle: Vehicle, costs: CostModel, goal, *, reverse: bool, candidates: int):
        self.context = context
        self.vehicle = vehicle
        self.costs = costs
        self.goal = tuple(goal)
        self.reverse = reverse
        self.candidates = candidates
        self.checker = context.checker
        self._pricers: dict = {}  # MotionEnd before the curve -> word pricer (few distinct ones)

    # ------------------------------------------------------------------ pricing
    def clearance_cost(self, samples: np.ndarray) -> float:
        """The clearance term along dense samples (N, >=2) of a motion."""
        if not self.costs.prices_clearance or len(samples) < 2:
            return 0.0
        step = np.hypot(np.diff(samples[:, 0]), np.diff(samples[:, 1]))
        return self.costs.clearance(self.context.proximity_at(samples[1:, 0], samples[1:, 1]), step)

    def curve_cost(self, path, start, before: MotionEnd | None = None, limit: float = math.inf,
                   sparse_first: bool = True):
        """(cost, dense samples) of ``path`` driven from ``start``, or None when it collides.

        A curve whose cost before clearance already exceeds ``limit`` is refused before
        it is sampled; ``sparse_first`` checks a coarse sampling before the dense one
        (worth it where most curves collide, as goal curves do; shortcuts mostly pass).
        """
        cost = self.costs.curve(path, before)
        if cost > limit:
            return None
        checker = self.checker
        if sparse_first:
            # most goal curves that fail do so early and widely: a pass at four times the step first
            sparse = path.sample(start, 4.0 * checker.sample_step_m)
            if not checker.all_clear(sparse[1:, 0], sparse[1:, 1], sparse[1:, 2]):
                return None
        samples = path.sample(start, checker.sample_step_m)
        if not checker.all_clear(samples[1:, 0], samples[1:, 1], samples[1:, 2]):
            return None
        return cost + self.clearance_cost(samples), samples

    # ------------------------------------------------------------------ to the goal
    def from_pose(self, x_m: float, y_m: float, heading_rad: float, before: MotionEnd | None = None,
                  more_within: float = math.inf):
        """The cheapest collision-free piece from the pose to the goal: (piece, cost), or None.

        The cheapest curve is always checked; the next ones only while they cost at most
        ``more_within`` (the search passes what would still end it at once).
        """
        return self.between((x_m, y_m, heading_rad), self.goal, before, more_within=more_within)

    def between(self, start, end, before: MotionEnd | None = None, limit: float = math.inf, *,
                forward_only: bool = False, more_within: float = math.inf, sparse_first: bool = True):
        """The cheapest collision-free piece from ``start`` to ``end`` within ``limit``: (piece, cost), or None.

        Checks at most ``candidates`` curves: the cheapest, then the shortest word (when it
        is not among the cheapest), then the next cheapest; the second and later only
        while they cost at most ``more_within`` (turn-in-place bases: the
        rotate-drive-rotate moves). Poses are finite floats (the planner checked them).
        """
        reverse = self.reverse and not forward_only
        if self.vehicle.turns_in_place:
            return self._spin_drive_spin(start, end, reverse, limit)
        radius = self.vehicle.min_turn_radius_m
        price = self._pricers.get(before)
        if price is None:
            price = self._pricers[before] = self.costs.word_pricer(radius, before)
        cheapest = curves.cheapest_words(
            start, end, radius, price, self.candidates, reverse=reverse, checked=False, with_shortest=True
        )
        for rank, (cost, word) in enumerate(cheapest):
            if cost > limit or (rank and cost > more_within):
                return None
            path = word.path()
            found = self.curve_cost(path, start, before, limit, sparse_first)
            if found is not None and found[0] <= limit:
                return ("curve", path), found[0]
        return None

    def _spin_drive_spin(self, start, end, reverse: bool, limit: float):
        """Rotate on the spot, drive straight to ``end``, rotate to its heading; forward or backing."""
        (x, y, h), (ex, ey, eh) = start, end
        dist = math.hypot(ex - x, ey - y)
        toward = math.atan2(ey - y, ex - x) if dist > 1e-9 else h
        options = []
        for gear in ((1, -1) if reverse and dist > 1e-9 else (1,)):
            facing = toward if gear > 0 else wrap_angle(toward + math.pi)
            turns = abs(wrap_angle(facing - h)) + abs(wrap_angle(eh - facing))
            base = self.costs.rotation(turns) + self.costs.motion(dist, gear, 0.0)
            options.append((base, gear, facing))
        for base, gear, facing in sorted(options):
            if base > limit:
                break
            pieces = self._spin_pieces((x, y, h), (ex, ey, eh), dist, gear, facing)
            dense = np.vstack([p[2] for p in pieces])
            if not self.checker.all_clear(dense[:, 0], dense[:, 1], dense[:, 2]):
                continue
            cost = base + self.clearance_cost(np.vstack(([x, y, h], dense)))
            if cost <= limit:
                return ("turn_in_place", pieces), cost
        return None

    def _spin_pieces(self, start, end, dist: float, gear: int, facing: float):
        (x, y, h), (ex, ey, eh) = start, end
        step = self.checker.sample_step_m
        reach = max(self.vehicle.bounding_radius_m, 1e-6)
        pieces = []

        def rotate(px, py, from_h, to_h):
            turn = wrap_angle(to_h - from_h)
            n = max(1, int(math.ceil(abs(turn) * reach / step)))
            hs = from_h + turn * np.arange(1, n + 1) / n
            pieces.append(("rotate", turn, np.column_stack((np.full(n, px), np.full(n, py), hs))))

        rotate(x, y, h, facing)
        if dist > 1e-9:
            n = max(1, int(math.ceil(dist / step)))
            pieces.append(("S", gear * dist, arc_poses(x, y, facing, gear * dist, 0.0, np.arange(1, n + 1) / n)))
        rotate(ex, ey, facing, eh)
        return pieces
