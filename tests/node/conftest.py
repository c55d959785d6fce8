"""Shared pieces of the node tests: a test world, a node on free loopback ports, a client.

The world: 40 m x 30 m at 0.1 m cells (400 x 300), the example vehicle (disc of 1 m),
start (5, 15, 0), goal (35, 15, 0). Walls are boxes of occupied cells. Paths are checked
with the suite's shapely verifier (tests/verify.py), never with the planner's own code.
"""

from __future__ import annotations

import socket
import threading
from dataclasses import replace
from types import SimpleNamespace

import numpy as np
import pytest

from veer.maps import OCCUPIED, OccupancyGrid
from veer.node.client import NodeClient
from veer.node.config import NodeConfig, SocketSettings
from veer.node.server import NodeServer

CELL_M = 0.1
WIDTH_M, HEIGHT_M = 40.0, 30.0
START = (5.0, 15.0, 0.0)
GOAL = (35.0, 15.0, 0.0)


def free_classes() -> np.ndarray:
    return np.zeros((round(HEIGHT_M / CELL_M), round(WIDTH_M / CELL_M)), np.uint8)


def with_boxes(classes: np.ndarray, boxes_m) -> np.ndarray:
    """A copy of ``classes`` with every cell whose centre lies in a world box (x0, y0, x1, y1) occupied."""
    out = np.array(classes)
    rows, cols = out.shape
    xs = (np.arange(cols) + 0.5) * CELL_M
    ys = (rows - np.arange(rows) - 0.5) * CELL_M
    for x0, y0, x1, y1 in boxes_m:
        out[np.ix_((ys >= y0) & (ys <= y1), (xs >= x0) & (xs <= x1))] = OCCUPIED
    return out


def as_grid(classes: np.ndarray) -> OccupancyGrid:
    return OccupancyGrid(classes, CELL_M, (0.0, 0.0))


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def node_config(**replan) -> NodeConfig:
    """Loopback, ports picked by the OS, status every 0.2 s."""
    config = NodeConfig(sockets=SocketSettings("tcp://127.0.0.1:*", "tcp://127.0.0.1:*", "tcp://127.0.0.1:*"),
                        status_interval_s=0.2)
    if replan:
        config = replace(config, replan=replace(config.replan, **replan))
    return config


class RunningNode:
    """A node serving on a thread of this process; ``client()`` connects to it."""

    def __init__(self, config: NodeConfig):
        self.server = NodeServer(config)
        self.server.bind()
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self.server.serve, args=(self.stop,), daemon=True)
        self.thread.start()
        self.clients: list[NodeClient] = []

    def client(self, timeout_s: float = 10.0) -> NodeClient:
        e = self.server.endpoints
        client = NodeClient(e["inputs"], e["outputs"], e["control"], timeout_s=timeout_s)
        self.clients.append(client)
        return client

    def close(self) -> None:
        if self.stop.is_set():
            return
        for client in self.clients:
            client.close()
        self.stop.set()
        self.thread.join(5.0)
        assert not self.thread.is_alive(), "the node did not stop within 5 s"
        self.server.close()


@pytest.fixture
def run_node():
    """``run_node(config=None)``: start a node (closed after the test)."""
    nodes = []

    def start(config: NodeConfig | None = None) -> RunningNode:
        node = RunningNode(config or node_config())
        nodes.append(node)
        return node

    yield start
    for node in nodes:
        node.close()


@pytest.fixture(scope="session")
def world():
    return SimpleNamespace(CELL_M=CELL_M, WIDTH_M=WIDTH_M, HEIGHT_M=HEIGHT_M, START=START, GOAL=GOAL,
                           free_classes=free_classes, with_boxes=with_boxes, as_grid=as_grid,
                           free_port=free_port, node_config=node_config)
