"""The planner benchmark script, run small: its large map, its measurements and its tables."""

from __future__ import annotations

import math
import re

import cv2
import numpy as np
import pytest
import scipy.ndimage as ndi

from veer.maps import OccupancyGrid
from veer.planning import SearchSettings
from veer.tools import bench_plan

RADIUS_M = 1.0  # the example vehicle's disc


def _pose_cell(rows: int, cell_m: float, pose) -> tuple[int, int]:
    return int(rows - pose[1] / cell_m), int(pose[0] / cell_m)


def test_large_map_start_and_goal_are_free_and_far_apart():
    size, cell_m = 400, bench_plan.LARGE_CELL_SIZE_M
    shades, start, goal = bench_plan.build_large_map(size)
    assert shades.shape == (size, size) and shades.dtype == np.uint8
    assert set(np.unique(shades)) == {bench_plan.LARGE_FLOOR, bench_plan.LARGE_OBSTACLE}
    # outside the image is blocked too: pad with one obstacle ring before measuring
    free = np.pad(shades == bench_plan.LARGE_FLOOR, 1, constant_values=False)
    # source: scipy.ndimage.distance_transform_edt (exact Euclidean distance to the nearest obstacle cell)
    clearance_m = ndi.distance_transform_edt(free)[1:-1, 1:-1] * cell_m
    for pose in (start, goal):
        row, col = _pose_cell(size, cell_m, pose)
        # centre-to-centre distance, less half a cell diagonal, must leave room for the disc
        assert clearance_m[row, col] - cell_m * math.sqrt(0.5) > RADIUS_M
    extent_m = size * cell_m
    assert math.dist(start[:2], goal[:2]) >= 0.5 * math.hypot(extent_m, extent_m)
    assert 0.03 < (shades == bench_plan.LARGE_OBSTACLE).mean() < 0.3  # boxes, not an empty or solid map


def test_written_large_map_reads_back(tmp_path):
    written = bench_plan.write_large_map(tmp_path, 200)
    shades, start, goal = bench_plan.build_large_map(200)
    # source: OpenCV imread (an independent PGM reader)
    np.testing.assert_array_equal(cv2.imread(written["path"], cv2.IMREAD_UNCHANGED), shades)
    assert written["start"] == list(start) and written["goal"] == list(goal)


def test_plan_once_on_an_open_grid():
    grid = OccupancyGrid(np.zeros((200, 300), np.uint8), 0.1, (0.0, 0.0))
    outcome = bench_plan.plan_once(grid, (5.0, 10.0, 0.0), (25.0, 10.0, 0.0), SearchSettings())
    assert outcome.found and outcome.reason is None
    # a straight drive along the heading in open space is as long as the straight line
    # common practice
    assert outcome.length_m == pytest.approx(20.0, abs=0.2)
    assert outcome.reverse_m == 0 and outcome.gear_changes == 0
    assert outcome.final_poses >= math.ceil(20.0 / 0.25) + 1  # docs/files.md: poses at most 0.25 m apart
    assert outcome.overhead == outcome.expansions / outcome.final_poses
    assert outcome.plan_s > 0 and outcome.rate_per_s > 0


def test_markdown_table_shape():
    text = bench_plan.markdown_table(["name", "value"], [["a", "1.5"], ["longer name", "22"]], right={1})
    lines = text.splitlines()
    # source: GitHub Flavored Markdown spec, "Tables (extension)": header row, delimiter row of
    # dashes with an optional colon for alignment, then one row per line, cells between pipes
    assert len(lines) == 4
    assert all(line.startswith("|") and line.endswith("|") and line.count("|") == 3 for line in lines)
    assert re.fullmatch(r"\|-+\|-+:\|", lines[1])
    assert lines[2].split("|")[2].strip() == "1.5" and lines[2].split("|")[2].endswith("1.5 ")


def _cells(line: str) -> list[str]:
    return [cell.strip() for cell in line.strip().strip("|").split("|")]


def _table_rows(report: str, *headers: str) -> list[list[str]]:
    """Body rows of the table whose header starts with ``headers``."""
    lines = report.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("|") and _cells(line)[: len(headers)] == list(headers))
    rows = []
    for line in lines[start + 2 :]:
        if not line.startswith("|"):
            break
        rows.append(_cells(line))
    return rows


def test_small_run_prints_consistent_tables(tmp_path, capsys):
    out = tmp_path / "table.md"
    code = bench_plan.main(
        ["--repeat", "2", "--scenarios", "open_yard", "enclosed_goal", "--large-size", "200", "--out", str(out)]
    )
    assert code == 0
    captured = capsys.readouterr()
    report = captured.out
    assert out.read_text() == report
    assert all(line.startswith("bench_plan: ") for line in captured.err.splitlines())
    assert "numpy" in report and "opencv" in report

    # every table row has as many cells as its header (GFM tables)
    for line_block in re.findall(r"(?:^\|.*\|\n)+", report, flags=re.M):
        counts = {line.count("|") for line in line_block.splitlines()}
        assert len(counts) == 1, line_block

    default = {row[0]: row for row in _table_rows(report, "scenario", "status", "median ms")}
    plain = {row[0]: row for row in _table_rows(report, "scenario", "status", "plain ms")}
    assert set(default) == set(plain) == {"open_yard", "enclosed_goal"}
    yard = default["open_yard"]
    assert yard[1] == "found"
    median_ms, min_ms, expansions, final_poses = float(yard[2]), float(yard[3]), int(yard[6]), int(yard[10])
    assert 0 < min_ms <= median_ms
    assert float(yard[11]) == pytest.approx(expansions / final_poses, abs=0.01)
    assert yard[5] == ("met" if median_ms <= 50.0 else "NOT met")
    assert default["enclosed_goal"][1] == "no_path (goal_enclosed)"
    speedup = float(plain["open_yard"][9].rstrip("x"))
    assert speedup == pytest.approx(float(plain["open_yard"][2]) / median_ms, rel=0.05, abs=0.06)
    assert plain["open_yard"][11] == ("met" if speedup >= 20 else "NOT met")
    assert plain["enclosed_goal"][11] == "–"  # no target where no path exists

    # the rectangle beside the disc on every scenario, its ratio from the two medians
    rect = {row[0]: row for row in _table_rows(report, "scenario", "disc ms", "rect status")}
    assert set(rect) == {"open_yard", "enclosed_goal"}
    assert float(rect["open_yard"][1]) == pytest.approx(median_ms, abs=0.051)
    assert rect["open_yard"][2] == "found"
    ratio = float(rect["open_yard"][5].rstrip("x"))
    assert ratio == pytest.approx(float(rect["open_yard"][3]) / median_ms, rel=0.05, abs=0.02)
    assert rect["open_yard"][7] == ("met" if ratio <= 1.5 else "NOT met")
    assert 0 < float(rect["open_yard"][4]) <= float(rect["open_yard"][3])
    assert rect["enclosed_goal"][2].startswith("no_path")

    other = {row[0]: row for row in _table_rows(report, "figure")}
    assert any("turning table build, reeds_shepp" in key for key in other)
    assert any("expansion rate, forward-only" in key for key in other)
    assert any("expansion rate, with reverse" in key for key in other)
    (rss_row,) = [row for key, row in other.items() if "ru_maxrss" in key]
    assert rss_row[3] in ("met", "NOT met") and int(rss_row[1].split()[0]) > 0
    met, total = map(int, re.search(r"targets met: (\d+) of (\d+)", report).groups())
    verdicts = [cell for block in re.findall(r"(?:^\|.*\|\n)+", report, flags=re.M)
                for line in block.splitlines()[2:] for cell in _cells(line) if cell in ("met", "NOT met")]
    assert met == verdicts.count("met") and total == len(verdicts)


def test_out_into_a_missing_folder_is_refused(tmp_path):
    with pytest.raises(SystemExit) as exit_info:
        bench_plan.main(["--out", str(tmp_path / "no" / "t.md")])
    assert exit_info.value.code == 2
