"""Tests for the ``veer`` command line: subcommands, exit codes, one-line errors, path JSON.

Most tests call :func:`veer.tools.cli.main` in-process; a few run the real entry point in
a child interpreter (``python -m veer.tools.cli``) to see exactly what a shell sees.
Found paths are checked with the suite's verifier (tests/verify.py, shapely) against the
rules of docs/files.md, "Path JSON", on a map read back by an independent decoder (OpenCV)
with the sidecar's thresholds, never with veer's own map reader.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tomllib
from importlib import metadata
from pathlib import Path
from types import SimpleNamespace

import cv2
import numpy as np
import pytest
import verify

from veer.tools.cli import main
from veer.tools.scenarios import build_scenario, write_scenario_map

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (ISO/IEC 15948), 5.2 PNG signature
# the example vehicle of docs/files.md, "Vehicle file": wheelbase 2.0 m, max steer 30 deg, disc of 1.0 m
EXAMPLE = SimpleNamespace(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=None, turns_in_place=False)
RADIUS_M = EXAMPLE.radius_m
# `veer plan` writes x, y to 0.1 mm and headings to 1e-5 rad: allow twice the rounding
JSON_POSITION_TOL_M = 1e-4
JSON_HEADING_TOL_RAD = 1e-5

# Scenario poses as typed on a command line (metres, metres, degrees).
PARKING_START = ["3.3", "11.3", "0"]
PARKING_GOAL = ["21.1", "20.3", "-90"]


@pytest.fixture(scope="module")
def maps_dir(tmp_path_factory) -> Path:
    """The built-in scenario maps written as PGM + sidecar, once for the module."""
    folder = tmp_path_factory.mktemp("maps")
    for name in ("parking_bay", "open_yard", "enclosed_goal"):
        write_scenario_map(build_scenario(name), folder)
    return folder


def _run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _pgm_p5(rows: int, cols: int, shades: np.ndarray | int) -> bytes:
    """A binary greymap: magic P5, whitespace, width, height, maxval, one whitespace, raster.

    # source: Netpbm PGM specification (pgm(5))
    """
    raster = np.broadcast_to(np.asarray(shades, dtype=np.uint8), (rows, cols))
    return f"P5\n{cols} {rows}\n255\n".encode("ascii") + raster.tobytes()


def _pgm_p2(rows: int, cols: int, shade: int) -> bytes:
    """A plain (ASCII) greymap of one shade, with a comment line and lines under 70 characters.

    # source: Netpbm PGM specification, "Plain PGM" (P2; '#' starts a comment)
    """
    lines = ["P2", "# all free, written by hand", f"{cols} {rows}", "255"]
    values = [str(shade)] * (rows * cols)
    lines += [" ".join(values[i : i + 16]) for i in range(0, len(values), 16)]
    return ("\n".join(lines) + "\n").encode("ascii")


def _obstacles_of(image_path: Path, cell_size_m: float | None = None) -> verify.Obstacles:
    """The blocked squares of a map file, read with OpenCV and the sidecar's thresholds."""
    # source: OpenCV imread (an independent PGM reader)
    shades = cv2.imread(str(image_path), cv2.IMREAD_UNCHANGED)
    sidecar = tomllib.loads(image_path.with_suffix(".toml").read_text())
    # docs/files.md, "Map sidecar": above free_above (default 200) is free; everything else
    # blocks, unknown included, as unknown_is defaults to "blocked"
    assert sidecar.get("unknown_is", "blocked") == "blocked"
    blocked = shades <= sidecar.get("free_above", 200)
    return verify.Obstacles.from_mask(blocked, cell_size_m or sidecar["cell_size_m"], sidecar.get("origin_m", (0.0, 0.0)))


def _pose(typed) -> tuple[float, float, float]:
    """A pose typed on the command line (degrees) in radians."""
    return float(typed[0]), float(typed[1]), math.radians(float(typed[2]))


def _check_path_document(doc: dict, image_path: Path, start_deg, goal_deg, cell_size_m=None) -> np.ndarray:
    """Assert the path JSON rules of docs/files.md for a found path; return the poses (N, 4)."""
    assert doc["status"] == "found" and doc["reason"] is None
    return verify.assert_valid_path(
        _obstacles_of(image_path, cell_size_m), EXAMPLE, doc, _pose(start_deg), _pose(goal_deg),
        position_tol_m=JSON_POSITION_TOL_M, heading_tol_rad=JSON_HEADING_TOL_RAD,
    )


# ------------------------------------------------------------------------------ subcommands


def test_help_lists_every_subcommand(capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["--help"])
    assert exit_info.value.code == 0
    out = capsys.readouterr().out
    listed = {line.split()[0] for line in out.splitlines() if line.startswith("    ") and line.split()}
    assert {"plan", "demo", "node", "replay"} <= listed


def test_console_script_points_at_main():
    # source: Python packaging entry points (importlib.metadata, console_scripts group)
    (entry,) = [e for e in metadata.entry_points(group="console_scripts") if e.name == "veer"]
    assert entry.load() is main


def test_help_in_a_child_process():
    done = subprocess.run([sys.executable, "-m", "veer.tools.cli", "--help"], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0
    for command in ("plan", "demo", "node", "replay"):
        assert command in done.stdout
    assert done.stderr == ""


def test_replay_of_a_missing_log_is_one_line(capsys, tmp_path):
    code, out, err = _run(capsys, "replay", str(tmp_path / "missing.log"))
    assert code == 2
    assert out == ""
    assert len(err.splitlines()) == 1
    assert "missing.log" in err


def test_every_registered_subcommand_has_the_interface():
    # each subcommand module: add_arguments(parser), run(args) -> int, a docstring for the help
    import importlib

    from veer.tools import cli

    assert set(cli.SUBCOMMANDS) >= {"plan", "demo"}
    for name in cli.SUBCOMMANDS:
        module = importlib.import_module(f"veer.tools.{name}")
        assert callable(module.add_arguments) and callable(module.run)
        assert module.__doc__ and module.__doc__.strip().splitlines()[0]


def test_subcommand_help_is_the_module_docstring(capsys):
    from veer.tools import plan

    with pytest.raises(SystemExit) as exit_info:
        main(["plan", "--help"])
    assert exit_info.value.code == 0
    assert plan.__doc__.strip().splitlines()[0] in capsys.readouterr().out


def test_cli_and_subcommands_do_not_import_each_other_at_load_time():
    # the exit codes and UsageError live in veer.tools.errors; cli imports the subcommands by
    # name when it builds its parser; a subcommand's own main() may call cli when it runs
    import ast

    tools = Path(__file__).resolve().parents[2] / "tools"
    for path in sorted(tools.glob("*.py")):
        if path.stem == "cli":
            continue
        top = ast.parse(path.read_text(encoding="utf-8")).body
        modules = {node.module for node in top if isinstance(node, ast.ImportFrom)}
        modules |= {alias.name for node in top if isinstance(node, ast.Import) for alias in node.names}
        assert not modules & {"veer.tools.cli", "cli"}, path.name


# ------------------------------------------------------------------------------ plan: found


def test_plan_writes_a_valid_path_and_a_png(capsys, maps_dir, tmp_path):
    image = maps_dir / "parking_bay.pgm"
    out, picture = tmp_path / "path.json", tmp_path / "path.png"
    code, stdout, err = _run(
        capsys, "plan", str(image), "--start", *PARKING_START, "--goal", *PARKING_GOAL,
        "--out", str(out), "--picture", str(picture),
    )
    assert code == 0, err
    assert stdout == ""  # the JSON went to --out
    assert "Traceback" not in err
    doc = json.loads(out.read_text())
    poses = _check_path_document(doc, image, PARKING_START, PARKING_GOAL)
    assert doc["reverse_m"] > 0 and (poses[:, 3] < 0).any()  # reverse is on by default
    assert doc["stats"]["expansions"] > 0 and doc["stats"]["plan_s"] > 0
    data = picture.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    # source: OpenCV imdecode (an independent PNG decoder)
    decoded = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
    assert decoded is not None and decoded.shape[0] > 50 and decoded.shape[1] > 50


def test_plan_without_out_prints_only_the_json(capsys, maps_dir):
    code, stdout, err = _run(
        capsys, "plan", str(maps_dir / "parking_bay.pgm"), "--start", *PARKING_START, "--goal", *PARKING_GOAL,
        "--reverse",
    )
    assert code == 0, err
    doc = json.loads(stdout)
    _check_path_document(doc, maps_dir / "parking_bay.pgm", PARKING_START, PARKING_GOAL)


def test_forward_only_open_yard_has_no_reverse_poses(capsys, maps_dir, tmp_path):
    # the scenario's own start faces a box and needs reverse; turned to 45 deg it can leave forward
    start, goal = ["4", "5", "45"], ["35", "34", "90"]
    out = tmp_path / "f.json"
    code, _, err = _run(capsys, "plan", str(maps_dir / "open_yard.pgm"), "--start", *start, "--goal", *goal,
                        "--forward-only", "--out", str(out))
    assert code == 0, err
    doc = json.loads(out.read_text())
    poses = _check_path_document(doc, maps_dir / "open_yard.pgm", start, goal)
    assert np.all(poses[:, 3] == 1) and doc["reverse_m"] == 0 and doc["gear_changes"] == 0


def test_cell_size_overrides_the_sidecar(capsys, tmp_path):
    # 100 x 50 cells: 10 x 5 m at the sidecar's 0.1 m, 20 x 10 m at 0.2 m
    image = tmp_path / "free.pgm"
    image.write_bytes(_pgm_p2(50, 100, 255))
    image.with_suffix(".toml").write_text("cell_size_m = 0.1\n")
    start, goal = ["3", "2.5", "0"], ["16", "2.5", "0"]  # goal beyond x = 10 m, inside x = 20 m
    code, _, err = _run(capsys, "plan", str(image), "--start", *start, "--goal", *goal)
    assert code == 2 and "goal" in err and "off the map" in err
    out = tmp_path / "p.json"
    code, _, err = _run(capsys, "plan", str(image), "--start", *start, "--goal", *goal,
                        "--cell-size", "0.2", "--out", str(out))
    assert code == 0, err
    doc = json.loads(out.read_text())
    poses = _check_path_document(doc, image, start, goal, cell_size_m=0.2)
    assert poses[:, 0].max() > 10.0 + RADIUS_M  # drove where the 0.1 m map has no cells
    assert doc["length_m"] == pytest.approx(13.0, abs=0.5)  # a straight drive in open space


# ------------------------------------------------------------------------------ plan: no path


def test_enclosed_goal_is_no_path_with_exit_1(capsys, maps_dir, tmp_path):
    out = tmp_path / "e.json"
    code, stdout, err = _run(capsys, "plan", str(maps_dir / "enclosed_goal.pgm"), "--start", "4", "4", "0",
                             "--goal", "20", "20", "0", "--out", str(out))
    assert code == 1
    assert "Traceback" not in err
    doc = json.loads(out.read_text())
    assert doc["status"] == "no_path"
    assert doc["reason"] == "goal_enclosed"
    assert doc["poses"] == []


def test_the_log_line_of_a_no_path_names_the_reason(capsys, caplog, maps_dir, tmp_path):
    import logging

    caplog.set_level(logging.INFO, logger="veer.tools")
    code, _, _ = _run(capsys, "plan", str(maps_dir / "enclosed_goal.pgm"), "--start", "4", "4", "0",
                      "--goal", "20", "20", "0", "--out", str(tmp_path / "e.json"))
    assert code == 1
    (line,) = [r.getMessage() for r in caplog.records if r.name == "veer.tools" and r.getMessage().startswith("plan ")]
    assert "status=no_path" in line and "reason=goal_enclosed" in line


# ------------------------------------------------------------------------------ plan: bad input


def _bad_inputs(maps: Path, tmp: Path) -> dict[str, tuple[list[str], list[str]]]:
    """name -> (argv after 'plan', words the one-line message must contain)."""
    park = str(maps / "parking_bay.pgm")
    poses = ["--start", *PARKING_START, "--goal", *PARKING_GOAL]
    garbage = tmp / "garbage.pgm"
    garbage.write_bytes(b"this is not an image\n" * 4)
    truncated = tmp / "short.pgm"
    truncated.write_bytes(_pgm_p5(50, 100, 255)[:200])  # header promises 5000 pixels
    truncated.with_suffix(".toml").write_text("cell_size_m = 0.1\n")
    bare = tmp / "bare.pgm"
    bare.write_bytes(_pgm_p5(50, 100, 255))  # no bare.toml beside it
    vehicles = {
        "syntax.toml": "wheelbase_m = 2.0\nmax_steer_deg = \nradius_m = 1.0\n",
        "unknown.toml": "wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\ncolour = \"red\"\n",
        "steer95.toml": "wheelbase_m = 2.0\nmax_steer_deg = 95.0\nradius_m = 1.0\n",
    }
    for name, text in vehicles.items():
        (tmp / name).write_text(text)
    return {
        "missing map": ([str(tmp / "nope.pgm"), *poses], ["nope.pgm"]),
        "garbage map": ([str(garbage), *poses, "--cell-size", "0.1"], ["garbage.pgm"]),
        "truncated map": ([str(truncated), "--start", "3", "2.5", "0", "--goal", "7", "2.5", "0"], ["short.pgm"]),
        "no sidecar": ([str(bare), "--start", "3", "2.5", "0", "--goal", "7", "2.5", "0"],
                       ["--cell-size", "sidecar", "bare.toml"]),
        "cell size 0": ([park, *poses, "--cell-size", "0"], ["cell"]),
        "cell size negative": ([park, *poses, "--cell-size", "-0.1"], ["cell"]),
        "cell size negative, = form": ([park, *poses, "--cell-size=-1"], ["cell"]),
        "cell size nan": ([park, *poses, "--cell-size", "nan"], ["cell"]),
        "cell size word": ([park, *poses, "--cell-size", "tiny"], ["--cell-size", "tiny"]),
        "start off the map": ([park, "--start", "50", "11.3", "0", "--goal", *PARKING_GOAL], ["start", "off the map"]),
        "start below the map": ([park, "--start", "3.3", "-4", "0", "--goal", *PARKING_GOAL], ["start", "off the map"]),
        "goal in an obstacle": ([park, "--start", *PARKING_START, "--goal", "0.1", "0.1", "0"], ["goal"]),
        "goal touching a wall": ([park, "--start", *PARKING_START, "--goal", "1.0", "11.3", "0"], ["goal"]),
        "vehicle syntax": ([park, *poses, "--vehicle", str(tmp / "syntax.toml")], ["syntax.toml"]),
        "vehicle unknown key": ([park, *poses, "--vehicle", str(tmp / "unknown.toml")], ["unknown.toml", "colour"]),
        "vehicle steer 95": ([park, *poses, "--vehicle", str(tmp / "steer95.toml")], ["steer95.toml", "max_steer_deg"]),
        "vehicle missing": ([park, *poses, "--vehicle", str(tmp / "none.toml")], ["none.toml"]),
        "missing goal": ([park, "--start", *PARKING_START], ["--goal"]),
        "start with two numbers": ([park, "--start", "3.3", "11.3", "--goal", *PARKING_GOAL], ["--start"]),
        "start not a number": ([park, "--start", "3.3", "11.3", "east", "--goal", *PARKING_GOAL], ["--start"]),
        "out into a missing folder": ([park, *poses, "--out", str(tmp / "no" / "such" / "p.json")], ["--out"]),
        "picture not png": ([park, *poses, "--picture", str(tmp / "p.jpg")], ["--picture", ".png"]),
        "reverse and forward-only": ([park, *poses, "--reverse", "--forward-only"], ["--reverse", "--forward-only"]),
    }


BAD_INPUT_NAMES = [
    "missing map", "garbage map", "truncated map", "no sidecar", "cell size 0", "cell size negative",
    "cell size negative, = form", "cell size nan", "cell size word", "start off the map", "start below the map",
    "goal in an obstacle", "goal touching a wall", "vehicle syntax", "vehicle unknown key", "vehicle steer 95",
    "vehicle missing", "missing goal", "start with two numbers", "start not a number", "out into a missing folder",
    "picture not png", "reverse and forward-only",
]


@pytest.mark.parametrize("name", BAD_INPUT_NAMES)
def test_bad_input_is_exit_2_with_one_line(capsys, maps_dir, tmp_path, name):
    cases = _bad_inputs(maps_dir, tmp_path)
    assert set(cases) == set(BAD_INPUT_NAMES)
    argv, words = cases[name]
    written = tmp_path / "written.json"
    if "--out" not in argv:
        argv = [*argv, "--out", str(written)]
    code, stdout, err = _run(capsys, "plan", *argv)
    assert code == 2
    assert stdout == ""
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert lines[0].startswith("veer plan")
    for word in words:
        assert word in lines[0], lines[0]
    assert not written.exists()  # a bad request writes no path


def test_bad_input_in_a_child_process(tmp_path):
    garbage = tmp_path / "garbage.pgm"
    garbage.write_bytes(b"\x00\x01not a map")
    done = subprocess.run(
        [sys.executable, "-m", "veer.tools.cli", "plan", str(garbage), "--start", "1", "1", "0",
         "--goal", "2", "2", "0", "--cell-size", "0.1"],
        capture_output=True, text=True, timeout=60,
    )
    assert done.returncode == 2
    assert done.stdout == ""
    assert len(done.stderr.splitlines()) == 1 and "Traceback" not in done.stderr
    assert "garbage.pgm" in done.stderr


# ------------------------------------------------------------------------------ demo


def test_demo_writes_pictures_and_paths(capsys, tmp_path):
    out = tmp_path / "demo"
    code, _, err = _run(capsys, "demo", "--scenarios", "--out", str(out))
    assert code == 0, err
    names = ("open_yard", "parking_bay", "s_corridor", "warehouse", "enclosed_goal")
    for name in names:
        assert (out / f"{name}.png").read_bytes()[:8] == PNG_SIGNATURE
        doc = json.loads((out / f"{name}.path.json").read_text())
        if name == "enclosed_goal":
            assert doc["status"] == "no_path" and doc["reason"] == "goal_enclosed"
        else:
            assert doc["status"] == "found" and len(doc["poses"]) >= 2
        assert (out / "maps" / f"{name}.pgm").read_bytes()[:2] == b"P5"  # source: Netpbm PGM specification
    assert all(str(out / f"{name}.png") in err for name in names)  # the last lines name the pictures


# ------------------------------------------------------------------------------ known gaps


def test_vehicle_file_not_utf8_is_exit_2(capsys, maps_dir, tmp_path):
    vehicle = tmp_path / "latin.toml"
    vehicle.write_bytes(b"\xff\xfewheelbase_m = 2.0\n")  # source: TOML v1.0.0 (a TOML file must be valid UTF-8)
    code, _, err = _run(capsys, "plan", str(maps_dir / "parking_bay.pgm"), "--start", *PARKING_START,
                        "--goal", *PARKING_GOAL, "--vehicle", str(vehicle))
    assert code == 2 and len(err.splitlines()) == 1 and "latin.toml" in err


@pytest.mark.parametrize("cell_size", ["1e-9", "1e300"])
def test_absurd_cell_size_is_exit_2(capsys, maps_dir, cell_size):
    # at 1e-9 m the map is 0.3 micrometres wide (start off the map); at 1e300 m arithmetic overflows
    code, _, err = _run(capsys, "plan", str(maps_dir / "parking_bay.pgm"), "--start", *PARKING_START,
                        "--goal", *PARKING_GOAL, "--cell-size", cell_size)
    assert code == 2 and len(err.splitlines()) == 1 and "Traceback" not in err and "--cell-size" in err
