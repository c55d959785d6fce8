"""Tests for ``veer check`` (veer.tools.check): scenario files, PASS / FAIL lines, the final
line, exit codes, one-line errors for bad files, and the example scenarios shipped in
examples/scenarios/.

The maps are drawn here (255 free, 0 occupied) so every expectation follows from plain
geometry: a path is never shorter than the straight line between its ends, a vehicle
parked nose-in in a bay narrower than its turning circle cannot leave it forward.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from veer.tools import check

REPO = Path(__file__).resolve().parents[2]
CELL_SIZE_M = 0.1
WIDTH_M, HEIGHT_M = 24.0, 14.0
FINAL_LINE = re.compile(r"^(\d+) passed, (\d+) failed$")


def _draw_map() -> np.ndarray:
    """A fenced yard: three nose-in bays along the top-left fence and a closed room bottom right."""
    rows, cols = round(HEIGHT_M / CELL_SIZE_M), round(WIDTH_M / CELL_SIZE_M)
    image = np.full((rows, cols), 255, np.uint8)

    def block(x0, y0, x1, y1):  # world metres, y up; row 0 is the top of the image
        image[rows - round(y1 / CELL_SIZE_M):rows - round(y0 / CELL_SIZE_M),
              round(x0 / CELL_SIZE_M):round(x1 / CELL_SIZE_M)] = 0

    for edge in ((0, 0, WIDTH_M, 0.3), (0, HEIGHT_M - 0.3, WIDTH_M, HEIGHT_M), (0, 0, 0.3, HEIGHT_M),
                 (WIDTH_M - 0.3, 0, WIDTH_M, HEIGHT_M)):
        block(*edge)
    for wall_x in (1.0, 4.6, 8.2, 11.8):  # bays 3.4 m wide inside, 5 m deep: centres x = 2.9, 6.5, 10.1
        block(wall_x, HEIGHT_M - 5.3, wall_x + 0.2, HEIGHT_M)
    for edge in ((16.0, 1.0, 23.0, 1.3), (16.0, 6.7, 23.0, 7.0), (16.0, 1.0, 16.3, 7.0), (22.7, 1.0, 23.0, 7.0)):
        block(*edge)  # a room without a door
    return image


@pytest.fixture(scope="module")
def site(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("site")
    (folder / "maps").mkdir()
    image = _draw_map()
    header = f"P5\n{image.shape[1]} {image.shape[0]}\n255\n".encode("ascii")  # source: Netpbm PGM specification
    (folder / "maps" / "yard.pgm").write_bytes(header + image.tobytes())
    (folder / "maps" / "yard.toml").write_text(f"cell_size_m = {CELL_SIZE_M}\n")
    (folder / "car.toml").write_text("wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\n")
    return folder


STRAIGHT = """
map = "maps/yard.pgm"
reverse = false
start = { x_m = 3.0, y_m = 4.0, heading_deg = 0.0 }
goal = { x_m = 13.0, y_m = 4.0, heading_deg = 0.0 }
"""
BACK_UP = """
map = "maps/yard.pgm"
start = { x_m = 12.0, y_m = 4.0, heading_deg = 0.0 }
goal = { x_m = 8.0, y_m = 4.0, heading_deg = 0.0 }
"""
BAY_TO_BAY = """
map = "maps/yard.pgm"
vehicle = "car.toml"
start = { x_m = 2.9, y_m = 10.5, heading_deg = 90.0 }
goal = { x_m = 10.1, y_m = 10.5, heading_deg = 90.0 }
"""
ENCLOSED = """
map = "maps/yard.pgm"
start = { x_m = 3.0, y_m = 4.0, heading_deg = 0.0 }
goal = { x_m = 19.5, y_m = 4.0, heading_deg = 0.0 }
"""


def scenario(folder: Path, name: str, body: str, expect: str = "") -> Path:
    path = folder / f"{name}.toml"
    path.write_text(body + (f"\n[expect]\n{expect}\n" if expect else ""), encoding="utf-8")
    return path


def run_check(capsys, *paths) -> tuple[int, list[str]]:
    code = check.main([str(p) for p in paths])
    return code, capsys.readouterr().out.splitlines()


def numbers(line: str) -> dict[str, float]:
    found = re.search(r"found ([\d.]+) m, reverse ([\d.]+) m, (\d+) gear change", line)
    assert found, line
    return {"length_m": float(found[1]), "reverse_m": float(found[2]), "gear_changes": int(found[3])}


# -- passing -----------------------------------------------------------------------------------


def test_passing_scenarios_print_pass_lines_and_exit_0(site, capsys):
    files = [
        # common practice: no path is shorter than the straight line between its ends (10 m here)
        scenario(site, "straight", STRAIGHT, "found = true\nmax_length_m = 10.5\nmax_gear_changes = 0\n"
                                             "max_reverse_m = 0.0"),
        # source: Reeds & Shepp, Pacific J. Math. 145(2), 1990: straight back is the shortest way to
        # a goal 4 m behind with the same heading
        scenario(site, "back_up", BACK_UP, "must_reverse = true\nmax_length_m = 4.5\nmax_gear_changes = 0"),
        scenario(site, "bay_to_bay", BAY_TO_BAY, "found = true\nmust_reverse = true\nmax_length_m = 60.0"),
        scenario(site, "enclosed", ENCLOSED, 'found = false\nreason = "goal_enclosed"'),
        scenario(site, "no_expect", STRAIGHT),  # no [expect]: a path must be found
    ]
    code, lines = run_check(capsys, *files)
    assert code == 0, lines
    assert [line.split(":")[0] for line in lines[:-1]] == ["PASS straight", "PASS back_up", "PASS bay_to_bay",
                                                           "PASS enclosed", "PASS no_expect"]
    assert lines[-1] == "5 passed, 0 failed"
    straight = numbers(lines[0])
    assert 10.0 - 0.01 <= straight["length_m"] <= 10.5 and straight["reverse_m"] == 0.0
    back_up = numbers(lines[1])
    assert back_up["reverse_m"] == pytest.approx(4.0, abs=0.05) and back_up["gear_changes"] == 0
    # a car nose-in in a 3.4 m bay (turning circle 6.9 m across) leaves it in reverse and enters
    # the other bay forward: at least one change of gear
    assert numbers(lines[2])["gear_changes"] >= 1
    assert "no path (goal_enclosed)" in lines[3]


def test_the_scenario_name_comes_from_the_file_or_the_name_key(site, capsys):
    named = scenario(site, "file_stem", 'name = "a name of its own"\n' + STRAIGHT)
    code, lines = run_check(capsys, named)
    assert code == 0 and lines[0].startswith("PASS a name of its own: found ")


def test_the_example_scenarios_pass(capsys):
    folder = REPO / "examples" / "scenarios"
    files = sorted(folder.glob("*.toml"))
    assert len(files) == 3
    code, lines = run_check(capsys, *files)
    assert code == 0, lines
    assert lines[-1] == "3 passed, 0 failed"
    code, lines = run_check(capsys, folder)  # a folder stands for its *.toml files
    assert code == 0 and lines[-1] == "3 passed, 0 failed"


# -- failing: each expectation once --------------------------------------------------------------


@pytest.mark.parametrize("name, body, expect, phrase", [
    # common practice: shorter than the 10 m straight line is impossible
    ("too_long", STRAIGHT, "max_length_m = 9.9", "> max_length_m 9.9"),
    ("no_reverse", STRAIGHT.replace("reverse = false", "reverse = true"), "must_reverse = true",
     "expected reverse driving"),
    ("gears", BAY_TO_BAY, "max_gear_changes = 0", "> max_gear_changes 0"),
    ("reversing", BACK_UP, "max_reverse_m = 1.0", "> max_reverse_m 1"),
    ("slow", STRAIGHT, "max_plan_s = 1e-12", "> max_plan_s 1e-12"),
    ("wants_path", ENCLOSED, "found = true", "expected a path, got no path (goal_enclosed"),
    ("wants_none", STRAIGHT, "found = false", "expected no path, but a path was found"),
    ("other_reason", ENCLOSED, 'found = false\nreason = "budget_exhausted"',
     "expected no path for reason budget_exhausted, got goal_enclosed"),
])
def test_each_expectation_can_fail(site, capsys, name, body, expect, phrase):
    path = scenario(site, name, body, expect)
    code, lines = run_check(capsys, path)
    assert code == 1
    assert len(lines) == 2 and lines[0].startswith(f"FAIL {name}: ") and phrase in lines[0]
    assert lines[1] == "0 passed, 1 failed"


def test_several_failures_are_named_on_one_line_and_counted_once(site, capsys):
    both = scenario(site, "both", STRAIGHT, "max_length_m = 5.0\nmax_plan_s = 1e-12")
    good = scenario(site, "good", STRAIGHT)
    code, lines = run_check(capsys, good, both, good)
    assert code == 1
    assert lines[1].startswith("FAIL both: ") and "max_length_m" in lines[1] and "max_plan_s" in lines[1]
    assert lines[-1] == "2 passed, 1 failed"
    match = FINAL_LINE.match(lines[-1])
    assert match and int(match[1]) + int(match[2]) == 3


# -- bad input: one line naming the file and the key, exit 2 ------------------------------------------


@pytest.mark.parametrize("name, text, words", [
    ("not_toml", "map = \n", ["not valid TOML"]),
    ("unknown_key", STRAIGHT + "speed_m_s = 2.0\n", ["'speed_m_s'"]),
    ("unknown_expect", STRAIGHT + "[expect]\nmax_length = 3.0\n", ["'expect.max_length'"]),
    ("unknown_pose_key", STRAIGHT.replace("heading_deg = 0.0 }\ngoal", "heading_deg = 0.0, z_m = 1.0 }\ngoal"),
     ["'start.z_m'"]),
    ("missing_map", STRAIGHT.replace('map = "maps/yard.pgm"', ""), ["'map'"]),
    ("missing_goal", STRAIGHT.split("goal")[0], ["'goal'"]),
    ("missing_heading", STRAIGHT.replace(", heading_deg = 0.0 }\ngoal", " }\ngoal"), ["'start.heading_deg'"]),
    ("text_number", STRAIGHT.replace("x_m = 3.0", 'x_m = "3"'), ["'start.x_m'", "number"]),
    ("bool_number", STRAIGHT.replace("x_m = 3.0", "x_m = true"), ["'start.x_m'"]),
    ("reverse_text", STRAIGHT.replace("reverse = false", 'reverse = "no"'), ["'reverse'"]),
    ("cell_size", "cell_size_m = 0.0\n" + STRAIGHT, ["'cell_size_m'"]),
    ("gear_fraction", STRAIGHT + "[expect]\nmax_gear_changes = 1.5\n", ["'expect.max_gear_changes'"]),
    ("negative_length", STRAIGHT + "[expect]\nmax_length_m = -1.0\n", ["'expect.max_length_m'"]),
    ("zero_time", STRAIGHT + "[expect]\nmax_plan_s = 0\n", ["'expect.max_plan_s'"]),
    ("unknown_reason", ENCLOSED + '[expect]\nfound = false\nreason = "blocked"\n', ["'expect.reason'"]),
    ("reason_with_found", ENCLOSED + '[expect]\nfound = true\nreason = "goal_enclosed"\n', ["'expect.reason'"]),
    ("length_without_path", ENCLOSED + "[expect]\nfound = false\nmax_length_m = 3.0\n", ["'expect.max_length_m'"]),
    ("reverse_forbidden", STRAIGHT + "[expect]\nmust_reverse = true\n", ["'expect.must_reverse'"]),
    ("expect_not_table", STRAIGHT.replace("reverse = false", "reverse = false\nexpect = 3"), ["'expect'"]),
    ("vehicle_inline", STRAIGHT + "[vehicle]\nwheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\nmass_kg = 9\n",
     ["[vehicle]", "'mass_kg'"]),
    ("vehicle_file", 'vehicle = "no_such_car.toml"\n' + STRAIGHT, ["'vehicle'", "no_such_car.toml"]),
    ("vehicle_number", "vehicle = 3\n" + STRAIGHT, ["'vehicle'"]),
    ("map_file", STRAIGHT.replace("maps/yard.pgm", "maps/none.pgm"), ["'map'", "none.pgm"]),
    ("start_in_wall", STRAIGHT.replace("x_m = 3.0, y_m = 4.0", "x_m = 0.1, y_m = 4.0"), ["start"]),
    ("sidecar", "cell_size_m = 0.1\norigin_m = [0.0, 0.0]\nfree_above = 200\n", ["'free_above'", "sidecar"]),
])
def test_bad_scenario_files_are_one_line_and_exit_2(site, capsys, name, text, words):
    path_in_site = site / f"{name}.toml"  # maps and vehicles are looked up beside the scenario
    path_in_site.write_text(text, encoding="utf-8")
    code, lines = run_check(capsys, path_in_site)
    assert code == 2
    assert len(lines) == 2, lines
    assert lines[0].startswith(f"ERROR {path_in_site}: ")
    for word in words:
        assert word in lines[0], lines[0]
    assert lines[1] == "0 passed, 1 failed"


def test_unreadable_files_and_folders(site, capsys, tmp_path):
    code, lines = run_check(capsys, tmp_path / "missing.toml")
    assert code == 2 and lines[0].startswith(f"ERROR {tmp_path / 'missing.toml'}: cannot read")
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\xff\xfe\x00")
    code, lines = run_check(capsys, binary)
    assert code == 2 and "UTF-8" in lines[0]
    empty = tmp_path / "empty_folder"
    empty.mkdir()
    code, lines = run_check(capsys, empty)
    assert code == 2 and "no *.toml" in lines[0] and lines[-1] == "0 passed, 1 failed"


def test_a_bad_file_among_good_ones_still_runs_the_others(site, capsys):
    good = scenario(site, "good_one", STRAIGHT)
    failing = scenario(site, "failing_one", STRAIGHT, "max_length_m = 1.0")
    bad = site / "bad_one.toml"
    bad.write_text("map = 3\n")
    code, lines = run_check(capsys, good, bad, failing)
    assert code == 2  # bad input outranks a failed check
    assert [line.split()[0] for line in lines[:-1]] == ["PASS", "ERROR", "FAIL"]
    assert lines[-1] == "1 passed, 2 failed"


# -- the module as a program --------------------------------------------------------------------


def test_python_m_runs_it_with_the_same_lines_and_codes(site):
    passing = scenario(site, "sub_pass", STRAIGHT)
    failing = scenario(site, "sub_fail", STRAIGHT, "max_length_m = 1.0")
    result = subprocess.run([sys.executable, "-m", "veer.tools.check", str(passing), str(failing)],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 1, result.stderr
    assert result.stdout.splitlines()[-1] == "1 passed, 1 failed"
    assert result.stderr == ""
    usage = subprocess.run([sys.executable, "-m", "veer.tools.check"], capture_output=True, text=True, timeout=120)
    assert usage.returncode == 2 and len(usage.stderr.strip().splitlines()) == 1
    assert "Traceback" not in usage.stderr


def test_add_arguments_and_run_are_what_the_cli_wires():
    import argparse

    parser = argparse.ArgumentParser()
    check.add_arguments(parser)
    args = parser.parse_args(["a.toml", "b.toml"])
    assert args.scenarios == ["a.toml", "b.toml"]
    assert check.__doc__ and "Exit codes" in check.__doc__
