"""Benchmark: replay throughput with local processes (--jobs N) and on a local Dask cluster.

Writes ``--logs`` recorded drives of our own (a 40 m x 24 m serpentine yard at 0.1 m
cells, six goals, a box dropped at a seeded random place after each goal), then replays them all, with pictures, the way
``veer replay LOG... --out DIR`` does: in this process (N = 1), on N local processes,
and on a Dask LocalCluster on loopback with N worker processes. Prints logs/s and
replans/s per setting (best of --repeat runs; the N = 1 run is in this process, the
others include starting their worker processes, the Dask ones not: the cluster is
started and warmed before timing) and checks that every setting gives the same table.

    python -m veer.tools.bench_replay --logs 24 --jobs 1 2 --repeat 3 [--no-pictures]
"""

from __future__ import annotations

import argparse
import math
import tempfile
import time
from pathlib import Path

import numpy as np

__all__ = ["main", "write_bench_log"]

CELL_M = 0.1
WIDTH_M, HEIGHT_M = 40.0, 24.0


def walled_yard(width_m: float, height_m: float, cell_m: float, boxes_m=()) -> np.ndarray:
    """Cell classes (0 free, 1 occupied) of a yard with a wall three cells thick round it and the given boxes.

    ``boxes_m`` are (x0, y0, x1, y1) in metres from the yard's lower-left corner.
    """
    rows, cols = round(height_m / cell_m), round(width_m / cell_m)
    out = np.zeros((rows, cols), np.uint8)
    out[:3, :] = out[-3:, :] = 1
    out[:, :3] = out[:, -3:] = 1
    xs = (np.arange(cols) + 0.5) * cell_m
    ys = (rows - np.arange(rows) - 0.5) * cell_m
    for x0, y0, x1, y1 in boxes_m:
        out[np.ix_((ys >= y0) & (ys <= y1), (xs >= x0) & (xs <= x1))] = 1
    return out


def _classes(walls) -> np.ndarray:
    return walled_yard(WIDTH_M, HEIGHT_M, CELL_M, walls)


def _grid(classes, map_id) -> dict:
    shades = np.where(classes == 1, 0, 255).astype(np.uint8)
    return {"v": 1, "kind": "grid", "map_id": map_id, "rows": int(shades.shape[0]), "cols": int(shades.shape[1]),
            "cell_size_m": CELL_M, "origin_m": [0.0, 0.0], "encoding": "raw", "cells": shades.tobytes()}


_FIXED_WALLS = ((10.0, 0.0, 10.6, 15.0), (20.0, 9.0, 20.6, 24.0), (30.0, 0.0, 30.6, 15.0))  # a serpentine
_GOALS = ((5.0, 4.0, 90.0), (35.0, 20.0, 0.0), (15.0, 20.0, 180.0), (25.0, 4.0, -90.0), (36.0, 5.0, 90.0),
          (5.0, 19.0, -90.0))


def write_bench_log(path: Path, seed: int) -> Path:
    """One drive through a serpentine yard: six goals 3 s apart, the robot at the previous goal
    when the next is set, and a box dropped at a seeded random free place 1.5 s after each goal
    (some block the current path and force a replan, others do not)."""
    from veer.node.recording import LogWriter

    rng = np.random.default_rng(seed)
    t0 = 1_700_000_000.0
    boxes = list(_FIXED_WALLS)
    robot = (3.0, 3.0, 0.0)
    with LogWriter(path) as log:
        log.write_input("grid", _grid(_classes(boxes), 0), t0)
        for leg, (gx, gy, gh_deg) in enumerate(_GOALS):
            t = 3.0 * leg + 0.1
            log.write_input("pose", {"v": 1, "kind": "pose", "x_m": robot[0], "y_m": robot[1],
                                     "heading_rad": robot[2], "t_s": t}, t0 + t)
            log.write_control({"v": 1, "op": "goal", "x_m": gx, "y_m": gy, "heading_rad": math.radians(gh_deg)},
                              {"ok": True, "goal_id": leg + 1}, t0 + t + 0.01)
            while True:  # a box away from the robot and the goal
                bx, by = rng.uniform(4.0, 36.0), rng.uniform(3.0, 21.0)
                if min(math.dist((bx, by), robot[:2]), math.dist((bx, by), (gx, gy))) > 3.5:
                    break
            boxes.append((bx - 0.6, by - 0.6, bx + 0.6, by + 0.6))
            log.write_input("grid", _grid(_classes(boxes), len(boxes)), t0 + t + 1.5)
            robot = (gx, gy, math.radians(gh_deg))
    return path


def _table(outcomes) -> list:
    return [{k: v for k, v in row.items() if k != "plan_s"}
            for outcome in outcomes for run in outcome.runs for row in run["rows"]]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--logs", type=int, default=8)
    parser.add_argument("--jobs", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--no-dask", action="store_true")
    parser.add_argument("--no-pictures", dest="pictures", action="store_false")
    parser.add_argument("--repeat", type=int, default=1, help="best of this many runs per setting")
    args = parser.parse_args(argv)
    from veer.node.config import NodeConfig
    from veer.tools.replay import ReplayOptions, replay_logs

    with tempfile.TemporaryDirectory() as folder:
        logs = [write_bench_log(Path(folder) / f"drive_{i:02d}.log", seed=i) for i in range(args.logs)]
        config = NodeConfig()
        results = {}
        for jobs in args.jobs:
            best = math.inf
            for _ in range(args.repeat):
                t = time.perf_counter()
                outcomes = replay_logs(logs, config, ReplayOptions(jobs=jobs, pictures=args.pictures))
                best = min(best, time.perf_counter() - t)
            results[f"local, --jobs {jobs}"] = (best, outcomes)
        if not args.no_dask:
            from dask.distributed import LocalCluster

            for jobs in args.jobs:
                with LocalCluster(n_workers=jobs, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address="127.0.0.1:0") as cluster:
                    replay_logs(logs[:1], config, ReplayOptions(cluster=cluster.scheduler_address))  # warm workers
                    best = math.inf
                    for _ in range(args.repeat):
                        t = time.perf_counter()
                        outcomes = replay_logs(logs, config, ReplayOptions(cluster=cluster.scheduler_address,
                                                                            pictures=args.pictures))
                        best = min(best, time.perf_counter() - t)
                    results[f"Dask, {jobs} worker process(es)"] = (best, outcomes)
        reference = _table(next(iter(results.values()))[1])
        replans = len(reference)
        base = next(iter(results.values()))[0]
        print(f"{args.logs} logs, {replans} replans, pictures {'on' if args.pictures else 'off'}")
        print("| setting | wall s | logs/s | replans/s | speed-up | same table |")
        print("| --- | ---: | ---: | ---: | ---: | --- |")
        for name, (wall_s, outcomes) in results.items():
            same = _table(outcomes) == reference
            print(f"| {name} | {wall_s:.2f} | {args.logs / wall_s:.2f} | {replans / wall_s:.1f} | "
                  f"{base / wall_s:.2f} | {'yes' if same else 'NO'} |")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
