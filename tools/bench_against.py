"""Old against new: plan the built-in scenarios with an earlier revision and with this tree, in one run.

The earlier revision is exported with ``git archive`` into a temporary folder and made
importable as the package ``veer`` (its four folders under a ``veer/`` with an
``__init__.py``, which wins over the installed namespace); each side then runs in a
child process of its own, scenario by scenario and side by side in turn, so both meet
the machine in the same state. Every run plans with a new ``Planner`` on the scenario's
grid (disc and example rectangle) and reports the planner's own ``plan_s``. The table
gives the median of each side and the ratio new / old, with the 5 % allowance for
"no slower" marked.

Usage::

    python -m veer.tools.bench_against HEAD~1 [--repeat 7] [--scenarios open_yard warehouse]
    python -m veer.tools.bench_plan --against HEAD~1      # the same table after the usual ones (bench_plan --against)
"""

from __future__ import annotations

import argparse
import json
import os
import pathlib
import statistics
import subprocess
import sys
import tarfile
import tempfile

__all__ = ["compare_with_revision", "format_comparison", "main"]

ALLOWANCE = 1.05  # "no scenario slower by more than 5 %"

# Runs in the child: only names that every revision of the planner has had.
_CHILD = r"""
import json, sys
from veer.tools.scenarios import build_scenario
from veer.planning import Planner, Vehicle, EXAMPLE_VEHICLE, NoPath
RECT = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)
name, repeat = sys.argv[1], int(sys.argv[2])
scenario = build_scenario(name)
out = {}
for label, vehicle in (("disc", EXAMPLE_VEHICLE), ("rect", RECT)):
    times, result = [], None
    Planner(vehicle)  # loads the turning table outside the timing
    for _ in range(repeat):
        try:
            path = Planner(vehicle).plan(scenario.grid, scenario.start, scenario.goal, allow_reverse=scenario.reverse)
            times.append(path.stats["plan_s"])
            result = [round(path.length_m, 2), path.stats["expansions"]]
        except NoPath as no_path:
            times.append(no_path.stats.get("plan_s", 0.0))
            result = no_path.reason
    out[label] = {"times": times, "result": result}
print(json.dumps(out))
"""


def _repo_root() -> pathlib.Path:
    here = pathlib.Path(__file__).resolve().parent.parent
    top = subprocess.run(["git", "-C", str(here), "rev-parse", "--show-toplevel"], capture_output=True, text=True)
    if top.returncode != 0:
        raise SystemExit("bench_against: this checkout is not a git repository; run it from a clone")
    return pathlib.Path(top.stdout.strip())


def _export(root: pathlib.Path, revision: str, into: pathlib.Path) -> pathlib.Path:
    """``revision`` as an importable ``veer`` package under ``into``; returns the folder for PYTHONPATH."""
    archive = subprocess.run(["git", "-C", str(root), "archive", "--format=tar", revision], capture_output=True)
    if archive.returncode != 0:
        raise SystemExit(f"bench_against: git cannot export {revision!r}: {archive.stderr.decode().strip()}")
    tree = into / "tree"
    tree.mkdir()
    tar_path = into / "tree.tar"
    tar_path.write_bytes(archive.stdout)
    with tarfile.open(tar_path) as tar:
        tar.extractall(tree, filter="data")
    site = into / "site"
    package = site / "veer"
    package.mkdir(parents=True)
    (package / "__init__.py").write_text("")
    for folder in ("maps", "planning", "node", "tools"):
        if (tree / folder).is_dir():
            (package / folder).symlink_to(tree / folder, target_is_directory=True)
    return site


def _child(python_path: str | None, name: str, repeat: int) -> dict:
    env = dict(os.environ)
    if python_path:
        env["PYTHONPATH"] = python_path + os.pathsep + env.get("PYTHONPATH", "")
    done = subprocess.run([sys.executable, "-c", _CHILD, name, str(repeat)], capture_output=True, text=True, env=env)
    if done.returncode != 0:
        raise SystemExit(f"bench_against: the {name} run failed: {done.stderr.strip().splitlines()[-1:]}")
    return json.loads(done.stdout)


def compare_with_revision(revision: str, scenarios: list[str], repeat: int = 7, progress=None) -> list[dict]:
    """Rows of {scenario, vehicle, old_s, new_s, old_result, new_result} (medians of ``repeat`` runs)."""
    root = _repo_root()
    rows = []
    with tempfile.TemporaryDirectory(prefix="veer-against-") as folder:
        site = str(_export(root, revision, pathlib.Path(folder)))
        for name in scenarios:
            if progress:
                progress(f"{name}: {revision} and this tree")
            old = _child(site, name, repeat)
            new = _child(None, name, repeat)
            for vehicle in ("disc", "rect"):
                rows.append({
                    "scenario": name, "vehicle": vehicle,
                    "old_s": statistics.median(old[vehicle]["times"]), "new_s": statistics.median(new[vehicle]["times"]),
                    "old_result": old[vehicle]["result"], "new_result": new[vehicle]["result"],
                })
    return rows


def format_comparison(revision: str, rows: list[dict]) -> str:
    lines = [
        f"| scenario | footprint | {revision} plan_s | this tree plan_s | new / old | within 5 % | {revision} result | this tree result |",
        "| --- | --- | ---: | ---: | ---: | --- | --- | --- |",
    ]
    for row in rows:
        ratio = row["new_s"] / row["old_s"] if row["old_s"] > 0 else float("nan")
        lines.append(
            f"| {row['scenario']} | {row['vehicle']} | {row['old_s'] * 1e3:.1f} ms | {row['new_s'] * 1e3:.1f} ms | "
            f"{ratio:.2f} | {'met' if ratio <= ALLOWANCE else 'NOT met'} | {row['old_result']} | {row['new_result']} |"
        )
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    from veer.tools.scenarios import SCENARIO_NAMES

    parser = argparse.ArgumentParser(prog="python -m veer.tools.bench_against", description=__doc__.split("\n\n")[0])
    parser.add_argument("revision", help="git revision to compare with, e.g. HEAD~1 or a commit hash")
    parser.add_argument("--repeat", type=int, default=7, help="runs per scenario and side (default 7)")
    parser.add_argument("--scenarios", nargs="+", choices=SCENARIO_NAMES, default=list(SCENARIO_NAMES))
    args = parser.parse_args(argv)
    rows = compare_with_revision(args.revision, args.scenarios, args.repeat,
                                 progress=lambda text: print(text, file=sys.stderr))
    sys.stdout.write(format_comparison(args.revision, rows))
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
