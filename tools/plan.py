"""Plan once on a map image.

Reads MAP_IMAGE (PGM or PNG) with its sidecar NAME.toml (or --cell-size), plans from
--start to --goal for the vehicle (--vehicle, or the example vehicle: wheelbase 2.0 m,
max steer 30 deg, disc radius 1.0 m) and writes the path JSON to --out (or stdout).
Headings are in degrees here; the JSON carries radians.

Exit codes: 0 a path was found, 1 no path (the JSON says why), 2 bad input.
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import sys
from pathlib import Path

from veer.tools.errors import EXIT_NO_PATH, EXIT_OK, UsageError

__all__ = ["add_arguments", "run", "format_path_json", "summary_line"]

log = logging.getLogger("veer.tools")


def _cell_size_m(text: str) -> float:
    """argparse type of --cell-size: a number of metres, range-checked by veer.maps itself."""
    from veer.maps import MapSettings, MapSettingsError

    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; give the edge of one map cell in metres") from None
    try:
        return MapSettings(cell_size_m=value).cell_size_m
    except MapSettingsError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def add_arguments(parser) -> None:
    """Add the ``veer plan`` arguments to an argparse parser."""
    parser.add_argument("map_image", metavar="MAP_IMAGE", help="PGM or PNG occupancy map")
    parser.add_argument("--start", nargs=3, type=float, required=True, metavar=("X", "Y", "HEADING_DEG"),
                        help="start pose: metres, metres, degrees counter-clockwise from +x")
    parser.add_argument("--goal", nargs=3, type=float, required=True, metavar=("X", "Y", "HEADING_DEG"),
                        help="goal pose: metres, metres, degrees")
    parser.add_argument("--cell-size", type=_cell_size_m, metavar="METRES",
                        help="edge of one map cell; overrides the sidecar's cell_size_m")
    parser.add_argument("--vehicle", metavar="VEHICLE.toml", help="vehicle file (default: the example vehicle)")
    gear = parser.add_mutually_exclusive_group()
    gear.add_argument("--reverse", dest="reverse", action="store_true", default=True,
                      help="allow reverse driving (the default)")
    gear.add_argument("--forward-only", dest="reverse", action="store_false", help="drive forward only")
    parser.add_argument("--out", metavar="PATH.json", help="write the path JSON here instead of stdout")
    parser.add_argument("--picture", metavar="OUT.png", help="draw the map, margin and path to this PNG")


def format_path_json(document: dict) -> str:
    """The path JSON with one pose per line: readable in a terminal and in a diff."""
    head = {k: v for k, v in document.items() if k not in ("poses", "curvature_per_m")}
    lines = ["{"]
    for key, value in head.items():
        lines.append(f"  {json.dumps(key)}: {json.dumps(value)},")
    if "curvature_per_m" in document:
        lines.append(f'  "curvature_per_m": {json.dumps(document["curvature_per_m"])},')
    poses = document.get("poses", [])
    if poses:
        lines.append('  "poses": [')
        rows = [f"    [{x:.4f}, {y:.4f}, {h:.5f}, {int(g)}]" for x, y, h, g in poses]
        lines.append(",\n".join(rows))
        lines.append("  ]")
    else:
        lines.append('  "poses": []')
    lines.append("}")
    return "\n".join(lines) + "\n"


def summary_line(document: dict) -> str:
    """One line for a person: what was found, or why not."""
    stats = document.get("stats", {})
    if document["status"] == "found":
        return (
            f"found: {document['length_m']:.1f} m, reverse {document['reverse_m']:.1f} m, "
            f"{document['gear_changes']} gear change(s), {len(document['poses'])} poses, "
            f"{stats.get('expansions', 0)} expansions, {stats.get('plan_s', 0.0):.3f} s"
        )
    return f"no path ({document['reason']}): {document.get('detail', '')}"


def _check_output_path(value: str | None, flag: str, suffix: str) -> Path | None:
    if value is None:
        return None
    path = Path(value)
    if path.is_dir():
        raise UsageError(f"{flag} {value} is a folder; give a file name ending in {suffix}")
    if path.suffix.lower() != suffix:
        raise UsageError(f"{flag} {value}: the file name must end in {suffix}")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise UsageError(f"{flag} {value}: folder {folder} does not exist; create it first")
    return path


def run(args) -> int:
    """Carry out ``veer plan``; returns the exit code (see the module docstring).

    Bad input (UsageError, MapError, PlanningError) propagates to ``veer.tools.cli.main``,
    which prints it as one line and exits 2.
    """
    from veer.maps import load_map
    from veer.planning import EXAMPLE_VEHICLE, NoPath, Planner, SearchSettings, load_vehicle
    from veer.planning.path import no_path_document

    out_path = _check_output_path(args.out, "--out", ".json")
    picture_path = _check_output_path(args.picture, "--picture", ".png")
    vehicle = load_vehicle(args.vehicle) if args.vehicle else EXAMPLE_VEHICLE
    grid = load_map(args.map_image, cell_size_m=args.cell_size)

    if sys.stderr.isatty():  # a person is watching: say what is being planned on
        print(
            f"veer plan: {Path(args.map_image).name}: {grid.cols} x {grid.rows} cells of {grid.cell_size_m:g} m "
            f"({grid.width_m:.1f} x {grid.height_m:.1f} m); planning...",
            file=sys.stderr,
        )
    start = (args.start[0], args.start[1], math.radians(args.start[2]))
    goal = (args.goal[0], args.goal[1], math.radians(args.goal[2]))
    planner = Planner(vehicle, SearchSettings(allow_reverse=args.reverse))
    poses = None
    try:
        path = planner.plan(grid, start, goal)
        document = path.to_document()
        poses = path.poses
        code = EXIT_OK
    except NoPath as no_path:
        document = no_path_document(no_path.reason, no_path.detail, no_path.stats)
        code = EXIT_NO_PATH
    log.info(
        "plan map_id=%s status=%s reason=%s length_m=%s expansions=%s plan_s=%s",
        grid.map_id, document["status"], document["reason"], document["length_m"],
        document["stats"].get("expansions"), document["stats"].get("plan_s"),
    )

    text = format_path_json(document)
    try:
        if out_path is not None:
            out_path.write_text(text, encoding="utf-8")
        else:
            sys.stdout.write(text)
        if picture_path is not None:
            from veer.tools.picture import render_plan_picture

            render_plan_picture(
                picture_path, planner.inflated_grid(grid), vehicle, start, goal, poses,
                title=f"veer plan: {Path(args.map_image).name}",
                notes=[summary_line(document)],
            )
    except OSError as error:
        raise UsageError(f"cannot write output: {error}") from None
    print(summary_line(document), file=sys.stderr)
    return code
