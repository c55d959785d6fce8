"""Plan the built-in scenarios and write what a person would want to look at.

For each scenario (an invented yard, parking lot, corridor, warehouse and walled-in
goal) this writes the map as PGM + sidecar, plans on it exactly as 'veer plan' would
(loading the written map), and writes the path JSON and a picture into --out
(default ./veer-demo). The last line names the pictures.

Exit code 0 when every scenario behaves as expected (a path where one exists, a
'goal_enclosed' answer where none does), 1 otherwise.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

from veer.tools.errors import EXIT_NO_PATH, EXIT_OK, UsageError

__all__ = ["add_arguments", "run"]


def add_arguments(parser) -> None:
    """Add the ``veer demo`` arguments to an argparse parser."""
    parser.add_argument("--out", default="veer-demo", metavar="DIR",
                        help="folder for maps, paths and pictures (created if missing; default ./veer-demo)")


def run(args) -> int:
    """Carry out ``veer demo``; returns the exit code (see the module docstring)."""
    from veer.maps import load_map
    from veer.planning import EXAMPLE_VEHICLE, NoPath, Planner, SearchSettings
    from veer.planning.path import no_path_document
    from veer.tools.picture import render_plan_picture
    from veer.tools.plan import format_path_json, summary_line
    from veer.tools.scenarios import DEMO_SCENARIO, SCENARIO_NAMES, build_scenario, write_scenario_map

    out = Path(args.out)
    try:
        (out / "maps").mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise UsageError(f"cannot create {out}: {error.strerror or error}; choose another --out") from None

    names = [DEMO_SCENARIO] + [n for n in SCENARIO_NAMES if n != DEMO_SCENARIO]
    vehicle = EXAMPLE_VEHICLE
    print(
        f"veer demo: {len(names)} scenarios, vehicle wheelbase {vehicle.wheelbase_m} m, max steer "
        f"{vehicle.max_steer_deg} deg (min turn radius {vehicle.min_turn_radius_m:.2f} m), disc {vehicle.radius_m} m",
        file=sys.stderr,
    )
    pictures, failures = [], []
    t_all = time.perf_counter()
    for number, name in enumerate(names, start=1):
        scenario = build_scenario(name)
        image = write_scenario_map(scenario, out / "maps")
        grid = load_map(image)
        planner = Planner(vehicle, SearchSettings(allow_reverse=scenario.reverse))
        poses = None
        try:
            path = planner.plan(grid, scenario.start, scenario.goal)
            document, poses = path.to_document(), path.poses
        except NoPath as no_path:
            document = no_path_document(no_path.reason, no_path.detail, no_path.stats)
        found = document["status"] == "found"
        if found != scenario.expect_path:
            failures.append(name)
        (out / f"{name}.path.json").write_text(format_path_json(document), encoding="utf-8")
        picture = out / f"{name}.png"
        render_plan_picture(
            picture, planner.inflated_grid(grid), vehicle, scenario.start, scenario.goal, poses,
            title=f"{name}: {scenario.description}",
            notes=[summary_line(document), _pose_text("start", scenario.start) + "   " + _pose_text("goal", scenario.goal)],
        )
        pictures.append(picture)
        verdict = "as expected" if found == scenario.expect_path else "NOT as expected"
        print(f"[{number}/{len(names)}] {name:14s} {summary_line(document)}  ({verdict})", file=sys.stderr)
    print(f"veer demo: done in {time.perf_counter() - t_all:.1f} s; pictures:", file=sys.stderr)
    for picture in pictures:
        print(f"  {picture}", file=sys.stderr)
    if failures:
        print(f"veer demo: scenarios not as expected: {', '.join(failures)}", file=sys.stderr)
        return EXIT_NO_PATH
    return EXIT_OK


def _pose_text(label: str, pose) -> str:
    return f"{label} ({pose[0]:.1f} m, {pose[1]:.1f} m, {math.degrees(pose[2]):.0f} deg)"
