"""Benchmarks of the planner node over loopback sockets.

Runs `veer node` as a separate process (loopback, ports picked free) and drives it with
``veer.node.client``; every loop is bounded in count and time.

1. latency: a grid that blocks the current path is sent; time until the new path is
   received by a subscriber. Median and 95th percentile over N changes, on 400 x 400 and
   2000 x 2000 grids (0.1 m cells). Walls alternate above / below the straight line from
   start to goal, 30 m apart, and each grid carries one extra occupied cell of its own so
   that no grid repeats an earlier one (no cache hit).
2. still-valid check: a change far from the path, on a 400 x 400 grid: the node's check
   job (inflation refresh included), timed in this process with the node's own code.
3. ingest: raw 2000 x 2000 grids at 20 Hz (and png grids at 20 and 40 Hz), each changed far from the
   path: how stale the node's answer is (time from sending grid i to the first output
   naming grid i or a later one), how many grids it processed per second, and the node's
   resident memory at the start and end.
4. peak resident memory (VmHWM) of the node process after the 2000 x 2000 runs.

    python -m veer.tools.bench_node            # full (several minutes)
    python -m veer.tools.bench_node --quick    # smoke run (seconds)

Absolute times move by 2x on a shared machine; read them beside the targets in
docs/benchmarks.md.
"""

from __future__ import annotations

import argparse
import json
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import cv2
import msgpack
import numpy as np

__all__ = ["main"]

CELL_M = 0.1
FREE, OCCUPIED = 255, 0


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class NodeProcess:
    """`veer node` in a subprocess on free loopback ports."""

    def __init__(self, workdir: Path, name: str):
        ports = [_free_port() for _ in range(3)]
        self.addresses = [f"tcp://127.0.0.1:{p}" for p in ports]
        config = workdir / f"{name}.toml"
        config.write_text(
            f'[sockets]\ninputs = "{self.addresses[0]}"\noutputs = "{self.addresses[1]}"\n'
            f'control = "{self.addresses[2]}"\n[log]\nlevel = "warning"\n'
        )
        self.stderr = open(workdir / f"{name}.log", "w")
        self.process = subprocess.Popen([sys.executable, "-m", "veer.tools.node", "--config", str(config)],
                                        stdout=subprocess.DEVNULL, stderr=self.stderr)

    def memory_mb(self) -> dict:
        """VmRSS and VmHWM (peak) of the node, MB (Linux /proc)."""
        values = {}
        with open(f"/proc/{self.process.pid}/status") as status:
            for line in status:
                if line.startswith(("VmRSS", "VmHWM")):
                    key, value = line.split(":")
                    values[key] = int(value.split()[0]) / 1024.0
        return values

    def stop(self) -> int:
        self.process.send_signal(2)
        try:
            code = self.process.wait(10.0)
        except subprocess.TimeoutExpired:
            self.process.kill()
            code = self.process.wait()
        self.stderr.close()
        return code


def _shades(size: int, wall: str | None, mark: int) -> np.ndarray:
    """A size x size yard: an optional wall across x = centre (gap below for "A", above for "B") and one marked cell."""
    shades = np.full((size, size), FREE, np.uint8)
    centre_m = size * CELL_M / 2.0
    if wall is not None:
        y0, y1 = (centre_m - 6.0, centre_m + 20.0) if wall == "A" else (centre_m - 20.0, centre_m + 6.0)
        col0 = int(centre_m / CELL_M)
        row0, row1 = int(size - y1 / CELL_M), int(size - y0 / CELL_M)
        shades[max(row0, 0):row1, col0:col0 + 3] = OCCUPIED
    # one cell of its own near the bottom-left corner, far from the path
    shades[size - 3 - (mark // 50) % 20, 2 + mark % 50] = OCCUPIED
    return shades


def _grid_frames(shades: np.ndarray, map_id, encoding: str = "raw") -> list[bytes]:
    if encoding == "raw":
        cells = shades.tobytes()
    else:
        ok, buffer = cv2.imencode(".png", shades)
        cells = buffer.tobytes()
    message = {"v": 1, "kind": "grid", "map_id": map_id, "rows": shades.shape[0], "cols": shades.shape[1],
               "cell_size_m": CELL_M, "origin_m": [0.0, 0.0], "encoding": encoding, "cells": cells}
    return [b"grid", msgpack.packb(message, use_bin_type=True)]


def _percentile(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values), q)) if values else float("nan")


def _start(client, size: int) -> tuple:
    centre_m = size * CELL_M / 2.0
    start, goal = (centre_m - 15.0, centre_m, 0.0), (centre_m + 15.0, centre_m, 0.0)
    client.send_raw(*_grid_frames(_shades(size, None, 0), "base"))
    client.send_pose(*start)
    client.wait_accepted("base", start, 60.0)
    goal_id = client.set_goal(*goal)
    first = client.wait_path(60.0, goal_id=goal_id)
    return start, goal, goal_id, first


def bench_latency(node: NodeProcess, size: int, changes: int) -> dict:
    from veer.node.client import NodeClient

    with NodeClient(*node.addresses, timeout_s=60.0) as client:
        _, _, goal_id, path = _start(client, size)
        latencies, triggers, statuses = [], [], []
        for i in range(changes):
            frames = _grid_frames(_shades(size, "AB"[i % 2], i + 1), f"wall{i}")
            t0 = time.perf_counter()
            client.send_frames(frames)
            path = client.wait_path(60.0, goal_id=goal_id, after_seq=path["seq"], map_id=f"wall{i}")
            latencies.append(time.perf_counter() - t0)
            triggers.append(path["trigger"])
            statuses.append(path["status"])
            time.sleep(0.05)
    return {"grid": f"{size} x {size}", "changes": changes, "median_s": statistics.median(latencies),
            "p95_s": _percentile(latencies, 95), "max_s": max(latencies),
            "found": statuses.count("found"), "triggers": sorted(set(triggers))}


def bench_check(size: int, repeats: int) -> dict:
    """The node's check job for a change far from the path, inflation refresh included."""
    from veer.maps import OccupancyGrid, classify, MapSettings
    from veer.node.jobs import Job, run_job
    from veer.planning import EXAMPLE_VEHICLE, Planner

    planner = Planner(EXAMPLE_VEHICLE)

    def grid_of(mark: int) -> OccupancyGrid:
        return OccupancyGrid(classify(_shades(size, None, mark), MapSettings(CELL_M)), CELL_M, (0.0, 0.0))

    centre_m = size * CELL_M / 2.0
    start, goal = (centre_m - 15.0, centre_m, 0.0), (centre_m + 15.0, centre_m, 0.0)
    base = grid_of(0)
    poses = planner.plan(base, start, goal).poses
    out = {"grid": f"{size} x {size}", "repeats": repeats}
    for name, with_previous in (("planner", False), ("distance", True)):
        times, kept, previous = [], 0, base
        for i in range(repeats):
            grid = grid_of(1000 * with_previous + i + 1)
            job = Job(i, "check", "grid", grid, i, goal, start, check_poses=poses,
                      previous_grid=previous if with_previous else None)
            t0 = time.perf_counter()
            result = run_job(planner, job)
            times.append(time.perf_counter() - t0)
            kept += result.outcome == "kept" and result.checked_by == name
            previous = grid
        out[name] = {"median_s": statistics.median(times), "p95_s": _percentile(times, 95), "kept": kept}
    return out


def bench_ingest(node: NodeProcess, size: int, rate_hz: float, duration_s: float, encoding: str) -> dict:
    from veer.node.client import NodeClient

    variants = 20
    frames = [_grid_frames(_shades(size, None, 100 + k), None, encoding) for k in range(variants)]
    payload_bytes = len(frames[0][1])
    with NodeClient(*node.addresses, timeout_s=60.0) as client:
        _start(client, size)
        memory_start = node.memory_mb()
        sent_at: dict[int, float] = {}
        answered: dict[int, float] = {}
        stop = threading.Event()

        def listen():
            while not stop.is_set():
                try:
                    message = client.wait_for(("event", "path"), 0.2)
                except Exception:  # noqa: BLE001 - timeouts while idle
                    continue
                map_id = message.get("map_id")
                if isinstance(map_id, int):
                    answered.setdefault(map_id, time.perf_counter())

        listener = threading.Thread(target=listen, daemon=True)
        listener.start()
        count = int(rate_hz * duration_s)
        t_start = time.perf_counter()
        for i in range(count):  # bounded: count grids at rate_hz
            due = t_start + i / rate_hz
            while time.perf_counter() < due:
                time.sleep(0.001)
            # a new map_id per send; content cycles through variants that each differ from the last
            k = i % variants
            header = msgpack.unpackb(frames[k][1], raw=False)
            header["map_id"] = i
            sent_at[i] = time.perf_counter()
            client.send_frames([b"grid", msgpack.packb(header, use_bin_type=True)])
        send_s = time.perf_counter() - t_start
        time.sleep(2.0)
        stop.set()
        listener.join(2.0)
        memory_end = node.memory_mb()
    # staleness of grid i: until the node answered for grid i or a later one
    answered_ids = sorted(answered)
    staleness = []
    for i, t_sent in sent_at.items():
        later = [answered[j] for j in answered_ids if j >= i]
        if later:
            staleness.append(min(later) - t_sent)
    last = count - 1
    return {"encoding": encoding, "grid": f"{size} x {size}", "payload_bytes": payload_bytes, "rate_hz": rate_hz,
            "sent": count, "send_s": send_s, "processed": len(answered_ids),
            "processed_per_s": len(answered_ids) / max(send_s, 1e-9),
            "staleness_median_s": statistics.median(staleness) if staleness else float("nan"),
            "staleness_p95_s": _percentile(staleness, 95),
            "last_answered": last in answered,
            "last_latency_s": answered.get(last, float("nan")) - sent_at[last],
            "rss_start_mb": memory_start.get("VmRSS"), "rss_end_mb": memory_end.get("VmRSS")}


def _table(results: dict) -> str:
    lines = ["| measurement | grid | figure |", "| --- | --- | --- |"]
    for r in results["latency"]:
        lines.append(f"| blocked path -> new path received ({r['changes']} changes, {r['found']} found) | {r['grid']} "
                     f"| median {1000 * r['median_s']:.0f} ms, p95 {1000 * r['p95_s']:.0f} ms, "
                     f"max {1000 * r['max_s']:.0f} ms |")
    c = results["check"]
    for name, what in (("planner", "planner's check, inflation refresh included"),
                       ("distance", "node's distance test (the node's first step)")):
        r = c[name]
        lines.append(f"| still-valid check, change far from the path: {what} ({c['repeats']} runs, {r['kept']} kept) "
                     f"| {c['grid']} | median {1000 * r['median_s']:.1f} ms, p95 {1000 * r['p95_s']:.1f} ms |")
    c = results["check_large"]
    for name in ("planner", "distance"):
        r = c[name]
        lines.append(f"| still-valid check, far change, {name} ({c['repeats']} runs, {r['kept']} kept) | {c['grid']} "
                     f"| median {1000 * r['median_s']:.1f} ms, p95 {1000 * r['p95_s']:.1f} ms |")
    for r in results["ingest"]:
        lines.append(
            f"| ingest {r['encoding']} ({r['payload_bytes'] / 1e6:.2f} MB each) at {r['rate_hz']:.0f} Hz, "
            f"{r['sent']} grids | {r['grid']} | {r['processed_per_s']:.1f} grids/s checked; answer to the "
            f"newest after median {1000 * r['staleness_median_s']:.0f} ms, p95 {1000 * r['staleness_p95_s']:.0f} ms;"
            f" RSS {r['rss_start_mb']:.0f} -> {r['rss_end_mb']:.0f} MB |")
    lines.append(f"| peak resident memory of the node (VmHWM) | {results['big']} x {results['big']} | {results['peak_rss_mb']:.0f} MB |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="bench_node", description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="a smoke run: few changes, short ingest")
    parser.add_argument("--changes", type=int, default=50, help="grid changes per latency run (default 50)")
    parser.add_argument("--ingest-s", type=float, default=60.0, help="seconds of raw ingest (default 60)")
    parser.add_argument("--json", metavar="OUT.json", help="also write the figures as JSON")
    args = parser.parse_args(argv)
    changes = 3 if args.quick else args.changes
    ingest_s = 1.0 if args.quick else args.ingest_s
    big = 600 if args.quick else 2000
    results: dict = {"latency": [], "ingest": [], "big": big}
    with tempfile.TemporaryDirectory() as tmp:
        workdir = Path(tmp)
        small = NodeProcess(workdir, "small")
        try:
            results["latency"].append(bench_latency(small, 400, changes))
        finally:
            small.stop()
        results["check"] = bench_check(400, 5 if args.quick else 50)
        results["check_large"] = bench_check(big, 3 if args.quick else 20)
        large = NodeProcess(workdir, "large")
        try:
            results["latency"].append(bench_latency(large, big, max(2, changes if not args.quick else 2)))
            results["ingest"].append(bench_ingest(large, big, 20.0, ingest_s, "raw"))
            results["ingest"].append(bench_ingest(large, big, 20.0, min(ingest_s, 20.0), "png"))
            if not args.quick:  # how far png ingest goes
                results["ingest"].append(bench_ingest(large, big, 40.0, 10.0, "png"))
            results["peak_rss_mb"] = large.memory_mb().get("VmHWM", float("nan"))
        finally:
            code = large.stop()
        results["node_exit_code"] = code
    print(_table(results))
    if args.json:
        Path(args.json).write_text(json.dumps(results, indent=2))
    return 0 if code == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
