"""`veer node` as a user runs it: a subprocess that starts, answers, and stops cleanly on a signal."""

from __future__ import annotations

import signal
import subprocess
import sys

import pytest
import zmq

from veer.node.client import NodeClient

STOP_WAIT_S = 10.0  # generous: the node stops within a second


def node_command(config_path) -> list[str]:
    return [sys.executable, "-m", "veer.tools.node", "--config", str(config_path)]


def write_config(tmp_path, ports, extra: str = "") -> str:
    path = tmp_path / "node.toml"
    inputs, outputs, control = (f"tcp://127.0.0.1:{p}" for p in ports)
    path.write_text(f'[sockets]\ninputs = "{inputs}"\noutputs = "{outputs}"\ncontrol = "{control}"\n{extra}')
    return path


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM])
def test_the_node_serves_and_stops_on_a_signal_with_exit_0(tmp_path, world, signum):
    ports = [world.free_port() for _ in range(3)]
    process = subprocess.Popen(node_command(write_config(tmp_path, ports)), stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    try:
        with NodeClient(*(f"tcp://127.0.0.1:{p}" for p in ports), timeout_s=30.0) as client:
            assert client.status()["state"] == "idle"
            client.send_grid(world.free_classes(), map_id="m", cell_size_m=world.CELL_M, classes=True)
            client.send_pose(*world.START)
            client.wait_accepted("m", world.START)
            goal_id = client.set_goal(*world.GOAL)
            assert client.wait_path(30.0, goal_id=goal_id)["status"] == "found"
        process.send_signal(signum)
        _, stderr = process.communicate(timeout=STOP_WAIT_S)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert process.returncode == 0, stderr
    assert "plan map_id=m goal_id=1 trigger=goal status=found" in stderr  # the INFO line per plan


def test_a_bad_config_is_one_line_and_exit_2(tmp_path):
    path = tmp_path / "node.toml"
    path.write_text("[replan]\noff_path_m = -2\n")
    result = subprocess.run(node_command(path), capture_output=True, text=True, timeout=60)
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and "off_path_m" in result.stderr and "Traceback" not in result.stderr


def test_an_address_in_use_is_one_line_and_exit_2(tmp_path, world):
    ports = [world.free_port() for _ in range(3)]
    context = zmq.Context()
    holder = context.socket(zmq.REP)
    holder.setsockopt(zmq.LINGER, 0)
    holder.bind(f"tcp://127.0.0.1:{ports[2]}")
    try:
        result = subprocess.run(node_command(write_config(tmp_path, ports)), capture_output=True, text=True,
                                timeout=60)
    finally:
        holder.close()
        context.term()
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and "in use" in result.stderr and "control" in result.stderr


def test_a_bad_vehicle_flag_is_one_line_and_exit_2(tmp_path):
    vehicle = tmp_path / "v.toml"
    vehicle.write_text("wheelbase_m = -1\nmax_steer_deg = 30\nradius_m = 1\n")
    result = subprocess.run([sys.executable, "-m", "veer.tools.node", "--vehicle", str(vehicle)],
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 2 and result.stderr.count("\n") == 1 and "wheelbase_m" in result.stderr


def test_a_recording_log_that_cannot_be_opened_is_one_line_and_exit_2(tmp_path, world):
    ports = [world.free_port() for _ in range(3)]
    config = write_config(tmp_path, ports, f'[record]\npath = "{tmp_path / "missing" / "drive.log"}"\n')
    result = subprocess.run(node_command(config), capture_output=True, text=True, timeout=60)
    assert result.returncode == 2
    assert result.stderr.count("\n") == 1 and "drive.log" in result.stderr and "Traceback" not in result.stderr
