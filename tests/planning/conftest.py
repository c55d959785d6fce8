"""Shared helpers for the planning tests: small grids and an independent path verifier.

The verifier checks a path JSON document against the outside contract (CONTRACT.md,
"Path JSON") with shapely geometry only, never with the planner's own collision code.
# source: shapely (GEOS) geometry predicates (STRtree.query with "intersects" / "dwithin")
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
import shapely

from veer.maps import OCCUPIED, OccupancyGrid

CELL_M = 0.1
GOAL_TOLERANCE_M = 0.2  # contract: last pose within 0.2 m and 5 degrees of the goal
GOAL_TOLERANCE_DEG = 5.0
MAX_POSE_GAP_M = 0.25  # contract: consecutive poses at most 0.25 m apart
CURVATURE_SLACK = 0.01  # relative: a chord of 0.25 m on a 3.46 m arc over-reads by 2e-4
DENSE_STEP_M = 0.01  # rectangle sweep: densify to 1 cm and half a degree
DENSE_TURN_RAD = math.radians(0.5)


def wrap(angle):
    """Angle wrapped to [-pi, pi)."""
    return (np.asarray(angle) + math.pi) % (2.0 * math.pi) - math.pi


def open_grid(width_m: float = 20.0, height_m: float = 20.0, cell_m: float = CELL_M) -> OccupancyGrid:
    """An all-free grid with its lower-left corner at the world origin."""
    return OccupancyGrid(np.zeros((round(height_m / cell_m), round(width_m / cell_m)), np.uint8), cell_m, (0.0, 0.0))


def with_boxes(grid: OccupancyGrid, boxes_m) -> OccupancyGrid:
    """``grid`` with every cell whose centre lies in one of the world boxes (x0, y0, x1, y1) occupied."""
    classes = np.array(grid.classes)
    cs = grid.cell_size_m
    ox, oy = grid.origin_m
    xs = ox + (np.arange(grid.cols) + 0.5) * cs
    ys = oy + (grid.rows - np.arange(grid.rows) - 0.5) * cs
    for x0, y0, x1, y1 in boxes_m:
        rows = (ys >= y0) & (ys <= y1)
        cols = (xs >= x0) & (xs <= x1)
        classes[np.ix_(rows, cols)] = OCCUPIED
    return grid.with_classes(classes)


class Obstacles:
    """The blocked squares of a grid plus the outside of the map, as shapely boxes in an STRtree."""

    def __init__(self, grid: OccupancyGrid):
        cs = grid.cell_size_m
        ox, oy = grid.origin_m
        blocked = np.asarray(grid.blocked, dtype=bool)
        boxes = []
        # one box per horizontal run of blocked cells (same union, far fewer boxes)
        padded = np.zeros((grid.rows, grid.cols + 2), dtype=np.int8)
        padded[:, 1:-1] = blocked
        edges = np.diff(padded, axis=1)
        run_rows, run_starts = np.nonzero(edges == 1)
        _, run_ends = np.nonzero(edges == -1)
        y0 = oy + (grid.rows - 1 - run_rows) * cs
        boxes.extend(shapely.box(ox + run_starts * cs, y0, ox + run_ends * cs, y0 + cs).tolist())
        # the outside of the map counts as blocked (contract, "Map image")
        w, h, far = grid.width_m, grid.height_m, 1000.0
        boxes += [
            shapely.box(ox - far, oy - far, ox, oy + h + far),
            shapely.box(ox + w, oy - far, ox + w + far, oy + h + far),
            shapely.box(ox - far, oy - far, ox + w + far, oy),
            shapely.box(ox - far, oy + h, ox + w + far, oy + h + far),
        ]
        self.geoms = np.array(boxes, dtype=object)
        self.tree = shapely.STRtree(self.geoms)
        self.union = shapely.union_all(self.geoms)

    def hits(self, geoms, distance_m: float | None = None) -> np.ndarray:
        """Indices of ``geoms`` that intersect an obstacle (or come within ``distance_m`` of one)."""
        geoms = np.asarray(geoms, dtype=object)
        if distance_m is None:
            pairs = self.tree.query(geoms, predicate="intersects")
        else:
            pairs = self.tree.query(geoms, predicate="dwithin", distance=distance_m)
        return np.unique(pairs[0])

    def distance_m(self, geoms) -> np.ndarray:
        """Exact distance from each geometry to the nearest obstacle (0 when they overlap)."""
        return shapely.distance(np.asarray(geoms, dtype=object), self.union)


def rectangle_corners(vehicle, x_m, y_m, heading_rad) -> np.ndarray:
    """Corners (N, 4, 2) of the rectangle footprint at poses, from the contract's vehicle fields."""
    # contract section 2: rear_overhang_m is rear axle to back bumper; without it the
    # rectangle is taken centred on the wheelbase (the project's documented default)
    overhang = vehicle.rear_overhang_m
    if overhang is None:
        overhang = max(0.0, (vehicle.length_m - vehicle.wheelbase_m) / 2.0)
    rear, front, half = -overhang, vehicle.length_m - overhang, vehicle.width_m / 2.0
    local = np.array([[rear, -half], [front, -half], [front, half], [rear, half]])
    x_m, y_m, heading_rad = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (x_m, y_m, heading_rad))
    c, s = np.cos(heading_rad)[:, None], np.sin(heading_rad)[:, None]
    wx = x_m[:, None] + c * local[:, 0] - s * local[:, 1]
    wy = y_m[:, None] + s * local[:, 0] + c * local[:, 1]
    return np.stack((wx, wy), axis=2)


def rectangle_polygons(vehicle, x_m, y_m, heading_rad) -> np.ndarray:
    return shapely.polygons(rectangle_corners(vehicle, x_m, y_m, heading_rad))


def densify(poses: np.ndarray, step_m: float = DENSE_STEP_M, turn_rad: float = DENSE_TURN_RAD):
    """Linear interpolation (position and wrapped heading) between consecutive poses.

    Returns the dense poses (M, 3) and, for each, the index of the original pose it leads to.
    """
    out, owner = [poses[:1, :3]], [np.zeros(1, dtype=int)]
    for i in range(1, len(poses)):
        a, b = poses[i - 1, :3], poses[i, :3]
        dh = float(wrap(b[2] - a[2]))
        n = max(1, int(math.ceil(max(math.hypot(b[0] - a[0], b[1] - a[1]) / step_m, abs(dh) / turn_rad))))
        t = np.arange(1, n + 1) / n
        out.append(np.column_stack((a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1]), a[2] + t * dh)))
        owner.append(np.full(n, i))
    return np.vstack(out), np.concatenate(owner)


def swept_footprints(vehicle, poses: np.ndarray):
    """Geometries covering the footprint swept from each pose to the next, and the pose each leads to.

    Disc: the segment between the two centres (the disc sweeps a stadium around it, so it
    is clear iff the segment keeps ``radius_m`` from every obstacle). Rectangle: the convex
    hull of the two footprints at each pair of poses densified to 1 cm and 0.5 degrees.
    """
    poses = np.asarray(poses, dtype=float)
    if vehicle.length_m is None:
        if len(poses) == 1:
            return shapely.points(poses[:, :2]), np.zeros(1, dtype=int)
        seg = np.stack((poses[:-1, :2], poses[1:, :2]), axis=1)
        lines = shapely.linestrings(seg)
        still = np.hypot(*(poses[1:, :2] - poses[:-1, :2]).T) < 1e-12
        lines[still] = shapely.points(poses[1:, :2][still])
        return lines, np.arange(1, len(poses))
    dense, owner = densify(poses)
    corners = rectangle_corners(vehicle, dense[:, 0], dense[:, 1], dense[:, 2])
    if len(dense) == 1:
        return shapely.polygons(corners), owner
    pairs = np.concatenate((corners[:-1], corners[1:]), axis=1)  # (M-1, 8, 2)
    hulls = shapely.convex_hull(shapely.multipoints(pairs))
    return hulls, owner[1:]


def first_exact_collision(obstacles: Obstacles, vehicle, poses: np.ndarray, extra_m: float = 0.0) -> int | None:
    """Index of the first pose whose footprint, or the sweep leading to it, meets an obstacle.

    ``extra_m`` grows the footprint (a lower bound for conservative checkers).
    """
    poses = np.asarray(poses, dtype=float)
    first_hit = None
    # the first pose itself
    if vehicle.length_m is None:
        start_geom = shapely.points(poses[:1, :2])
        reach = vehicle.radius_m + extra_m
        if obstacles.hits(start_geom, reach).size:
            return 0
    else:
        start_geom = rectangle_polygons(vehicle, poses[:1, 0], poses[:1, 1], poses[:1, 2])
        hit = obstacles.hits(start_geom, extra_m) if extra_m else obstacles.hits(start_geom)
        if hit.size:
            return 0
    if len(poses) < 2:
        return None
    geoms, owner = swept_footprints(vehicle, poses)
    if vehicle.length_m is None:
        hit = obstacles.hits(geoms, vehicle.radius_m + extra_m)
    else:
        hit = obstacles.hits(geoms, extra_m) if extra_m else obstacles.hits(geoms)
    if hit.size:
        first_hit = int(owner[hit].min())
    return first_hit


def gear_flips(steps_m: np.ndarray, gears: np.ndarray) -> int:
    """Gear changes: flips between consecutive steps that move (a turn on the spot has no gear)."""
    moving = gears[steps_m > 1e-9]
    return int(np.count_nonzero(moving[1:] != moving[:-1]))


def path_problems(grid: OccupancyGrid, vehicle, document: dict, start, goal, obstacles: Obstacles | None = None) -> list[str]:
    """Every way ``document`` breaks the contract's path rules; an empty list for a valid path."""
    problems: list[str] = []
    if document.get("status") != "found":
        return [f"status is {document.get('status')!r}, not 'found'"]
    poses = np.array(document["poses"], dtype=float)
    if poses.ndim != 2 or poses.shape[1] != 4 or len(poses) == 0:
        return [f"poses must be a non-empty list of [x, y, heading, gear], got shape {poses.shape}"]
    if not np.isfinite(poses).all():
        problems.append("a pose is not finite")
    sx, sy, sh = start
    gx, gy, gh = goal
    if math.hypot(poses[0, 0] - sx, poses[0, 1] - sy) > 1e-6 or abs(wrap(poses[0, 2] - sh)) > 1e-6:
        problems.append(f"first pose {poses[0, :3].tolist()} is not the start {list(start)}")
    end_gap_m = math.hypot(poses[-1, 0] - gx, poses[-1, 1] - gy)
    end_turn_deg = math.degrees(abs(float(wrap(poses[-1, 2] - gh))))
    if end_gap_m > GOAL_TOLERANCE_M + 1e-9 or end_turn_deg > GOAL_TOLERANCE_DEG + 1e-9:
        problems.append(f"last pose is {end_gap_m:.3f} m and {end_turn_deg:.2f} deg from the goal")
    gears = poses[:, 3]
    if not np.isin(gears, (1.0, -1.0)).all():
        problems.append(f"gears must be +1 or -1, got {sorted(set(gears.tolist()))}")
    delta = np.diff(poses[:, :2], axis=0)
    steps_m = np.hypot(delta[:, 0], delta[:, 1])
    if steps_m.size and steps_m.max() > MAX_POSE_GAP_M + 1e-9:
        i = int(np.argmax(steps_m))
        problems.append(f"poses {i} and {i + 1} are {steps_m[i]:.4f} m apart (> {MAX_POSE_GAP_M} m)")
    turn = wrap(np.diff(poses[:, 2]))
    # gear = direction of travel: sign of (mean heading) . (step vector)
    mid = poses[:-1, 2] + turn / 2.0
    along = np.cos(mid) * delta[:, 0] + np.sin(mid) * delta[:, 1]
    moving = steps_m > 1e-6
    wrong = np.flatnonzero(moving & (np.sign(along) != gears[1:]))
    if wrong.size:
        i = int(wrong[0]) + 1
        problems.append(f"pose {i} has gear {gears[i]:+.0f} but the step to it runs {'back' if along[i - 1] < 0 else 'forward'}")
    if len(poses) > 1 and gears[0] != gears[1]:
        problems.append("the first pose does not carry the gear of the first step")
    # metrics of the document recomputed from the poses
    length_m = float(steps_m.sum())
    reverse_m = float(steps_m[gears[1:] < 0].sum())
    changes = gear_flips(steps_m, gears[1:])
    if abs(document["length_m"] - length_m) > 1e-3:
        problems.append(f"length_m {document['length_m']} but the poses add up to {length_m:.4f}")
    if abs(document["reverse_m"] - reverse_m) > 1e-3:
        problems.append(f"reverse_m {document['reverse_m']} but the reverse steps add up to {reverse_m:.4f}")
    if document["gear_changes"] != changes:
        problems.append(f"gear_changes {document['gear_changes']} but the gears flip {changes} times")
    # curvature: heading change per metre between consecutive poses
    kappa_max = vehicle.max_curvature_per_m
    if math.isfinite(kappa_max):
        spot = np.flatnonzero(~moving & (np.abs(turn) > 1e-6))
        if spot.size:
            problems.append(f"pose {int(spot[0]) + 1} turns on the spot, but the vehicle cannot")
        with np.errstate(divide="ignore", invalid="ignore"):
            kappa = np.where(moving, np.abs(turn) / steps_m, 0.0)
        if kappa.size and kappa.max() > kappa_max * (1.0 + CURVATURE_SLACK):
            i = int(np.argmax(kappa))
            problems.append(f"curvature {kappa[i]:.4f} /m reaching pose {i + 1} exceeds 1/min turn radius {kappa_max:.4f}")
    # collisions of every pose and of the sweep between poses
    obstacles = obstacles or Obstacles(grid)
    hit = first_exact_collision(obstacles, vehicle, poses)
    if hit is not None:
        problems.append(f"the footprint collides at or just before pose {hit} {poses[hit, :3].round(3).tolist()}")
    return problems


def turns_on_spot(document: dict, min_turn_rad: float = math.radians(20.0)) -> bool:
    """Whether the path holds a rotation of at least ``min_turn_rad`` without moving."""
    poses = np.array(document["poses"], dtype=float)
    step = np.hypot(*np.diff(poses[:, :2], axis=0).T)
    turn = np.abs(wrap(np.diff(poses[:, 2])))
    total, best = 0.0, 0.0
    for moved, dh in zip(step > 1e-6, turn):
        total = 0.0 if moved else total + dh
        best = max(best, total)
    return best >= min_turn_rad


@pytest.fixture(scope="session", autouse=True)
def fresh_turning_tables(tmp_path_factory):
    """Build the turning tables from the code under test, never from an older disk cache."""
    from veer.planning import heuristics

    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("VEER_CACHE_DIR", str(tmp_path_factory.mktemp("veer_cache")))
        patch.setattr(heuristics, "_tables", {})
        yield


@pytest.fixture(scope="session")
def geo():
    """The helpers above, for test modules (conftest is not importable by name here)."""
    return SimpleNamespace(
        wrap=wrap,
        open_grid=open_grid,
        with_boxes=with_boxes,
        Obstacles=Obstacles,
        rectangle_corners=rectangle_corners,
        rectangle_polygons=rectangle_polygons,
        densify=densify,
        swept_footprints=swept_footprints,
        first_exact_collision=first_exact_collision,
        gear_flips=gear_flips,
        path_problems=path_problems,
        turns_on_spot=turns_on_spot,
    )
