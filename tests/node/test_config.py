"""NODE.toml: defaults for every key, one clear line for every mistake."""

from __future__ import annotations

import pytest

from veer.node.config import ConfigError, NodeConfig, config_from_mapping, load_config
from veer.planning import EXAMPLE_VEHICLE, SearchSettings


def test_no_file_means_every_default():
    config = load_config(None)
    assert config == NodeConfig()
    # docs/protocol.md, "Sockets": default addresses, loopback only
    assert (config.sockets.inputs, config.sockets.outputs, config.sockets.control) == (
        "tcp://127.0.0.1:7401", "tcp://127.0.0.1:7402", "tcp://127.0.0.1:7403")
    assert config.vehicle == EXAMPLE_VEHICLE and config.search == SearchSettings()
    assert config.status_interval_s <= 1.0  # docs/protocol.md: a status at least once a second


def test_a_full_file_is_read(tmp_path):
    (tmp_path / "robot.toml").write_text("wheelbase_m = 1.5\nmax_steer_deg = 35.0\nradius_m = 0.6\n")
    path = tmp_path / "node.toml"
    path.write_text(
        '[sockets]\ninputs = "tcp://127.0.0.1:9001"\n'
        "[limits]\nmax_grid_cells = 1000000\n"
        "[replan]\noff_path_m = 0.8\nstart_ahead_m = 2\nmax_supersedes = 0\n"
        "[status]\ninterval_s = 0.25\n[log]\nlevel = \"debug\"\n"
        '[vehicle]\nfile = "robot.toml"\n'
        "[search]\nmax_expansions = 5000\nallow_reverse = false\n"
    )
    config = load_config(path)
    assert config.sockets.inputs == "tcp://127.0.0.1:9001" and config.sockets.control == "tcp://127.0.0.1:7403"
    assert config.limits.max_grid_cells == 1_000_000
    assert (config.replan.off_path_m, config.replan.start_ahead_m, config.replan.max_supersedes) == (0.8, 2.0, 0)
    assert isinstance(config.replan.start_ahead_m, float)
    assert config.status_interval_s == 0.25 and config.log_level == "debug"
    assert config.vehicle.wheelbase_m == 1.5 and config.vehicle.radius_m == 0.6
    assert config.search.max_expansions == 5000 and config.search.allow_reverse is False


def test_an_inline_vehicle_and_the_vehicle_flag(tmp_path):
    config = config_from_mapping({"vehicle": {"wheelbase_m": 2.5, "max_steer_deg": 25.0, "radius_m": 1.2}})
    assert config.vehicle.wheelbase_m == 2.5
    flag = tmp_path / "v.toml"
    flag.write_text("wheelbase_m = 1.0\nmax_steer_deg = 40.0\nradius_m = 0.4\n")
    node = tmp_path / "node.toml"
    node.write_text("[vehicle]\nwheelbase_m = 2.5\nmax_steer_deg = 25.0\nradius_m = 1.2\n")
    assert load_config(node, flag).vehicle.radius_m == 0.4  # --vehicle wins


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("[sockest]\n", ["unknown section", "sockest"]),
        ("[replan]\noff_path = 1.0\n", ["unknown key", "off_path", "off_path_m"]),
        ("[replan]\noff_path_m = \"far\"\n", ["off_path_m", "number"]),
        ("[replan]\noff_path_m = -1.0\n", ["off_path_m", "between"]),
        ("[replan]\nmax_supersedes = 1.5\n", ["max_supersedes", "whole number"]),
        ("[replan]\nplan_deadline_s = nan\n", ["plan_deadline_s", "finite"]),
        ("[limits]\nmax_message_bytes = true\n", ["max_message_bytes", "whole number"]),
        ("[limits]\nmax_message_bytes = 2000\nmax_control_bytes = 4000\n", ["max_control_bytes"]),
        ("[sockets]\ncontrol = \"\"\n", ["control", "non-empty"]),
        ("[status]\ninterval_s = 2.0\n", ["interval_s", "between"]),
        ("[status]\nevery = 1\n", ["[status]", "interval_s"]),
        ("[log]\nlevel = \"loud\"\n", ["level", "info"]),
        ("[search]\nheading_binz = 36\n", ["heading_binz"]),
        ("[search]\nheading_bins = 3\n", ["heading_bins"]),
        ("[vehicle]\nwheelbase_m = 2.0\n", ["max_steer_deg"]),
        ("[vehicle]\nfile = \"missing.toml\"\n", ["missing.toml"]),
        ("[vehicle]\nfile = \"a.toml\"\nradius_m = 1.0\n", ["not both"]),
        ("replan = 3\n", ["[replan] must be a table"]),
        ("[replan\n", ["not valid TOML"]),
    ],
)
def test_each_mistake_is_one_line_naming_the_key(tmp_path, text, words):
    path = tmp_path / "node.toml"
    path.write_text(text)
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    message = str(caught.value)
    assert "\n" not in message and str(path) in message or "vehicle" in message
    for word in words:
        assert word in message, message


def test_a_missing_config_file_is_one_line(tmp_path):
    with pytest.raises(ConfigError, match="cannot read node config"):
        load_config(tmp_path / "nope.toml")


def test_the_record_path_is_relative_to_the_config(tmp_path):
    path = tmp_path / "node.toml"
    path.write_text('[record]\npath = "logs/drive.log"\nfsync_every_s = 2\n')
    config = load_config(path)
    assert config.record.path == str(tmp_path / "logs" / "drive.log") and config.record.fsync_every_s == 2.0
    assert load_config(None).record.path == ""  # off by default


def test_an_integer_too_large_for_a_float_is_refused_in_one_line():
    # TOML integers have no size limit in Python's tomllib; math.isfinite of such an int overflows
    for table in ({"replan": {"off_path_m": 10**400}}, {"limits": {"max_grid_cells": 10**400}}):
        with pytest.raises(ConfigError) as caught:
            config_from_mapping(table)
        assert caught.value.code == "bad_config" and len(str(caught.value)) < 200
