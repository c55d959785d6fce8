"""A small recorded drive for the replay tests, written with ``LogWriter`` as the node writes it.

The world: 30 m x 16 m at 0.1 m cells, walls round the edge, the example vehicle (disc of
1 m). The robot starts at (3, 8, 0) facing +x, the goal is (27, 8, 0). It drives along
y = 8 to x = 11 and stops. Grids: at 0 s the empty yard; at 3 s a box in the top corner
far from the path (the path is kept); at 5 s a wall across the path at x = 18-19 from the
bottom wall up to y = 11.5, leaving a passage at the top (the path is blocked and
replanned). Times are Unix-like seconds (the node writes ``time.time()``).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from veer.node.recording import LogWriter
from veer.tools.bench_replay import walled_yard

CELL_M = 0.1
WIDTH_M, HEIGHT_M = 30.0, 16.0
START = (3.0, 8.0, 0.0)
GOAL = (27.0, 8.0, 0.0)
T0_S = 1_700_000_000.0
FAR_BOX_M = (12.0, 14.2, 14.0, 15.5)  # x0, y0, x1, y1: top wall corner, far from y = 8
BLOCKING_WALL_M = (18.0, 0.0, 19.0, 11.5)  # across y = 8, a passage above y = 11.5

_SHADE = {0: 255, 1: 0, 2: 128}  # class -> grey level of a map image (light = free, dark = occupied)


def classes(boxes_m=()) -> np.ndarray:
    """Cell classes (0 free, 1 occupied) of the yard with walls round it and the given boxes."""
    return walled_yard(WIDTH_M, HEIGHT_M, CELL_M, boxes_m)


def grid_message(cells: np.ndarray, map_id) -> dict:
    shades = np.vectorize(_SHADE.get, otypes=[np.uint8])(cells)
    rows, cols = shades.shape
    return {"v": 1, "kind": "grid", "map_id": map_id, "rows": rows, "cols": cols, "cell_size_m": CELL_M,
            "origin_m": [0.0, 0.0], "encoding": "raw", "cells": shades.tobytes()}


def pose_message(x_m: float, y_m: float, heading_rad: float, t_s: float) -> dict:
    return {"v": 1, "kind": "pose", "x_m": x_m, "y_m": y_m, "heading_rad": heading_rad, "t_s": t_s}


def drive_events() -> list[tuple[float, str, object]]:
    """(seconds from the start, kind, message) of the drive, in time order."""
    events: list[tuple[float, str, object]] = [
        (0.0, "grid", grid_message(classes(), 1)),
        (0.05, "pose", pose_message(*START, 0.05)),
        (0.1, "control", {"request": {"v": 1, "op": "goal", "x_m": GOAL[0], "y_m": GOAL[1],
                                      "heading_rad": GOAL[2]}, "reply": {"ok": True, "goal_id": 1}}),
    ]
    for step in range(1, 21):  # 0.25 s apart, 0.4 m each: x from 3.4 to 11.0, then it stands
        t = 0.1 + 0.25 * step
        events.append((t, "pose", pose_message(START[0] + 0.4 * step, START[1], 0.0, t)))
    events.append((3.0, "grid", grid_message(classes([FAR_BOX_M]), 2)))
    events.append((5.0, "grid", grid_message(classes([FAR_BOX_M, BLOCKING_WALL_M]), 3)))
    events.append((5.5, "pose", pose_message(11.0, START[1], 0.0, 5.5)))
    events.sort(key=lambda e: e[0])
    return events


def write_drive_log(path: Path, *, extra_goal_s: float | None = None) -> Path:
    """The drive as a recording log (inputs and the goal request as the node records them)."""
    with LogWriter(path) as log:
        for t, kind, message in drive_events():
            if kind == "control":
                log.write_control(message["request"], message["reply"], T0_S + t)
            else:
                log.write_input(kind, message, T0_S + t)
        if extra_goal_s is not None:  # a second goal back near the start: one more replan
            log.write_control({"v": 1, "op": "goal", "x_m": 6.0, "y_m": 8.0, "heading_rad": math.pi},
                              {"ok": True, "goal_id": 2}, T0_S + extra_goal_s)
    return path
