"""The soak script (tools/soak.py): a smoke run of a few seconds, and its memory slope against numpy."""

from __future__ import annotations

import re
import subprocess
import sys

import numpy as np
import pytest

from veer.tools.soak import Mover, SimulatedRobot, memory_slope_mb_per_h


def test_a_short_soak_drives_the_node_reports_a_table_and_stops_the_node(tmp_path):
    out = tmp_path / "soak.md"
    result = subprocess.run([sys.executable, "-m", "veer.tools.soak", "--minutes", "0.15", "--out", str(out)],
                            capture_output=True, text=True, timeout=180)
    assert result.returncode == 0, result.stdout + result.stderr
    table = result.stdout
    assert out.read_text(encoding="utf-8").strip() == table.strip()
    rows = {line.split(" | ")[0].strip("| "): line for line in table.splitlines() if line.startswith("| ")}
    grids_sent, _changed, poses_sent = map(int, re.findall(r"(\d+) (?:grids|of new|poses)", rows["inputs sent"]))
    assert 0 < grids_sent < poses_sent  # grids at 10 Hz, poses at 50 Hz
    grids_taken = int(re.search(r"grids (\d+)", rows["node counters at the end"]).group(1))
    assert 0 < grids_taken <= grids_sent
    assert int(re.search(r"\((\d+) found", rows["paths received"]).group(1)) >= 1
    assert "goal" in rows["paths by trigger"]
    assert "p50" in next(line for key, line in rows.items() if key.startswith("latency"))
    assert "| 0 |" in rows[next(key for key in rows if key.startswith("control requests"))]
    assert "too short to judge" in rows["memory"]
    assert "exit code after SIGINT: 0" in rows["node"]  # the node was stopped, cleanly


def test_the_memory_slope_is_the_least_squares_line_in_mb_per_hour():
    rng = np.random.default_rng(7)
    times_s = np.linspace(0.0, 1800.0, 61)
    rss_mb = 80.0 + 12.0 * times_s / 3600.0 + rng.normal(0.0, 0.3, times_s.size)
    slope, stderr = memory_slope_mb_per_h(times_s, rss_mb)
    # source: scipy.stats.linregress (slope and its standard error)
    from scipy.stats import linregress

    reference = linregress(times_s / 3600.0, rss_mb)
    assert slope == pytest.approx(reference.slope, rel=1e-9)
    assert stderr == pytest.approx(reference.stderr, rel=1e-9)
    assert slope == pytest.approx(12.0, abs=4 * stderr)


def test_the_simulated_robot_follows_a_path_at_its_speed_and_the_mover_stops_for_it():
    robot = SimulatedRobot((0.0, 0.0, 0.0), speed_m_per_s=1.5)
    poses = [[0.25 * i, 0.0, 0.0, 1] for i in range(41)]  # 10 m straight along +x
    robot.follow({"status": "found", "poses": poses})
    for _ in range(50):  # 1 s at 50 Hz
        pose = robot.step(0.02)
    assert pose[0] == pytest.approx(1.5) and pose[1] == pytest.approx(0.0)
    robot.follow({"status": "no_path", "poses": []})
    assert robot.step(1.0) == pose  # no path: it stands still
    mover = Mover()
    y_m = mover.y_m
    blocked = (20.0, y_m + 2.0 + 1.0)  # the robot just ahead of the box's top edge
    assert mover.step(0.1, blocked) == y_m and mover.yields == 1
    assert mover.step(0.1, (5.0, 15.0)) > y_m  # far from the robot it moves on
