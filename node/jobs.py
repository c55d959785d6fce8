"""Planning work of the node as plain values: a :class:`Job` in, a :class:`JobResult` out.

:func:`run_job` is the only place the node calls the planner. It holds no state of its
own and touches no socket, so the server runs it on a worker thread and a test (or an
offline replay) can run it inline with the same result.

Job kinds:

- ``plan``: plan from ``start`` to ``goal`` on ``grid``.
- ``check``: is the stretch of the current path ahead of the robot (``check_poses``)
  still free on ``grid``? First a distance test against ``previous_grid`` (the grid the
  path is known to be free on, see :func:`changes_are_clear_of`); when it cannot decide,
  the planner's check. If free the answer is ``kept``; if not, replan: from the pose
  ``ahead_index`` of ``check_poses`` when the robot moves and the stretch up to it is
  free (``starts_ahead``), else (or when that fails) from ``start``.
- ``request``: a ``plan`` control request; answered, never published.
"""

from __future__ import annotations

import threading
import time
import logging
from dataclasses import dataclass, field

import numpy as np

from veer.maps import OccupancyGrid
from veer.planning import NoPath, PlannedPath, Planner, PlanningError, no_path_document

__all__ = ["Job", "JobResult", "run_job", "changes_are_clear_of", "clear_reach_m"]

log = logging.getLogger("veer.node")


@dataclass(frozen=True, eq=False)
class Job:
    """One piece of planning work (see the module docstring for ``kind``)."""

    job_id: int
    kind: str
    trigger: str
    grid: OccupancyGrid
    map_id: int | str
    goal: tuple[float, float, float]
    start: tuple[float, float, float]
    goal_id: int | None = None
    allow_reverse: bool | None = None
    check_poses: np.ndarray | None = None
    ahead_index: int | None = None
    deadline_s: float | None = None
    previous_grid: OccupancyGrid | None = None
    path_seq: int | None = None


@dataclass(eq=False)
class JobResult:
    """What a job produced.

    outcome : "found", "no_path", "kept" (check: the path is still free), "bad_request"
        (a request with a bad start or goal), or "error" (a bug, reported, never raised)
    document : the path JSON (found or no_path), or None
    poses : the new path's poses (N, 4) when found
    lead_in : for ``starts_ahead``, the old path's poses from the robot to the new start
    """

    job: Job
    outcome: str
    document: dict | None = None
    poses: np.ndarray | None = None
    starts_ahead: bool = False
    lead_in: np.ndarray | None = None
    detail: str = ""
    code: str = ""
    check_s: float = 0.0
    checked_by: str = ""
    elapsed_s: float = 0.0
    cancelled: bool = False
    stats: dict = field(default_factory=dict)


_MAX_CHANGED_CELLS = 200_000  # beyond this many changed cells the distance test is not worth it
_PAIRS_PER_CHUNK = 2_000_000


def changes_are_clear_of(previous: OccupancyGrid, grid: OccupancyGrid, poses: np.ndarray, reach_m: float) -> bool:
    """True when every cell whose blocked state differs lies farther than ``reach_m`` from every pose.

    The node's own sufficient test that a path free on ``previous`` is free on ``grid``:
    a footprint lies within ``bounding_radius_m`` of its reference point, and a cell
    whose centre is further than that plus half its diagonal cannot touch it. Callers
    pass ``reach_m`` = bounding radius + cell diagonal + half the largest gap between
    poses (every point between two poses is that close to one of them). False means
    "cannot tell": the planner then checks.
    """
    if (previous.classes.shape != grid.classes.shape or previous.cell_size_m != grid.cell_size_m
            or tuple(previous.origin_m) != tuple(grid.origin_m)):
        return False
    changed = previous.blocked != grid.blocked
    rows, cols = np.nonzero(changed)
    if rows.size == 0:
        return True
    if rows.size > _MAX_CHANGED_CELLS:
        return False
    xs, ys = grid.cell_to_world(rows, cols)
    px, py = poses[:, 0], poses[:, 1]
    near = ((xs >= px.min() - reach_m) & (xs <= px.max() + reach_m)
            & (ys >= py.min() - reach_m) & (ys <= py.max() + reach_m))
    xs, ys = xs[near], ys[near]
    chunk = max(1, _PAIRS_PER_CHUNK // max(len(px), 1))
    reach2 = reach_m * reach_m
    for i in range(0, len(xs), chunk):
        dx = xs[i:i + chunk, None] - px[None, :]
        dy = ys[i:i + chunk, None] - py[None, :]
        if ((dx * dx + dy * dy) <= reach2).any():
            return False
    return True


def clear_reach_m(planner: Planner, grid: OccupancyGrid, poses: np.ndarray) -> float:
    """``reach_m`` for :func:`changes_are_clear_of`: bounding radius + cell diagonal + half the largest pose gap."""
    gaps = np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1])) if len(poses) > 1 else np.zeros(1)
    return float(planner.vehicle.bounding_radius_m + grid.cell_size_m * np.sqrt(2.0) + gaps.max() / 2.0 + 1e-6)


def _plan(planner: Planner, job: Job, start, cancel, t0: float) -> PlannedPath:
    deadline = None if job.deadline_s is None else max(1e-3, job.deadline_s - (time.perf_counter() - t0))
    return planner.plan(job.grid, start, job.goal, allow_reverse=job.allow_reverse, cancel=cancel,
                        deadline_s=deadline)


def run_job(planner: Planner, job: Job, cancel: threading.Event | None = None) -> JobResult:
    """Do ``job`` with ``planner``; never raises (a bug comes back as outcome ``error``)."""
    cancel = cancel or threading.Event()
    t0 = time.perf_counter()
    check_s = 0.0
    try:
        start, starts_ahead, lead_in = job.start, False, None
        if job.kind == "check":
            poses = job.check_poses
            if job.previous_grid is not None and changes_are_clear_of(
                    job.previous_grid, job.grid, poses, clear_reach_m(planner, job.grid, poses)):
                check_s = time.perf_counter() - t0
                return JobResult(job, "kept", check_s=check_s, checked_by="distance", elapsed_s=check_s)
            hit = planner.check_path(job.grid, poses)
            check_s = time.perf_counter() - t0
            if hit is None:
                return JobResult(job, "kept", check_s=check_s, checked_by="planner", elapsed_s=check_s)
            if job.ahead_index is not None and job.ahead_index < hit:
                # the stretch from the robot to the ahead pose is still free: start there
                start = tuple(float(v) for v in job.check_poses[job.ahead_index, :3])
                starts_ahead = True
                lead_in = np.array(job.check_poses[: job.ahead_index + 1], dtype=float)
        try:
            path = _plan(planner, job, start, cancel, t0)
        except (NoPath, PlanningError) as first:
            reason = getattr(first, "reason", "")
            if not starts_ahead or reason in ("cancelled", "deadline") or cancel.is_set():
                raise
            # the ahead start led nowhere: plan from the robot itself
            starts_ahead, lead_in = False, None
            path = _plan(planner, job, job.start, cancel, t0)
        document = path.to_document()
        return JobResult(job, "found", document, np.asarray(path.poses, dtype=float), starts_ahead, lead_in,
                         check_s=check_s, elapsed_s=time.perf_counter() - t0, stats=dict(path.stats))
    except NoPath as exc:
        document = no_path_document(exc.reason, exc.detail, exc.stats)
        return JobResult(job, "no_path", document, detail=exc.detail, code=exc.reason, check_s=check_s,
                         elapsed_s=time.perf_counter() - t0, cancelled=exc.reason == "cancelled",
                         stats=dict(exc.stats))
    except PlanningError as exc:
        # a start or goal off the map or in collision: the request is valid on the wire,
        # the answer is that no path exists from / to there on this grid
        code = getattr(exc, "code", "planning_error")
        if job.kind == "request":
            return JobResult(job, "bad_request", detail=str(exc), code=code, check_s=check_s,
                             elapsed_s=time.perf_counter() - t0)
        document = no_path_document(code, str(exc), {})
        return JobResult(job, "no_path", document, detail=str(exc), code=code, check_s=check_s,
                         elapsed_s=time.perf_counter() - t0)
    except Exception as exc:  # noqa: BLE001 - a bug must not stop the node
        log.exception("planning job %d failed", job.job_id)
        detail = f"{type(exc).__name__}: {exc}"
        return JobResult(job, "error", detail=detail, code="internal_error", check_s=check_s,
                         elapsed_s=time.perf_counter() - t0)
