"""The suite's one independent path verifier: a path against a map and a vehicle, with shapely.

Every test that gets a path from veer (planning, tools, node) checks it here, never with the
planner's own collision code. The rules are those of docs/files.md, "Path JSON": the first
pose is the start, the last within 0.2 m and 5 degrees of the goal, consecutive poses at most
0.25 m apart, every pose and every point between two consecutive poses clear for the
footprint (everything outside the map is blocked), curvature at most 1 / min turn radius,
and `length_m`, `reverse_m`, `gear_changes` as the poses add up.

How to import it: tests/conftest.py puts the tests/ folder on ``sys.path`` (the suite runs
with ``--import-mode=importlib``, which does not), so any test module may write
``import verify`` or ``from verify import path_problems``; the ``verify`` fixture of
tests/conftest.py hands over the same module.

Stable names (others import them): ``path_problems``, ``assert_valid_path``, ``Obstacles``,
``first_exact_collision``, ``swept_footprints``, ``rectangle_corners``,
``rectangle_polygons``, ``densify``, ``gear_flips``, ``turns_on_spot``, ``wrap``,
``open_grid``, ``with_boxes``, ``max_curvature_per_m`` and the constants
``GOAL_TOLERANCE_M``, ``GOAL_TOLERANCE_DEG``, ``MAX_POSE_GAP_M``.

# source: shapely (GEOS) geometry predicates (STRtree.query with "intersects" / "dwithin")
"""

from __future__ import annotations

import math

import numpy as np
import shapely

from veer.maps import OCCUPIED, OccupancyGrid

CELL_M = 0.1
GOAL_TOLERANCE_M = 0.2  # docs/files.md, "Path JSON": last pose within 0.2 m and 5 degrees of the goal
GOAL_TOLERANCE_DEG = 5.0
MAX_POSE_GAP_M = 0.25  # docs/files.md, "Path JSON": consecutive poses at most 0.25 m apart
CURVATURE_SLACK = 0.01  # relative: a chord of 0.25 m on a 3.46 m arc over-reads by 2e-4
DENSE_STEP_M = 0.01  # rectangle sweep: densify to 1 cm and half a degree
DENSE_TURN_RAD = math.radians(0.5)


def wrap(angle):
    """Angle wrapped to [-pi, pi)."""
    return (np.asarray(angle) + math.pi) % (2.0 * math.pi) - math.pi


def max_curvature_per_m(vehicle) -> float:
    """1 / min turn radius from the vehicle's own fields: tan(max steer) / wheelbase.

    # source: LaValle, Planning Algorithms, 2006, section 13.1.2.1 (kinematic car, rear-axle
    # reference: rho_min = L / tan(delta_max))
    """
    if getattr(vehicle, "turns_in_place", False):
        return math.inf
    return math.tan(math.radians(vehicle.max_steer_deg)) / vehicle.wheelbase_m


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
    """The blocked squares of a map plus the outside of the map, as shapely boxes in an STRtree.

    Built from an OccupancyGrid (``Obstacles(grid)``) or from a plain mask
    (``Obstacles.from_mask(blocked, cell_size_m, origin_m)``, row 0 at the top), so a test
    may read the map with another decoder and never use veer's.
    """

    def __init__(self, grid: OccupancyGrid | None = None, *, blocked=None, cell_size_m=None, origin_m=None):
        if grid is not None:
            blocked, cell_size_m, origin_m = grid.blocked, grid.cell_size_m, grid.origin_m
        blocked = np.asarray(blocked, dtype=bool)
        cs = float(cell_size_m)
        ox, oy = (float(v) for v in origin_m)
        rows, cols = blocked.shape
        self.cell_size_m, self.origin_m = cs, (ox, oy)
        self.width_m, self.height_m = cols * cs, rows * cs
        # one box per horizontal run of blocked cells (same union, far fewer boxes)
        padded = np.zeros((rows, cols + 2), dtype=np.int8)
        padded[:, 1:-1] = blocked
        edges = np.diff(padded, axis=1)
        run_rows, run_starts = np.nonzero(edges == 1)
        _, run_ends = np.nonzero(edges == -1)
        y0 = oy + (rows - 1 - run_rows) * cs
        boxes = shapely.box(ox + run_starts * cs, y0, ox + run_ends * cs, y0 + cs).tolist()
        # the outside of the map counts as blocked (docs/files.md, "Map image")
        w, h, far = self.width_m, self.height_m, 1000.0
        boxes += [
            shapely.box(ox - far, oy - far, ox, oy + h + far),
            shapely.box(ox + w, oy - far, ox + w + far, oy + h + far),
            shapely.box(ox - far, oy - far, ox + w + far, oy),
            shapely.box(ox - far, oy + h, ox + w + far, oy + h + far),
        ]
        self.geoms = np.array(boxes, dtype=object)
        self.tree = shapely.STRtree(self.geoms)
        self.union = shapely.union_all(self.geoms)

    @classmethod
    def from_mask(cls, blocked, cell_size_m: float, origin_m=(0.0, 0.0)) -> "Obstacles":
        """Obstacles of a boolean mask (True blocks), row 0 at the top edge of the map."""
        return cls(blocked=blocked, cell_size_m=cell_size_m, origin_m=origin_m)

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


def _overhang_m(vehicle) -> float:
    # docs/files.md, "Vehicle file": rear_overhang_m is rear axle to back bumper; without it
    # the rectangle is centred on the wheelbase (an overhang of at least 0)
    overhang = vehicle.rear_overhang_m
    if overhang is None:
        overhang = max(0.0, (vehicle.length_m - vehicle.wheelbase_m) / 2.0)
    return overhang


def rectangle_corners(vehicle, x_m, y_m, heading_rad) -> np.ndarray:
    """Corners (N, 4, 2) of the rectangle footprint at poses, from the vehicle file's fields."""
    overhang = _overhang_m(vehicle)
    rear, front, half = -overhang, vehicle.length_m - overhang, vehicle.width_m / 2.0
    local = np.array([[rear, -half], [front, -half], [front, half], [rear, half]])
    x_m, y_m, heading_rad = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (x_m, y_m, heading_rad))
    c, s = np.cos(heading_rad)[:, None], np.sin(heading_rad)[:, None]
    wx = x_m[:, None] + c * local[:, 0] - s * local[:, 1]
    wy = y_m[:, None] + s * local[:, 0] + c * local[:, 1]
    return np.stack((wx, wy), axis=2)


def rectangle_polygons(vehicle, x_m, y_m, heading_rad) -> np.ndarray:
    """The rectangle footprints at poses as shapely polygons."""
    return shapely.polygons(rectangle_corners(vehicle, x_m, y_m, heading_rad))


def _is_rectangle(vehicle) -> bool:
    return getattr(vehicle, "length_m", None) is not None


def densify(poses: np.ndarray, step_m: float = DENSE_STEP_M, turn_rad: float = DENSE_TURN_RAD):
    """Linear interpolation (position and wrapped heading) between consecutive poses.

    Returns the dense poses (M, 3) and, for each, the index of the original pose it leads to.
    """
    poses = np.asarray(poses, dtype=float)
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
    if not _is_rectangle(vehicle):
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
    rectangle = _is_rectangle(vehicle)
    reach = (extra_m or None) if rectangle else vehicle.radius_m + extra_m
    if rectangle:
        start_geom = rectangle_polygons(vehicle, poses[:1, 0], poses[:1, 1], poses[:1, 2])
    else:
        start_geom = shapely.points(poses[:1, :2])
    if obstacles.hits(start_geom, reach).size:
        return 0
    if len(poses) < 2:
        return None
    geoms, owner = swept_footprints(vehicle, poses)
    hit = obstacles.hits(geoms, reach)
    return int(owner[hit].min()) if hit.size else None


def gear_flips(steps_m: np.ndarray, gears: np.ndarray) -> int:
    """Gear changes: flips between consecutive steps that move (a turn on the spot has no gear)."""
    moving = gears[steps_m > 1e-9]
    return int(np.count_nonzero(moving[1:] != moving[:-1]))


def _as_document(path) -> dict:
    """A path JSON document from a document or from a PlannedPath."""
    if isinstance(path, dict):
        return path
    return path.to_document()


def path_problems(
    grid,
    vehicle,
    path,
    start,
    goal,
    obstacles: Obstacles | None = None,
    *,
    position_tol_m: float = 1e-6,
    heading_tol_rad: float = 1e-6,
) -> list[str]:
    """Every way ``path`` breaks the rules of docs/files.md, "Path JSON"; an empty list when valid.

    ``grid`` is an OccupancyGrid or an :class:`Obstacles` (then ``obstacles`` is not needed);
    ``path`` a path JSON document or a PlannedPath; ``start`` and ``goal`` are
    (x_m, y_m, heading_rad). A document read back from a file carries rounded numbers
    (``veer plan`` writes x, y to 0.1 mm and headings to 1e-5 rad): pass the rounding as
    ``position_tol_m`` and ``heading_tol_rad``.
    """
    document = _as_document(path)
    problems: list[str] = []
    if document.get("status") != "found":
        return [f"status is {document.get('status')!r}, not 'found'"]
    poses = np.array(document["poses"], dtype=float)
    if poses.ndim != 2 or poses.shape[1] != 4 or len(poses) == 0:
        return [f"poses must be a non-empty list of [x, y, heading, gear], got shape {poses.shape}"]
    if not np.isfinite(poses).all():
        return ["a pose is not finite"]
    sx, sy, sh = start
    gx, gy, gh = goal
    if math.hypot(poses[0, 0] - sx, poses[0, 1] - sy) > position_tol_m or abs(wrap(poses[0, 2] - sh)) > heading_tol_rad:
        problems.append(f"first pose {poses[0, :3].tolist()} is not the start {list(start)}")
    end_gap_m = math.hypot(poses[-1, 0] - gx, poses[-1, 1] - gy)
    end_turn_rad = abs(float(wrap(poses[-1, 2] - gh)))
    if end_gap_m > GOAL_TOLERANCE_M + position_tol_m or end_turn_rad > math.radians(GOAL_TOLERANCE_DEG) + heading_tol_rad:
        problems.append(f"last pose is {end_gap_m:.3f} m and {math.degrees(end_turn_rad):.2f} deg from the goal")
    gears = poses[:, 3]
    if not np.isin(gears, (1.0, -1.0)).all():
        problems.append(f"gears must be +1 or -1, got {sorted(set(gears.tolist()))}")
    delta = np.diff(poses[:, :2], axis=0)
    steps_m = np.hypot(delta[:, 0], delta[:, 1])
    if steps_m.size and steps_m.max() > MAX_POSE_GAP_M + 2 * position_tol_m:
        i = int(np.argmax(steps_m))
        problems.append(f"poses {i} and {i + 1} are {steps_m[i]:.4f} m apart (> {MAX_POSE_GAP_M} m)")
    turn = wrap(np.diff(poses[:, 2]))
    # gear = direction of travel: sign of (mean heading) . (step vector)
    # common practice (projection of the displacement on the mean heading of the two poses)
    mid = poses[:-1, 2] + turn / 2.0
    along = np.cos(mid) * delta[:, 0] + np.sin(mid) * delta[:, 1]
    moving = steps_m > max(1e-6, 4 * position_tol_m)
    wrong = np.flatnonzero(moving & (np.sign(along) != gears[1:]))
    if wrong.size:
        i = int(wrong[0]) + 1
        problems.append(f"pose {i} has gear {gears[i]:+.0f} but the step to it runs {'back' if along[i - 1] < 0 else 'forward'}")
    if len(poses) > 1 and gears[0] != gears[1]:
        problems.append("the first pose does not carry the gear of the first step")
    # metrics of the document recomputed from the poses (rounding adds up like a random walk)
    metric_tol_m = 1e-3 + 4 * position_tol_m * math.sqrt(len(poses))
    length_m = float(steps_m.sum())
    reverse_m = float(steps_m[gears[1:] < 0].sum())
    changes = gear_flips(steps_m, gears[1:])
    if abs(document["length_m"] - length_m) > metric_tol_m:
        problems.append(f"length_m {document['length_m']} but the poses add up to {length_m:.4f}")
    if abs(document["reverse_m"] - reverse_m) > metric_tol_m:
        problems.append(f"reverse_m {document['reverse_m']} but the reverse steps add up to {reverse_m:.4f}")
    if document["gear_changes"] != changes:
        problems.append(f"gear_changes {document['gear_changes']} but the gears flip {changes} times")
    # curvature: heading change per metre between consecutive poses
    kappa_max = max_curvature_per_m(vehicle)
    if math.isfinite(kappa_max):
        spot = np.flatnonzero(~moving & (np.abs(turn) > 1e-6 + 2 * heading_tol_rad))
        if spot.size:
            problems.append(f"pose {int(spot[0]) + 1} turns on the spot, but the vehicle cannot")
        allowed = steps_m * kappa_max * (1.0 + CURVATURE_SLACK) + 2 * heading_tol_rad + 1e-9
        over = np.flatnonzero(moving & (np.abs(turn) > allowed))
        if over.size:
            i = int(over[np.argmax(np.abs(turn[over]) / steps_m[over])])
            problems.append(
                f"curvature {abs(turn[i]) / steps_m[i]:.4f} /m reaching pose {i + 1} exceeds 1/min turn radius {kappa_max:.4f}"
            )
    # collisions of every pose and of the sweep between poses
    if obstacles is None:
        obstacles = grid if isinstance(grid, Obstacles) else Obstacles(grid)
    hit = first_exact_collision(obstacles, vehicle, poses)
    if hit is not None:
        problems.append(f"the footprint collides at or just before pose {hit} {poses[hit, :3].round(3).tolist()}")
    return problems


def assert_valid_path(grid, vehicle, path, start, goal, **options) -> np.ndarray:
    """Assert that ``path`` keeps every rule of :func:`path_problems`; return its poses (N, 4)."""
    problems = path_problems(grid, vehicle, path, start, goal, **options)
    assert problems == [], "\n".join(problems)
    return np.array(_as_document(path)["poses"], dtype=float)


def turns_on_spot(path, min_turn_rad: float = math.radians(20.0)) -> bool:
    """Whether the path holds a rotation of at least ``min_turn_rad`` without moving."""
    poses = np.array(_as_document(path)["poses"], dtype=float)
    step = np.hypot(*np.diff(poses[:, :2], axis=0).T)
    turn = np.abs(wrap(np.diff(poses[:, 2])))
    total, best = 0.0, 0.0
    for moved, dh in zip(step > 1e-6, turn):
        total = 0.0 if moved else total + dh
        best = max(best, total)
    return best >= min_turn_rad
