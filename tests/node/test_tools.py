"""The node's tools: the pyzmq + msgpack example script and the benchmark's smoke run."""

from __future__ import annotations

import pathlib
import subprocess
import sys

TOOLS = pathlib.Path(__file__).resolve().parents[2] / "tools"


def test_the_example_script_imports_only_pyzmq_and_msgpack(imports_of):
    modules = {name.split(".")[0] for name, _level in imports_of(TOOLS / "node_example.py")}
    assert not {m for m in modules if m.startswith("veer")}
    assert {"zmq", "msgpack"} <= modules
    assert modules - {"zmq", "msgpack"} <= set(sys.stdlib_module_names) | {"__future__"}


def test_the_example_script_plans_against_a_running_node(run_node):
    e = run_node().server.endpoints
    result = subprocess.run(
        [sys.executable, str(TOOLS / "node_example.py"), "--inputs", e["inputs"], "--outputs", e["outputs"],
         "--control", e["control"], "--wall", "--timeout", "30"],
        capture_output=True, text=True, timeout=120,
    )
    assert result.returncode == 0, result.stderr
    lines = [line for line in result.stdout.splitlines() if line.startswith("path #")]
    assert len(lines) == 2 and "on map yard " in lines[0] and "on map yard+wall" in lines[1], result.stdout
    assert "blocked" in lines[1]


def test_the_example_script_says_so_when_no_node_runs(world):
    port = world.free_port()
    result = subprocess.run(
        [sys.executable, str(TOOLS / "node_example.py"), "--inputs", f"tcp://127.0.0.1:{port}", "--timeout", "0.5"],
        capture_output=True, text=True, timeout=60,
    )
    assert result.returncode == 2 and "is `veer node` running?" in result.stderr


def test_the_node_benchmark_smoke_run():
    result = subprocess.run([sys.executable, "-m", "veer.tools.bench_node", "--quick"], capture_output=True,
                            text=True, timeout=300)
    assert result.returncode == 0, result.stderr
    assert result.stdout.count("| blocked path -> new path received") == 2
    assert "peak resident memory" in result.stdout
