"""From a finished search to the output path: analytic shortcuts, resampling, gear and curvature.

A mixin of the search (``veer.planning.search``), kept apart so that the search loop and
the path output each read on their own. The found chain of nodes (plus the final
analytic shot) becomes pieces between waypoints; runs of pieces are replaced by single
Reeds-Shepp / Dubins curves where these are collision-free and no dearer under the
search's own cost model (or, for turn-in-place bases, by rotate-straight-rotate moves);
then every piece is sampled at most ``output_step_m`` apart with the gear and curvature
of the motion that reaches each pose.
"""

from __future__ import annotations

import math
import time

import numpy as np

from veer.planning import curves
from veer.planning.path import PlannedPath
from veer.planning.primitives import arc_poses

__all__: list[str] = []

_TWO_PI = 2.0 * math.pi


def _wrap(angle: float) -> float:
    return (angle + math.pi) % _TWO_PI - math.pi


class _PathAssembly:
    """Curve costing, shortcuts and output sampling for :class:`veer.planning.search._Search`.

    Expects the attributes ``settings``, ``context``, ``vehicle``, ``start``, ``goal`` and
    ``stats`` of the search it is mixed into.
    """

    def _spin_drive_spin(self, start, end):
        """Rotate on the spot to face ``end``, drive straight to it, rotate to its heading.

        For turn-in-place bases: ([(part, amount, dense poses), ...], cost) or None when it
        collides. Rotations cost the distance the footprint's farthest point travels.
        """
        checker = self.context.checker
        (x, y, h), (ex, ey, eh) = start, end
        dist = math.hypot(ex - x, ey - y)
        facing = math.atan2(ey - y, ex - x) if dist > 1e-9 else h
        reach = self.vehicle.bounding_radius_m
        pieces = []

        def rotate(px, py, from_h, to_h):
            turn = _wrap(to_h - from_h)
            n = max(1, int(math.ceil(abs(turn) * max(reach, 1e-6) / checker.sample_step_m)))
            hs = from_h + turn * np.arange(1, n + 1) / n
            pieces.append(("rotate", turn, np.column_stack((np.full(n, px), np.full(n, py), hs))))

        rotate(x, y, h, facing)
        if dist > 1e-9:
            n = max(1, int(math.ceil(dist / checker.sample_step_m)))
            pieces.append(("S", dist, arc_poses(x, y, facing, dist, 0.0, np.arange(1, n + 1) / n)))
        rotate(ex, ey, facing, eh)
        dense = np.vstack([p[2] for p in pieces])
        if not checker.poses_clear(dense[:, 0], dense[:, 1], dense[:, 2]).all():
            return None
        cost = dist + sum(abs(p[1]) * reach for p in pieces if p[0] == "rotate")
        return pieces, cost + self._clearance_cost(dense)

    def _clearance_cost(self, samples: np.ndarray) -> float:
        """The search's clearance cost along dense samples (N, >=2)."""
        context = self.context
        if self.settings.clearance_cost_factor <= 0 or len(samples) < 2:
            return 0.0
        grid = context.grid
        top = grid.origin_m[1] + grid.rows * grid.cell_size_m
        inv_lat = 1.0 / context.lattice_cell_m
        rows_c, cols_c = context.open_coarse.shape
        lr = np.clip(((top - samples[:, 1]) * inv_lat).astype(np.intp), 0, rows_c - 1)
        lc = np.clip(((samples[:, 0] - grid.origin_m[0]) * inv_lat).astype(np.intp), 0, cols_c - 1)
        step = np.hypot(np.diff(samples[:, 0]), np.diff(samples[:, 1]))
        return float((context.proximity_coarse[(lr * cols_c + lc)[1:]] * step).sum())

    def _curve_base_cost(self, path) -> float:
        """Cost of a curve before clearance: length with the reverse factor, steering, gears."""
        settings = self.settings
        cost = settings.gear_change_cost_m * path.gear_changes
        for kind, length in path.segments:
            cost += abs(length) * (settings.reverse_cost_factor if length < 0 else 1.0) * (
                1.0 + (settings.steer_cost_factor if kind != "S" else 0.0)
            )
        return cost

    def _curve_cost(self, path, start, limit: float = math.inf) -> tuple[float, np.ndarray] | None:
        """(cost, dense samples) of an analytic curve from ``start``, or None if it collides.

        The cost model of the search: length with the reverse factor, steering on arcs,
        gear changes, and the clearance cost read along the samples. A curve whose cost
        before clearance already exceeds ``limit`` is refused before it is sampled.
        """
        checker = self.context.checker
        cost = self._curve_base_cost(path)
        if cost > limit:
            return None
        samples = path.sample(start, checker.sample_step_m)
        # most curves that fail do so early and widely: every fourth sample first
        sparse = samples[1::4]
        if not checker.poses_clear(sparse[:, 0], sparse[:, 1], sparse[:, 2]).all():
            return None
        if not checker.poses_clear(samples[1:, 0], samples[1:, 1], samples[1:, 2]).all():
            return None
        return cost + self._clearance_cost(samples), samples

    def _pieces(self, finish, nodes, prims):
        """The found path as pieces between waypoints, with the cost to reach each waypoint.

        Returns (waypoints, pieces): waypoints are (x, y, heading, g); piece i joins
        waypoint i to i + 1 and is ("prim", Primitive), ("curve", CurvePath) or
        ("turn_in_place", shot pieces).
        """
        sh, bin_rad = self.start[2], self.settings.heading_bin_rad
        i, shot, shot_cost = finish
        chain = []
        while i >= 0:
            chain.append(i)
            i = nodes[i][4]
        chain.reverse()
        waypoints = [(nodes[n][0], nodes[n][1], sh + nodes[n][2] * bin_rad, nodes[n][3]) for n in chain]
        waypoints[0] = (*self.start, 0.0)
        pieces = [("prim", prims.primitives[nodes[b][5]]) for b in chain[1:]]
        if shot is not None:
            pieces.append(("turn_in_place" if isinstance(shot, list) else "curve", shot))
            waypoints.append((*self.goal, waypoints[-1][3] + shot_cost))
        return waypoints, pieces

    def _shortcut(self, waypoints, pieces):
        """Replace runs of pieces by one analytic curve where that is clear and no dearer.

        Greedy from the start: from waypoint i try the curves to i + 2, i + 4, i + 8, ...
        and keep the farthest that is collision-free, costs no more than the run it
        replaces (same cost model), and keeps the gears at both ends. Curves keep the
        curvature limit, so the path stays drivable; lattice zig-zags straighten out.
        """
        settings = self.settings
        radius = self.vehicle.min_turn_radius_m
        spinning = self.vehicle.turns_in_place
        curve_fn = curves.reeds_shepp_shortest if settings.allow_reverse else curves.dubins_shortest

        def gears(piece):
            kind, obj = piece
            if kind == "prim":
                return [obj.gear] if obj.length_m else []
            if kind == "curve":
                return [1 if length > 0 else -1 for _, length in obj.segments if abs(length) > 1e-9]
            return []

        def changes(sequence):
            return sum(1 for a, b in zip(sequence, sequence[1:]) if a != b)

        def replacement(i, j):
            """The piece that may stand for pieces[i:j], or None."""
            original = [g for piece in pieces[i:j] for g in gears(piece)]
            budget = waypoints[j][3] - waypoints[i][3] + 1e-9
            if spinning:
                # rotate, drive straight, rotate: only where the run drove forward
                if any(g < 0 for g in original):
                    return None
                found = self._spin_drive_spin(waypoints[i][:3], waypoints[j][:3])
                return None if found is None or found[1] > budget else ("turn_in_place", found[0])
            if any(kind == "turn_in_place" for kind, _ in pieces[i:j]) or not original:
                return None
            if all(g > 0 for g in original):
                # a forward run can only become a forward curve: Dubins, much cheaper
                curve = curves.dubins_shortest(waypoints[i][:3], waypoints[j][:3], radius)
            else:
                curve = curve_fn(waypoints[i][:3], waypoints[j][:3], radius)
            new_gears = gears(("curve", curve))
            if not (new_gears and new_gears[0] == original[0] and new_gears[-1] == original[-1]
                    and changes(new_gears) <= changes(original)):
                return None
            found = self._curve_cost(curve, waypoints[i][:3], limit=budget)
            return None if found is None or found[0] > budget else ("curve", curve)

        out_waypoints, out_pieces = [waypoints[0]], []
        i, last = 0, len(waypoints) - 1
        while i < last:
            best = None
            span = 2
            while i + 1 < last:
                j = min(i + span, last)
                piece = replacement(i, j)
                if piece is None:
                    break
                best = (j, piece)
                if j == last:
                    break
                span *= 2
            if best is None:
                out_pieces.append(pieces[i])
                out_waypoints.append(waypoints[i + 1])
                i += 1
            else:
                j, piece = best
                out_pieces.append(piece)
                out_waypoints.append(waypoints[j])
                i = j
        return out_waypoints, out_pieces

    def _assemble(self, finish, nodes, prims) -> PlannedPath:
        settings = self.settings
        out_step = settings.output_step_m
        waypoints, pieces = self._pieces(finish, nodes, prims)
        if settings.smooth and len(pieces) > 1:
            t_smooth = time.perf_counter()
            waypoints, pieces = self._shortcut(waypoints, pieces)
            self.stats["smooth_s"] = round(time.perf_counter() - t_smooth, 6)
        poses = [np.array([[self.start[0], self.start[1], self.start[2], 0.0]])]
        curvature = [np.array([0.0])]
        for (x, y, h, _), (kind, obj), end in zip(waypoints[:-1], pieces, waypoints[1:]):
            if kind == "prim" and obj.rotation_rad:
                n = max(1, int(math.ceil(abs(obj.rotation_rad) / math.radians(5.0))))
                hs = h + obj.rotation_rad * np.arange(1, n + 1) / n
                seg = np.column_stack((np.full(n, x), np.full(n, y), hs, np.ones(n)))
                kappa = np.full(n, math.copysign(math.inf, obj.rotation_rad))
            elif kind == "prim":
                n = max(1, int(math.ceil(abs(obj.length_m) / out_step - 1e-9)))
                seg = arc_poses(x, y, h, obj.length_m, obj.curvature_per_m, np.arange(1, n + 1) / n)
                seg = np.column_stack((seg, np.full(n, float(obj.gear))))
                # signed geometric curvature: heading change per metre travelled
                kappa = np.full(n, obj.turn_bins * settings.heading_bin_rad / abs(obj.length_m))
                # snap the end exactly onto the node (removes round-off between tables and arcs)
                seg[-1, 0], seg[-1, 1] = end[0], end[1]
            elif kind == "curve":
                samples = obj.sample((x, y, h), out_step)
                seg = samples[1:]
                kappa = _curve_curvatures(obj, seg, (x, y, h))
            else:  # turn-in-place shot: rotate, drive straight, rotate
                segs, kappas = [], []
                for part, amount, dense in obj:
                    if part == "rotate":
                        n = max(1, int(math.ceil(abs(amount) / math.radians(5.0))))
                        kappas.append(np.full(n, math.copysign(math.inf, amount) if amount else 0.0))
                    else:
                        n = max(1, int(math.ceil(amount / out_step)))
                        kappas.append(np.zeros(n))
                    sel = dense[np.linspace(0, len(dense) - 1, n + 1).astype(int)[1:]]
                    segs.append(np.column_stack((sel, np.ones(len(sel)))))
                seg, kappa = np.vstack(segs), np.concatenate(kappas)
            poses.append(seg)
            curvature.append(kappa)
        all_poses = np.vstack(poses)
        all_poses[:, 2] = (all_poses[:, 2] + math.pi) % _TWO_PI - math.pi  # headings in [-pi, pi)
        all_kappa = np.concatenate(curvature)
        # drop zero-length repeats (a shot from the exact goal, cusp duplicates)
        keep = np.ones(len(all_poses), dtype=bool)
        step = np.hypot(np.diff(all_poses[:, 0]), np.diff(all_poses[:, 1]))
        turn = np.abs((np.diff(all_poses[:, 2]) + math.pi) % _TWO_PI - math.pi)
        keep[1:] = (step > 1e-9) | (turn > 1e-9)
        all_poses, all_kappa = all_poses[keep], all_kappa[keep]
        if len(all_poses) > 1:
            all_poses[0, 3] = all_poses[1, 3]
            all_kappa[0] = all_kappa[1]
        else:
            all_poses[0, 3] = 1.0
        return PlannedPath.from_poses(all_poses, all_kappa, {})


def _curve_curvatures(path, samples: np.ndarray, start) -> np.ndarray:
    """Curvature of the analytic-curve segment that reached each sample."""
    radius = path.turn_radius_m
    bounds = np.cumsum([abs(length) for _, length in path.segments])
    # arc length of each sample along the path, from the sample spacing
    pts = np.vstack((np.asarray(start)[None, :2], samples[:, :2]))
    s = np.cumsum(np.hypot(np.diff(pts[:, 0]), np.diff(pts[:, 1])))
    seg_index = np.minimum(np.searchsorted(bounds, s - 1e-9), len(bounds) - 1)
    # heading change per metre travelled: a left arc driven in reverse turns clockwise
    sign = np.array(
        [(1.0 if kind == "L" else -1.0 if kind == "R" else 0.0) * (1.0 if length >= 0 else -1.0)
         for kind, length in path.segments]
    )
    return sign[seg_index] / radius
