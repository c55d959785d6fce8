"""Benchmark map loading and inflation on a large synthetic map.

Builds a square map of random rectangles (dark obstacles and mid-grey unknown patches
on a light floor), writes it as a raw PGM with its sidecar in a temporary folder, then
measures :func:`veer.maps.load_map`, :func:`veer.maps.clearance_field_m` and
:func:`veer.maps.inflate`: wall time (best and median of ``--repeat`` runs) and peak
memory (``tracemalloc`` peak per step on a separate run, and the process's ``ru_maxrss``).

Usage::

    python -m veer.tools.bench_maps [--size 4000] [--repeat 3] [--radius-m 1.0]
"""

from __future__ import annotations

import argparse
import gc
import pathlib
import platform
import resource
import statistics
import sys
import tempfile
import time
import tracemalloc

import numpy as np

from veer.maps import clearance_field_m, inflate, load_map

FLOOR, OBSTACLE, UNKNOWN_SHADE = 255, 0, 160


def build_map(size: int, *, seed: int = 1, rectangles: int | None = None) -> np.ndarray:
    """Return a (size, size) uint8 image of random rectangles: 0 obstacles, 160 unknown, 255 floor."""
    rng = np.random.default_rng(seed)
    if rectangles is None:
        rectangles = max(1, size * size // 40_000)
    shades = np.full((size, size), FLOOR, dtype=np.uint8)
    for index in range(rectangles):
        height, width = rng.integers(1, max(2, size // 20), size=2)
        top, left = rng.integers(0, size, size=2)
        shade = UNKNOWN_SHADE if index % 5 == 0 else OBSTACLE
        shades[top : top + height, left : left + width] = shade
    return shades


def write_map(folder: pathlib.Path, shades: np.ndarray, cell_size_m: float) -> pathlib.Path:
    """Write ``shades`` as ``bench.pgm`` (P5) with a ``bench.toml`` sidecar; return the image path."""
    rows, cols = shades.shape
    path = folder / "bench.pgm"
    path.write_bytes(f"P5\n{cols} {rows}\n255\n".encode() + shades.tobytes())
    (folder / "bench.toml").write_text(f"cell_size_m = {cell_size_m!r}\norigin_m = [0.0, 0.0]\n")
    return path


def _maxrss_mib() -> float:
    # Linux reports ru_maxrss in KiB.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _timed(step, repeat: int) -> list[float]:
    times = []
    for _ in range(repeat):
        gc.collect()
        start = time.perf_counter()
        result = step()
        times.append(time.perf_counter() - start)
        del result
    return times


def _traced_peak_mib(step) -> float:
    gc.collect()
    tracemalloc.start()
    try:
        result = step()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    del result
    return peak / 2**20


def main(argv: list[str] | None = None) -> int:
    """Run the benchmark and print a table; return the exit code."""
    parser = argparse.ArgumentParser(prog="python -m veer.tools.bench_maps", description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=4000, help="map edge in cells (default 4000)")
    parser.add_argument("--cell-size-m", type=float, default=0.05, help="cell edge in metres (default 0.05)")
    parser.add_argument("--radius-m", type=float, default=1.0, help="inflation radius in metres (default 1.0)")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs per step (default 3)")
    parser.add_argument("--seed", type=int, default=1, help="random seed of the map (default 1)")
    args = parser.parse_args(argv)
    if args.size < 1 or args.repeat < 1:
        parser.error("--size and --repeat must be at least 1")

    rss_start = _maxrss_mib()
    shades = build_map(args.size, seed=args.seed)
    with tempfile.TemporaryDirectory(prefix="veer-bench-") as tmp:
        path = write_map(pathlib.Path(tmp), shades, args.cell_size_m)
        file_mib = path.stat().st_size / 2**20
        del shades
        rss_built = _maxrss_mib()

        grid = load_map(path)
        clearance = clearance_field_m(grid)
        load_s = _timed(lambda: load_map(path), args.repeat)
        clearance_s = _timed(lambda: clearance_field_m(grid), args.repeat)
        threshold_s = _timed(lambda: inflate(grid, args.radius_m, clearance_m=clearance), args.repeat)
        inflate_s = _timed(lambda: inflate(grid, args.radius_m), args.repeat)
        blocked_share = float(inflate(grid, args.radius_m, clearance_m=clearance).blocked.mean())
        del clearance

        load_peak = _traced_peak_mib(lambda: load_map(path))
        inflate_peak = _traced_peak_mib(lambda: inflate(grid, args.radius_m))
        rss_end = _maxrss_mib()

    rows = [
        ("load_map (read PGM + sidecar, classify)", load_s, load_peak),
        ("clearance_field_m (padded cv2 distance transform)", clearance_s, None),
        ("inflate, clearance given (threshold only)", threshold_s, None),
        ("inflate (clearance + threshold)", inflate_s, inflate_peak),
    ]
    print(f"map {args.size} x {args.size} = {args.size * args.size:,} cells, cell {args.cell_size_m} m, "
          f"radius {args.radius_m} m, PGM {file_mib:.1f} MiB, {grid.blocked.mean():.1%} blocked, "
          f"{blocked_share:.1%} blocked after inflation")
    print(f"python {platform.python_version()}, numpy {np.__version__}, {args.repeat} timed runs per step")
    print()
    print(f"| {'step':<50} | {'best s':>7} | {'median s':>8} | {'tracemalloc peak MiB':>20} |")
    print(f"|{'-' * 52}|{'-' * 9}|{'-' * 10}|{'-' * 22}|")
    for name, times, peak in rows:
        peak_text = f"{peak:.1f}" if peak is not None else "-"
        print(f"| {name:<50} | {min(times):>7.3f} | {statistics.median(times):>8.3f} | {peak_text:>20} |")
    print()
    print(f"ru_maxrss: {rss_start:.0f} MiB at start, {rss_built:.0f} MiB after building the map, "
          f"{rss_end:.0f} MiB at the end")
    return 0


if __name__ == "__main__":
    sys.exit(main())
