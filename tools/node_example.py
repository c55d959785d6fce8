"""Drive a running `veer node` end to end with nothing but pyzmq and msgpack.

A client in any language does the same: connect to the node's three sockets, send a
grid and the robot's pose (two frames each: topic, msgpack map), set a goal on the
control socket (one msgpack map each way), and read path messages from the output
socket. The protocol is in docs/protocol.md; this script imports nothing from veer.

    veer node &                                   # in another terminal
    python tools/node_example.py                  # a synthetic 40 m x 30 m yard
    python tools/node_example.py --map yard.png --cell-size 0.1 --start 3 3 0 --goal 30 20 90
    python tools/node_example.py --wall           # then drop a wall across the path and wait for the replan
    python tools/node_example.py --key keys/robot1/robot1.key_secret --node-key keys/node/node.key   # CURVE

With a node that runs CURVE (docs/protocol.md, "Security"), --key is this client's key
file (NAME.key_secret from `veer keys DIR`; its public NAME.key must be in the node's
allowed folder) and --node-key the node's public key file; every socket then
authenticates and encrypts (ZeroMQ RFC 26/CurveZMQ, libzmq zmq_curve(7)).

Exit codes: 0 a path was received, 1 the node answered no_path, 2 no answer or bad input.
"""

from __future__ import annotations

import argparse
import math
import struct
import sys
import time
import tomllib
from pathlib import Path

import msgpack
import zmq

FREE, OCCUPIED = 255, 0  # grey levels of a map image: light = free, dark = occupied


def synthetic_yard(width_m: float, height_m: float, cell_m: float, wall: bool) -> tuple[int, int, bytes]:
    """Rows, cols and raw shades (row 0 = top) of an open yard, optionally with a wall across x = 20 m."""
    rows, cols = round(height_m / cell_m), round(width_m / cell_m)
    cells = bytearray([FREE]) * (rows * cols)
    if wall:
        for row in range(rows):
            y_m = (rows - row - 0.5) * cell_m
            if 6.0 <= y_m <= 24.0:
                for col in range(round(20.0 / cell_m), round(20.3 / cell_m)):
                    cells[row * cols + col] = OCCUPIED
    return rows, cols, bytes(cells)


def image_size(data: bytes) -> tuple[int, int]:
    """(rows, cols) of a PNG (IHDR, PNG spec section 11.2.2) or PGM (Netpbm header) file."""
    if data[:8] == b"\x89PNG\r\n\x1a\n":
        width, height = struct.unpack(">II", data[16:24])
        return height, width
    if data[:2] in (b"P2", b"P5"):
        fields, position = [], 2
        while len(fields) < 2:
            while data[position:position + 1].isspace():
                position += 1
            if data[position:position + 1] == b"#":
                position = data.index(b"\n", position)
                continue
            end = position
            while not data[end:end + 1].isspace():
                end += 1
            fields.append(int(data[position:end]))
            position = end
        return fields[1], fields[0]
    raise ValueError("not a PNG or PGM file")


def grid_from_file(path: Path, cell_size_m: float | None) -> dict:
    data = path.read_bytes()
    rows, cols = image_size(data)
    sidecar = path.with_suffix(".toml")
    extra = tomllib.loads(sidecar.read_text()) if sidecar.is_file() else {}
    cell_size_m = cell_size_m or extra.pop("cell_size_m", None)
    if cell_size_m is None:
        raise ValueError(f"{path}: no cell size; pass --cell-size or write cell_size_m in {sidecar}")
    extra.pop("cell_size_m", None)
    origin = extra.pop("origin_m", [0.0, 0.0])
    return {"v": 1, "kind": "grid", "map_id": path.name, "rows": rows, "cols": cols, "cell_size_m": cell_size_m,
            "origin_m": origin, "encoding": "png" if data[:1] == b"\x89" else "pgm", "cells": data, **extra}


def curve_options(key_file: Path | None, node_key_file: Path | None) -> list[tuple[int, bytes]]:
    """Socket options of a CURVE client from two key files (ZeroMQ certificate text), or none."""
    if key_file is None and node_key_file is None:
        return []
    if key_file is None or node_key_file is None:
        raise ValueError("CURVE needs both --key (this client's NAME.key_secret) and --node-key (the node's NAME.key)")
    from zmq.auth import load_certificate

    try:
        public, secret = load_certificate(key_file)
        node_public, _ = load_certificate(node_key_file)
    except (OSError, ValueError):
        raise ValueError(f"cannot read the key files {key_file} and {node_key_file}; write them with "
                         f"`veer keys DIR`") from None
    if secret is None:
        raise ValueError(f"{key_file} holds no secret key; pass the NAME.key_secret file as --key")
    return [(zmq.CURVE_SERVERKEY, node_public), (zmq.CURVE_PUBLICKEY, public), (zmq.CURVE_SECRETKEY, secret)]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--inputs", default="tcp://127.0.0.1:7401")
    parser.add_argument("--outputs", default="tcp://127.0.0.1:7402")
    parser.add_argument("--control", default="tcp://127.0.0.1:7403")
    parser.add_argument("--map", type=Path, help="PNG or PGM map image (default: a synthetic 40 m x 30 m yard)")
    parser.add_argument("--cell-size", type=float, help="metres per cell of --map (else its sidecar)")
    parser.add_argument("--start", nargs=3, type=float, default=[5.0, 15.0, 0.0], metavar=("X", "Y", "HEADING_DEG"))
    parser.add_argument("--goal", nargs=3, type=float, default=[35.0, 15.0, 0.0], metavar=("X", "Y", "HEADING_DEG"))
    parser.add_argument("--wall", action="store_true", help="synthetic yard: then add a wall and wait for the replan")
    parser.add_argument("--timeout", type=float, default=15.0, help="seconds to wait for each answer")
    parser.add_argument("--key", type=Path, help="CURVE: this client's secret key file (NAME.key_secret)")
    parser.add_argument("--node-key", type=Path, help="CURVE: the node's public key file (NAME.key)")
    args = parser.parse_args(argv)
    try:
        curve = curve_options(args.key, args.node_key)
    except ValueError as exc:
        print(f"node_example: {exc}", file=sys.stderr)
        return 2

    context = zmq.Context()
    inputs = context.socket(zmq.XPUB)  # XPUB: we see the node's subscription, so no grid is sent into the void
    outputs = context.socket(zmq.SUB)
    control = context.socket(zmq.REQ)
    for sock in (inputs, outputs, control):
        sock.setsockopt(zmq.LINGER, 0)
        for option, value in curve:  # before connect: options act on later connections
            sock.setsockopt(option, value)
    outputs.setsockopt(zmq.SUBSCRIBE, b"")
    inputs.connect(args.inputs)
    outputs.connect(args.outputs)
    control.connect(args.control)
    timeout_ms = int(args.timeout * 1000)

    def request(message: dict) -> dict:
        control.send(msgpack.packb({"v": 1, **message}))
        if not control.poll(timeout_ms):
            raise TimeoutError(f"no answer on {args.control}; is `veer node` running?")
        return msgpack.unpackb(control.recv())

    def wait_path(after_seq: int, goal_id: int) -> dict:
        end = time.monotonic() + args.timeout
        while time.monotonic() < end:
            if outputs.poll(100):
                topic, payload = outputs.recv_multipart()
                message = msgpack.unpackb(payload)
                if topic == b"event":
                    print(f"event {message['code']}: {message['detail']}")
                if topic == b"path" and message["goal_id"] == goal_id and message["seq"] > after_seq:
                    return message
        raise TimeoutError("no path within the timeout")

    def send(topic: bytes, message: dict) -> None:
        inputs.send_multipart([topic, msgpack.packb(message, use_bin_type=True)])

    def summary(path: dict) -> str:
        if path["status"] != "found":
            return f"path #{path['seq']} on map {path['map_id']}: no path ({path['reason']}): {path.get('detail', '')}"
        first, last = path["poses"][0], path["poses"][-1]
        return (f"path #{path['seq']} on map {path['map_id']} (goal {path['goal_id']}, {path.get('trigger', '?')}): "
                f"{path['length_m']:.1f} m, {len(path['poses'])} poses, reverse {path['reverse_m']:.1f} m, "
                f"{path['gear_changes']} gear change(s), from ({first[0]:.2f}, {first[1]:.2f}) to "
                f"({last[0]:.2f}, {last[1]:.2f}, {math.degrees(last[2]):.0f} deg), "
                f"planned in {path['stats'].get('plan_s', 0.0):.3f} s")

    try:
        if not inputs.poll(timeout_ms):
            raise TimeoutError(f"the node did not subscribe on {args.inputs}; is `veer node` running"
                               f"{' and is our public key in its allowed folder' if curve else ''}?")
        inputs.recv()  # the node's subscription
        print("node status:", request({"op": "status"}).get("state"))
        if args.map:
            grid = grid_from_file(args.map, args.cell_size)
        else:
            rows, cols, cells = synthetic_yard(40.0, 30.0, 0.1, wall=False)
            grid = {"v": 1, "kind": "grid", "map_id": "yard", "rows": rows, "cols": cols, "cell_size_m": 0.1,
                    "origin_m": [0.0, 0.0], "encoding": "raw", "cells": cells}
        send(b"grid", grid)
        x, y, heading_deg = args.start
        send(b"pose", {"v": 1, "kind": "pose", "x_m": x, "y_m": y, "heading_rad": math.radians(heading_deg),
                       "t_s": time.time()})
        # inputs and control are separate sockets with no order between them: wait until
        # the node shows our grid and pose before setting the goal, so it plans on them
        end = time.monotonic() + args.timeout
        while True:
            status = request({"op": "status"})
            if status["map_id"] == grid["map_id"] and status.get("pose") is not None \
                    and abs(status["pose"][0] - x) < 1e-9 and abs(status["pose"][1] - y) < 1e-9:
                break
            if time.monotonic() > end:
                raise TimeoutError(f"the node did not take in map {grid['map_id']!r}; look at its events")
            time.sleep(0.02)
        gx, gy, gh_deg = args.goal
        answer = request({"op": "goal", "x_m": gx, "y_m": gy, "heading_rad": math.radians(gh_deg)})
        if not answer.get("ok"):
            print(f"goal refused ({answer['code']}): {answer['error']}", file=sys.stderr)
            return 2
        path = wait_path(0, answer["goal_id"])
        print(summary(path))
        if args.wall and not args.map and path["status"] == "found":
            rows, cols, cells = synthetic_yard(40.0, 30.0, 0.1, wall=True)
            send(b"grid", {**grid, "map_id": "yard+wall", "cells": cells})
            path = wait_path(path["seq"], answer["goal_id"])
            print(summary(path))
        return 0 if path["status"] == "found" else 1
    except (TimeoutError, ValueError, OSError) as exc:
        print(f"node_example: {exc}", file=sys.stderr)
        return 2
    finally:
        for sock in (inputs, outputs, control):
            sock.close(linger=0)
        context.term()


if __name__ == "__main__":
    sys.exit(main())
