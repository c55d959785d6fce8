"""Tests for ``veer replay``: the report folder, determinism, damage, comparison and fleet replay.

Logs are written in the tests with ``LogWriter`` (tests/replay_world.py: a goal, poses
along the way, a grid change away from the path and one across it). The CSV and JSON are
read back with the standard library's csv and json modules; pictures are checked as PNG
files by their signature and decoded with OpenCV.
"""

from __future__ import annotations

import csv
import json
import sys

import cv2
import pytest
import replay_world as world

from veer.node.offline import replay
from veer.tools.cli import main

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (ISO/IEC 15948), 5.2 PNG signature
TIMING_COLUMNS = ("plan_s", "picture")  # wall time differs from run to run; pictures carry it in a note


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("logs")
    return [world.write_drive_log(folder / "drive_a.log"),
            world.write_drive_log(folder / "drive_b.log", extra_goal_s=6.0)]


def _veer(capsys, *argv):
    code = main(["replay", *map(str, argv)])
    out, err = capsys.readouterr()
    return code, out, err


def _csv(path):
    with open(path, newline="", encoding="utf-8") as file:
        return list(csv.DictReader(file))


def _answers(rows):
    return [{k: v for k, v in row.items() if k not in TIMING_COLUMNS} for row in rows]


def test_report_has_one_row_and_one_picture_per_replan(capsys, tmp_path, logs):
    code, out, err = _veer(capsys, logs[0], "--out", tmp_path / "report")
    assert code == 0, err
    report = tmp_path / "report"
    rows = _csv(report / "replans.csv")
    expected = replay(logs[0]).replans  # the driver the command is built on
    assert len(rows) == len(expected) == 2
    assert [(r["trigger"], r["status"], r["map_id"]) for r in rows] == [("goal", "found", "1"), ("blocked", "found", "3")]
    assert list(rows[0]) == ["log", "config", "index", "t_s", "trigger", "map_id", "goal_id", "status", "reason",
                             "length_m", "reverse_m", "gear_changes", "expansions", "plan_s", "picture"]
    summary = json.loads((report / "summary.json").read_text(encoding="utf-8"))
    assert summary["totals"]["replans"] == 2 and len(summary["replans"]) == 2
    assert summary["replans"][1]["length_m"] == pytest.approx(float(rows[1]["length_m"]), abs=1e-4)
    page = (report / "index.html").read_text(encoding="utf-8")
    for row in rows:
        picture = report / row["picture"]
        assert picture.read_bytes()[:8] == PNG_SIGNATURE
        image = cv2.imread(str(picture))
        assert image is not None and image.shape[1] >= 1000
        assert f'src="{row["picture"]}"' in page
    assert "http://" not in page.replace('xmlns="http://www.w3.org/2000/svg"', "") and "https://" not in page
    assert "<svg" in page and "<polyline" in page
    assert out.strip().splitlines()[-1] == f"report: {report / 'index.html'}"


def test_the_changed_cells_are_highlighted_in_the_picture_of_the_replan(capsys, tmp_path, logs):
    from veer.tools.picture import CHANGED_BGR

    code, _, _ = _veer(capsys, logs[0], "--out", tmp_path / "r")
    assert code == 0
    first = cv2.imread(str(tmp_path / "r/pictures/001_0001.png"))
    second = cv2.imread(str(tmp_path / "r/pictures/001_0002.png"))

    def cyan_pixels(image):  # blended cyan: blue and green high, red low
        b, g, r = image[..., 0].astype(int), image[..., 1].astype(int), image[..., 2].astype(int)
        return int(((b > 150) & (g > 120) & (r < 60)).sum())

    assert CHANGED_BGR[2] < 60
    assert cyan_pixels(second) > 20 * cyan_pixels(first) + 1000  # the wall and the box of 3 s and 5 s


def test_two_runs_give_the_same_table(capsys, tmp_path, logs):
    for name in ("one", "two"):
        assert _veer(capsys, *logs, "--out", tmp_path / name, "--no-pictures")[0] == 0
    one, two = _csv(tmp_path / "one/replans.csv"), _csv(tmp_path / "two/replans.csv")
    assert _answers(one) == _answers(two)
    assert len(one) == 5  # drive_b has one more goal: one more replan
    assert not list((tmp_path / "one/pictures").glob("*.png"))


@pytest.mark.parametrize("content, expected", [
    (b"", "is empty"),
    (b"not a log, just text", "not a veer recording log"),
])
def test_an_unreadable_log_is_one_line_and_exit_2(capsys, tmp_path, logs, content, expected):
    bad = tmp_path / "bad.log"
    bad.write_bytes(content)
    code, out, err = _veer(capsys, logs[0], bad, "--out", tmp_path / "r")
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and expected in err and err.startswith("veer replay: ")
    assert not (tmp_path / "r").exists()  # nothing was replayed


def test_a_missing_log_and_a_bad_config_are_one_line(capsys, tmp_path, logs):
    code, _, err = _veer(capsys, tmp_path / "nope.log")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "cannot read log" in err
    config = tmp_path / "NODE.toml"
    config.write_text("[replan]\noff_path_m = -1\n", encoding="utf-8")
    code, _, err = _veer(capsys, logs[0], "--config", config, "--out", tmp_path / "r")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "off_path_m" in err
    code, _, err = _veer(capsys, logs[0], "--config", config, "--compare", config, config)
    assert code == 2 and "not both" in err


def test_damage_is_reported_per_line_and_in_the_report_not_fatal(capsys, tmp_path, logs):
    data = bytearray(logs[0].read_bytes())
    damaged = tmp_path / "damaged.log"
    middle = len(data) // 3
    data[middle: middle + 8] = b"\x00" * 8  # inside a record in the middle
    damaged.write_bytes(bytes(data[:-10]))  # and the last record cut off
    code, out, err = _veer(capsys, damaged, "--out", tmp_path / "r")
    assert code == 0
    lines = [line for line in err.splitlines() if "damage" in line]
    assert len(lines) == 2 and all(line.startswith("veer replay: damaged.log: damage: ") for line in lines)
    assert "in the middle" in lines[0] and "at the tail" in lines[1]
    page = (tmp_path / "r/index.html").read_text(encoding="utf-8")
    assert "in the middle" in page and "at the tail" in page
    summary = json.loads((tmp_path / "r/summary.json").read_text(encoding="utf-8"))
    assert len(summary["logs"][0]["runs"][0]["damage"]) == 2
    assert len(summary["replans"]) >= 1  # replayed past the damage


def _configs(tmp_path):
    same = tmp_path / "A.toml"
    same.write_text("# the defaults\n", encoding="utf-8")
    tiny = tmp_path / "tiny_budget.toml"
    tiny.write_text("[search]\nmax_expansions = 5\n", encoding="utf-8")  # too few for the detour round the wall
    return same, tiny


def test_compare_flags_a_worse_configuration_with_exit_1(capsys, tmp_path, logs):
    same, tiny = _configs(tmp_path)
    code, out, err = _veer(capsys, *logs, "--compare", same, tiny, "--out", tmp_path / "r")
    assert code == 1, err
    assert "B is worse than A" in out and "--max-lost" in out
    summary = json.loads((tmp_path / "r/summary.json").read_text(encoding="utf-8"))
    compare = summary["compare"]
    assert compare["verdict"] == "worse" and compare["totals"]["lost"] >= 2  # the blocked replan of each log
    lost = [p for p in compare["pairs"] if p["change"] == "lost"]
    assert all(p["a_status"] == "found" and p["b_status"] == "no_path" for p in lost)
    pairs_csv = _csv(tmp_path / "r/compare.csv")
    assert len(pairs_csv) == len(compare["pairs"])
    pictured = [p for p in pairs_csv if p["picture"]]
    assert pictured and all((tmp_path / "r" / p["picture"]).read_bytes()[:8] == PNG_SIGNATURE for p in pictured)
    # side by side: about twice as wide as one replan picture
    one = cv2.imread(str(tmp_path / "r" / pictured[0]["picture"]))
    assert one.shape[1] > 2000
    # a threshold high enough lets the same comparison pass
    code, out, _ = _veer(capsys, *logs, "--compare", same, tiny, "--out", tmp_path / "r2", "--max-lost", "10",
                         "--max-plan-time-ratio", "inf", "--no-pictures")
    assert code == 0 and "within the thresholds" in out


def test_compare_passes_an_identical_configuration_with_exit_0(capsys, tmp_path, logs):
    same, _ = _configs(tmp_path)
    # plan time is wall time: switched off here, a test never asserts on it
    code, out, err = _veer(capsys, *logs, "--compare", same, same, "--out", tmp_path / "r",
                           "--max-plan-time-ratio", "inf")
    assert code == 0, err
    compare = json.loads((tmp_path / "r/summary.json").read_text(encoding="utf-8"))["compare"]
    assert compare["failures"] == [] and compare["totals"]["lost"] == 0
    assert {p["change"] for p in compare["pairs"]} == {"same"}
    assert compare["ratios"]["length_ratio"] == 1.0
    assert "No replan differs" in (tmp_path / "r/index.html").read_text(encoding="utf-8")


def test_compare_gates_on_the_length_ratio_the_user_sets(capsys, tmp_path, logs):
    forward = tmp_path / "forward_only.toml"  # A drives forward only; B may reverse and takes another detour
    forward.write_text("[search]\nallow_reverse = false\n", encoding="utf-8")
    defaults = tmp_path / "defaults.toml"
    defaults.write_text("", encoding="utf-8")
    common = ["--compare", forward, defaults, "--no-pictures", "--max-plan-time-ratio", "inf"]
    code, out, _ = _veer(capsys, logs[0], *common, "--out", tmp_path / "r")
    pairs = _csv(tmp_path / "r/compare.csv")
    both = [p for p in pairs if p["a_status"] == p["b_status"] == "found"]
    # the ratio recomputed from the per-replan lengths
    ratio = sum(float(p["b_length_m"]) for p in both) / sum(float(p["a_length_m"]) for p in both)
    reported = json.loads((tmp_path / "r/summary.json").read_text(encoding="utf-8"))["compare"]["ratios"]
    assert reported["length_ratio"] == pytest.approx(ratio, rel=1e-4)
    assert ratio != pytest.approx(1.0, abs=1e-3), "the two settings should plan different detours"
    below, above = f"{ratio * 0.999:.6f}", f"{ratio * 1.001:.6f}"
    code_below, out_below, _ = _veer(capsys, logs[0], *common, "--out", tmp_path / "b", "--max-length-ratio", below,
                                     "--max-reverse-ratio", "inf", "--max-gear-change-ratio", "inf")
    code_above, out_above, _ = _veer(capsys, logs[0], *common, "--out", tmp_path / "a", "--max-length-ratio", above,
                                     "--max-reverse-ratio", "inf", "--max-gear-change-ratio", "inf")
    assert (code_below, code_above) == (1, 0)
    assert "--max-length-ratio" in out_below and "within the thresholds" in out_above


def test_jobs_spread_over_processes_give_the_same_table(capsys, tmp_path, logs):
    assert _veer(capsys, *logs, "--out", tmp_path / "one", "--no-pictures")[0] == 0
    code, _, err = _veer(capsys, *logs, "--out", tmp_path / "two", "--jobs", "2")
    assert code == 0, err
    assert _answers(_csv(tmp_path / "two/replans.csv")) == _answers(_csv(tmp_path / "one/replans.csv"))
    assert len(list((tmp_path / "two/pictures").glob("*.png"))) == 5


def test_fleet_replay_on_a_local_dask_cluster_gives_the_same_table(capsys, tmp_path, logs):
    distributed = pytest.importorskip("distributed")
    assert _veer(capsys, *logs, "--out", tmp_path / "local", "--no-pictures")[0] == 0
    # one in-process worker on loopback: the scheduler speaks TCP as a real cluster does
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0") as cluster:
        address = cluster.scheduler_address
        assert address.startswith("tcp://127.0.0.1:")
        code, out, err = _veer(capsys, *logs, "--out", tmp_path / "dask", "--cluster", address)
    assert code == 0, err
    assert _answers(_csv(tmp_path / "dask/replans.csv")) == _answers(_csv(tmp_path / "local/replans.csv"))
    assert len(list((tmp_path / "dask/pictures").glob("*.png"))) == 5
    # a comparison on the cluster gives the local verdict
    same, tiny = _configs(tmp_path)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp",
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0") as cluster:
        code, _, _ = _veer(capsys, *logs, "--compare", same, tiny, "--out", tmp_path / "dc", "--no-pictures",
                           "--cluster", cluster.scheduler_address)
    assert code == 1


def test_cluster_without_dask_names_the_install_command(capsys, tmp_path, logs, monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import fails as if not installed
    code, out, err = _veer(capsys, logs[0], "--out", tmp_path / "r", "--cluster", "tcp://127.0.0.1:1")
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "pip install 'veer-planner[fleet]'" in err


def test_jobs_and_cluster_together_are_refused(capsys, tmp_path, logs):
    code, _, err = _veer(capsys, logs[0], "--jobs", "2", "--cluster", "tcp://127.0.0.1:1")
    assert code == 2 and "not both" in err
    code, _, err = _veer(capsys, logs[0], "--jobs", "0")
    assert code == 2 and "--jobs" in err


def test_replay_report_call_and_a_rewritten_folder_keeps_only_its_own_pictures(tmp_path, logs):
    from veer.tools.replay import replay_report

    out = tmp_path / "r"
    first = replay_report(logs, out)
    assert first.replans == first.pictures == 5
    (out / "pictures/notes.png").write_bytes(b"a file of the user's")
    second = replay_report(logs[:1], out)  # fewer logs into the same folder
    assert second.replans == 2
    assert sorted(p.name for p in (out / "pictures").glob("*.png")) == ["001_0001.png", "001_0002.png", "notes.png"]
    assert len(_csv(second.csv_path)) == 2


def test_picture_helpers_side_by_side_and_a_changed_mask_of_the_wrong_shape():
    import numpy as np

    from veer.maps import OccupancyGrid
    from veer.planning import EXAMPLE_VEHICLE, Planner
    from veer.tools.picture import plan_picture_image, side_by_side

    grid = OccupancyGrid(world.classes(), world.CELL_M, (0.0, 0.0))
    inflated = Planner(EXAMPLE_VEHICLE).inflated_grid(grid)
    left = plan_picture_image(inflated, EXAMPLE_VEHICLE, world.START, world.GOAL)
    right = plan_picture_image(inflated, EXAMPLE_VEHICLE, world.START, world.GOAL, title="B",
                               notes=["no path (budget_exhausted)"])
    both = side_by_side([left, right], gap_px=10)
    assert both.shape[1] == left.shape[1] + right.shape[1] + 10
    assert both.shape[0] == max(left.shape[0], right.shape[0])
    np.testing.assert_array_equal(both[: left.shape[0], : left.shape[1]], left)
    with pytest.raises(ValueError, match="changed_cells must have the grid's shape"):
        plan_picture_image(inflated, EXAMPLE_VEHICLE, world.START, world.GOAL, changed_cells=np.zeros((3, 3), bool))
