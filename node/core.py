"""The node's state and replan policy, without sockets or threads.

:class:`NodeCore` takes one input at a time through :meth:`NodeCore.on_input` (a checked
grid, pose or control request, a rejected input, a finished job, or a clock tick), with
the time passed in, and returns the actions that follow: messages to publish, a reply
to the control request, a job to start or cancel. The server turns actions into socket
and worker calls; a test or an offline replay can feed recorded inputs and run jobs
inline (:func:`veer.node.jobs.run_job`) and get the same answers.

Replan policy (docs/protocol.md, "Replan policy"):

- a new goal: plan now from the latest pose;
- a grid whose content differs from the one the current path was checked on: check the
  part of the path still ahead of the robot; keep it when free (not republished; an
  ``event`` with code ``path_kept`` says so), replan when blocked, from a point
  ``start_ahead_m`` ahead on the path when the robot moves and the stretch to it is free
  (a change whose cells all lie beyond the footprint's reach of the path is decided
  without the planner, see :func:`veer.node.jobs.changes_are_clear_of`);
- the robot further than ``off_path_m`` or ``off_path_deg`` from its path: replan from it;
- a newer goal (or cancel, or a plan request) cancels a plan in progress; a newer grid
  cancels it at most ``max_supersedes`` times in a row, so a stream of grids cannot
  starve planning;
- after a no_path, the next change of grid, goal or pose (moved ``retry_moved_m``) retries.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np

from .codec import ControlRequest, GridInput, PoseInput, WireError
from .config import NodeConfig
from .jobs import Job, JobResult
from .tracking import cumulative_m, index_ahead, locate

__all__ = ["NodeCore", "Publish", "Reply", "StartJob", "CancelJob", "STATES"]

log = logging.getLogger("veer.node")

STATES = ("idle", "waiting", "planning", "following", "no_path")
_POSE_FRESH_S = 1.0  # a robot whose last pose is older than this does not count as moving


@dataclass(frozen=True)
class Publish:
    """Publish ``body`` on the PUB socket under ``topic`` (path, status, event)."""

    topic: str
    body: dict


@dataclass(frozen=True)
class Reply:
    """Answer the control request being served."""

    body: dict


@dataclass(frozen=True)
class StartJob:
    job: Job


@dataclass(frozen=True)
class CancelJob:
    job_id: int


@dataclass(frozen=True)
class _Goal:
    goal_id: int
    pose: tuple[float, float, float]
    reverse: bool | None


class _TrackedPath:
    """The current path of the goal: the poses the robot follows (lead-in included)."""

    def __init__(self, poses: np.ndarray, grid, map_id, seq: int):
        self.poses = poses
        self.along_m = cumulative_m(poses)
        self.grid = grid  # the newest grid this path is known to be free on
        self.grid_key = grid.map_id  # its content hash
        self.map_id = map_id
        self.seq = seq
        self.segment = 0


def _error(code: str, detail: str) -> dict:
    return {"ok": False, "error": detail, "code": code}


class NodeCore:
    """State of one node (see the module docstring); every method is deterministic in its inputs."""

    def __init__(self, config: NodeConfig):
        self.config = config
        self.grid_input: GridInput | None = None
        self.pose: PoseInput | None = None
        self.pose_received_s = -math.inf
        self.speed_m_per_s = 0.0
        self.goal: _Goal | None = None
        self.path: _TrackedPath | None = None
        self.last_path_message: dict | None = None
        self.failed: dict | None = None  # after a no_path: grid key and pose it was planned with
        self.need: str | None = None  # trigger of a plan that must run
        self.job: Job | None = None
        self.job_cancelled = False
        self.pending_request: ControlRequest | None = None
        self.supersedes = 0
        self.seq = 0
        self.next_goal_id = 1
        self.next_job_id = 1
        self.last_plan_s: float | None = None
        self.last_status_s = -math.inf
        self.started_s: float | None = None
        self.counters = {"grids": 0, "grids_unchanged": 0, "grids_skipped": 0, "poses": 0, "rejected": 0,
                         "requests": 0, "plans": 0, "checks": 0, "kept": 0, "cancelled": 0}

    # ------------------------------------------------------------------ entry point
    def on_input(self, kind: str, message, now_s: float) -> list:
        """Handle one input; ``kind`` is grid, pose, control, rejected, skipped, job_done or tick."""
        if self.started_s is None:
            self.started_s = now_s
        handler = {
            "grid": self._on_grid, "pose": self._on_pose, "control": self._on_control,
            "rejected": self._on_rejected, "skipped": self._on_skipped, "job_done": self._on_job_done,
            "tick": lambda _message, _now: [],
        }[kind]
        actions = handler(message, now_s)
        actions += self._reconcile(now_s)
        if now_s - self.last_status_s >= self.config.status_interval_s - 1e-6:
            actions.append(Publish("status", self.status(now_s)))
            self.last_status_s = now_s
        return actions

    # ------------------------------------------------------------------ inputs
    def _on_rejected(self, error: tuple[str, WireError], now_s: float) -> list:
        topic, exc = error
        self.counters["rejected"] += 1
        log.info("rejected %s input: code=%s detail=%s", topic, exc.code, exc.detail)
        return [Publish("event", {"code": exc.code, "detail": exc.detail, "topic": topic})]

    def _on_skipped(self, count: int, now_s: float) -> list:
        self.counters["grids_skipped"] += int(count)
        return []

    def _on_grid(self, grid_input: GridInput, now_s: float) -> list:
        self.counters["grids"] += 1
        previous = self.grid_input
        self.grid_input = grid_input
        if previous is not None and previous.grid.map_id == grid_input.grid.map_id:
            self.counters["grids_unchanged"] += 1
            return []
        job = self.job
        if job is not None and job.kind != "request" and not self.job_cancelled and job.grid is not grid_input.grid:
            if self.supersedes < self.config.replan.max_supersedes:
                self.supersedes += 1
                return self._cancel_job()
        return []

    def _on_pose(self, pose: PoseInput, now_s: float) -> list:
        self.counters["poses"] += 1
        previous = self.pose
        if previous is not None and pose.t_s > previous.t_s:
            moved = math.hypot(pose.x_m - previous.x_m, pose.y_m - previous.y_m)
            self.speed_m_per_s = moved / (pose.t_s - previous.t_s)
        self.pose, self.pose_received_s = pose, now_s
        path = self.path
        if path is None or self.goal is None:
            return []
        place = locate(path.poses, path.along_m, (pose.x_m, pose.y_m, pose.heading_rad), path.segment,
                       self.config.replan.track_window_m)
        off = (place.off_m > self.config.replan.off_path_m
               or math.degrees(place.heading_off_rad) > self.config.replan.off_path_deg)
        if not off:
            path.segment = place.segment
        elif self.job is None and self.need is None:
            log.debug("robot %.2f m / %.0f deg off its path: replan", place.off_m, math.degrees(place.heading_off_rad))
            self.need = "off_path"
        return []

    # ------------------------------------------------------------------ control
    def _on_control(self, request: ControlRequest | WireError, now_s: float) -> list:
        self.counters["requests"] += 1
        if isinstance(request, WireError):
            log.info("rejected control request: code=%s detail=%s", request.code, request.detail)
            return [Reply(_error(request.code, request.detail))]
        op, fields = request.op, request.fields
        if op == "status":
            return [Reply({"ok": True, **self.status(now_s)})]
        if op == "path":
            return [Reply({"ok": True, "path": self.last_path_message})]
        if op == "cancel":
            old = self.goal.goal_id if self.goal else None
            actions = self._cancel_job() if self.job is not None and self.job.kind != "request" else []
            self.goal, self.path, self.need, self.failed = None, None, None, None
            if old is not None:
                actions.append(Publish("event", {"code": "goal_cancelled", "detail": f"goal {old} dropped",
                                                 "goal_id": old}))
            return actions + [Reply({"ok": True, "goal_id": old})]
        if op == "goal":
            goal = _Goal(self.next_goal_id, (fields["x_m"], fields["y_m"], fields["heading_rad"]), fields["reverse"])
            self.next_goal_id += 1
            actions = self._cancel_job() if self.job is not None and self.job.kind != "request" else []
            self.goal, self.path, self.failed, self.need = goal, None, None, "goal"
            log.debug("goal %d: %s", goal.goal_id, goal.pose)
            return actions + [Reply({"ok": True, "goal_id": goal.goal_id})]
        # op == "plan": answered when the worker is done
        if self.grid_input is None:
            return [Reply(_error("no_grid", "no grid received yet; send a grid on the input socket first"))]
        self.pending_request = request
        return self._cancel_job() if self.job is not None else []

    def _cancel_job(self) -> list:
        if self.job is None or self.job_cancelled:
            return []
        self.job_cancelled = True
        self.counters["cancelled"] += 1
        return [CancelJob(self.job.job_id)]

    # ------------------------------------------------------------------ jobs
    def _new_job(self, kind: str, trigger: str, **fields) -> list:
        grid_input = self.grid_input
        job = Job(self.next_job_id, kind, trigger, grid_input.grid, grid_input.map_id,
                  deadline_s=self.config.replan.plan_deadline_s, **fields)
        self.next_job_id += 1
        self.job, self.job_cancelled = job, False
        return [StartJob(job)]

    def _pose_tuple(self) -> tuple[float, float, float]:
        return (self.pose.x_m, self.pose.y_m, self.pose.heading_rad)

    def _reconcile(self, now_s: float) -> list:
        """Start the job the state calls for, when the worker is free."""
        if self.job is not None:
            return []
        if self.pending_request is not None:
            request, self.pending_request = self.pending_request, None
            fields = request.fields
            return self._new_job("request", "request", goal=fields["goal"], start=fields["start"],
                                 allow_reverse=fields["reverse"])
        goal = self.goal
        if goal is None or self.grid_input is None or self.pose is None:
            return []
        grid_key = self.grid_input.grid.map_id
        common = {"goal": goal.pose, "goal_id": goal.goal_id, "allow_reverse": goal.reverse,
                  "start": self._pose_tuple()}
        if self.need is not None:
            trigger, self.need = self.need, None
            return self._new_job("plan", trigger, **common)
        if self.path is not None and self.path.grid_key != grid_key:
            return self._check_job(common, now_s)
        if self.path is None and self.failed is not None:
            moved = math.hypot(self.pose.x_m - self.failed["pose"][0], self.pose.y_m - self.failed["pose"][1])
            if self.failed["grid_key"] != grid_key:
                return self._new_job("plan", "retry_grid", **common)
            if moved >= max(self.config.replan.retry_moved_m, 1e-9):
                return self._new_job("plan", "retry_pose", **common)
        return []

    def _check_job(self, common: dict, now_s: float) -> list:
        """Check the stretch of the path ahead of the robot on the newest grid."""
        path = self.path
        place = locate(path.poses, path.along_m, self._pose_tuple(), path.segment, self.config.replan.track_window_m)
        i = place.segment
        if len(path.poses) == 1:
            ahead = path.poses.copy()
        else:
            ahead = np.array(path.poses[i:], dtype=float)
            ahead[0, :3] = place.point  # start the check at the robot's place on the path
        ahead_index = None
        replan = self.config.replan
        moving = self.speed_m_per_s > replan.moving_above_m_per_s and now_s - self.pose_received_s < _POSE_FRESH_S
        if moving and replan.start_ahead_m > 0:
            along = cumulative_m(ahead)
            k = index_ahead(along, 0.0, replan.start_ahead_m)
            if k is not None and 0 < k < len(ahead) - 1:
                ahead_index = k
        return self._new_job("check", "grid", check_poses=ahead, ahead_index=ahead_index, previous_grid=path.grid,
                             path_seq=path.seq, **common)

    def _on_job_done(self, result: JobResult, now_s: float) -> list:
        job = result.job
        if self.job is None or job.job_id != self.job.job_id:
            log.debug("result of stale job %d dropped", job.job_id)
            return []
        cancelled = self.job_cancelled
        self.job, self.job_cancelled = None, False
        if job.kind == "request":
            return self._answer_request(result)
        if result.outcome == "error":
            log.error("planning failed: %s", result.detail)
            if not cancelled and self.goal is not None and job.goal_id == self.goal.goal_id:
                self.failed = {"grid_key": job.grid.map_id, "pose": job.start}
                self.path = None
            return [Publish("event", {"code": "internal_error", "detail": result.detail})]
        if (result.outcome == "kept" and self.path is not None and job.path_seq == self.path.seq
                and self.goal is not None and job.goal_id == self.goal.goal_id):
            # a finished check is a fact even when a newer grid asked to cancel it
            return self._kept(result)
        if cancelled or result.cancelled or self.goal is None or job.goal_id != self.goal.goal_id:
            # superseded: the state still calls for the work, _reconcile starts it again
            if job.kind == "plan" and self.goal is not None and job.goal_id == self.goal.goal_id:
                self.need = self.need or job.trigger
            return []
        self.supersedes = 0
        if job.kind == "check":
            self.counters["checks"] += 1
        return self._publish_plan(result, now_s)

    def _kept(self, result: JobResult) -> list:
        job = result.job
        self.supersedes = 0
        self.counters["checks"] += 1
        self.counters["kept"] += 1
        self.path.grid, self.path.grid_key = job.grid, job.grid.map_id
        log.debug("path %d still free on map %s (check %.3f s)", self.path.seq, job.map_id, result.check_s)
        return [Publish("event", {"code": "path_kept", "map_id": job.map_id, "path_seq": self.path.seq,
                                  "detail": f"path {self.path.seq} is still free on map {job.map_id}",
                                  "check_s": round(result.check_s, 6), "checked_by": result.checked_by})]

    def _publish_plan(self, result: JobResult, now_s: float) -> list:
        job = result.job
        trigger = "blocked" if job.kind == "check" else job.trigger
        self.counters["plans"] += 1
        self.seq += 1
        self.last_plan_s = round(result.elapsed_s, 6)
        document = result.document
        message = {**document, "seq": self.seq, "map_id": job.map_id, "goal_id": job.goal_id,
                   "starts_ahead": bool(result.starts_ahead), "trigger": trigger}
        self.last_path_message = {"v": 1, "kind": "path", **message}
        if result.outcome == "found":
            poses = result.poses
            if result.lead_in is not None and len(result.lead_in) > 1:
                poses = np.vstack((result.lead_in[:-1], poses))
            self.path = _TrackedPath(poses, job.grid, job.map_id, self.seq)
            self.failed = None
        else:
            self.path = None
            self.failed = {"grid_key": job.grid.map_id, "pose": job.start}
        stats = document.get("stats", {})
        log.info(
            "plan map_id=%s goal_id=%s trigger=%s status=%s reason=%s length_m=%s expansions=%s plan_s=%.3f",
            job.map_id, job.goal_id, trigger, document["status"], document.get("reason") or "-",
            "-" if document.get("length_m") is None else f"{document['length_m']:.2f}",
            stats.get("expansions", 0), result.elapsed_s,
        )
        return [Publish("path", message)]

    def _answer_request(self, result: JobResult) -> list:
        if result.outcome in ("found", "no_path"):
            document = result.document
            log.info("plan request map_id=%s status=%s reason=%s plan_s=%.3f", result.job.map_id,
                     document["status"], document.get("reason") or "-", result.elapsed_s)
            return [Reply({"ok": True, "path": document, "map_id": result.job.map_id})]
        if result.outcome == "bad_request":
            return [Reply(_error(result.code, result.detail))]
        return [Reply(_error("internal_error", result.detail))]

    # ------------------------------------------------------------------ status
    def state(self) -> str:
        if self.goal is None:
            return "idle"
        if self.job is not None and self.job.kind != "request":
            return "planning"
        if self.grid_input is None or self.pose is None:
            return "waiting"
        if self.path is not None:
            return "following"
        if self.failed is not None:
            return "no_path"
        return "planning"

    def status(self, now_s: float) -> dict:
        """The status message body (also the answer to ``{"op": "status"}``)."""
        pose = self.pose
        return {
            "state": self.state(),
            "map_id": None if self.grid_input is None else self.grid_input.map_id,
            "goal_id": None if self.goal is None else self.goal.goal_id,
            "path_seq": self.seq,
            "last_plan_s": self.last_plan_s,
            "goal": None if self.goal is None else list(self.goal.pose),
            "path_map_id": None if self.path is None else self.path.map_id,
            "pose": None if pose is None else [pose.x_m, pose.y_m, pose.heading_rad],
            "speed_m_per_s": round(self.speed_m_per_s, 4),
            "uptime_s": round(now_s - (self.started_s if self.started_s is not None else now_s), 3),
            "counters": dict(self.counters),
        }
