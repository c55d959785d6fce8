"""Offline replay: recorded inputs through a fresh :class:`~veer.node.core.NodeCore`, no sockets.

The live node (:mod:`veer.node.server`) decodes each input with the codec, hands it to
``NodeCore.on_input`` with the time, and carries out the actions that come back:
publish, reply, start or cancel a planning job on its worker thread. :class:`OfflineNode`
does the same with the same functions, except that

- time is the recorded time (seconds since the first record), never the wall clock;
- every job runs inline with :func:`veer.node.jobs.run_job` on one ``Planner``, and its
  result goes back to the core as ``job_done`` at the time stamp the job started, so no
  input ever arrives while a plan runs (the live node may cancel a plan for a newer grid;
  a replay plans every trigger to its end);
- each recorded input is handled on its own (the live node reads every input waiting
  and handles only the newest grid and pose of a burst; a log does not say which
  inputs arrived together);
- time budgets are lifted unless ``deadlines=True``: the node's ``plan_deadline_s`` and
  the planner's ``max_time_s`` make an answer depend on how busy the machine is, so by
  default a replay is bounded by the expansion budget (``max_expansions``) only, and the
  same log and settings give the same replans on any machine.

Sources (:func:`replay`): a recording log (docs/files.md, "Recording log"), or a drive
folder of map images with a ``drive.toml`` listing times, images, poses and goals
(docs/files.md, "Drive folder"). Every replan (a published path, found or no_path, and
the answer to a ``plan`` request) becomes a :class:`Replan`, with the grid and poses a
report needs to draw it.
"""

from __future__ import annotations

import math
import time
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from veer.planning import Planner

from .codec import WireError, check_control, check_input, decode_grid, encode
from .config import NodeConfig
from .core import CancelJob, NodeCore, Publish, Reply, StartJob
from .jobs import run_job

__all__ = [
    "DRIVE_FILE",
    "DriveError",
    "OfflineNode",
    "OfflineRun",
    "Replan",
    "SourceError",
    "TimedInput",
    "drive_inputs",
    "log_inputs",
    "open_source",
    "replay",
]

DRIVE_FILE = "drive.toml"
"""Name of the file that makes a folder a drive (docs/files.md, "Drive folder")."""

_NO_TIME_LIMIT_S = 1e6  # the largest max_time_s SearchSettings accepts
_MAX_TICKS_PER_GAP = 100_000  # a gap of days in a log is not worth a tick per status interval


class SourceError(ValueError):
    """A replay source that cannot be read at all (not a log, no drive.toml, bad drive file); one line."""


class DriveError(SourceError):
    """A drive folder whose ``drive.toml`` or map images cannot be used; names the file and the entry."""


@dataclass(frozen=True)
class TimedInput:
    """One input to feed: ``kind`` is ``grid``, ``pose`` (the wire message as a dict) or
    ``control`` (``{"request": dict or None, "reply": dict or None}`` as recorded);
    ``t_s`` recorded time; ``progress`` how far into the source it lies (bytes or items)."""

    t_s: float
    kind: str
    message: object
    progress: int = 0


@dataclass(eq=False)
class Replan:
    """One replan of a replay (a published path, or the answer to a ``plan`` request).

    ``t_s`` is seconds since the start of the source; ``trigger`` as in the path message
    (goal, blocked, off_path, retry_grid, retry_pose, ...) or ``request``; ``start`` the
    robot's pose the plan started from (the robot itself, also for ``starts_ahead``);
    ``poses`` (N, 4) the path the robot is to follow (the lead-in on the old path
    included) or None; ``grid`` the grid planned on; ``plan_s`` wall time of the job.
    """

    index: int
    t_s: float
    trigger: str
    kind: str
    map_id: object
    goal_id: object
    status: str
    reason: str | None
    length_m: float | None
    reverse_m: float | None
    gear_changes: int | None
    expansions: int | None
    plan_s: float
    start: tuple[float, float, float]
    goal: tuple[float, float, float]
    starts_ahead: bool = False
    detail: str = ""
    poses: np.ndarray | None = None
    grid: object = None

    def row(self) -> dict:
        """The plain values of the report's table (docs/files.md, "Replay report")."""
        return {
            "index": self.index, "t_s": round(self.t_s, 6), "trigger": self.trigger, "map_id": self.map_id,
            "goal_id": self.goal_id, "status": self.status, "reason": self.reason,
            "length_m": self.length_m, "reverse_m": self.reverse_m, "gear_changes": self.gear_changes,
            "expansions": self.expansions, "plan_s": round(self.plan_s, 6),
        }


@dataclass
class OfflineRun:
    """What one replay produced: replans, every output with its time, and what was off in the source."""

    source: str
    replans: list[Replan] = field(default_factory=list)
    outputs: list[tuple[float, object]] = field(default_factory=list)  # (t_s, Publish or Reply)
    damage: list[str] = field(default_factory=list)
    inputs: int = 0
    rejected: int = 0
    checks_kept: int = 0
    duration_s: float = 0.0
    counters: dict = field(default_factory=dict)
    planner: object = field(default=None, repr=False)  # the planner of the run (for the inflated grids of pictures)


class OfflineNode:
    """A node without sockets: :meth:`feed` one recorded input at a time, then :meth:`finish`.

    ``deadlines``: apply the node's ``plan_deadline_s`` and the planner's ``max_time_s``
    as the live node does (answers then depend on the machine's speed); off by default.
    ``on_replan(run, replan)`` is called as each replan is added (a caller that draws it
    then may drop ``grid`` and ``poses`` of older replans, so a long log needs no more
    memory than its last grids).
    """

    def __init__(self, config: NodeConfig, *, deadlines: bool = False, source: str = "",
                 on_replan: Callable[[OfflineRun, Replan], None] | None = None):
        if not deadlines:
            config = replace(config, search=replace(config.search, max_time_s=_NO_TIME_LIMIT_S))
        self.config = config
        self.deadlines = deadlines
        self.core = NodeCore(config)
        self.planner = Planner(config.vehicle, config.search, cache_size=2)
        self.run = OfflineRun(source, planner=self.planner)
        self.on_replan = on_replan
        self.t0_s: float | None = None
        self.now_s = 0.0
        self._next_tick_s = 0.0
        self._cancelled: set[int] = set()

    # ------------------------------------------------------------------ inputs
    def feed(self, item: TimedInput) -> None:
        """Handle one recorded input (ticks due before it first), as the server would."""
        if self.t0_s is None:
            self.t0_s = item.t_s
        now = max(self.now_s, item.t_s - self.t0_s)  # never backwards, whatever the recorder's clock did
        self._tick_until(now)
        self.now_s = now
        self.run.inputs += 1
        limits = self.config.limits
        if item.kind in ("grid", "pose"):
            message = item.message
            try:
                if not isinstance(message, dict):
                    raise WireError("bad_message", f"{item.kind} message must be a msgpack map")
                checked = check_input(item.kind, message, size_bytes=len(encode(message)),
                                      max_cells=limits.max_grid_cells)
                if item.kind == "grid":
                    checked = decode_grid(checked, limits.max_grid_cells)
            except WireError as exc:
                self.run.rejected += 1
                self._handle("rejected", (item.kind, exc))
                return
            self._handle(item.kind, checked)
        elif item.kind == "control":
            record = item.message if isinstance(item.message, dict) else {}
            request, reply = record.get("request"), record.get("reply")
            if isinstance(request, dict):
                try:
                    checked = check_control(request)
                except WireError as exc:
                    checked = exc
            else:  # the node could not unpack it: the recorded reply says what it answered
                reply = reply if isinstance(reply, dict) else {}
                checked = WireError(str(reply.get("code", "bad_msgpack")), str(reply.get("error", "unreadable request")))
            self._handle("control", checked)
        else:
            raise ValueError(f"offline input kind must be grid, pose or control, got {item.kind!r}")

    def finish(self) -> OfflineRun:
        """One last tick at the time of the last input; returns the run."""
        self._handle("tick", None)
        self.run.duration_s = self.now_s
        self.run.counters = dict(self.core.counters)
        return self.run

    def _tick_until(self, now_s: float) -> None:
        interval = self.config.status_interval_s
        if self._next_tick_s <= self.now_s:
            self._next_tick_s = self.now_s + interval
        ticks = 0
        while self._next_tick_s < now_s and ticks < _MAX_TICKS_PER_GAP:
            self.now_s = self._next_tick_s
            self._handle("tick", None)
            self._next_tick_s += interval
            ticks += 1

    # ------------------------------------------------------------------ actions
    def _handle(self, kind: str, message) -> None:
        pending = [(kind, message)]
        while pending:
            kind, message = pending.pop(0)
            actions = self.core.on_input(kind, message, self.now_s)
            for action in actions:
                if isinstance(action, (Publish, Reply)):
                    self.run.outputs.append((self.now_s, action))
                elif isinstance(action, CancelJob):
                    self._cancelled.add(action.job_id)
            for action in actions:
                if isinstance(action, StartJob):
                    pending.append(("job_done", self._run_job(action.job)))
            if kind == "job_done":
                self._note_result(message, actions)

    def _run_job(self, job):
        import threading

        cancel = threading.Event()
        if job.job_id in self._cancelled:
            cancel.set()
        run = job if self.deadlines else replace(job, deadline_s=None)
        result = run_job(self.planner, run, cancel)
        result.job = job
        return result

    def _note_result(self, result, actions) -> None:
        job = result.job
        if result.outcome == "kept":
            self.run.checks_kept += 1
            return
        for action in actions:
            if isinstance(action, Publish) and action.topic == "path":
                self._add_replan(result, action.body, action.body.get("trigger", job.trigger))
            elif isinstance(action, Reply) and job.kind == "request" and isinstance(action.body.get("path"), dict):
                self._add_replan(result, action.body["path"], "request")

    def _add_replan(self, result, document: dict, trigger: str) -> None:
        job = result.job
        poses = None
        if result.outcome == "found" and result.poses is not None:
            poses = np.asarray(result.poses, float)
            if result.lead_in is not None and len(result.lead_in) > 1:
                poses = np.vstack((result.lead_in[:-1], poses))
        stats = document.get("stats") or {}
        expansions = stats.get("expansions")
        self.run.replans.append(Replan(
            index=len(self.run.replans) + 1, t_s=self.now_s, trigger=str(trigger), kind=job.kind,
            map_id=job.map_id, goal_id=job.goal_id, status=str(document.get("status")),
            reason=document.get("reason"), length_m=document.get("length_m"), reverse_m=document.get("reverse_m"),
            gear_changes=document.get("gear_changes"), expansions=None if expansions is None else int(expansions),
            plan_s=float(result.elapsed_s), start=tuple(float(v) for v in job.start),
            goal=tuple(float(v) for v in job.goal), starts_ahead=bool(result.starts_ahead),
            detail=str(document.get("detail") or ""), poses=poses, grid=job.grid,
        ))
        if self.on_replan is not None:
            self.on_replan(self.run, self.run.replans[-1])


# ---------------------------------------------------------------------- sources


def log_inputs(path, damage: list[str]) -> tuple[int, Iterator[TimedInput]]:
    """(size in bytes, the inputs and control records of a recording log in file order).

    Damage the reader finds is appended to ``damage`` (one line each) as the iteration
    passes it, and at its end.
    """
    from .recording import LogFormatError, LogReader

    try:
        reader = LogReader(path)
    except LogFormatError as exc:
        raise SourceError(str(exc)) from None
    size = Path(path).stat().st_size

    def items() -> Iterator[TimedInput]:
        seen = 0
        try:
            for record in reader:
                while seen < len(reader.damage):
                    damage.append(reader.damage[seen].describe())
                    seen += 1
                if record.kind in ("grid", "pose", "control"):
                    yield TimedInput(record.t_s, record.kind, record.message, record.offset)
        except LogFormatError as exc:
            damage.append(f"reading stopped: {exc}")
        for entry in reader.damage[seen:]:
            damage.append(entry.describe())

    return size, items()


def _drive_number(table: dict, key: str, where: str, *, default=None) -> float:
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise DriveError(f"{where}: {key} must be a finite number, got {value!r}")
    return float(value)


_DRIVE_TOP_KEYS = ("cell_size_m", "origin_m", "occupied_below", "free_above", "unknown_is", "map", "pose", "goal")


def drive_inputs(folder) -> tuple[int, Iterator[TimedInput]]:
    """(entry count, the inputs of a drive folder in time order): docs/files.md, "Drive folder".

    Map images become grid messages with the image file's bytes (``png`` or ``pgm``),
    cell size and thresholds from the image's sidecar ``NAME.toml`` when there is one,
    else from ``drive.toml``; goals become ``goal`` control requests. At equal times maps
    come first, then poses, then goals.
    """
    import cv2

    from veer.maps import MapSettingsError, read_sidecar, sidecar_path_for

    folder = Path(folder)
    drive_file = folder / DRIVE_FILE if folder.is_dir() else folder
    folder = drive_file.parent
    try:
        values = tomllib.loads(drive_file.read_text(encoding="utf-8"))
    except OSError as exc:
        raise DriveError(f"cannot read {drive_file}: {exc.strerror or exc}; a drive folder needs a {DRIVE_FILE}") \
            from None
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise DriveError(f"{drive_file} is not valid TOML ({exc}); see docs/files.md, 'Drive folder'") from None
    unknown = sorted(set(values) - set(_DRIVE_TOP_KEYS))
    if unknown:
        raise DriveError(f"{drive_file}: unknown key {unknown[0]!r}; accepted: {', '.join(_DRIVE_TOP_KEYS)}")
    defaults = {key: values[key] for key in ("cell_size_m", "origin_m", "occupied_below", "free_above",
                                             "unknown_is") if key in values}
    entries: list[tuple[float, int, int, str, object]] = []
    order = 0
    for section, rank, keys in (("map", 0, ("t_s", "image", "map_id")),
                                ("pose", 1, ("t_s", "x_m", "y_m", "heading_deg")),
                                ("goal", 2, ("t_s", "x_m", "y_m", "heading_deg", "reverse"))):
        tables = values.get(section, [])
        if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
            raise DriveError(f"{drive_file}: {section} must be an array of tables ([[{section}]])")
        for number, table in enumerate(tables, 1):
            where = f"{drive_file}: [[{section}]] number {number}"
            extra = sorted(set(table) - set(keys))
            if extra:
                raise DriveError(f"{where}: unknown key {extra[0]!r}; accepted: {', '.join(keys)}")
            t_s = _drive_number(table, "t_s", where)
            if section == "map":
                image = table.get("image")
                if not isinstance(image, str) or not image:
                    raise DriveError(f"{where}: image must be the file name of a PNG or PGM map image")
                path = folder / image
                try:
                    data = path.read_bytes()
                except OSError as exc:
                    raise DriveError(f"{where}: cannot read map image {path}: {exc.strerror or exc}") from None
                pixels = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
                if pixels is None:
                    raise DriveError(f"{where}: {path} is not a PNG or PGM image")
                settings = dict(defaults)
                sidecar = sidecar_path_for(path)
                if sidecar.is_file():
                    try:
                        side = read_sidecar(sidecar)
                    except MapSettingsError as exc:
                        raise DriveError(str(exc)) from None
                    settings.update({"origin_m": list(side.origin_m), "occupied_below": side.occupied_below,
                                     "free_above": side.free_above, "unknown_is": side.unknown_is})
                    if side.cell_size_m is not None:
                        settings["cell_size_m"] = side.cell_size_m
                if "cell_size_m" not in settings:
                    raise DriveError(f"{where}: no cell size for {image}; write cell_size_m in {drive_file} "
                                     f"or in {sidecar.name} beside the image")
                map_id = table.get("map_id", image)
                message = {"v": 1, "kind": "grid", "map_id": map_id, "rows": int(pixels.shape[0]),
                           "cols": int(pixels.shape[1]), "cell_size_m": settings.pop("cell_size_m"),
                           "origin_m": list(settings.pop("origin_m", [0.0, 0.0])),
                           "encoding": "png" if data[:8] == b"\x89PNG\r\n\x1a\n" else "pgm", "cells": data,
                           **settings}
                entries.append((t_s, rank, order, "grid", message))
            else:
                pose = {"x_m": _drive_number(table, "x_m", where), "y_m": _drive_number(table, "y_m", where),
                        "heading_rad": math.radians(_drive_number(table, "heading_deg", where))}
                if section == "pose":
                    entries.append((t_s, rank, order, "pose", {"v": 1, "kind": "pose", **pose, "t_s": t_s}))
                else:
                    request = {"v": 1, "op": "goal", **pose}
                    if "reverse" in table:
                        if not isinstance(table["reverse"], bool):
                            raise DriveError(f"{where}: reverse must be true or false")
                        request["reverse"] = table["reverse"]
                    entries.append((t_s, rank, order, "control", {"request": request, "reply": None}))
            order += 1
    entries.sort(key=lambda entry: entry[:3])
    return len(entries), (TimedInput(t, kind, message, i)
                          for i, (t, _rank, _order, kind, message) in enumerate(entries))


def open_source(source, damage: list[str]) -> tuple[int, Iterator[TimedInput]]:
    """(progress total, inputs) of a log file, a drive folder or a ``drive.toml``; raises :class:`SourceError`."""
    path = Path(source)
    if path.is_dir() or path.suffix.lower() == ".toml":
        return drive_inputs(path)
    if not path.exists():
        raise SourceError(f"{path} does not exist; give a recording log or a drive folder")
    return log_inputs(path, damage)


def replay(source, config: NodeConfig | None = None, *, deadlines: bool = False, realtime: bool = False,
           progress: Callable[[int, int], None] | None = None,
           on_replan: Callable[[OfflineRun, Replan], None] | None = None) -> OfflineRun:
    """Replay a log or drive folder through a fresh node; see the module docstring.

    ``realtime`` paces the inputs at their recorded spacing (plans still run inline);
    ``progress(done, total)`` is called as the source is read (bytes of a log, entries
    of a drive); ``on_replan`` as for :class:`OfflineNode`. Raises :class:`SourceError` when the source cannot be read at all;
    damage inside a log is listed in ``run.damage`` and skipped.
    """
    config = config or NodeConfig()
    damage: list[str] = []
    total, items = open_source(source, damage)
    node = OfflineNode(config, deadlines=deadlines, source=str(source), on_replan=on_replan)
    wall0 = time.monotonic()
    for item in items:
        if realtime and node.t0_s is not None:
            wait_s = (item.t_s - node.t0_s) - (time.monotonic() - wall0)
            if wait_s > 0:
                time.sleep(wait_s)
        node.feed(item)
        if progress is not None:
            progress(item.progress, total)
    run = node.finish()
    run.damage = damage
    if progress is not None:
        progress(total, total)
    return run
