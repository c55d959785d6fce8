"""The planner: checks the request, prepares the grid, runs the search, assembles the path.

Hybrid A* after Dolgov, Thrun, Montemerlo & Diebel, "Practical search techniques in path
planning for autonomous driving" (AAAI STAIR workshop, 2008). The stages, each in its
own module::

    inputs      check start, goal (and settings) and name the bad argument
    context     inflate the grid for the vehicle, lattice masks, clearance cost (cached)
    problem     2-D field, turning table, primitives, heuristic per (grid, goal, settings)
    kernel      the A* loop -> SearchResult (node chain, final goal curve, figures)
    assembly    shortcuts and resampling -> PlannedPath

:class:`Planner` keeps, per vehicle, a :class:`~veer.planning.context.GridCache` (the
inflated grid per ``map_id`` and the 2-D fields per goal), so a long-lived caller that
replans on the same or a slightly changed grid pays for them once. It holds no sockets
and no messages.
"""

from __future__ import annotations

import logging
import math
import threading
import time
from dataclasses import replace

import numpy as np

from veer.maps import InflatedGrid, OccupancyGrid
from veer.planning.angles import wrap_angle
from veer.planning.assembly import assemble_path
from veer.planning.context import GridCache, GridContext, body_centre_m
from veer.planning.errors import NoPath, PlanningError, PoseError
from veer.planning.inputs import pose_argument, poses_argument
from veer.planning.kernel import run_search
from veer.planning.path import PlannedPath
from veer.planning.problem import SearchProblem, build_problem
from veer.planning.settings import DEFAULT_SEARCH_SETTINGS, SearchSettings
from veer.planning.vehicle import Vehicle

__all__ = ["Planner", "GridContext", "plan_path"]

log = logging.getLogger("veer.planning")

_NO_PATH_DETAIL = {
    "no_path_at_resolution": "every pose reachable at this search resolution was tried without reaching the goal",
}


class Planner:
    """Plans paths for one vehicle on any number of grids.

    Parameters
    ----------
    vehicle : Vehicle
    settings : SearchSettings
    cache_size : int
        Grids (and goal fields) kept between calls.

    Examples
    --------
    >>> import numpy as np
    >>> from veer.maps import OccupancyGrid
    >>> grid = OccupancyGrid(np.zeros((200, 300), np.uint8), 0.1, (0.0, 0.0))
    >>> from veer.planning.vehicle import EXAMPLE_VEHICLE
    >>> path = Planner(EXAMPLE_VEHICLE).plan(grid, (5.0, 10.0, 0.0), (25.0, 10.0, 0.0))
    >>> round(path.length_m, 1)
    20.0
    """

    def __init__(self, vehicle: Vehicle, settings: SearchSettings = DEFAULT_SEARCH_SETTINGS, cache_size: int = 2):
        self.vehicle = vehicle
        self.settings = settings
        self.cache = GridCache(vehicle, cache_size)
        # the turning table and the lazy imports of the first search are loaded here, not in plan_s
        _warm_up(vehicle, settings)

    # ------------------------------------------------------------------ caches
    def prepare(self, grid: OccupancyGrid, settings: SearchSettings | None = None) -> GridContext:
        """Inflate ``grid`` for this vehicle (cached by ``map_id`` and the settings it depends on)."""
        return self.cache.context(grid, settings or self.settings)

    def inflated_grid(self, grid: OccupancyGrid, settings: SearchSettings | None = None) -> InflatedGrid:
        """The inflated grid (``veer.maps.InflatedGrid``) this planner checks ``grid`` against (cached)."""
        return self.prepare(grid, settings).inflated

    # ------------------------------------------------------------------ checks
    def check_path(self, grid: OccupancyGrid, poses) -> int | None:
        """Index of the first pose of an existing path that collides on ``grid``, else None.

        Poses further apart than the collision sample step are densified first, so the
        space between two poses is checked too; the index returned is into ``poses``.
        """
        poses = poses_argument(poses, "poses")
        if len(poses) == 0:
            return None
        context = self.prepare(grid)
        dense, owner = _densify(poses, context.checker.sample_step_m)
        hit = context.checker.first_collision(dense)
        return None if hit is None else int(owner[hit])

    def validate_pose(self, context: GridContext, pose, name: str) -> tuple[float, float, float]:
        """``pose`` as floats; PoseError naming ``name`` unless it is on the map with its footprint clear."""
        x, y, h = pose_argument(pose, name)
        grid = context.grid
        if not grid.contains(x, y):
            raise PoseError(
                f"{name} ({x:.2f}, {y:.2f}) is off the map, which spans x {grid.origin_m[0]:.2f}.."
                f"{grid.origin_m[0] + grid.width_m:.2f} m, y {grid.origin_m[1]:.2f}..{grid.origin_m[1] + grid.height_m:.2f} m"
            )
        if not context.checker.poses_clear([x], [y], [h])[0]:
            row, col = context.map_frame.cell_of(x, y)
            what = "on a blocked cell" if grid.blocked[row, col] else "too close to an obstacle for the vehicle"
            raise PoseError(
                f"{name} ({x:.2f}, {y:.2f}, {math.degrees(h):.0f} deg) at cell ({row}, {col}) is {what}; "
                f"move it into open space"
            )
        return x, y, h

    def _in_narrow_passage(self, context: GridContext, poses) -> bool:
        """True when a pose has less free room than a quarter lattice cell beyond the footprint.

        Coarse steering cannot hold a line that tight, so such plans start at the finer resolution.
        """
        return any(context.room_m(x, y) < context.lattice_cell_m / 4.0 for x, y, _ in poses)

    # ------------------------------------------------------------------ search
    def plan(
        self,
        grid: OccupancyGrid,
        start,
        goal,
        *,
        allow_reverse: bool | None = None,
        cancel: threading.Event | None = None,
        deadline_s: float | None = None,
        settings: SearchSettings | None = None,
    ) -> PlannedPath:
        """Plan from ``start`` to ``goal`` (x_m, y_m, heading_rad) on ``grid``.

        Raises
        ------
        PoseError
            Start or goal malformed, off the map or in collision (the message names which).
        NoPath
            ``goal_enclosed`` (proven before any search), ``budget_exhausted``,
            ``deadline`` (``deadline_s`` seconds from the call, or ``max_time_s``),
            ``cancelled`` (``cancel`` was set) or ``no_path_at_resolution``.
        """
        t0 = time.perf_counter()
        start = pose_argument(start, "start")
        goal = pose_argument(goal, "goal")
        settings = settings or self.settings
        if allow_reverse is not None and allow_reverse != settings.allow_reverse:
            settings = replace(settings, allow_reverse=bool(allow_reverse))
        context = self.prepare(grid, settings)
        start = self.validate_pose(context, start, "start")
        goal = self.validate_pose(context, goal, "goal")
        # headings in [-pi, pi): the search adds multiples of a bin to the start heading
        start = (start[0], start[1], wrap_angle(start[2]))
        goal = (goal[0], goal[1], wrap_angle(goal[2]))
        budget_s = settings.max_time_s if deadline_s is None else min(deadline_s, settings.max_time_s)
        deadline = t0 + budget_s
        finer = _finer(settings)
        if finer is not None and self._in_narrow_passage(context, (start, goal)):
            # a coarse search would only exhaust itself first: go straight to the finer one
            path = self._search(context, finer, start, goal, t0, deadline, cancel)
            path.stats["heading_bins"] = finer.heading_bins
            return path
        try:
            return self._search(context, settings, start, goal, t0, deadline, cancel)
        except NoPath as first:
            if first.reason != "no_path_at_resolution" or finer is None:
                raise
            log.debug("no path with %d heading bins; trying %d", settings.heading_bins, finer.heading_bins)
            spent = first.stats.get("expansions", 0)
            try:
                path = self._search(context, finer, start, goal, t0, deadline, cancel, {"coarse_expansions": spent})
            except NoPath as second:
                second.stats["expansions"] += spent
                raise
            path.stats["expansions"] += spent
            path.stats["heading_bins"] = finer.heading_bins
            return path

    def problem(self, context: GridContext, settings: SearchSettings, start, goal) -> SearchProblem:
        """The search problem for ``goal`` on ``context``; NoPath ``goal_enclosed`` when ``start`` cannot reach it.

        The 2-D field over the collision mask guides best; where it cannot link start and
        goal (tight margins, a rectangle the circles over-cover), the optimistic one
        decides whether the goal is really walled in, and guides instead.
        """
        if context.body_components is not None:
            # a rectangle's body centre moves through 8-connected cells where its inner disc
            # fits: start and goal in different components cannot be joined by any motion
            labels = [
                int(context.body_components[context.map_frame.cell_of(*body_centre_m(self.vehicle, pose))])
                for pose in (start, goal)
            ]
            if labels[0] and labels[1] and labels[0] != labels[1]:
                raise NoPath("goal_enclosed", "the goal cannot be reached from the start even ignoring the turning limit")
        lattice = context.lattice
        goal_cell = lattice.cell_of(goal[0], goal[1])
        start_cell = lattice.cell_of(start[0], start[1])
        field = self.cache.field(context, goal_cell)
        if not field.reachable(*start_cell):
            field = self.cache.field(context, goal_cell, optimistic=True)
        if not field.reachable(*start_cell):
            raise NoPath("goal_enclosed", "the goal cannot be reached from the start even ignoring the turning limit")
        return build_problem(self.cache, context, self.vehicle, settings, goal, field)

    def _search(self, context, settings, start, goal, t0, deadline, cancel, extra_stats=None) -> PlannedPath:
        t_field = time.perf_counter()
        try:
            problem = self.problem(context, settings, start, goal)
        except NoPath as enclosed:
            enclosed.stats.update(_base_stats(extra_stats), field_s=round(time.perf_counter() - t_field, 6),
                                  plan_s=round(time.perf_counter() - t0, 6))
            raise
        tables = problem.tables_for(start[2])
        field_s = round(time.perf_counter() - t_field, 6)
        result = run_search(problem, tables, start, deadline, cancel)
        stats = {**_base_stats(extra_stats), **result.stats, "field_s": field_s}
        if result.finish is None:
            stats["plan_s"] = round(time.perf_counter() - t0, 6)
            reason = result.reason
            detail = _NO_PATH_DETAIL.get(reason) or f"stopped after {stats['expansions']} expansions ({reason})"
            raise NoPath(reason, detail, stats)
        path = assemble_path(problem, tables, result, start)
        if result.stopped:
            stats["stopped"] = result.stopped
        stats.update(path.stats, prepare_s=round(context.prepare_s, 6), final_poses=len(path.poses))
        stats["plan_s"] = round(time.perf_counter() - t0, 6)
        path.stats = stats
        log.debug("plan %s -> %s: %s", start, goal, stats)
        return path


def _base_stats(extra: dict | None) -> dict:
    stats = {"expansions": 0, "generated": 0, "goal_curves_tried": 0}
    stats.update(extra or {})
    return stats


def _finer(settings: SearchSettings) -> SearchSettings | None:
    """The same search at twice the heading and steering resolution (same step), if allowed."""
    if not settings.refine_on_exhaustion or settings.heading_bins * 2 > 720 or settings.steer_levels * 2 > 8:
        return None
    return replace(
        settings,
        heading_bins=settings.heading_bins * 2,
        steer_levels=settings.steer_levels * 2,
        refine_on_exhaustion=False,
    )


def plan_path(grid, vehicle, start, goal, settings: SearchSettings = DEFAULT_SEARCH_SETTINGS, **kwargs) -> PlannedPath:
    """One-shot convenience: ``Planner(vehicle, settings).plan(grid, start, goal, **kwargs)``."""
    return Planner(vehicle, settings, cache_size=1).plan(grid, start, goal, **kwargs)


def _densify(poses: np.ndarray, step_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Insert straight-line samples between poses further apart than ``step_m``.

    Returns the dense poses and, for each, the index of the original pose it leads to.
    """
    out = [poses[:1, :3]]
    owner = [np.zeros(1, dtype=np.intp)]
    for i in range(1, len(poses)):
        a, b = poses[i - 1, :3], poses[i, :3]
        n = max(1, int(math.ceil(math.hypot(b[0] - a[0], b[1] - a[1]) / step_m)))
        t = (np.arange(1, n + 1) / n)[:, None]
        dh = wrap_angle(float(b[2] - a[2]))
        seg = np.column_stack((a[0] + t[:, 0] * (b[0] - a[0]), a[1] + t[:, 0] * (b[1] - a[1]), a[2] + t[:, 0] * dh))
        out.append(seg)
        owner.append(np.full(n, i, dtype=np.intp))
    return np.vstack(out), np.concatenate(owner)


_warm: set = set()


def _warm_up(vehicle: Vehicle, settings: SearchSettings) -> None:
    """Do once per process what the first plan would otherwise pay for inside ``plan_s``.

    Loads the turning table (from the disk cache, or builds it) and runs one small plan
    on an empty 3 x 3 m grid, so that numpy's and OpenCV's lazily loaded routines and the
    search's first-use paths are ready (about 5 ms, once).
    """
    key = (vehicle, settings.allow_reverse, settings.use_turning_heuristic)
    if key in _warm:
        return
    _warm.add(key)  # before the plan below, whose planner would warm up again
    from veer.planning.heuristics import turning_table

    if settings.use_turning_heuristic and not vehicle.turns_in_place:
        turning_table("reeds_shepp" if settings.allow_reverse else "dubins", spread=2)
    span_m = 4.0 * vehicle.bounding_radius_m + 4.0
    cell_m = span_m / 40.0
    grid = OccupancyGrid(np.zeros((40, 40), np.uint8), cell_m, (0.0, 0.0))
    middle = span_m / 2.0
    quick = replace(settings, max_expansions=50, max_time_s=1.0, refine_on_exhaustion=False)
    try:
        Planner(vehicle, quick, cache_size=1).plan(grid, (middle - 0.5, middle, 0.0), (middle + 0.5, middle, 0.0))
    except (NoPath, PlanningError):  # only the loading matters
        pass
