"""Benchmark the planner on the built-in scenarios and against its plain textbook mode.

For each scenario of :mod:`veer.tools.scenarios` the map is written as PGM + sidecar and
loaded back with :func:`veer.maps.load_map`; every run then plans on that grid with a new
:class:`veer.planning.Planner` (so inflation, the 2-D field and the search are paid every
time; only the process-wide turning table is shared, built and warmed before any timing).
The figure is ``stats["plan_s"]`` as the planner reports it: median and best of
``--repeat`` runs, next to the same problem in plain mode (``SearchSettings.plain()``:
Euclidean heuristic only, no analytic shots, no 2-D field in the heuristic, goal test on
the goal's lattice cell) and the speed-up plain / default measured in the same process.
The same scenarios are then planned with the example rectangle footprint (3.2 x 1.6 m,
rear overhang 0.6 m, same wheelbase and steering) and its median set against the disc's.

Also measured: the warehouse path against the best one found with weight 1.0 and ten
times the budget; the search loop's expansion rate (expansions / ``stats["search_s"]``)
on plain-mode runs, forward-only and with reverse; and, in a child process, the peak
memory of loading and planning on a 2000 x 2000 map of random boxes (``ru_maxrss`` of the
child, started before any planning so it inherits little from this process, and the
``tracemalloc`` peak). Every figure is shown beside its target with met / NOT met.

Progress goes to stderr, the markdown tables to stdout (and to ``--out``).

Usage::

    python -m veer.tools.bench_plan [--repeat 5] [--plain-repeat 1] [--out TABLE.md]
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import pathlib
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from dataclasses import dataclass, replace

import cv2
import numpy as np

from veer.maps import inflate, load_map
from veer.planning import EXAMPLE_VEHICLE, NoPath, Planner, SearchSettings, Vehicle
from veer.planning.heuristics import build_turning_table, turning_table
from veer.planning.settings import DEFAULT_SEARCH_SETTINGS
from veer.tools.bench_maps import write_map
from veer.tools.scenarios import SCENARIO_NAMES, build_scenario, write_scenario_map

__all__ = [
    "EXAMPLE_RECTANGLE",
    "Outcome",
    "ScenarioResult",
    "build_large_map",
    "large_map_child",
    "main",
    "markdown_table",
    "plan_once",
    "run_large_map",
    "write_large_map",
]

# ---- targets
TARGET_PLAN_S = {
    "open_yard": 0.050,
    "parking_bay": 0.300,
    "s_corridor": 0.030,
    "warehouse": 0.250,
    "enclosed_goal": 0.010,
}
TARGET_SPEEDUP = 20.0  # plain plan_s / default plan_s, on every solvable scenario
TARGET_OVERHEAD = 10.0  # expansions per output pose
OVERHEAD_EXEMPT = ("parking_bay",)
TARGET_BEST_RATIO = 1.05  # warehouse: default length / best length with 10x budget
TARGET_RATE_FORWARD_PER_S = 100_000.0
TARGET_RATE_REVERSE_PER_S = 60_000.0
TARGET_PEAK_BYTES = 400e6  # 400 MB for the 2000 x 2000 map
TARGET_RECT_RATIO = 1.5  # rectangle plan_s / disc plan_s (medians), on every scenario

# ---- run settings
PLAIN_MAX_EXPANSIONS = 2_000_000
PLAIN_MAX_TIME_S = 60.0
BEST_BUDGET_SCALE = 10
# The open_yard start faces a box 1.8 m ahead (inflated) with the fence close on the right:
# it cannot be left without reversing, so the forward-only rate run turns the start to 45 deg.
FORWARD_START_HEADING_DEG = 45.0
LARGE_SIZE = 2000
LARGE_CELL_SIZE_M = 0.1
LARGE_SEED = 7
LARGE_FLOOR, LARGE_OBSTACLE = 255, 0
#: The example rectangle: the example vehicle's wheelbase and steering, a 3.2 x 1.6 m body.
EXAMPLE_RECTANGLE = Vehicle(
    wheelbase_m=EXAMPLE_VEHICLE.wheelbase_m, max_steer_deg=EXAMPLE_VEHICLE.max_steer_deg,
    radius_m=EXAMPLE_VEHICLE.radius_m, length_m=3.2, width_m=1.6, rear_overhang_m=0.6,
)
# A rectangle run that needs longer than this is cut off (reported as a deadline, NOT met).
RECT_MAX_TIME_S = 1.0

_DASH = "–"


@dataclass(frozen=True)
class Outcome:
    """What one plan call reported.

    ``expansions`` counts every search of the call (a coarse pass that found nothing
    included); ``search_expansions`` only the last search, the one ``search_s`` timed.
    """

    status: str
    reason: str | None
    plan_s: float
    search_s: float | None
    expansions: int
    search_expansions: int
    length_m: float | None = None
    reverse_m: float | None = None
    gear_changes: int | None = None
    final_poses: int | None = None

    @property
    def found(self) -> bool:
        return self.status == "found"

    @property
    def overhead(self) -> float | None:
        """Expansions per output pose."""
        return self.expansions / self.final_poses if self.final_poses else None

    @property
    def rate_per_s(self) -> float | None:
        """Expansions per second of the search loop."""
        if not self.search_s:
            return None
        return self.search_expansions / self.search_s

    @property
    def status_text(self) -> str:
        return "found" if self.found else f"no_path ({self.reason})"


@dataclass
class ScenarioResult:
    """Default-mode runs, plain-mode runs and rectangle-footprint runs of one scenario."""

    name: str
    runs: list[Outcome]
    plain: list[Outcome]
    rect: list[Outcome] | None = None

    @property
    def median_s(self) -> float:
        return statistics.median(o.plan_s for o in self.runs)

    @property
    def min_s(self) -> float:
        return min(o.plan_s for o in self.runs)

    @property
    def plain_s(self) -> float:
        return statistics.median(o.plan_s for o in self.plain)

    @property
    def speedup(self) -> float:
        return self.plain_s / self.median_s if self.median_s > 0 else math.inf

    @property
    def rect_s(self) -> float | None:
        return statistics.median(o.plan_s for o in self.rect) if self.rect else None

    @property
    def rect_ratio(self) -> float | None:
        """Rectangle median / disc median."""
        if not self.rect:
            return None
        return self.rect_s / self.median_s if self.median_s > 0 else math.inf


def plan_once(grid, start, goal, settings: SearchSettings, vehicle=EXAMPLE_VEHICLE) -> Outcome:
    """Plan once with a new :class:`Planner` (nothing cached from earlier runs)."""
    gc.collect()
    planner = Planner(vehicle, settings)
    try:
        path = planner.plan(grid, start, goal)
    except NoPath as no_path:
        stats = no_path.stats
        return Outcome(
            "no_path", no_path.reason, float(stats["plan_s"]), stats.get("search_s"),
            int(stats.get("expansions", 0)),
            int(stats.get("expansions", 0)) - int(stats.get("coarse_expansions", 0)),
        )
    stats = path.stats
    return Outcome(
        "found", None, float(stats["plan_s"]), stats.get("search_s"), int(stats["expansions"]),
        int(stats["expansions"]) - int(stats.get("coarse_expansions", 0)),
        float(path.length_m), float(path.reverse_m), int(path.gear_changes), len(path.poses),
    )


def plain_settings(allow_reverse: bool) -> SearchSettings:
    """Plain mode with the larger budget it needs."""
    return SearchSettings(
        allow_reverse=allow_reverse, max_expansions=PLAIN_MAX_EXPANSIONS, max_time_s=PLAIN_MAX_TIME_S
    ).plain()


def bookkeeping_rate(iterations: int = 50_000, successors: int = 10, pushed: int = 4) -> float:
    """Expansions per second of a loop doing an expansion's bookkeeping and nothing else.

    Per iteration: pop the heap, look up ``successors`` keys in a dict of visited states,
    and for ``pushed`` of them append a node to seven lists, store the key and push the
    heap (the counts of veer's search with reverse, about 10 successors and 2-4 pushes per
    expansion); the heap and dict start at realistic sizes. No geometry, no numpy: the
    floor under any expansion rate of a search written in plain Python, measured in the
    same run so the expansion rates can be read against the machine's speed today.
    """
    import heapq
    import random

    rng = random.Random(1)
    heap = [(rng.random(), -n) for n in range(1, 50_001)]
    heapq.heapify(heap)
    state = {rng.getrandbits(40): n for n in range(100_000)}
    columns = [[] for _ in range(7)]
    keys = [rng.getrandbits(40) for _ in range(4096)]
    t0 = time.perf_counter()
    n = 0
    for _ in range(iterations):
        f, i = heapq.heappop(heap)
        for j in range(successors):
            key = keys[(n + j) & 4095]
            other = state.get(key)
            if j < pushed and other is None:
                n += 1
                for column in columns:
                    column.append(f)
                state[key + n] = n
                heapq.heappush(heap, (f + 0.5, n))
    return iterations / (time.perf_counter() - t0)


def _progress(text: str) -> None:
    print(f"bench_plan: {text}", file=sys.stderr, flush=True)


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as info:
            for line in info:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.machine()


def machine_lines() -> list[str]:
    """Processor, core count, Python, numpy and OpenCV versions."""
    return [
        f"machine: {platform.processor() or _cpu_model()}, {os.cpu_count()} cores, "
        f"{platform.system()} {platform.release()}",
        f"python {platform.python_version()}, numpy {np.__version__}, opencv {cv2.__version__}",
    ]


def warm_turning_tables() -> dict[str, float]:
    """Time one build of each turning table, then load both into the process-wide cache."""
    build_s = {}
    for kind in ("reeds_shepp", "dubins"):
        t0 = time.perf_counter()
        build_turning_table(kind)
        build_s[kind] = time.perf_counter() - t0
        turning_table(kind)
    return build_s


# --------------------------------------------------------------------------- large map


def build_large_map(size: int = LARGE_SIZE, *, cell_size_m: float = LARGE_CELL_SIZE_M, seed: int = LARGE_SEED):
    """A (size, size) uint8 image of random boxes, with a start and a goal far apart.

    Boxes are 5 to 40 cells on a side, one per 5000 cells of map; a square of 6 m (or a
    fifth of the map, whichever is smaller) around the start and the goal is cleared.
    The start sits near the lower-left corner facing +x, the goal near the upper-right
    corner facing +y.

    Returns
    -------
    shades : ndarray (size, size) uint8
        255 floor, 0 obstacle, row 0 at the top.
    start, goal : tuple of float
        (x_m, y_m, heading_rad).
    """
    rng = np.random.default_rng(seed)
    shades = np.full((size, size), LARGE_FLOOR, dtype=np.uint8)
    for _ in range(max(1, size * size // 5000)):
        height, width = rng.integers(5, 41, size=2)
        top, left = rng.integers(0, size, size=2)
        shades[top : top + height, left : left + width] = LARGE_OBSTACLE
    extent_m = size * cell_size_m
    inset_m = min(10.0, extent_m / 4)
    start = (inset_m, inset_m, 0.0)
    goal = (extent_m - inset_m, extent_m - inset_m, math.pi / 2)
    half = int(round(min(3.0, extent_m / 10) / cell_size_m))
    for x_m, y_m, _ in (start, goal):
        row, col = int(size - y_m / cell_size_m), int(x_m / cell_size_m)
        shades[max(0, row - half) : row + half, max(0, col - half) : col + half] = LARGE_FLOOR
    return shades, start, goal


def _maxrss_bytes() -> int:
    # Linux reports ru_maxrss in KiB.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def _own_peak_rss_bytes() -> int | None:
    """VmHWM: the peak resident size of this process image only (Linux), else None."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def write_large_map(folder: str | pathlib.Path, size: int = LARGE_SIZE) -> dict:
    """Write the large map as PGM + sidecar into ``folder``; check its start and goal are free.

    Returns the image path, start, goal and the share of blocked cells.

    Raises
    ------
    RuntimeError
        When the start or the goal is not free for the example vehicle.
    """
    shades, start, goal = build_large_map(size)
    path = write_map(pathlib.Path(folder), shades, LARGE_CELL_SIZE_M)
    blocked_share = float((shades == LARGE_OBSTACLE).mean())
    del shades
    inflated = inflate(load_map(path), EXAMPLE_VEHICLE.radius_m)
    for name, (x_m, y_m, _) in (("start", start), ("goal", goal)):
        row, col = inflated.grid.world_to_cell(x_m, y_m)
        if inflated.blocked[int(row), int(col)]:
            raise RuntimeError(f"large map: the {name} ({x_m}, {y_m}) is not free; change LARGE_SEED")
    return {"path": str(path), "start": list(start), "goal": list(goal), "blocked_share": blocked_share}


def large_map_child(args: list[str]) -> dict:
    """In a fresh process: load the map at ``args[0]`` and plan ``args[1:4]`` -> ``args[4:7]``.

    One run without tracing gives ``plan_s`` and the peak resident size; a second run of
    load + plan under ``tracemalloc`` gives its peak of traced allocations.
    """
    path = args[0]
    start = tuple(float(v) for v in args[1:4])
    goal = tuple(float(v) for v in args[4:7])
    rss_imports = _maxrss_bytes()
    turning_table("reeds_shepp")
    grid = load_map(path)
    outcome = plan_once(grid, start, goal, DEFAULT_SEARCH_SETTINGS)
    rss_peak, own_peak = _maxrss_bytes(), _own_peak_rss_bytes()
    del grid
    gc.collect()
    tracemalloc.start()
    try:
        plan_once(load_map(path), start, goal, DEFAULT_SEARCH_SETTINGS)
        _, traced_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return {
        "status": outcome.status_text, "plan_s": outcome.plan_s, "expansions": outcome.expansions,
        "length_m": outcome.length_m, "rss_imports_bytes": rss_imports, "rss_peak_bytes": rss_peak,
        "own_peak_bytes": own_peak, "traced_peak_bytes": traced_peak,
    }


_WRITE_CODE = (
    "import json, sys\n"
    "from veer.tools.bench_plan import write_large_map\n"
    "print(json.dumps(write_large_map(sys.argv[1], int(sys.argv[2]))))\n"
)
_CHILD_CODE = (
    "import json, sys\n"
    "from veer.tools.bench_plan import large_map_child\n"
    "print(json.dumps(large_map_child(sys.argv[1:])))\n"
)


def _child_json(argv: list[str], what: str) -> dict:
    done = subprocess.run([sys.executable, "-c", *argv], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"{what} failed (exit {done.returncode}): {done.stderr.strip()[-500:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def run_large_map(size: int, folder: pathlib.Path) -> dict:
    """Write the large map in one child process and load + plan on it in another.

    Linux keeps a process's peak resident size across fork and exec, so a child's
    ``ru_maxrss`` never reads below its parent's at launch; both children are started
    from this process while it is still small (call this before any planning), and the
    child's own image peak (``VmHWM``) is reported beside it.
    """
    written = _child_json([_WRITE_CODE, str(folder), str(size)], "writing the large map")
    launch_rss = _maxrss_bytes()
    result = _child_json(
        [_CHILD_CODE, written["path"], *map(repr, written["start"]), *map(repr, written["goal"])],
        "planning on the large map",
    )
    result.update(size=size, blocked_share=written["blocked_share"], parent_rss_bytes=launch_rss)
    return result


# --------------------------------------------------------------------------- output


def markdown_table(header: list[str], rows: list[list[str]], right: set[int] = frozenset()) -> str:
    """A GitHub-flavoured markdown table; columns in ``right`` are right-aligned."""
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)]

    def line(cells):
        return "| " + " | ".join(
            c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths))
        ) + " |"

    rule = "|" + "|".join(("-" * (w + 1) + ":") if i in right else ("-" * (w + 2)) for i, w in enumerate(widths)) + "|"
    return "\n".join([line(header), rule, *(line(r) for r in rows)])


def _verdict(ok: bool | None) -> str:
    return _DASH if ok is None else ("met" if ok else "NOT met")


def _num(value, fmt: str) -> str:
    return _DASH if value is None else format(value, fmt)


def _ms(seconds: float) -> str:
    return f"{seconds * 1000:.1f}"


def _mib(value) -> str:
    return _DASH if value is None else f"{value / 2**20:.0f} MiB"


def _rate(value: float | None) -> str:
    return _DASH if value is None else f"{value / 1000:.1f}k/s"


class _Tally:
    def __init__(self) -> None:
        self.met = self.total = 0

    def __call__(self, ok: bool | None) -> str:
        if ok is not None:
            self.total += 1
            self.met += bool(ok)
        return _verdict(ok)


def format_report(
    machine: list[str], repeat: int, plain_repeat: int, build_s: dict[str, float],
    results: list[ScenarioResult], best: tuple[Outcome, Outcome] | None,
    rates: list[tuple[str, Outcome, float]], large: dict | None, bookkeeping_per_s: float | None = None,
) -> str:
    """All tables of one run as markdown."""
    tally = _Tally()
    out = [*machine, f"default settings: {repeat} run(s) per scenario; plain mode: {plain_repeat} run(s); "
           f"vehicle: example (wheelbase 2.0 m, max steer 30 deg, disc 1.0 m)", ""]

    rows = []
    for r in results:
        first = r.runs[0]
        target = TARGET_PLAN_S.get(r.name)
        overhead_ok = None
        if first.found and r.name not in OVERHEAD_EXEMPT:
            overhead_ok = first.overhead <= TARGET_OVERHEAD
        rows.append([
            r.name, first.status_text, _ms(r.median_s), _ms(r.min_s),
            _DASH if target is None else f"<= {target * 1000:.0f}",
            tally(None if target is None else r.median_s <= target),
            str(first.expansions), _num(first.length_m, ".2f"), _num(first.reverse_m, ".2f"),
            _num(first.gear_changes, "d"), _num(first.final_poses, "d"), _num(first.overhead, ".2f"),
            _DASH if overhead_ok is None else f"<= {TARGET_OVERHEAD:g}", tally(overhead_ok),
        ])
    out.append("Default settings (`stats.plan_s`, new Planner per run):")
    out.append("")
    out.append(markdown_table(
        ["scenario", "status", "median ms", "min ms", "target ms", "met", "expansions", "length m",
         "reverse m", "gear changes", "final poses", "overhead", "target", "met"],
        rows, right={2, 3, 6, 7, 8, 9, 10, 11},
    ))
    out.append("")

    rows = []
    for r in results:
        p = r.plain[0]
        solvable = r.runs[0].found
        rows.append([
            r.name, p.status_text, _ms(r.plain_s), str(p.expansions), _num(p.length_m, ".2f"),
            _num(p.reverse_m, ".2f"), _num(p.gear_changes, "d"), _num(p.final_poses, "d"),
            _num(p.overhead, ".1f"), f"{r.speedup:.1f}x",
            f">= {TARGET_SPEEDUP:g}x" if solvable else _DASH, tally(r.speedup >= TARGET_SPEEDUP if solvable else None),
        ])
    out.append("Plain mode (`SearchSettings(...).plain()`, budget "
               f"{PLAIN_MAX_EXPANSIONS:,} expansions / {PLAIN_MAX_TIME_S:g} s) and speed-up plain / default median:")
    out.append("")
    out.append(markdown_table(
        ["scenario", "status", "plain ms", "expansions", "length m", "reverse m", "gear changes",
         "final poses", "overhead", "speed-up", "target", "met"],
        rows, right={2, 3, 4, 5, 6, 7, 8, 9},
    ))
    out.append("")

    rows = []
    for r in results:
        if not r.rect:
            continue
        first = r.rect[0]
        rows.append([
            r.name, _ms(r.median_s), first.status_text, _ms(r.rect_s), _ms(min(o.plan_s for o in r.rect)),
            f"{r.rect_ratio:.2f}x", f"<= {TARGET_RECT_RATIO:g}x", tally(r.rect_ratio <= TARGET_RECT_RATIO),
            str(first.expansions), _num(first.length_m, ".2f"),
        ])
    if rows:
        out.append("Rectangle footprint (3.2 x 1.6 m, rear overhang 0.6 m, same wheelbase, steering and settings; "
                   f"cut off after {RECT_MAX_TIME_S:g} s) against the disc, medians of `stats.plan_s`:")
        out.append("")
        out.append(markdown_table(
            ["scenario", "disc ms", "rect status", "rect ms", "rect min ms", "rect / disc", "target", "met",
             "rect expansions", "rect length m"],
            rows, right={1, 3, 4, 5, 8, 9},
        ))
        out.append("")

    rows = [[f"turning table build, {kind} (`build_turning_table`, once per process)", f"{s:.3f} s", _DASH, _DASH]
            for kind, s in build_s.items()]
    if best is not None:
        default, wide = best
        rows.append([
            f"warehouse best path (weight 1.0, {BEST_BUDGET_SCALE}x budget): length",
            f"{_num(wide.length_m, '.2f')} m ({wide.expansions} expansions, {wide.plan_s:.2f} s)", _DASH, _DASH,
        ])
        ratio = default.length_m / wide.length_m if default.found and wide.found else None
        rows.append([
            "warehouse default length / best length", _num(ratio, ".3f"), f"<= {TARGET_BEST_RATIO:g}",
            tally(None if ratio is None else ratio <= TARGET_BEST_RATIO),
        ])
    for label, outcome, target in rates:
        rate = outcome.rate_per_s
        rows.append([
            f"expansion rate, {label}",
            f"{_rate(rate)} ({outcome.search_expansions} in {_num(outcome.search_s, '.3f')} s)",
            f">= {target / 1000:g}k/s", tally(None if rate is None else rate >= target),
        ])
    if bookkeeping_per_s is not None:
        rows.append([
            "bookkeeping-only loop (per expansion: 1 heap pop, 10 dict look-ups, 4 x (7 appends, dict store, "
            "heap push)): this machine's speed in this run",
            _rate(bookkeeping_per_s), _DASH, _DASH,
        ])
    if large is not None:
        n = large["size"]
        what = f"{n} x {n} map ({n * LARGE_CELL_SIZE_M:g} m square, {large['blocked_share']:.1%} blocked)"
        rows.append([
            f"{what}: plan_s", f"{large['plan_s']:.3f} s ({large['status']}, {_num(large['length_m'], '.1f')} m, "
            f"{large['expansions']} expansions)", _DASH, _DASH,
        ])
        rows.append([
            f"{what}: ru_maxrss of the child (load + plan)",
            f"{large['rss_peak_bytes'] / 2**20:.0f} MiB ({large['rss_imports_bytes'] / 2**20:.0f} MiB after imports; "
            f"own image peak {_mib(large['own_peak_bytes'])}; parent at launch {_mib(large['parent_rss_bytes'])})",
            f"<= {TARGET_PEAK_BYTES / 1e6:g} MB ({TARGET_PEAK_BYTES / 2**20:.0f} MiB)",
            tally(large["rss_peak_bytes"] <= TARGET_PEAK_BYTES),
        ])
        rows.append([
            f"{what}: tracemalloc peak (load + plan)", f"{large['traced_peak_bytes'] / 2**20:.0f} MiB", _DASH, _DASH,
        ])
    out.append("Other figures:")
    out.append("")
    out.append(markdown_table(["figure", "value", "target", "met"], rows))
    out.append("")
    out.append(f"targets met: {tally.met} of {tally.total}")
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------- main


def main(argv: list[str] | None = None) -> int:
    """Run the benchmark, print progress on stderr and the tables on stdout; return the exit code."""
    parser = argparse.ArgumentParser(prog="python -m veer.tools.bench_plan", description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5, help="default-mode runs per scenario (default 5)")
    parser.add_argument("--plain-repeat", type=int, default=1, help="plain-mode runs per scenario (default 1)")
    parser.add_argument("--out", metavar="TABLE.md", help="also write the tables to this file")
    parser.add_argument("--scenarios", nargs="+", choices=SCENARIO_NAMES, default=list(SCENARIO_NAMES),
                        help="scenarios to run (default: all)")
    parser.add_argument("--against", metavar="REV",
                        help="also plan the scenarios with git revision REV (checked out aside) beside this tree")
    parser.add_argument("--large-size", type=int, default=LARGE_SIZE,
                        help=f"edge in cells of the memory benchmark map (default {LARGE_SIZE}; 0 skips it)")
    args = parser.parse_args(argv)
    if args.repeat < 1 or args.plain_repeat < 1:
        parser.error("--repeat and --plain-repeat must be at least 1")
    if args.large_size and args.large_size < 100:
        parser.error("--large-size must be 0 (skip) or at least 100 cells")
    out_path = pathlib.Path(args.out) if args.out else None
    if out_path is not None and not (out_path.parent if str(out_path.parent) else pathlib.Path(".")).is_dir():
        parser.error(f"--out {args.out}: folder {out_path.parent} does not exist; create it first")

    t_all = time.perf_counter()
    machine = machine_lines()
    for line in machine:
        _progress(line)
    build_s = warm_turning_tables()
    _progress("turning tables: " + ", ".join(f"{k} built in {s:.3f} s" for k, s in build_s.items()))

    results: list[ScenarioResult] = []
    grids: dict[str, tuple] = {}
    with tempfile.TemporaryDirectory(prefix="veer-bench-plan-") as tmp:
        folder = pathlib.Path(tmp)
        large = None
        if args.large_size:
            _progress(f"large map {args.large_size} x {args.large_size}: building, then planning in a child process")
            large = run_large_map(args.large_size, folder)
            _progress(f"large map: {large['status']}, plan_s {large['plan_s']:.3f} s, "
                      f"ru_maxrss {large['rss_peak_bytes'] / 2**20:.0f} MiB")
        for name in args.scenarios:
            scenario = build_scenario(name)
            grid = load_map(write_scenario_map(scenario, folder))
            grids[name] = (scenario, grid)
            settings = SearchSettings(allow_reverse=scenario.reverse)
            plan_once(grid, scenario.start, scenario.goal, settings)  # warm-up, not counted
            runs = [plan_once(grid, scenario.start, scenario.goal, settings) for _ in range(args.repeat)]
            _progress(f"{name}: {runs[0].status_text}, median {statistics.median(o.plan_s for o in runs):.4f} s "
                      f"over {args.repeat} run(s), {runs[0].expansions} expansions")
            plain = [plan_once(grid, scenario.start, scenario.goal, plain_settings(scenario.reverse))
                     for _ in range(args.plain_repeat)]
            _progress(f"{name}: plain {plain[0].status_text}, {statistics.median(o.plan_s for o in plain):.3f} s, "
                      f"{plain[0].expansions} expansions")
            rect_settings = replace(settings, max_time_s=min(settings.max_time_s, RECT_MAX_TIME_S))
            plan_once(grid, scenario.start, scenario.goal, rect_settings, EXAMPLE_RECTANGLE)  # warm-up
            rect = [plan_once(grid, scenario.start, scenario.goal, rect_settings, EXAMPLE_RECTANGLE)
                    for _ in range(args.repeat)]
            _progress(f"{name}: rectangle {rect[0].status_text}, median "
                      f"{statistics.median(o.plan_s for o in rect):.4f} s, {rect[0].expansions} expansions")
            results.append(ScenarioResult(name, runs, plain, rect))

        best = None
        if "warehouse" in grids:
            scenario, grid = grids["warehouse"]
            base = SearchSettings(allow_reverse=scenario.reverse)
            wide = replace(base, heuristic_weight=1.0, max_expansions=BEST_BUDGET_SCALE * base.max_expansions,
                           max_time_s=BEST_BUDGET_SCALE * base.max_time_s)
            default = next(r for r in results if r.name == "warehouse").runs[0]
            best = (default, plan_once(grid, scenario.start, scenario.goal, wide))
            _progress(f"warehouse best path: {best[1].status_text}, {_num(best[1].length_m, '.2f')} m, "
                      f"{best[1].plan_s:.2f} s")

        rates: list[tuple[str, Outcome, float]] = []
        if "open_yard" in grids:
            scenario, grid = grids["open_yard"]
            start = (scenario.start[0], scenario.start[1], math.radians(FORWARD_START_HEADING_DEG))
            forward = plan_once(grid, start, scenario.goal, plain_settings(False))
            rates.append((f"forward-only, open_yard plain (start turned to {FORWARD_START_HEADING_DEG:g} deg)",
                          forward, TARGET_RATE_FORWARD_PER_S))
        if "warehouse" in grids:
            scenario, grid = grids["warehouse"]
            forward = plan_once(grid, scenario.start, scenario.goal, plain_settings(False))
            rates.append(("forward-only, warehouse plain", forward, TARGET_RATE_FORWARD_PER_S))
        for r in results:
            if r.name in ("open_yard", "warehouse"):
                rates.append((f"with reverse, {r.name} plain", r.plain[0], TARGET_RATE_REVERSE_PER_S))
        for label, outcome, _ in rates:
            _progress(f"rate {label}: {_rate(outcome.rate_per_s)}")

    calibration = bookkeeping_rate()
    _progress(f"bookkeeping-only loop: {_rate(calibration)}")
    report = format_report(machine, args.repeat, args.plain_repeat, build_s, results, best, rates, large, calibration)
    if args.against:
        from veer.tools.bench_against import compare_with_revision, format_comparison

        rows = compare_with_revision(args.against, args.scenarios, max(args.repeat, 3), progress=_progress)
        report += (f"\n{args.against} against this tree, one run (each side in a child process, medians of "
                   f"`plan_s`):\n\n" + format_comparison(args.against, rows))
    _progress(f"done in {time.perf_counter() - t_all:.1f} s")
    sys.stdout.write(report)
    if out_path is not None:
        out_path.write_text(report, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
