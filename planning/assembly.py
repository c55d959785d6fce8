"""From a search result to the output path: shortcuts, resampling, gear and curvature.

A plain function of a :class:`~veer.planning.kernel.SearchResult`. The found chain of
nodes (plus the final goal curve) becomes pieces between waypoints; runs of pieces are
replaced by single analytic pieces (the cheapest collision-free Reeds-Shepp / Dubins
curve, or rotate-drive-rotate for bases that turn in place) where these cost no more
under the one cost model, junctions with the neighbouring pieces included; then every
piece is sampled at most ``output_step_m`` apart with the gear and curvature of the
motion that reaches each pose.
"""

from __future__ import annotations

import math
import time

import numpy as np

from veer.planning.angles import wrap_angle
from veer.planning.costs import CostModel
from veer.planning.kernel import SearchResult
from veer.planning.path import PlannedPath
from veer.planning.primitives import arc_poses
from veer.planning.problem import HeadingTables, SearchProblem

__all__ = ["assemble_path"]

_ROTATION_STEP_RAD = math.radians(5.0)  # output spacing of rotations on the spot


def assemble_path(problem: SearchProblem, tables: HeadingTables, result: SearchResult, start) -> PlannedPath:
    """The output path of a successful search (``result.finish`` is set); stats are the caller's."""
    settings = problem.settings
    waypoints, pieces = _pieces(problem, tables, result, start)
    smooth_s = None
    if settings.smooth and len(pieces) > 1:
        t0 = time.perf_counter()
        waypoints, pieces = _shortcut(problem, waypoints, pieces)
        smooth_s = round(time.perf_counter() - t0, 6)
    path = _sample(problem, waypoints, pieces, start)
    if smooth_s is not None:
        path.stats["smooth_s"] = smooth_s
    return path


def _pieces(problem: SearchProblem, tables: HeadingTables, result: SearchResult, start):
    """The found path as pieces between waypoints, with the cost to reach each waypoint.

    Returns (waypoints, pieces): waypoints are (x, y, heading, g); piece i joins waypoint
    i to i + 1 and is ("prim", Primitive), ("curve", CurvePath) or ("turn_in_place",
    [(part, amount, dense poses), ...]).
    """
    sh, bin_rad = tables.start_heading_rad, problem.settings.heading_bin_rad
    chain = result.chain()
    waypoints = [(n.x_m, n.y_m, sh + n.heading_index * bin_rad, n.cost_m) for n in chain]
    waypoints[0] = (*start, 0.0)
    primitives = tables.primitives.primitives
    pieces = [("prim", primitives[n.primitive]) for n in chain[1:]]
    _, piece, piece_cost = result.finish
    if piece is not None:
        pieces.append(piece)
        waypoints.append((*problem.goal, waypoints[-1][3] + piece_cost))
    return waypoints, pieces


def _ends(piece, costs: CostModel, max_curvature: float):
    """(start, end) MotionEnd of a piece, for the junction costs around it."""
    kind, obj = piece
    if kind == "prim":
        if obj.rotation_rad or not obj.length_m:
            return (0, 0.0), (0, 0.0)
        u = 0.0 if math.isinf(max_curvature) else obj.curvature_per_m / max_curvature
        return (obj.gear, u), (obj.gear, u)
    if kind == "curve":
        return costs.curve_ends(obj)
    return (0, 0.0), (0, 0.0)  # rotate, drive, rotate: begins and ends turning on the spot


def _shortcut(problem: SearchProblem, waypoints, pieces):
    """Replace runs of pieces by one analytic piece where that is clear and no dearer.

    Greedy from the start: from waypoint i try the pieces to i + 2, i + 4, i + 8, ... and
    keep the farthest that is collision-free and costs no more than the run it replaces,
    the junctions into it and out of it included. Curves keep the curvature limit, so
    the path stays drivable; lattice zig-zags straighten out.
    """
    costs, goal_curves = problem.costs, problem.goal_curves
    max_curvature = problem.vehicle.max_curvature_per_m
    ends = [_ends(piece, costs, max_curvature) for piece in pieces]

    def replacement(i, j, before):
        """(piece, its ends) that may stand for pieces[i:j], or None."""
        after = ends[j][0] if j < len(pieces) else None
        budget = waypoints[j][3] - waypoints[i][3] + costs.junction(ends[j - 1][1], after) + 1e-9
        forward_only = all(
            (p[0] == "prim" and p[1].gear > 0) or (p[0] == "curve" and p[1].reverse_length_m == 0.0)
            for p in pieces[i:j]
        ) and not problem.vehicle.turns_in_place
        found = goal_curves.between(waypoints[i][:3], waypoints[j][:3], before, budget, forward_only=forward_only,
                                    more_within=-1.0, sparse_first=False)  # the cheapest curve only
        if found is None:
            return None
        piece, cost = found
        piece_ends = _ends(piece, costs, max_curvature)
        if cost + costs.junction(piece_ends[1], after) > budget:
            return None
        return piece, piece_ends

    out_waypoints, out_pieces, out_ends = [waypoints[0]], [], []
    i, last = 0, len(waypoints) - 1
    while i < last:
        before = out_ends[-1][1] if out_ends else None
        best = None
        span = 2
        while i + 1 < last:
            j = min(i + span, last)
            found = replacement(i, j, before)
            if found is None:
                break
            best = (j, found)
            if j == last:
                break
            span *= 2
        if best is None:
            out_pieces.append(pieces[i])
            out_ends.append(ends[i])
            out_waypoints.append(waypoints[i + 1])
            i += 1
        else:
            j, (piece, piece_ends) = best
            out_pieces.append(piece)
            out_ends.append(piece_ends)
            out_waypoints.append(waypoints[j])
            i = j
    return out_waypoints, out_pieces


def _sample(problem: SearchProblem, waypoints, pieces, start) -> PlannedPath:
    """Poses at most ``output_step_m`` apart, gear and curvature per pose."""
    settings = problem.settings
    out_step = settings.output_step_m
    poses = [np.array([[start[0], start[1], start[2], 0.0]])]
    curvature = [np.array([0.0])]
    for (x, y, h, _), (kind, obj), end in zip(waypoints[:-1], pieces, waypoints[1:]):
        if kind == "prim" and obj.rotation_rad:
            seg, kappa = _rotation_poses(x, y, h, obj.rotation_rad)
        elif kind == "prim":
            n = max(1, int(math.ceil(abs(obj.length_m) / out_step - 1e-9)))
            seg = arc_poses(x, y, h, obj.length_m, obj.curvature_per_m, np.arange(1, n + 1) / n)
            seg = np.column_stack((seg, np.full(n, float(obj.gear))))
            # signed geometric curvature: heading change per metre travelled
            kappa = np.full(n, obj.turn_bins * settings.heading_bin_rad / abs(obj.length_m))
            # snap the end exactly onto the node (removes round-off between tables and arcs)
            seg[-1, 0], seg[-1, 1] = end[0], end[1]
        elif kind == "curve":
            seg = obj.sample((x, y, h), out_step)[1:]
            kappa = _curve_curvatures(obj, seg, (x, y, h))
        else:  # rotate, drive straight, rotate
            segs, kappas = [], []
            for part, amount, dense in obj:
                if part == "rotate":
                    if not amount:
                        continue
                    seg_part, kappa_part = _rotation_poses(dense[0, 0], dense[0, 1], dense[-1, 2] - amount, amount)
                else:
                    n = max(1, int(math.ceil(abs(amount) / out_step)))
                    sel = dense[np.linspace(0, len(dense) - 1, n + 1).astype(int)[1:]]
                    seg_part = np.column_stack((sel, np.full(len(sel), 1.0 if amount > 0 else -1.0)))
                    kappa_part = np.zeros(len(sel))
                segs.append(seg_part)
                kappas.append(kappa_part)
            if not segs:
                continue
            seg, kappa = np.vstack(segs), np.concatenate(kappas)
        poses.append(seg)
        curvature.append(kappa)
    all_poses = np.vstack(poses)
    all_poses[:, 2] = wrap_angle(all_poses[:, 2])
    all_kappa = np.concatenate(curvature)
    # drop zero-length repeats (a goal curve from the exact goal, cusp duplicates)
    keep = np.ones(len(all_poses), dtype=bool)
    step = np.hypot(np.diff(all_poses[:, 0]), np.diff(all_poses[:, 1]))
    turn = np.abs(wrap_angle(np.diff(all_poses[:, 2])))
    keep[1:] = (step > 1e-9) | (turn > 1e-9)
    all_poses, all_kappa = all_poses[keep], all_kappa[keep]
    if len(all_poses) > 1:
        all_poses[0, 3] = all_poses[1, 3]
        all_kappa[0] = all_kappa[1]
    else:
        all_poses[0, 3] = 1.0
    return PlannedPath.from_poses(all_poses, all_kappa, {})


def _rotation_poses(x: float, y: float, h: float, turn_rad: float):
    """A rotation on the spot at (x, y) from heading h: poses every 5 degrees, infinite curvature."""
    n = max(1, int(math.ceil(abs(turn_rad) / _ROTATION_STEP_RAD)))
    hs = h + turn_rad * np.arange(1, n + 1) / n
    seg = np.column_stack((np.full(n, x), np.full(n, y), hs, np.ones(n)))
    return seg, np.full(n, math.copysign(math.inf, turn_rad))


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
