"""Every failing example the fuzz tests found, kept as a plain test.

Each was a bug when found (marked ``xfail(strict=True)`` with an entry in
``fuzzkit.KNOWN_BUGS`` while open) and is fixed now; the test keeps it fixed. The property is the
fuzzers': every input gives a valid result or the project's own error with a ``code``.
"""

from __future__ import annotations

import math
import struct
import zlib

import numpy as np
import pytest

import verify
from fuzzkit import PNG_SIGNATURE, check_project_error, png_chunk, png_ihdr
from veer.maps import MapError, grid_from_message, load_map, read_image, read_sidecar
from veer.planning import Planner, PlanningError, SearchSettings, Vehicle, load_vehicle, vehicle_from_mapping


def expect_project_error(function, *args, allowed=(Exception,), **kwargs):
    with pytest.raises(allowed) as caught:
        function(*args, **kwargs)
    check_project_error(caught.value)
    return caught.value


# ------------------------------------------------------------------ maps


def test_load_map_with_a_huge_integer_cell_size_is_refused(tmp_path):
    # found by test_load_map_loads_or_refuses (cell_size_m override) and reached as well from a
    # sidecar value and a grid message field: TOML and Python integers have no size limit
    image = tmp_path / "one.pgm"
    image.write_bytes(b"P2\n1 1\n1\n1\n")
    expect_project_error(load_map, image, cell_size_m=10**400, allowed=(MapError,))
    sidecar = tmp_path / "one.toml"
    sidecar.write_text(f"cell_size_m = 0.1\norigin_m = [{10**400}, 0]\n", encoding="utf-8")
    expect_project_error(read_sidecar, sidecar, allowed=(MapError,))
    message = {"rows": 1, "cols": 1, "cell_size_m": 10**400, "origin_m": [0, 0], "encoding": "raw", "cells": b"\x00"}
    expect_project_error(grid_from_message, message, allowed=(MapError,))


def test_a_png_chunk_type_with_a_line_break_gives_a_one_line_error():
    # found by test_mutated_png_decodes_or_is_refused (deep profile): a splice put the bytes
    # "\r\n\x1a\n" of the signature where a chunk type belongs
    data = (PNG_SIGNATURE + png_ihdr(1, 1, 1, 0)
            + struct.pack(">I", 0) + b"\n\x1a\n\x00" + b"\x00\x00\x00\x00"  # critical chunk, wrong CRC
            + png_chunk(b"IDAT", zlib.compress(b"\x00\x00")) + png_chunk(b"IEND", b""))
    error = expect_project_error(read_image, data, "fuzz.png", allowed=(MapError,))
    assert error.code == "bad_image"


def test_an_origin_with_a_nested_list_is_refused(tmp_path):
    # found by test_sidecar_tables_load_or_are_refused (deep profile): origin_m = [0.0, []]
    sidecar = tmp_path / "map.toml"
    sidecar.write_text("origin_m = [0.0, []]\n", encoding="utf-8")
    error = expect_project_error(read_sidecar, sidecar, allowed=(MapError,))
    assert error.code == "bad_map_settings"
    message = {"rows": 1, "cols": 1, "cell_size_m": 0.1, "origin_m": [0.0, [1]], "encoding": "raw", "cells": b"\x00"}
    assert expect_project_error(grid_from_message, message, allowed=(MapError,)).code == "bad_grid_message"


# ------------------------------------------------------------------ planning


def test_a_vehicle_with_a_huge_integer_wheelbase_is_refused(tmp_path):
    table = {"wheelbase_m": 10**400, "max_steer_deg": 30.0, "radius_m": 1.0}
    expect_project_error(vehicle_from_mapping, table, allowed=(PlanningError,))
    path = tmp_path / "vehicle.toml"
    path.write_text(f"wheelbase_m = {10**400}\nmax_steer_deg = 30.0\nradius_m = 1.0\n", encoding="utf-8")
    expect_project_error(load_vehicle, path, allowed=(PlanningError,))


def test_search_settings_with_a_huge_integer_are_refused():
    expect_project_error(SearchSettings.from_mapping, {"heading_bins": 10**400}, allowed=(PlanningError,))


def small_planner():
    grid = verify.open_grid(4.0, 3.0)
    return grid, Planner(Vehicle(wheelbase_m=0.5, max_steer_deg=35.0, radius_m=0.3),
                         SearchSettings(max_expansions=2000, max_time_s=2.0))


def test_a_two_dimensional_array_as_start_gives_a_one_line_error():
    # found by test_any_start_and_goal_give_a_valid_path_or_a_project_error
    grid, planner = small_planner()
    error = expect_project_error(planner.plan, grid, np.zeros((3, 2)), (2.0, 1.5, 0.0), allowed=(PlanningError,))
    assert error.code == "bad_pose"


def test_a_start_with_a_huge_integer_is_refused():
    grid, planner = small_planner()
    error = expect_project_error(planner.plan, grid, (10**400, 1.5, 0.0), (2.0, 1.5, 0.0), allowed=(PlanningError,))
    assert error.code == "bad_pose"


@pytest.mark.parametrize("goal", [(0.0, 0.0, 0.0), (1.0, 0.0, 0.0)], ids=["corner", "bottom_edge"])
def test_a_goal_on_the_bottom_edge_of_the_map_is_refused(goal):
    # found by test_any_start_and_goal_give_a_valid_path_or_a_project_error (deep profile):
    # start [1.0, 1.0, 0.0], goal (0.0, 0.0, 0.0) on an 8 m x 6 m map with its corner at the origin
    # (planning/search.py validate_pose raised IndexError); fixed in planning/frame.py since
    grid, planner = small_planner()
    error = expect_project_error(planner.plan, grid, (1.0, 1.0, 0.0), goal, allowed=(PlanningError,))
    assert error.code == "bad_pose"


@pytest.mark.parametrize("table", [{"wheelbase_m": 1, "max_steer_deg": 5e-324, "radius_m": 0.0},
                                   {"wheelbase_m": 1e308, "max_steer_deg": 1.0, "radius_m": 0.0}],
                         ids=["tiny_steer", "huge_wheelbase"])
def test_a_vehicle_without_a_finite_turn_radius_is_refused(table):
    # found by test_vehicle_tables_give_a_vehicle_or_are_refused and test_vehicle_files_load_or_are_refused
    # (deep profile); the planner divides by the turn radius and sizes its tables by it
    error = expect_project_error(vehicle_from_mapping, table, allowed=(PlanningError,))
    assert error.code == "bad_vehicle"


@pytest.mark.parametrize("heading_rad", [1e16, 1e17, 1e308])
def test_a_huge_goal_heading_is_refused_or_reached(heading_rad):
    # found by test_any_start_and_goal_give_a_valid_path_or_a_project_error (deep profile):
    # start [1.0, 1.0, 0.0], goal (1.5, 1.0, 1e308): the path ends 180 degrees from the goal heading
    grid, planner = small_planner()
    try:
        path = planner.plan(grid, (1.0, 1.0, 0.0), (1.5, 1.0, heading_rad))
    except PlanningError as error:
        check_project_error(error)  # refusing such a heading is a fine answer
        return
    # source: IEEE 754 remainder (math.remainder) is exact: the heading reduced without rounding
    wanted_rad = math.remainder(heading_rad, math.tau)
    miss_rad = abs(math.remainder(path.poses[-1][2] - wanted_rad, math.tau))
    assert miss_rad <= math.radians(verify.GOAL_TOLERANCE_DEG)


# ------------------------------------------------------------------ file names


@pytest.mark.parametrize("loader, error", [(load_map, MapError), (read_sidecar, MapError), (load_vehicle, PlanningError)],
                         ids=["load_map", "read_sidecar", "load_vehicle"])
def test_file_names_with_a_nul_byte_are_refused(tmp_path, loader, error):
    # found by test_any_file_name_loads_or_is_refused; NODE.toml may carry "\u0000" in a path string
    expect_project_error(loader, tmp_path / "a\x00b.toml", allowed=(error,))


@pytest.mark.parametrize("loader, error", [(load_map, MapError), (read_sidecar, MapError), (load_vehicle, PlanningError)],
                         ids=["load_map", "read_sidecar", "load_vehicle"])
def test_file_names_with_a_line_break_give_one_line_errors(tmp_path, loader, error):
    # found by test_any_file_name_loads_or_is_refused (deep profile): the name "\n"
    expect_project_error(loader, tmp_path / "\n", allowed=(error,))


# ------------------------------------------------------------------ node


def test_node_config_errors_carry_a_code():
    # found by test_node_config_tables_give_a_config_or_are_refused: {"log": {"level": 0.0}};
    # fixed in node/config.py while the fuzz tests were being written
    from veer.node.config import ConfigError, config_from_mapping

    expect_project_error(config_from_mapping, {"log": {"level": 0.0}}, allowed=(ConfigError,))


@pytest.mark.parametrize("table", [{"replan": {"off_path_m": 10**400}}, {"status": {"interval_s": 10**400}}],
                         ids=["replan", "status"])
def test_node_config_with_a_huge_integer_is_refused(table):
    # found by test_node_config_tables_give_a_config_or_are_refused: {"status": {"interval_s": 2**1000 ...}}
    # (node/config.py _value raised OverflowError); fixed in node/config.py since
    from veer.node.config import ConfigError, config_from_mapping

    expect_project_error(config_from_mapping, table, allowed=(ConfigError,))
