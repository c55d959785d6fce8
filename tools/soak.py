"""Soak run of the planner node: grids at 10 Hz, poses at 50 Hz, goals changing, memory watched.

Starts `veer node` in a **subprocess** (loopback, ports picked free, a NODE.toml of its
own in a temporary folder) and drives it for a bounded time with one loop in this
process. A subprocess, not a thread of this process, because the figure that matters is
the node's own resident memory (``/proc/PID/status`` ``VmRSS``), which this driver's
allocations would blur; it is also the program a robot runs, and it can be killed
outright on exit.

The world: a 40 m x 30 m yard at 0.1 m cells with two fixed boxes and one box that
moves up and down across the middle (x = 20 m), pausing now and then and stopping for
the robot, so that it sometimes blocks the robot's path. A simulated robot follows the
latest path at 1.5 m/s; the goal changes when the robot arrives or every
``GOAL_EVERY_S`` seconds.

Reported (a markdown table on stdout, also written with ``--out FILE.md``): replans by
trigger, ``path_kept`` events, the node's counters, latency from sending a grid of new
content to receiving the first ``path`` or ``path_kept`` naming that grid or a later
one (p50 / p95 / p99), and the node's resident memory sampled every few seconds with a
least-squares slope in MB per hour after a warm-up.

    python -m veer.tools.soak              # 5 minutes
    python -m veer.tools.soak --minutes 60 --out soak.md
    python -m veer.tools.soak --quick      # a 20-second smoke run

Every loop is bounded in count and time; sockets are loopback only; the node is stopped
(SIGINT, then SIGKILL after 10 s) whatever happens, and dies with this process (Linux
parent-death signal). Exit codes: 0 finished with memory flat (or a run too short to
judge), 1 the node died, never answered, or its memory grew, 2 bad arguments.
"""

from __future__ import annotations

import argparse
import math
import signal
import socket
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import msgpack
import numpy as np
import zmq

__all__ = ["NodeProcess", "NodeLink", "SoakWorld", "Mover", "SimulatedRobot", "memory_slope_mb_per_h", "run_soak",
           "main"]

CELL_M = 0.1
WIDTH_M, HEIGHT_M = 40.0, 30.0
FREE_SHADE, OCCUPIED_SHADE = 255, 0  # grey levels of a map image: light = free, dark = occupied
FIXED_BOXES_M = ((11.0, 3.0, 13.0, 9.0), (27.0, 21.0, 29.0, 27.0))  # (x0, y0, x1, y1)
MOVER_X_M = (19.3, 20.7)  # the moving box spans these x ...
MOVER_HALF_HEIGHT_M = 2.0  # ... and 4 m in y
MOVER_SPEED_M_PER_S = 1.2
MOVER_RUN_S, MOVER_PAUSE_S = 9.0, 3.0  # moves this long, then stands still this long
GOALS = ((35.0, 15.0, 0.0), (5.0, 15.0, math.pi), (34.0, 5.0, math.pi / 2), (6.0, 26.0, math.pi))
START = (5.0, 15.0, 0.0)
ROBOT_SPEED_M_PER_S = 1.5
GRID_HZ, POSE_HZ = 10.0, 50.0
GOAL_EVERY_S = 25.0  # a new goal at the latest this often
ARRIVED_M = 0.5
FLAT_MB_PER_H = 10.0  # memory counts as flat when the slope after warm-up is below this
WARMUP_S = 240.0  # planner caches and allocator pools fill in the first minutes (a 20-minute run: RSS
# 74 -> 84 MB by 240 s, then 83.6 to 84.3 MB); the slope is fitted after this, at most 40% of the run
MIN_JUDGED_S = 60.0  # a shorter stretch after warm-up is too short to judge
UNANSWERED_AFTER_S = 30.0  # a grid with no answer this long is counted as unanswered
CONTROL_TIMEOUT_S = 5.0
STOP_WAIT_S = 10.0


# ---------------------------------------------------------------------- the node process


def free_port() -> int:
    """A TCP port on 127.0.0.1 free right now (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _die_with_parent() -> None:  # pragma: no cover - runs in the child between fork and exec
    """Linux prctl(PR_SET_PDEATHSIG, SIGKILL): the node dies if the driver does."""
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)
    except Exception:  # noqa: BLE001 - not Linux: the finally blocks still stop the node
        pass


def read_memory_mb(pid: int) -> dict[str, float]:
    """``VmRSS`` (resident now) and ``VmHWM`` (peak) of a process, MB (Linux ``/proc/PID/status``)."""
    values = {}
    with open(f"/proc/{pid}/status") as status:
        for line in status:
            if line.startswith(("VmRSS:", "VmHWM:")):
                key, value = line.split(":", 1)
                values[key] = int(value.split()[0]) / 1024.0  # kB -> MB
    return values


class NodeProcess:
    """`veer node --config NODE.toml` in a subprocess on free loopback ports.

    ``extra_toml`` is appended to the generated NODE.toml (any section but ``[sockets]``
    and ``[log]``). The node's stderr goes to ``workdir/NAME.log``. Use as a context
    manager, or call :meth:`stop`; :meth:`kill` sends SIGKILL.
    """

    def __init__(self, workdir: Path | str, *, extra_toml: str = "", name: str = "node",
                 log_level: str = "warning", ready_timeout_s: float = 60.0):
        self.workdir = Path(workdir)
        self.log_path = self.workdir / f"{name}.log"
        self.config_path = self.workdir / f"{name}.toml"
        self.process: subprocess.Popen | None = None
        for _attempt in range(3):  # a port picked free can be taken before the node binds it
            ports = [free_port() for _ in range(3)]
            self.addresses = {key: f"tcp://127.0.0.1:{port}" for key, port in zip(("inputs", "outputs", "control"),
                                                                                  ports)}
            self.config_path.write_text(
                "[sockets]\n" + "".join(f'{key} = "{value}"\n' for key, value in self.addresses.items())
                + f'[log]\nlevel = "{log_level}"\n' + extra_toml)
            with open(self.log_path, "w") as stderr:
                self.process = subprocess.Popen(
                    [sys.executable, "-m", "veer.tools.node", "--config", str(self.config_path)],
                    stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=stderr,
                    preexec_fn=_die_with_parent if sys.platform.startswith("linux") else None)
            try:
                self.wait_ready(ready_timeout_s)
                return
            except RuntimeError:
                if self.process.poll() is None or "in use" not in self.stderr_text():
                    self.kill()
                    raise
        raise RuntimeError(f"the node could not bind free ports in 3 attempts: {self.stderr_tail()}")

    @property
    def pid(self) -> int:
        return self.process.pid

    def alive(self) -> bool:
        return self.process is not None and self.process.poll() is None

    def stderr_text(self) -> str:
        try:
            return self.log_path.read_text(errors="replace")
        except OSError:
            return ""

    def stderr_tail(self, lines: int = 5) -> str:
        return " | ".join(self.stderr_text().strip().splitlines()[-lines:])

    def wait_ready(self, timeout_s: float) -> dict:
        """Ask ``status`` until the node answers (bounded by ``timeout_s``); returns the answer."""
        end = time.monotonic() + timeout_s
        context = zmq.Context.instance()
        while time.monotonic() < end:
            if not self.alive():
                raise RuntimeError(f"the node exited with code {self.process.returncode}: {self.stderr_tail()}")
            request = context.socket(zmq.REQ)
            request.setsockopt(zmq.LINGER, 0)
            try:
                request.connect(self.addresses["control"])
                request.send(msgpack.packb({"v": 1, "op": "status"}))
                if request.poll(500):
                    return msgpack.unpackb(request.recv(), raw=False)
            finally:
                request.close(linger=0)
        raise RuntimeError(f"the node did not answer within {timeout_s} s: {self.stderr_tail()}")

    def memory_mb(self) -> dict[str, float]:
        return read_memory_mb(self.pid)

    def kill(self) -> None:
        """SIGKILL and reap."""
        if self.alive():
            self.process.kill()
        if self.process is not None:
            self.process.wait(STOP_WAIT_S)

    def stop(self) -> int | None:
        """SIGINT, wait up to 10 s, then SIGKILL; returns the exit code (negative: killed by that signal)."""
        if self.process is None:
            return None
        if self.alive():
            self.process.send_signal(signal.SIGINT)
            try:
                self.process.wait(STOP_WAIT_S)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(STOP_WAIT_S)
        return self.process.returncode

    def __enter__(self) -> "NodeProcess":
        return self

    def __exit__(self, *exc) -> None:
        self.stop()


# ---------------------------------------------------------------------- the driver's sockets


class NodeLink:
    """The driver's three sockets: XPUB to the inputs, SUB to the outputs, REQ to control.

    XPUB, so that :meth:`connect` can wait for the node's subscription before the first
    input (a PUB drops messages until then). Requests time out and rebuild their REQ
    socket (a REQ socket that missed its reply cannot send again).
    """

    def __init__(self, addresses: dict[str, str], *, timeout_s: float = 30.0, send_hwm: int | None = None):
        self.addresses = addresses
        self.context = zmq.Context()
        self.inputs = self.context.socket(zmq.XPUB)
        self.inputs.setsockopt(zmq.LINGER, 0)
        if send_hwm is not None:  # at most this many inputs queued here (ZMQ_SNDHWM); more are dropped
            self.inputs.setsockopt(zmq.SNDHWM, send_hwm)
        self.outputs = self.context.socket(zmq.SUB)
        self.outputs.setsockopt(zmq.LINGER, 0)
        self.outputs.setsockopt(zmq.SUBSCRIBE, b"")
        self.control = None
        self.control_timeouts = 0
        try:
            self.inputs.connect(addresses["inputs"])
            self.outputs.connect(addresses["outputs"])
            self._new_control()
            if not self.inputs.poll(int(1000 * timeout_s)):
                raise RuntimeError(f"the node at {addresses['inputs']} did not subscribe within {timeout_s} s")
            self.inputs.recv()  # the node's subscription
            if not self.outputs.poll(int(1000 * timeout_s)):  # a status proves our subscription arrived
                raise RuntimeError(f"no output from {addresses['outputs']} within {timeout_s} s")
        except BaseException:
            self.close()
            raise

    def _new_control(self) -> None:
        if self.control is not None:
            self.control.close(linger=0)
        self.control = self.context.socket(zmq.REQ)
        self.control.setsockopt(zmq.LINGER, 0)
        self.control.connect(self.addresses["control"])

    def send(self, topic: str, message: dict) -> None:
        self.inputs.send_multipart([topic.encode("ascii"), msgpack.packb(message, use_bin_type=True)])

    def request(self, message: dict, timeout_s: float = CONTROL_TIMEOUT_S) -> dict | None:
        """One control request; None (and a counted timeout) when no answer came in time."""
        self.control.send(msgpack.packb({"v": 1, **message}, use_bin_type=True))
        if not self.control.poll(int(1000 * timeout_s)):
            self.control_timeouts += 1
            self._new_control()
            return None
        return msgpack.unpackb(self.control.recv(), raw=False)

    def receive(self, timeout_s: float) -> tuple[str, dict] | None:
        """The next output (topic, message) within ``timeout_s``, or None."""
        if not self.outputs.poll(max(0, math.ceil(1000 * timeout_s))):
            return None
        topic, payload = self.outputs.recv_multipart()
        return topic.decode("ascii", "replace"), msgpack.unpackb(payload, raw=False)

    def close(self) -> None:
        for sock in (self.inputs, self.outputs, self.control):
            if sock is not None:
                sock.close(linger=0)
        self.context.term()


# ---------------------------------------------------------------------- world and robot


class SoakWorld:
    """The yard's shades (row 0 at the top), with the moving box at its place at time ``t_s``."""

    def __init__(self):
        self.rows, self.cols = round(HEIGHT_M / CELL_M), round(WIDTH_M / CELL_M)
        self.base = np.full((self.rows, self.cols), FREE_SHADE, np.uint8)
        for box in FIXED_BOXES_M:
            self._paint(self.base, box)

    def _paint(self, shades: np.ndarray, box_m) -> None:
        x0, y0, x1, y1 = box_m
        col0, col1 = max(0, int(x0 / CELL_M)), min(self.cols, int(math.ceil(x1 / CELL_M)))
        row0 = max(0, self.rows - int(math.ceil(y1 / CELL_M)))
        row1 = min(self.rows, self.rows - int(y0 / CELL_M))
        shades[row0:row1, col0:col1] = OCCUPIED_SHADE

    def shades(self, mover_y_m: float) -> np.ndarray:
        """The yard with the moving box centred at ``mover_y_m``."""
        shades = self.base.copy()
        self._paint(shades, mover_box_m(mover_y_m))
        return shades

    def grid_message(self, shades: np.ndarray, map_id: int) -> dict:
        return {"v": 1, "kind": "grid", "map_id": map_id, "rows": self.rows, "cols": self.cols,
                "cell_size_m": CELL_M, "origin_m": [0.0, 0.0], "encoding": "raw", "cells": shades.tobytes()}


def mover_box_m(centre_y_m: float) -> tuple[float, float, float, float]:
    return (MOVER_X_M[0], centre_y_m - MOVER_HALF_HEIGHT_M, MOVER_X_M[1], centre_y_m + MOVER_HALF_HEIGHT_M)


class Mover:
    """The moving box: up and down between y = 3 m and 27 m, pausing MOVER_PAUSE_S after every MOVER_RUN_S.

    Like a careful driver it stops while its next step would come within ``clear_m`` of
    the robot, so it blocks the robot's path but never runs over the robot itself.
    """

    LOW_M, HIGH_M = 3.0 + MOVER_HALF_HEIGHT_M, HEIGHT_M - 3.0 - MOVER_HALF_HEIGHT_M

    def __init__(self, clear_m: float = 1.6):
        self.y_m = self.LOW_M
        self.direction = 1.0
        self.clock_s = 0.0
        self.clear_m = clear_m
        self.yields = 0

    def step(self, dt_s: float, robot_xy) -> float:
        cycle_s = MOVER_RUN_S + MOVER_PAUSE_S
        self.clock_s = (self.clock_s + dt_s) % cycle_s
        if self.clock_s >= MOVER_RUN_S:
            return self.y_m
        y_m = self.y_m + self.direction * MOVER_SPEED_M_PER_S * dt_s
        if not self.LOW_M <= y_m <= self.HIGH_M:
            self.direction = -self.direction
            y_m = min(self.HIGH_M, max(self.LOW_M, y_m))
        x0, y0, x1, y1 = mover_box_m(y_m)
        gap_m = math.hypot(max(x0 - robot_xy[0], 0.0, robot_xy[0] - x1), max(y0 - robot_xy[1], 0.0, robot_xy[1] - y1))
        if gap_m < self.clear_m:
            self.yields += 1  # wait for the robot to pass
            return self.y_m
        self.y_m = y_m
        return self.y_m


def _wrap_rad(angle: float) -> float:
    return (angle + math.pi) % (2 * math.pi) - math.pi


class SimulatedRobot:
    """Follows the latest path at a fixed speed; stands still without one.

    A new path that starts at the robot's (slightly old) pose: the robot snaps to the
    nearest of its poses within the first few metres. A path that ``starts_ahead`` on the
    old one: the robot drives the old path until it reaches the new path's first pose.
    """

    SNAP_WINDOW_M = 5.0

    def __init__(self, pose=START, speed_m_per_s: float = ROBOT_SPEED_M_PER_S):
        self.pose = tuple(float(v) for v in pose)
        self.speed_m_per_s = speed_m_per_s
        self.poses: np.ndarray | None = None
        self.along_m: np.ndarray | None = None
        self.s_m = 0.0
        self.pending: np.ndarray | None = None

    @staticmethod
    def _along(poses: np.ndarray) -> np.ndarray:
        return np.concatenate(([0.0], np.cumsum(np.hypot(*np.diff(poses[:, :2], axis=0).T))))

    def follow(self, path: dict) -> None:
        if path.get("status") != "found" or len(path.get("poses") or []) < 2:
            self.poses = self.along_m = self.pending = None  # no path: stop
            return
        poses = np.asarray(path["poses"], dtype=float)
        if path.get("starts_ahead") and self.poses is not None:
            self.pending = poses
            return
        self._take(poses, snap=True)

    def _take(self, poses: np.ndarray, snap: bool) -> None:
        along = self._along(poses)
        self.poses, self.along_m, self.pending, self.s_m = poses, along, None, 0.0
        if snap:
            window = along <= self.SNAP_WINDOW_M
            gaps = np.hypot(poses[window, 0] - self.pose[0], poses[window, 1] - self.pose[1])
            self.s_m = float(along[int(np.argmin(gaps))])
        self.pose = self._pose_at(self.s_m)

    def _pose_at(self, s_m: float) -> tuple[float, float, float]:
        poses, along = self.poses, self.along_m
        i = int(np.clip(np.searchsorted(along, s_m, side="right") - 1, 0, len(poses) - 2))
        t = min(1.0, max(0.0, (s_m - along[i]) / max(along[i + 1] - along[i], 1e-12)))
        x = poses[i, 0] + t * (poses[i + 1, 0] - poses[i, 0])
        y = poses[i, 1] + t * (poses[i + 1, 1] - poses[i, 1])
        heading = _wrap_rad(poses[i, 2] + t * _wrap_rad(poses[i + 1, 2] - poses[i, 2]))
        return float(x), float(y), float(heading)

    def step(self, dt_s: float) -> tuple[float, float, float]:
        if self.poses is None:
            return self.pose
        self.s_m = min(self.s_m + self.speed_m_per_s * dt_s, float(self.along_m[-1]))
        self.pose = self._pose_at(self.s_m)
        if self.pending is not None:
            gap_m = math.hypot(self.pending[0, 0] - self.pose[0], self.pending[0, 1] - self.pose[1])
            if gap_m <= self.speed_m_per_s * dt_s + 0.05 or self.s_m >= self.along_m[-1]:
                self._take(self.pending, snap=False)
        return self.pose

    def distance_to(self, pose) -> float:
        return math.hypot(pose[0] - self.pose[0], pose[1] - self.pose[1])


# ---------------------------------------------------------------------- figures


def memory_slope_mb_per_h(times_s, rss_mb) -> tuple[float, float]:
    """Least-squares slope of RSS over time, MB per hour, and its standard error.

    Ordinary least squares for a straight line (any statistics textbook; the standard
    error is sqrt(residual variance / sum of squared time deviations)).
    """
    t_h = np.asarray(times_s, dtype=float) / 3600.0
    y = np.asarray(rss_mb, dtype=float)
    if len(t_h) < 3 or np.ptp(t_h) == 0:
        return float("nan"), float("nan")
    slope, intercept = np.polyfit(t_h, y, 1)
    residual = y - (slope * t_h + intercept)
    spread = float(np.sum((t_h - t_h.mean()) ** 2))
    stderr = math.sqrt(float(np.sum(residual ** 2)) / (len(t_h) - 2) / spread)
    return float(slope), stderr


def _percentile_ms(values: list[float], q: float) -> float:
    return 1000.0 * float(np.percentile(np.asarray(values), q)) if values else float("nan")


@dataclass
class SoakResult:
    """Everything one soak run measured."""

    duration_s: float = 0.0
    warmup_s: float = 0.0
    node_pid: int = 0
    grids_sent: int = 0
    grids_changed: int = 0
    poses_sent: int = 0
    goals_set: int = 0
    goals_reached: int = 0
    paths: dict = field(default_factory=dict)  # trigger -> count
    paths_found: int = 0
    paths_no_path: int = 0
    no_path_reasons: dict = field(default_factory=dict)  # reason -> count
    kept_events: int = 0
    other_events: dict = field(default_factory=dict)  # code -> count
    latencies_s: list = field(default_factory=list)
    answered_own: int = 0
    answered_later: int = 0
    unanswered: int = 0
    control_timeouts: int = 0
    counters: dict = field(default_factory=dict)
    memory: list = field(default_factory=list)  # (elapsed_s, rss_mb, hwm_mb)
    node_alive: bool = True
    node_exit_code: int | None = None

    def slope(self) -> tuple[float, float, int, float]:
        """(slope MB/h, standard error, samples, span s) of the samples after warm-up."""
        after = [(t, rss) for t, rss, _ in self.memory if t >= self.warmup_s]
        if len(after) < 3:
            return float("nan"), float("nan"), len(after), 0.0
        slope, stderr = memory_slope_mb_per_h([t for t, _ in after], [rss for _, rss in after])
        return slope, stderr, len(after), after[-1][0] - after[0][0]

    def verdict(self) -> str:
        slope, _stderr, _n, span_s = self.slope()
        if span_s < MIN_JUDGED_S or math.isnan(slope):
            return f"too short to judge (under {MIN_JUDGED_S:.0f} s after warm-up)"
        if slope < FLAT_MB_PER_H:
            return f"flat (slope below {FLAT_MB_PER_H:.0f} MB/h)"
        return f"GROWING (slope {slope:.1f} MB/h, bound {FLAT_MB_PER_H:.0f} MB/h)"

    def ok(self) -> bool:
        return (self.node_alive and self.paths_found > 0 and self.control_timeouts == 0
                and not self.verdict().startswith("GROWING"))

    def table(self) -> str:
        slope, stderr, samples, span_s = self.slope()
        rss = [m[1] for m in self.memory]
        after = [m[1] for m in self.memory if m[0] >= self.warmup_s]
        counters = ", ".join(f"{k} {v}" for k, v in self.counters.items()) or "-"
        triggers = ", ".join(f"{k} {v}" for k, v in sorted(self.paths.items())) or "-"
        reasons = ", ".join(f"{k} {v}" for k, v in sorted(self.no_path_reasons.items())) or "none"
        events = ", ".join(f"{k} {v}" for k, v in sorted(self.other_events.items())) or "none"
        lat = self.latencies_s
        lines = [
            f"### veer node soak: {self.duration_s / 60:.1f} min, grids {GRID_HZ:.0f} Hz, poses {POSE_HZ:.0f} Hz, "
            f"robot {ROBOT_SPEED_M_PER_S} m/s",
            "",
            "| item | figure |",
            "| --- | --- |",
            f"| inputs sent | {self.grids_sent} grids ({self.grids_changed} of new content), {self.poses_sent} poses |",
            f"| goals | {self.goals_set} set, {self.goals_reached} reached |",
            f"| paths received | {sum(self.paths.values())} ({self.paths_found} found, {self.paths_no_path} no_path) |",
            f"| paths by trigger | {triggers} |",
            f"| no_path reasons | {reasons} |",
            f"| path_kept events | {self.kept_events} |",
            f"| other events | {events} |",
            f"| node counters at the end | {counters} |",
            f"| control requests without an answer within {CONTROL_TIMEOUT_S:.0f} s | {self.control_timeouts} |",
            f"| latency, grid sent -> path or path_kept naming it or a later grid ({len(lat)} grids) | "
            f"p50 {_percentile_ms(lat, 50):.0f} ms, p95 {_percentile_ms(lat, 95):.0f} ms, "
            f"p99 {_percentile_ms(lat, 99):.0f} ms, max {_percentile_ms(lat, 100):.0f} ms |",
            f"| grids answered by an output naming them / by a later grid / unanswered | "
            f"{self.answered_own} / {self.answered_later} / {self.unanswered} |",
            f"| node RSS: first sample, after warm-up ({self.warmup_s:.0f} s), last, peak (VmHWM) | "
            + (f"{rss[0]:.1f}, {after[0] if after else float('nan'):.1f}, {rss[-1]:.1f}, "
               f"{self.memory[-1][2]:.1f} MB |" if rss else "- |"),
            f"| RSS slope after warm-up (least squares, {samples} samples over {span_s:.0f} s) | "
            f"{slope:+.1f} MB/h (standard error {stderr:.1f}) |",
            f"| memory | {self.verdict()} |",
            f"| node | {'alive to the end' if self.node_alive else 'DIED'}; exit code after SIGINT: "
            f"{self.node_exit_code} |",
        ]
        if self.memory:
            lines += ["", "| t (s) | node RSS (MB) |", "| --- | --- |"]
            step = max(1, len(self.memory) // 10)
            picked = self.memory[::step]
            if picked[-1] is not self.memory[-1]:
                picked.append(self.memory[-1])
            lines += [f"| {t:.0f} | {r:.1f} |" for t, r, _ in picked]
        return "\n".join(lines)


# ---------------------------------------------------------------------- the run


def run_soak(duration_s: float, *, warmup_s: float | None = None, sample_every_s: float | None = None,
             workdir: Path | str | None = None, progress=None) -> SoakResult:
    """Start a node, drive it for ``duration_s``, stop it; returns the figures."""
    warmup_s = min(WARMUP_S, 0.4 * duration_s) if warmup_s is None else warmup_s
    sample_every_s = min(10.0, max(1.0, duration_s / 60.0)) if sample_every_s is None else sample_every_s
    result = SoakResult(duration_s=duration_s, warmup_s=warmup_s)
    with tempfile.TemporaryDirectory(prefix="veer-soak-") as tmp:
        node = NodeProcess(workdir or tmp)
        result.node_pid = node.pid
        try:
            link = NodeLink(node.addresses)
            try:
                _drive(node, link, result, duration_s, sample_every_s, progress)
            finally:
                result.control_timeouts = link.control_timeouts
                link.close()
        finally:
            result.node_alive = result.node_alive and node.alive()
            result.node_exit_code = node.stop()
    return result


def _drive(node: NodeProcess, link: NodeLink, result: SoakResult, duration_s: float, sample_every_s: float,
           progress) -> None:
    world = SoakWorld()
    robot = SimulatedRobot()
    mover = Mover()
    sent_at: dict[int, float] = {}  # map_id of a grid of new content -> send time (perf_counter)
    previous_cells = None
    goal_index, goal, goal_set_at = 0, GOALS[0], -math.inf
    grid_period_s, pose_period_s = 1.0 / GRID_HZ, 1.0 / POSE_HZ
    t0 = time.perf_counter()
    next_grid = next_pose = next_sample = t0
    last_pose_t = t0
    map_id = 0
    # bounded: the loop ends at duration_s; a pass sends what is due, then waits (at least 1 ms,
    # at most until the next send) for outputs, so there are at most ~1000 passes a second
    max_passes = int(duration_s * 2000) + 1000
    for _ in range(max_passes):
        now = time.perf_counter()
        elapsed_s = now - t0
        if elapsed_s >= duration_s:
            break
        if now >= next_sample:
            next_sample += sample_every_s
            if not node.alive():
                result.node_alive = False
                break
            memory = node.memory_mb()
            result.memory.append((elapsed_s, memory.get("VmRSS", float("nan")), memory.get("VmHWM", float("nan"))))
            if progress:
                progress(f"t={elapsed_s:6.1f} s  RSS {memory.get('VmRSS', float('nan')):.1f} MB  "
                         f"paths {sum(result.paths.values())}  kept {result.kept_events}")
        if now >= next_pose:
            next_pose += pose_period_s
            pose = robot.step(now - last_pose_t)
            last_pose_t = now
            link.send("pose", {"v": 1, "kind": "pose", "x_m": pose[0], "y_m": pose[1], "heading_rad": pose[2],
                               "t_s": time.time()})
            result.poses_sent += 1
            arrived = robot.distance_to(goal) <= ARRIVED_M
            if arrived or elapsed_s - goal_set_at >= GOAL_EVERY_S:
                if arrived and goal_set_at > -math.inf:
                    result.goals_reached += 1
                goal_index = (goal_index + 1) % len(GOALS) if goal_set_at > -math.inf else 0
                goal = GOALS[goal_index]
                answer = link.request({"op": "goal", "x_m": goal[0], "y_m": goal[1], "heading_rad": goal[2]})
                goal_set_at = time.perf_counter() - t0
                result.goals_set += answer is not None and bool(answer.get("ok"))
        if now >= next_grid:
            next_grid += grid_period_s
            map_id += 1
            shades = world.shades(mover.step(grid_period_s, robot.pose))
            cells = shades.tobytes()
            if cells != previous_cells:
                sent_at[map_id] = time.perf_counter()
                result.grids_changed += 1
                previous_cells = cells
            link.send("grid", world.grid_message(shades, map_id))
            result.grids_sent += 1
        # outputs until the next send is due
        due = min(next_grid, next_pose, next_sample)
        for _read in range(1000):  # bounded; the node publishes far fewer in one pose period
            item = link.receive(max(0.0, due - time.perf_counter()))
            if item is None:
                break
            _take_output(item, robot, sent_at, result, time.perf_counter())
            if time.perf_counter() >= due:
                break
        stale = [i for i, t in sent_at.items() if time.perf_counter() - t > UNANSWERED_AFTER_S]
        for i in stale:
            del sent_at[i]
            result.unanswered += 1
    status = link.request({"op": "status"})
    if status is not None and status.get("ok"):
        result.counters = status.get("counters", {})
    memory = node.memory_mb() if node.alive() else {}
    if memory:
        result.memory.append((time.perf_counter() - t0, memory["VmRSS"], memory["VmHWM"]))
    result.unanswered += len(sent_at)


def _take_output(item, robot: SimulatedRobot, sent_at: dict, result: SoakResult, received: float) -> None:
    topic, message = item
    answered_id = None
    if topic == "path":
        trigger = message.get("trigger", "?")
        result.paths[trigger] = result.paths.get(trigger, 0) + 1
        if message.get("status") == "found":
            result.paths_found += 1
        else:
            result.paths_no_path += 1
            reason = message.get("reason") or "?"
            result.no_path_reasons[reason] = result.no_path_reasons.get(reason, 0) + 1
        robot.follow(message)
        answered_id = message.get("map_id")
    elif topic == "event":
        code = message.get("code", "?")
        if code == "path_kept":
            result.kept_events += 1
            answered_id = message.get("map_id")
        else:
            result.other_events[code] = result.other_events.get(code, 0) + 1
    if isinstance(answered_id, int):
        for i in [i for i in sent_at if i <= answered_id]:
            result.latencies_s.append(received - sent_at.pop(i))
            if i == answered_id:
                result.answered_own += 1
            else:
                result.answered_later += 1


def _interrupt(_signum, _frame) -> None:
    raise KeyboardInterrupt


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m veer.tools.soak", description=__doc__.split("\n\n")[0])
    parser.add_argument("--minutes", type=float, default=5.0, help="how long to drive the node (default 5)")
    parser.add_argument("--quick", action="store_true", help="a 20-second smoke run")
    parser.add_argument("--out", metavar="FILE.md", help="also write the table to this file")
    parser.add_argument("--progress", action="store_true", help="a line on stderr at every memory sample")
    args = parser.parse_args(argv)
    duration_s = 20.0 if args.quick else 60.0 * args.minutes
    if not 0 < duration_s <= 7 * 24 * 3600:
        print(f"soak: --minutes must be above 0 and at most a week, got {args.minutes}", file=sys.stderr)
        return 2
    # SIGTERM runs the same clean-up as Ctrl-C: the node is stopped in run_soak's finally
    signal.signal(signal.SIGTERM, _interrupt)
    progress = (lambda line: print(line, file=sys.stderr, flush=True)) if args.progress else None
    try:
        result = run_soak(duration_s, progress=progress)
    except RuntimeError as exc:
        print(f"soak: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("soak: interrupted; the node was stopped", file=sys.stderr)
        return 1
    table = result.table()
    print(table)
    if args.out:
        Path(args.out).write_text(table + "\n", encoding="utf-8")
    return 0 if result.ok() else 1


if __name__ == "__main__":
    sys.exit(main())
