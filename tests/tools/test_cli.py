"""Tests for the ``veer`` command line: subcommands, exit codes, one-line errors, path JSON.

Most tests call :func:`veer.tools.cli.main` in-process; a few run the real entry point in
a child interpreter (``python -m veer.tools.cli``) to see exactly what a shell sees.
Found paths are checked against the outside contract (CONTRACT.md, "Path JSON") with
an independent reader of the map image (OpenCV) and plain geometry, not the planner's code.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import tomllib
from importlib import metadata
from pathlib import Path

import cv2
import numpy as np
import pytest
from scipy.spatial import cKDTree

from veer.tools.cli import main
from veer.tools.scenarios import build_scenario, write_scenario_map

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (ISO/IEC 15948), 5.2 PNG signature
RADIUS_M = 1.0  # example vehicle (CONTRACT.md section 2): disc of 1.0 m
MIN_TURN_RADIUS_M = 2.0 / math.tan(math.radians(30.0))  # contract: wheelbase / tan(max steer)
GOAL_TOLERANCE_M = 0.2  # contract: last pose within 0.2 m and 5 degrees of the goal
GOAL_TOLERANCE_RAD = math.radians(5.0)
MAX_POSE_GAP_M = 0.25  # contract: consecutive poses at most 0.25 m apart
ROUNDING_M = 1e-3  # the JSON rounds x, y to 0.1 mm

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

    # source: Netpbm PGM specification (https://netpbm.sourceforge.net/doc/pgm.html)
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


def _blocked_squares(image_path: Path, cell_size_m: float | None = None):
    """Centres (N, 2) of the cells that block, read with OpenCV and the sidecar's thresholds."""
    # source: OpenCV imread (an independent PGM reader)
    shades = cv2.imread(str(image_path), cv2.IMREAD_UNCHANGED)
    sidecar = tomllib.loads(image_path.with_suffix(".toml").read_text())
    cell_m = cell_size_m or sidecar["cell_size_m"]
    # contract: above free_above (default 200) is free; everything else blocks, unknown
    # included, as unknown_is defaults to "blocked"
    assert sidecar.get("unknown_is", "blocked") == "blocked"
    rows, cols = np.nonzero(shades <= sidecar.get("free_above", 200))
    ox, oy = sidecar.get("origin_m", (0.0, 0.0))
    height = shades.shape[0]
    centres = np.column_stack((ox + (cols + 0.5) * cell_m, oy + (height - rows - 0.5) * cell_m))
    extent = (ox, oy, ox + shades.shape[1] * cell_m, oy + height * cell_m)
    return centres, cell_m, extent


def _check_path_document(doc: dict, image_path: Path, start_deg, goal_deg, cell_size_m=None) -> np.ndarray:
    """Assert the contract's path JSON rules for a found path; return the poses (N, 4)."""
    assert doc["status"] == "found" and doc["reason"] is None
    poses = np.array(doc["poses"], dtype=float)
    assert poses.ndim == 2 and poses.shape[1] == 4 and len(poses) >= 2
    assert set(np.unique(poses[:, 3])) <= {-1.0, 1.0}
    sx, sy, sh = float(start_deg[0]), float(start_deg[1]), math.radians(float(start_deg[2]))
    gx, gy, gh = float(goal_deg[0]), float(goal_deg[1]), math.radians(float(goal_deg[2]))

    def wrap(a):
        return (np.asarray(a) + math.pi) % (2 * math.pi) - math.pi

    # first pose is the start; last within the goal tolerance
    assert math.hypot(poses[0, 0] - sx, poses[0, 1] - sy) <= ROUNDING_M
    assert abs(wrap(poses[0, 2] - sh)) <= 1e-4
    assert math.hypot(poses[-1, 0] - gx, poses[-1, 1] - gy) <= GOAL_TOLERANCE_M + ROUNDING_M
    assert abs(wrap(poses[-1, 2] - gh)) <= GOAL_TOLERANCE_RAD + 1e-4

    step = np.hypot(np.diff(poses[:, 0]), np.diff(poses[:, 1]))
    assert step.max() <= MAX_POSE_GAP_M + ROUNDING_M
    gear = poses[1:, 3]
    # gear = direction of travel from the previous pose: sign of the step along the heading
    # common practice (projection of the displacement on the mean heading of the two poses)
    mid = poses[:-1, 2] + wrap(np.diff(poses[:, 2])) / 2
    along = np.diff(poses[:, 0]) * np.cos(mid) + np.diff(poses[:, 1]) * np.sin(mid)
    moving = step > 0.02
    np.testing.assert_array_equal(np.sign(along[moving]), gear[moving])
    assert poses[0, 3] == poses[1, 3]  # the first pose carries the gear of the first step
    assert doc["length_m"] == pytest.approx(step.sum(), abs=0.01)
    assert doc["reverse_m"] == pytest.approx(step[gear < 0].sum(), abs=0.01)
    moving_gears = gear[step > 1e-9]
    assert doc["gear_changes"] == int(np.count_nonzero(moving_gears[1:] != moving_gears[:-1]))

    # curvature never exceeds 1 / min turn radius (heading change per metre, chord over-reads
    # an arc of 0.25 m on 3.46 m by 2e-4 relative)
    turn = np.abs(wrap(np.diff(poses[:, 2])))
    big = step > 0.02
    assert np.all(turn[big] <= step[big] / MIN_TURN_RADIUS_M * 1.01 + 2e-5)

    # the disc is clear at every pose and every 2 cm between poses: no blocked square
    # within RADIUS_M, and the disc stays on the image (everything outside is blocked)
    t = np.linspace(0.0, 1.0, 14)[:-1]
    xs = (poses[:-1, 0, None] + np.diff(poses[:, 0])[:, None] * t).ravel()
    ys = (poses[:-1, 1, None] + np.diff(poses[:, 1])[:, None] * t).ravel()
    points = np.column_stack((np.append(xs, poses[-1, 0]), np.append(ys, poses[-1, 1])))
    centres, cell_m, (x0, y0, x1, y1) = _blocked_squares(image_path, cell_size_m)
    assert np.all(points[:, 0] - RADIUS_M >= x0 - 1e-9) and np.all(points[:, 0] + RADIUS_M <= x1 + 1e-9)
    assert np.all(points[:, 1] - RADIUS_M >= y0 - 1e-9) and np.all(points[:, 1] + RADIUS_M <= y1 + 1e-9)
    # source: scipy.spatial.cKDTree (neighbour query); point-to-square distance is common practice
    tree = cKDTree(centres)
    for point, near in zip(points, tree.query_ball_point(points, RADIUS_M + cell_m * math.sqrt(0.5))):
        if near:
            d = np.abs(centres[near] - point) - cell_m / 2
            assert np.hypot(*np.maximum(d, 0.0).T).min() >= RADIUS_M - 1e-9, f"disc at {point} touches a blocked cell"
    return poses


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


@pytest.mark.parametrize("argv", [["node"], ["node", "--vehicle", "v.toml"], ["replay", "x"]])
def test_node_and_replay_say_they_are_not_built(capsys, argv):
    code, out, err = _run(capsys, *argv)
    assert code != 0
    assert out == ""
    assert len(err.splitlines()) == 1
    assert f"veer {argv[0]}" in err and "not built yet" in err


# ------------------------------------------------------------------------------ plan: found


def test_plan_writes_a_contract_path_and_a_png(capsys, maps_dir, tmp_path):
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
    image.write_bytes(_pgm_p2(50, 100, 254))
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


# ------------------------------------------------------------------------------ plan: bad input


def _bad_inputs(maps: Path, tmp: Path) -> dict[str, tuple[list[str], list[str]]]:
    """name -> (argv after 'plan', words the one-line message must contain)."""
    park = str(maps / "parking_bay.pgm")
    poses = ["--start", *PARKING_START, "--goal", *PARKING_GOAL]
    garbage = tmp / "garbage.pgm"
    garbage.write_bytes(b"this is not an image\n" * 4)
    truncated = tmp / "short.pgm"
    truncated.write_bytes(_pgm_p5(50, 100, 254)[:200])  # header promises 5000 pixels
    truncated.with_suffix(".toml").write_text("cell_size_m = 0.1\n")
    bare = tmp / "bare.pgm"
    bare.write_bytes(_pgm_p5(50, 100, 254))  # no bare.toml beside it
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
    code, _, err = _run(capsys, "demo", "--out", str(out))
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
