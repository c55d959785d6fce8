"""CURVE on the node's sockets: allowed clients plan, others get nothing through, no key ever shows.

Every socket binds loopback on a port the OS picks; every wait is bounded. Non-loopback
addresses are only ever parsed, never bound: the refusal comes before any socket exists.
Key files are checked with pyzmq's own certificate reader and libzmq's key derivation.
"""

from __future__ import annotations

import logging
import pathlib
import shutil
import signal
import stat
import subprocess
import sys
import threading
import time
from dataclasses import replace

import msgpack
import numpy as np
import pytest
import zmq
from zmq.auth import load_certificate

from veer.node.client import NodeClient, NodeTimeout
from veer.node.config import (
    ConfigError,
    NodeConfig,
    SecuritySettings,
    SocketSettings,
    check_exposure,
    config_from_mapping,
    is_local_address,
    load_config,
)
from veer.node.server import BindError, NodeServer
from veer.tools.keys import KeyFileError, write_key_pair

WAIT_S = 15.0
REFUSED_WAIT_S = 1.5  # an admitted client hears a status every 0.2 s; a refused one hears nothing in this time
TOOLS = pathlib.Path(__file__).resolve().parents[2] / "tools"


@pytest.fixture(scope="module")
def keys(tmp_path_factory):
    """Key pairs of the node, an allowed robot and an unknown one; the allowed folder holds the robot's public key."""
    root = tmp_path_factory.mktemp("keys")
    pairs = {name: write_key_pair(root / name) for name in ("node", "robot", "stranger")}
    allowed = root / "allowed"
    allowed.mkdir()
    shutil.copy(pairs["robot"][0], allowed / "robot.key")
    material = []
    for public_path, secret_path in pairs.values():
        public, secret = load_certificate(secret_path)  # source: pyzmq zmq.auth.load_certificate
        material += [public.decode(), secret.decode()]
    return {"root": root, "allowed": allowed, "material": material,
            **{f"{name}_public": pair[0] for name, pair in pairs.items()},
            **{f"{name}_secret": pair[1] for name, pair in pairs.items()}}


def curve_config(keys, world) -> NodeConfig:
    return replace(world.node_config(), security=SecuritySettings(str(keys["node_secret"]), str(keys["allowed"])))


def assert_no_key_material(text: str, keys) -> None:
    for key in keys["material"]:
        assert key not in text


# ------------------------------------------------------------------ veer keys


def test_veer_keys_writes_a_pair_private_secret_and_refuses_to_overwrite(tmp_path):
    folder = tmp_path / "robot7"
    command = [sys.executable, "-m", "veer.tools.cli", "keys", str(folder)]
    first = subprocess.run(command, capture_output=True, text=True, timeout=60)
    assert first.returncode == 0, first.stderr
    public_path, secret_path = folder / "robot7.key", folder / "robot7.key_secret"
    assert stat.S_IMODE(secret_path.stat().st_mode) == 0o600  # readable by its owner only
    assert stat.S_IMODE(public_path.stat().st_mode) & 0o044 == 0o044  # the public key is readable
    public, secret = load_certificate(secret_path)  # source: pyzmq zmq.auth.load_certificate (ZPL certificate)
    assert load_certificate(public_path) == (public, None)
    assert zmq.curve_public(secret) == public  # source: libzmq zmq_curve_public(3)
    assert len(zmq.utils.z85.decode(public)) == 32  # source: RFC 26 (32-octet keys), RFC 32 (Z85)
    assert public.decode() not in first.stdout + first.stderr and secret.decode() not in first.stdout

    again = subprocess.run(command, capture_output=True, text=True, timeout=60)
    assert again.returncode == 2 and again.stderr.count("\n") == 1 and "--force" in again.stderr
    assert load_certificate(secret_path) == (public, secret)  # untouched

    forced = subprocess.run(command + ["--force", "--name", "robot7"], capture_output=True, text=True, timeout=60)
    assert forced.returncode == 0, forced.stderr
    new_public, _ = load_certificate(secret_path)
    assert new_public != public and stat.S_IMODE(secret_path.stat().st_mode) == 0o600


def test_veer_keys_errors_are_one_line(tmp_path):
    (tmp_path / "file").write_text("x")
    with pytest.raises(KeyFileError, match="cannot write"):
        write_key_pair(tmp_path / "file" / "below")
    with pytest.raises(KeyFileError, match="--name"):
        write_key_pair(tmp_path / "k", "../escape")


# ------------------------------------------------------------------ exposure: decided before binding


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:7401", "tcp://127.3.2.1:*", "tcp://[::1]:7401",
                                     "tcp://localhost:7401", "ipc:///tmp/veer-node-in", "inproc://veer-in"])
def test_loopback_and_local_transports_are_local(address):
    assert is_local_address(address)  # source: RFC 1122 section 3.2.1.3 (127/8), RFC 4291 section 2.5.3 (::1)


@pytest.mark.parametrize("address", ["tcp://0.0.0.0:7401", "tcp://*:7401", "tcp://[::]:7401", "tcp://192.0.2.7:7401",
                                     "tcp://eth0:7401", "tcp://robot.example:7401", "ws://0.0.0.0:7401"])
def test_a_network_address_without_curve_is_refused_unless_allowed(address):
    table = {"sockets": {"control": address}}
    assert not is_local_address(address)
    with pytest.raises(ConfigError) as caught:
        config_from_mapping(table)
    message = str(caught.value)
    assert "\n" not in message and address in message and "allow_insecure_bind" in message
    allowed = config_from_mapping({**table, "security": {"allow_insecure_bind": True}})
    warnings = check_exposure(allowed)
    assert len(warnings) == 1 and address in warnings[0] and "without CURVE" in warnings[0]


def test_the_server_refuses_a_network_address_before_binding_anything(caplog):
    config = NodeConfig(sockets=SocketSettings("tcp://127.0.0.1:*", "tcp://0.0.0.0:*", "tcp://127.0.0.1:*"))
    server = NodeServer(config)  # built directly, so the config check never ran
    try:
        with pytest.raises(BindError, match="allow_insecure_bind"):
            server.bind()
        assert server.endpoints == {} and server._sockets == []  # nothing was created, let alone bound
    finally:
        server.close()


def test_curve_keys_make_a_network_address_acceptable_without_warning(keys):
    config = config_from_mapping({"sockets": {"inputs": "tcp://0.0.0.0:7401"},
                                  "security": {"secret_key_file": str(keys["node_secret"]),
                                               "allowed_clients_dir": str(keys["allowed"])}})
    assert config.security.curve and check_exposure(config) == []


def test_a_network_address_in_node_toml_stops_veer_node_with_one_line(tmp_path):
    path = tmp_path / "node.toml"
    path.write_text('[sockets]\ninputs = "tcp://0.0.0.0:7401"\n')
    result = subprocess.run([sys.executable, "-m", "veer.tools.node", "--config", str(path)], capture_output=True,
                            text=True, timeout=60)
    assert result.returncode == 2 and result.stderr.count("\n") == 1 and "0.0.0.0" in result.stderr


# ------------------------------------------------------------------ key files checked at start


def _security_error(table, tmp_path) -> str:
    with pytest.raises(ConfigError) as caught:
        config_from_mapping({"security": table}, base_dir=tmp_path)
    message = str(caught.value)
    assert "\n" not in message
    return message


def test_missing_or_bad_key_files_name_the_path_and_the_fix(keys, tmp_path):
    allowed = str(keys["allowed"])
    missing = _security_error({"secret_key_file": "nope.key_secret", "allowed_clients_dir": allowed}, tmp_path)
    assert str(tmp_path / "nope.key_secret") in missing and "veer keys" in missing
    public = _security_error({"secret_key_file": str(keys["node_public"]), "allowed_clients_dir": allowed}, tmp_path)
    assert str(keys["node_public"]) in public and "secret" in public
    garbage = tmp_path / "garbage.key_secret"
    garbage.write_text('curve\n    public-key = "short"\n    secret-key = "short"\n')
    assert "Z85" in _security_error({"secret_key_file": str(garbage), "allowed_clients_dir": allowed}, tmp_path)
    empty = tmp_path / "empty"
    empty.mkdir()
    no_clients = _security_error({"secret_key_file": str(keys["node_secret"]), "allowed_clients_dir": str(empty)},
                                 tmp_path)
    assert str(empty) in no_clients and "veer keys" in no_clients
    (empty / "bad.key").write_text("nothing here\n")
    assert str(empty / "bad.key") in _security_error(
        {"secret_key_file": str(keys["node_secret"]), "allowed_clients_dir": str(empty)}, tmp_path)
    assert "both" in _security_error({"secret_key_file": str(keys["node_secret"])}, tmp_path)
    for message in (missing, public, no_clients):
        assert_no_key_material(message, keys)


def test_key_paths_are_relative_to_node_toml_and_a_missing_key_stops_veer_node(keys, tmp_path):
    path = tmp_path / "node.toml"
    shutil.copytree(keys["allowed"], tmp_path / "allowed")
    path.write_text('[security]\nsecret_key_file = "node/node.key_secret"\nallowed_clients_dir = "allowed"\n')
    result = subprocess.run([sys.executable, "-m", "veer.tools.node", "--config", str(path)], capture_output=True,
                            text=True, timeout=60)
    assert result.returncode == 2 and result.stderr.count("\n") == 1
    assert str(tmp_path / "node" / "node.key_secret") in result.stderr and "veer keys" in result.stderr
    shutil.copytree(keys["root"] / "node", tmp_path / "node")
    config = load_config(path)
    assert config.security.secret_key_file == str(tmp_path / "node" / "node.key_secret")
    assert_no_key_material(repr(config), keys)


# ------------------------------------------------------------------ on the wire


def _intruder(context, e, curve_options):
    """Raw sockets of a client the node should refuse: XPUB inputs, SUB outputs, REQ control."""
    sockets = {}
    for name, kind in (("inputs", zmq.PUB), ("outputs", zmq.SUB), ("control", zmq.REQ)):
        sock = context.socket(kind)
        sock.setsockopt(zmq.LINGER, 0)
        sock.setsockopt(zmq.SNDTIMEO, 1000)  # a refused REQ never gets a pipe: its send must not block forever
        for option, value in curve_options:
            sock.setsockopt(option, value)
        if kind == zmq.SUB:
            sock.setsockopt(zmq.SUBSCRIBE, b"")
        sock.connect(e[name])
        sockets[name] = sock
    return sockets


def test_an_allowed_client_plans_and_others_get_nothing_through(run_node, world, keys, caplog):
    caplog.set_level(logging.DEBUG)
    node = run_node(curve_config(keys, world))
    e = node.server.endpoints
    client = NodeClient(e["inputs"], e["outputs"], e["control"], timeout_s=WAIT_S,
                        secret_key_file=keys["robot_secret"], node_public_key_file=keys["node_public"])
    node.clients.append(client)
    client.send_grid(world.free_classes(), map_id="mine", cell_size_m=world.CELL_M, classes=True)
    client.send_pose(*world.START)
    client.wait_accepted("mine", world.START, WAIT_S)
    goal_id = client.set_goal(*world.GOAL)
    assert client.wait_path(WAIT_S, goal_id=goal_id)["status"] == "found"

    stranger_public, stranger_secret = load_certificate(keys["stranger_secret"])
    node_public, _ = load_certificate(keys["node_public"])
    cases = {"unknown key": [(zmq.CURVE_SERVERKEY, node_public), (zmq.CURVE_PUBLICKEY, stranger_public),
                             (zmq.CURVE_SECRETKEY, stranger_secret)],
             "no key": []}
    context = zmq.Context()
    try:
        for case, options in cases.items():
            intruder = _intruder(context, e, options)
            blocked = world.with_boxes(world.free_classes(), [(20.0, 0.0, 20.3, 30.0)])
            grid = {"v": 1, "kind": "grid", "map_id": f"intruder {case}", "rows": 300, "cols": 400,
                    "cell_size_m": world.CELL_M, "origin_m": [0.0, 0.0], "encoding": "raw",
                    "cells": np.where(blocked == 1, 0, 255).astype(np.uint8).tobytes()}
            try:
                intruder["control"].send(msgpack.packb({"v": 1, "op": "cancel"}))
            except zmq.Again:
                pass  # no pipe to the node at all: the request cannot even leave, let alone be answered
            end = time.monotonic() + REFUSED_WAIT_S
            while time.monotonic() < end:  # bounded: keeps offering a grid while the node publishes status
                intruder["inputs"].send_multipart([b"grid", msgpack.packb(grid, use_bin_type=True)])
                time.sleep(0.1)
            assert not intruder["control"].poll(0), f"{case}: a control reply got through"
            assert not intruder["outputs"].poll(0), f"{case}: an output got through"
            new_goal = client.set_goal(*world.GOAL)  # the allowed client makes the node publish a path
            path = client.wait_for("path", WAIT_S, lambda m, g=new_goal: m["goal_id"] == g, keep_others=True)
            assert path["status"] == "found"
            assert not intruder["outputs"].poll(300), f"{case}: a path got through"
            status = client.status()
            assert status["map_id"] == "mine" and status["goal_id"] == new_goal  # no grid, no cancel accepted
            for sock in intruder.values():
                sock.close(linger=0)
    finally:
        context.destroy(linger=0)  # closes whatever a failed assertion left open
    events = [m for t, m in client.drain(1.2) if t == "event"]
    refusals = [m for m in events if m["code"] == "connection_refused"]
    assert {m["socket"] for m in refusals} == {"inputs", "outputs", "control"}
    assert {"key_not_allowed"} <= {m["reason"] for m in refusals}
    refused_lines = [r.getMessage() for r in caplog.records
                     if r.name == "veer.node" and "refused a connection" in r.getMessage()]
    assert any("control" in line for line in refused_lines) and any("inputs" in line for line in refused_lines)
    assert_no_key_material(caplog.text + repr(events), keys)
    assert_no_key_material("\n".join(r.getMessage() for r in caplog.records), keys)


def test_a_client_with_the_wrong_node_key_times_out_with_a_hint(run_node, world, keys):
    node = run_node(curve_config(keys, world))
    e = node.server.endpoints
    with pytest.raises(NodeTimeout, match="allowed folder"):
        NodeClient(e["inputs"], e["outputs"], e["control"], timeout_s=1.0,
                   secret_key_file=keys["robot_secret"], node_public_key_file=keys["stranger_public"])
    with pytest.raises(ValueError, match="both"):
        NodeClient(e["inputs"], e["outputs"], e["control"], secret_key_file=keys["robot_secret"])


def test_veer_node_with_curve_logs_refusals_and_no_key_on_stderr(tmp_path, world, keys):
    ports = [world.free_port() for _ in range(3)]
    addresses = [f"tcp://127.0.0.1:{p}" for p in ports]
    path = tmp_path / "node.toml"
    path.write_text(f'[sockets]\ninputs = "{addresses[0]}"\noutputs = "{addresses[1]}"\ncontrol = "{addresses[2]}"\n'
                    f'[security]\nsecret_key_file = "{keys["node_secret"]}"\n'
                    f'allowed_clients_dir = "{keys["allowed"]}"\n[log]\nlevel = "debug"\n')
    process = subprocess.Popen([sys.executable, "-m", "veer.tools.cli", "-v", "node", "--config", str(path)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        with NodeClient(*addresses, timeout_s=30.0, secret_key_file=keys["robot_secret"],
                        node_public_key_file=keys["node_public"]) as client:
            assert client.status()["state"] == "idle"
            with pytest.raises(NodeTimeout):
                NodeClient(*addresses, timeout_s=1.0)  # no keys
            client.wait_event("connection_refused", WAIT_S)
        process.send_signal(signal.SIGTERM)
        _, stderr = process.communicate(timeout=15)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert process.returncode == 0, stderr
    assert "refused a connection" in stderr and "CURVE on: 1 allowed client key" in stderr
    assert_no_key_material(stderr, keys)


def test_the_example_script_plans_with_curve(run_node, world, keys):
    e = run_node(curve_config(keys, world)).server.endpoints
    base = [sys.executable, str(TOOLS / "node_example.py"), "--inputs", e["inputs"], "--outputs", e["outputs"],
            "--control", e["control"]]
    result = subprocess.run(base + ["--key", str(keys["robot_secret"]), "--node-key", str(keys["node_public"]),
                                    "--timeout", "30"], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert "path #1 on map yard" in result.stdout
    refused = subprocess.run(base + ["--timeout", "1"], capture_output=True, text=True, timeout=60)
    assert refused.returncode == 2 and "is `veer node` running" in refused.stderr


# ------------------------------------------------------------------ several input addresses


def test_a_client_fans_its_inputs_out_to_the_node_and_a_second_receiver(run_node, world):
    node = run_node()
    e = node.server.endpoints
    context = zmq.Context()
    heard, bound = [], threading.Event()
    stop = threading.Event()

    def recorder():  # stands in for a recorder: binds, subscribes to everything, keeps reading (bounded)
        sock = context.socket(zmq.SUB)
        sock.setsockopt(zmq.LINGER, 0)
        sock.setsockopt(zmq.SUBSCRIBE, b"")
        sock.bind("tcp://127.0.0.1:*")
        heard.append(sock.getsockopt_string(zmq.LAST_ENDPOINT))
        bound.set()
        end = time.monotonic() + 2 * WAIT_S
        while not stop.is_set() and time.monotonic() < end:
            if sock.poll(50):
                heard.append(sock.recv_multipart())
        sock.close(linger=0)

    thread = threading.Thread(target=recorder, daemon=True)
    thread.start()
    try:
        assert bound.wait(WAIT_S)
        client = NodeClient([e["inputs"], heard[0]], e["outputs"], e["control"], timeout_s=WAIT_S)
        node.clients.append(client)
        client.send_pose(*world.START)
        client.wait_accepted(pose=world.START, timeout_s=WAIT_S)
        end = time.monotonic() + WAIT_S
        while len(heard) < 2 and time.monotonic() < end:
            time.sleep(0.02)
        topic, payload = heard[1]
        assert topic == b"pose" and msgpack.unpackb(payload)["x_m"] == world.START[0]
        assert client.addresses["inputs"] == client.inputs and len(client.inputs) == 2
    finally:
        stop.set()
        thread.join(5.0)
        context.destroy(linger=0)  # closes whatever a failed assertion left open
    with pytest.raises(ValueError, match="inputs"):
        NodeClient([], e["outputs"], e["control"])
