"""Run scenario checks: plan each scenario file and compare the result with its expectations.

A scenario file (TOML, format in docs/files.md "Scenario file") names a map image (path
relative to the scenario file; its sidecar beside it, or `cell_size_m` here), an
optional vehicle (a file or an inline [vehicle] table; default the example vehicle),
start and goal (x_m, y_m, heading_deg), `reverse` (default true) and an [expect] table:
found, reason, must_reverse, max_length_m, max_gear_changes, max_reverse_m, max_plan_s.
A folder stands for every *.toml file directly in it.

Prints one line per scenario ("PASS name: ...", "FAIL name: what failed", or "ERROR
file: what is wrong" for a scenario that cannot be run), then "N passed, M failed"
(errors count as failed).

Exit codes: 0 all passed, 1 any failed, 2 bad input (a scenario file that cannot be read
or run, or a start or goal off the map or in collision).
"""

from __future__ import annotations

import math
import sys
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from veer.tools.errors import EXIT_BAD_INPUT, EXIT_OK

__all__ = ["Expectations", "Scenario", "ScenarioFileError", "Outcome", "add_arguments", "load_scenario", "check_scenario",
           "run", "main", "SCENARIO_KEYS", "EXPECT_KEYS", "POSE_KEYS"]


EXIT_FAILED = 1  # a scenario failed its expectations

SCENARIO_KEYS = ("name", "description", "map", "cell_size_m", "vehicle", "reverse", "start", "goal", "expect")
POSE_KEYS = ("x_m", "y_m", "heading_deg")
EXPECT_KEYS = ("found", "reason", "must_reverse", "max_length_m", "max_gear_changes", "max_reverse_m", "max_plan_s")
_PATH_ONLY_KEYS = ("must_reverse", "max_length_m", "max_gear_changes", "max_reverse_m")


class ScenarioFileError(ValueError):
    """A scenario file that cannot be read or makes no sense; the message names file and key."""

    code = "bad_scenario"


@dataclass(frozen=True)
class Expectations:
    """What a scenario expects of the planner's answer; ``None`` means not checked."""

    found: bool = True
    reason: str | None = None
    must_reverse: bool = False
    max_length_m: float | None = None
    max_gear_changes: int | None = None
    max_reverse_m: float | None = None
    max_plan_s: float | None = None


@dataclass(frozen=True)
class Scenario:
    """One checked planning problem, read from a scenario file (paths resolved)."""

    name: str
    source: Path
    map_path: Path
    cell_size_m: float | None
    vehicle: object  # veer.planning.Vehicle
    reverse: bool
    start: tuple[float, float, float]  # x_m, y_m, heading_rad
    goal: tuple[float, float, float]
    expect: Expectations = field(default_factory=Expectations)


@dataclass(frozen=True)
class Outcome:
    """The result of one scenario: passed, the failures (one phrase each) and a summary."""

    name: str
    passed: bool
    failures: tuple[str, ...]
    summary: str

    def line(self) -> str:
        if self.passed:
            return f"PASS {self.name}: {self.summary}"
        return f"FAIL {self.name}: {'; '.join(self.failures)} ({self.summary})"


def add_arguments(parser) -> None:
    """Add the `veer check` arguments to an argparse parser."""
    parser.add_argument("scenarios", nargs="+", metavar="SCENARIO",
                        help="scenario TOML files, or folders of them (every *.toml directly inside)")


# -- reading a scenario ---------------------------------------------------------------------


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _shown(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


class _Reader:
    """Checks of one file's values; every message names the file and the key."""

    def __init__(self, source: Path) -> None:
        self.source = source

    def fail(self, message: str) -> ScenarioFileError:
        return ScenarioFileError(f"{self.source}: {message}")

    def table(self, values, key: str, allowed: tuple[str, ...]) -> dict:
        if not isinstance(values, dict):
            raise self.fail(f"key '{key}' must be a table like {{ {', '.join(f'{k} = ...' for k in allowed)} }}, "
                            f"got {_shown(values)}")
        unknown = sorted(set(values) - set(allowed))
        if unknown:
            raise self.fail(f"unknown key '{key}.{unknown[0]}'; accepted in [{key}]: {', '.join(allowed)}")
        return values

    def number(self, values: dict, key: str, where: str, *, minimum: float | None = None,
               above: float | None = None) -> float | None:
        if key not in values:
            return None
        value = values[key]
        name = f"{where}{key}"
        if not _is_number(value):
            raise self.fail(f"key '{name}' must be a number, got {_shown(value)}")
        if minimum is not None and value < minimum:
            raise self.fail(f"key '{name}' must be >= {minimum:g}, got {value!r}")
        if above is not None and value <= above:
            raise self.fail(f"key '{name}' must be > {above:g}, got {value!r}")
        return float(value)

    def boolean(self, values: dict, key: str, where: str, default: bool) -> bool:
        value = values.get(key, default)
        if not isinstance(value, bool):
            raise self.fail(f"key '{where}{key}' must be true or false, got {_shown(value)}")
        return value

    def text(self, values: dict, key: str, where: str = "") -> str | None:
        if key not in values:
            return None
        value = values[key]
        if not isinstance(value, str) or not value.strip():
            raise self.fail(f"key '{where}{key}' must be a non-empty string, got {_shown(value)}")
        return value

    def pose(self, values: dict, key: str) -> tuple[float, float, float]:
        if key not in values:
            raise self.fail(f"missing key '{key}'; add e.g. {key} = {{ x_m = 1.0, y_m = 2.0, heading_deg = 0.0 }}")
        table = self.table(values[key], key, POSE_KEYS)
        for name in POSE_KEYS:
            if name not in table:
                raise self.fail(f"missing key '{key}.{name}'; a pose needs x_m, y_m and heading_deg")
        x_m = self.number(table, "x_m", f"{key}.")
        y_m = self.number(table, "y_m", f"{key}.")
        heading_deg = self.number(table, "heading_deg", f"{key}.")
        return (x_m, y_m, math.radians(heading_deg))


def load_scenario(path) -> Scenario:
    """Read and check one scenario file; the vehicle is built, the map is not loaded yet.

    Raises
    ------
    ScenarioFileError
        Unreadable file, bad TOML, an unknown key, a value of the wrong type or range, a
        bad vehicle, or expectations that contradict each other; one line naming the file
        and the key.
    """
    from veer.planning import EXAMPLE_VEHICLE, NO_PATH_REASONS, PlanningError, load_vehicle, vehicle_from_mapping

    source = Path(path)
    check = _Reader(source)
    try:
        text = source.read_text(encoding="utf-8")
    except IsADirectoryError:
        raise check.fail("is a folder; give a scenario .toml file") from None
    except OSError as error:
        raise check.fail(f"cannot read scenario file: {error.strerror or error}") from None
    except UnicodeDecodeError:
        raise check.fail("is not UTF-8 text; a scenario is a TOML file") from None
    try:
        values = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise check.fail(f"not valid TOML: {' '.join(str(error).split())}") from None

    unknown = sorted(set(values) - set(SCENARIO_KEYS))
    if unknown:
        hint = " (is this a map sidecar? keep maps in a folder of their own)" if "map" not in values else ""
        raise check.fail(f"unknown key '{unknown[0]}'; accepted keys: {', '.join(SCENARIO_KEYS)}{hint}")
    name = check.text(values, "name") or source.stem
    check.text(values, "description")
    map_name = check.text(values, "map")
    if map_name is None:
        raise check.fail("missing key 'map'; add e.g. map = \"maps/yard.png\" (relative to this file)")
    map_path = source.parent / map_name
    cell_size_m = check.number(values, "cell_size_m", "", above=0.0)
    reverse = check.boolean(values, "reverse", "", True)
    start = check.pose(values, "start")
    goal = check.pose(values, "goal")

    vehicle_value = values.get("vehicle")
    try:
        if vehicle_value is None:
            vehicle = EXAMPLE_VEHICLE
        elif isinstance(vehicle_value, str):
            vehicle = load_vehicle(source.parent / vehicle_value)
        elif isinstance(vehicle_value, dict):
            try:
                vehicle = vehicle_from_mapping(vehicle_value, source=f"{source}: [vehicle]")
            except PlanningError as error:
                raise ScenarioFileError(str(error)) from None
        else:
            raise check.fail(f"key 'vehicle' must be a file name or a [vehicle] table, got {_shown(vehicle_value)}")
    except PlanningError as error:
        raise check.fail(f"key 'vehicle': {error}") from None

    expect_values = check.table(values.get("expect", {}), "expect", EXPECT_KEYS)
    reason = check.text(expect_values, "reason", "expect.")
    if reason is not None and reason not in NO_PATH_REASONS:
        raise check.fail(f"key 'expect.reason' must be one of {', '.join(NO_PATH_REASONS)}, got {reason!r}")
    found = check.boolean(expect_values, "found", "expect.", reason is None)
    if found and reason is not None:
        raise check.fail("key 'expect.reason' names why no path is found; it needs found = false")
    if not found:
        for key in _PATH_ONLY_KEYS:
            if key in expect_values and not (key == "must_reverse" and expect_values[key] is False):
                raise check.fail(f"key 'expect.{key}' checks a found path, but found = false; remove one of them")
    max_gear_changes = expect_values.get("max_gear_changes")
    if max_gear_changes is not None and (isinstance(max_gear_changes, bool) or not isinstance(max_gear_changes, int)
                                         or max_gear_changes < 0):
        raise check.fail(f"key 'expect.max_gear_changes' must be a whole number >= 0, got {_shown(max_gear_changes)}")
    must_reverse = check.boolean(expect_values, "must_reverse", "expect.", False)
    if must_reverse and not reverse:
        raise check.fail("key 'expect.must_reverse' = true contradicts reverse = false; drop one of them")
    expect = Expectations(
        found=found,
        reason=reason,
        must_reverse=must_reverse,
        max_length_m=check.number(expect_values, "max_length_m", "expect.", minimum=0.0),
        max_gear_changes=max_gear_changes,
        max_reverse_m=check.number(expect_values, "max_reverse_m", "expect.", minimum=0.0),
        max_plan_s=check.number(expect_values, "max_plan_s", "expect.", above=0.0),
    )
    return Scenario(name, source, map_path, cell_size_m, vehicle, reverse, start, goal, expect)


# -- running one -------------------------------------------------------------------------------


def check_scenario(scenario: Scenario, grid) -> Outcome:
    """Plan the scenario on ``grid`` and compare with its expectations.

    Raises
    ------
    veer.planning.PlanningError
        Start or goal off the map or in collision (bad input, not a failed check).
    """
    from veer.planning import NoPath, Planner, SearchSettings

    expect = scenario.expect
    planner = Planner(scenario.vehicle, SearchSettings(allow_reverse=scenario.reverse))
    failures: list[str] = []
    try:
        path = planner.plan(grid, scenario.start, scenario.goal)
    except NoPath as no_path:
        plan_s = float(no_path.stats.get("plan_s", 0.0))
        summary = f"no path ({no_path.reason}), {plan_s:.3f} s"
        if expect.found:
            failures.append(f"expected a path, got no path ({no_path.reason}: {no_path.detail})")
        elif expect.reason is not None and no_path.reason != expect.reason:
            failures.append(f"expected no path for reason {expect.reason}, got {no_path.reason}")
    else:
        plan_s = float(path.stats.get("plan_s", 0.0))
        summary = (f"found {path.length_m:.2f} m, reverse {path.reverse_m:.2f} m, "
                   f"{path.gear_changes} gear change(s), {plan_s:.3f} s")
        if not expect.found:
            wanted = f" ({expect.reason})" if expect.reason else ""
            failures.append(f"expected no path{wanted}, but a path was found")
        if expect.must_reverse and path.reverse_m <= 0.0:
            failures.append("expected reverse driving, the path drives forward only")
        if expect.max_length_m is not None and path.length_m > expect.max_length_m:
            failures.append(f"length {path.length_m:.2f} m > max_length_m {expect.max_length_m:g}")
        if expect.max_gear_changes is not None and path.gear_changes > expect.max_gear_changes:
            failures.append(f"{path.gear_changes} gear change(s) > max_gear_changes {expect.max_gear_changes}")
        if expect.max_reverse_m is not None and path.reverse_m > expect.max_reverse_m:
            failures.append(f"reverse {path.reverse_m:.2f} m > max_reverse_m {expect.max_reverse_m:g}")
    if expect.max_plan_s is not None and plan_s > expect.max_plan_s:
        failures.append(f"plan time {plan_s:.3f} s > max_plan_s {expect.max_plan_s:g}")
    return Outcome(scenario.name, not failures, tuple(failures), summary)


def _scenario_files(arguments: list[str]) -> list[Path]:
    files: list[Path] = []
    for argument in arguments:
        path = Path(argument)
        if path.is_dir():
            found = sorted(p for p in path.glob("*.toml") if p.is_file())
            files.extend(found if found else [path])  # an empty folder is reported as bad input
        else:
            files.append(path)
    return files


def run(args) -> int:
    """Carry out ``veer check``; returns the exit code (0 all passed, 1 a failure, 2 bad input)."""
    from veer.maps import MapError, load_map
    from veer.planning import PlanningError

    passed = failed = errors = 0
    grids: dict[tuple[Path, float | None], object] = {}
    for path in _scenario_files(args.scenarios):
        try:
            if path.is_dir():
                raise ScenarioFileError(f"{path}: folder holds no *.toml scenario files")
            scenario = load_scenario(path)
            key = (scenario.map_path.resolve(), scenario.cell_size_m)
            if key not in grids:
                try:
                    grids[key] = load_map(scenario.map_path, cell_size_m=scenario.cell_size_m)
                except MapError as error:
                    raise ScenarioFileError(f"{path}: key 'map': {error}") from None
            try:
                outcome = check_scenario(scenario, grids[key])
            except PlanningError as error:
                raise ScenarioFileError(f"{path}: {error}") from None
        except ScenarioFileError as error:
            print(f"ERROR {error}", flush=True)
            errors += 1
            continue
        print(outcome.line(), flush=True)
        if outcome.passed:
            passed += 1
        else:
            failed += 1
    print(f"{passed} passed, {failed + errors} failed", flush=True)
    if errors:
        return EXIT_BAD_INPUT
    return EXIT_FAILED if failed else EXIT_OK


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.tools.check``: the same as ``veer check``."""
    from veer.tools.cli import run_subcommand

    return run_subcommand("check", argv)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
