"""Drive a simulated yard tractor with the planner node and write a replay report of the drive.

The invented site (tools/scenarios.py, loading_yard): a 50 x 34 m yard with three
parking bays on the west wall, two buildings in the middle with passages south, between
them (behind a gate, shut) and north, and a loading dock on the east wall. The tractor
stands nose-in in the middle bay and must back out, cross the yard and reach the dock.

The real node (NodeServer) runs in this process on loopback ports the system picks, and
records itself into DIR/drive.log. A simulated robot sends the map and its pose at 20 Hz
of simulated time (which runs --speed times faster than real time), follows every path
the node publishes at up to 1.8 m/s forward and 1.0 m/s in reverse, stopping to change
gear at each cusp. The map changes twice while it drives: a trailer parks across the
south passage the first path takes (the node replans round the north), then the gate
between the buildings opens (the current path is still free, so the node keeps it and
says so; the demo's dispatcher then sends the goal again and the node plans the shorter
way through the gate). While the node answers a map change, the simulated clock waits.

At the end the log is replayed through a fresh node (veer replay) into
DIR/report/index.html with a picture per replan; DIR/drive.png shows the drive as
driven. Open the report in any browser.

--scenarios instead plans the five built-in scenarios once each and writes maps, path
JSON and pictures into DIR (exit 1 when one is not as expected).

Exit code 0 when the tractor reached the loading point, 1 otherwise.
"""

from __future__ import annotations

import math
import sys
import threading
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from veer.tools.errors import EXIT_NO_PATH, EXIT_OK, UsageError, number_flag

__all__ = ["DriveDemo", "DriveFailed", "Route", "add_arguments", "drive_demo", "run", "run_scenarios"]

SIM_STEP_S = 0.05
"""Simulated time between two poses sent (20 Hz)."""

FORWARD_M_PER_S = 1.8
REVERSE_M_PER_S = 1.0
ACCEL_M_PER_S2 = 1.0
CUSP_DWELL_S = 0.6  # standing still to change gear
GRID_EVERY_S = 1.0  # the robot sends its map this often (simulated seconds), changed or not
MAX_SIM_S = 240.0  # the drive gives up after this much simulated time
REACTION_WAIT_S = 30.0  # longest real wait for the node's answer to a map change or a goal
DEFAULT_SPEED = 10.0


def add_arguments(parser) -> None:
    """Add the ``veer demo`` arguments to an argparse parser."""
    parser.add_argument("--out", default="veer-demo", metavar="DIR",
                        help="folder for the log, the report and pictures (created if missing; default ./veer-demo)")
    parser.add_argument("--speed", type=number_flag("a speed-up", low=0.1, high=1000.0),
                        default=DEFAULT_SPEED, metavar="X",
                        help=f"simulated seconds per real second (default {DEFAULT_SPEED:g})")
    parser.add_argument("--scenarios", action="store_true",
                        help="plan the five built-in scenarios instead and write maps, paths and pictures")


def run(args) -> int:
    """Carry out ``veer demo``; returns the exit code (see the module docstring)."""
    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise UsageError(f"cannot create {out}: {error.strerror or error}; choose another --out") from None
    if getattr(args, "scenarios", False):
        return run_scenarios(out)
    from veer.node.client import NodeTimeout

    try:
        demo = drive_demo(out, speed=getattr(args, "speed", DEFAULT_SPEED), say=_say)
    except (NodeTimeout, DriveFailed) as error:
        _say(f"veer demo: the drive stopped: {error}")
        return EXIT_NO_PATH
    return EXIT_OK if demo.reached else EXIT_NO_PATH


class DriveFailed(RuntimeError):
    """The node answered the drive with no path (one line)."""


def _say(line: str) -> None:
    print(line, file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------------------
# the robot


def _wrap(angle: float) -> float:
    return (angle + math.pi) % (2 * math.pi) - math.pi


class Route:
    """The poses the simulated robot drives along, and where it is on them.

    ``poses`` (N, 4): x, y, heading, gear (the gear of the step arriving at a pose, as in
    the path JSON). The robot stands at arc length ``s_m``; :meth:`step` moves it with a
    trapezoid speed profile that stops at every cusp (where the gear flips) and at the end.
    """

    def __init__(self, poses) -> None:
        self.poses = np.asarray(poses, float)
        steps = np.hypot(np.diff(self.poses[:, 0]), np.diff(self.poses[:, 1]))
        self.along_m = np.concatenate(([0.0], np.cumsum(steps)))
        gears = self.poses[1:, 3] if len(self.poses) > 1 else np.array([self.poses[0, 3]])
        # arc lengths where the gear flips, and the end: the robot stops at each
        flips = [float(self.along_m[i]) for i in range(1, len(gears)) if gears[i] != gears[i - 1]]
        self.stops_m = flips + [float(self.along_m[-1])]
        self.s_m = 0.0
        self.speed_m_per_s = 0.0
        self.dwell_s = 0.0

    @property
    def length_m(self) -> float:
        return float(self.along_m[-1])

    @property
    def finished(self) -> bool:
        return self.s_m >= self.length_m - 1e-9 and self.speed_m_per_s == 0.0

    def pose(self) -> tuple[float, float, float, int]:
        """(x, y, heading, gear) at ``s_m``, interpolated between the poses."""
        i = min(int(np.searchsorted(self.along_m, self.s_m, side="right")) - 1, len(self.poses) - 2)
        if len(self.poses) == 1 or i < 0:
            x, y, h, g = self.poses[0]
            return float(x), float(y), float(h), int(g)
        a, b = self.poses[i], self.poses[i + 1]
        span = self.along_m[i + 1] - self.along_m[i]
        t = 0.0 if span <= 0 else min(1.0, max(0.0, (self.s_m - self.along_m[i]) / span))
        heading = a[2] + t * _wrap(b[2] - a[2])
        return (float(a[0] + t * (b[0] - a[0])), float(a[1] + t * (b[1] - a[1])), _wrap(float(heading)), int(b[3]))

    def gear_ahead(self) -> int:
        i = min(int(np.searchsorted(self.along_m, self.s_m + 1e-6, side="right")), len(self.poses) - 1)
        return int(self.poses[max(i, 1) if len(self.poses) > 1 else 0, 3])

    def step(self, dt_s: float) -> None:
        """Advance ``dt_s`` of simulated time."""
        if self.dwell_s > 0:
            self.dwell_s = max(0.0, self.dwell_s - dt_s)
            return
        stop_m = next((s for s in self.stops_m if s > self.s_m + 1e-6), self.length_m)
        left_m = stop_m - self.s_m
        if left_m <= 1e-6:
            self.speed_m_per_s = 0.0
            return
        top = FORWARD_M_PER_S if self.gear_ahead() > 0 else REVERSE_M_PER_S
        braking = math.sqrt(2 * ACCEL_M_PER_S2 * left_m)
        speed = min(top, braking, self.speed_m_per_s + ACCEL_M_PER_S2 * dt_s)
        speed = max(speed, min(0.2, top))  # creep the last centimetres rather than stall
        advance = speed * dt_s
        if advance >= left_m:
            self.s_m = stop_m
            self.speed_m_per_s = 0.0
            if stop_m < self.length_m:
                self.dwell_s = CUSP_DWELL_S  # change gear standing still
        else:
            self.s_m += advance
            self.speed_m_per_s = speed

    def switched_to(self, path_poses, starts_ahead: bool) -> "Route":
        """The route after a new path: spliced on at its first pose when it starts ahead on this one."""
        new = np.asarray(path_poses, float)
        here = np.array([self.pose()])
        if starts_ahead:
            i = max(0, min(int(np.searchsorted(self.along_m, self.s_m, side="right")) - 1, len(self.poses) - 2))
            distances = np.hypot(self.poses[i + 1:, 0] - new[0, 0], self.poses[i + 1:, 1] - new[0, 1])
            k = i + 1 + int(np.argmin(distances)) if len(distances) else i + 1
            lead_in = self.poses[i + 1:k]
            route = Route(np.vstack((here, lead_in, new)))
        else:
            gap = math.hypot(new[0, 0] - here[0, 0], new[0, 1] - here[0, 1])
            route = Route(new if gap < 1e-3 else np.vstack((here, new)))
        route.speed_m_per_s = self.speed_m_per_s if starts_ahead else 0.0
        return route


# ---------------------------------------------------------------------------------------------
# the drive


@dataclass
class DriveDemo:
    """What :func:`drive_demo` did: every path the node published, the events, the drive, the files."""

    out_dir: Path
    log_path: Path
    site: object
    grids: dict = field(default_factory=dict)  # map_id -> OccupancyGrid
    paths: list = field(default_factory=list)  # path messages as published
    events: list = field(default_factory=list)  # event messages as published
    map_changes: list = field(default_factory=list)  # (simulated s, map_id, what the node did)
    trace: list = field(default_factory=list)  # (simulated s, x, y, heading, gear) sent as poses
    reached: bool = False
    speed: float = DEFAULT_SPEED
    sim_s: float = 0.0
    wall_s: float = 0.0
    report: object = None  # the ReplayReport
    picture: Path | None = None
    map_image: Path | None = None
    files: list = field(default_factory=list)  # (path, what it is) for the last lines

    @property
    def final_pose(self) -> tuple[float, float, float]:
        return tuple(self.trace[-1][1:4]) if self.trace else tuple(self.site.start)


def _node_config(site, log_path: Path):
    from veer.node.config import NodeConfig, RecordSettings, SocketSettings

    return NodeConfig(sockets=SocketSettings("tcp://127.0.0.1:*", "tcp://127.0.0.1:*", "tcp://127.0.0.1:*"),
                      vehicle=site.vehicle, record=RecordSettings(path=str(log_path)), source="veer demo")


def _write_node_settings(out_dir: Path, vehicle) -> Path:
    """DIR/node.toml: the demo's vehicle as a NODE.toml, so a replay of the log plans for the tractor too."""
    lines = ["# veer demo: the yard tractor of the drive (docs/protocol.md, NODE.toml)", "[vehicle]"]
    for key in ("wheelbase_m", "max_steer_deg", "radius_m", "length_m", "width_m", "rear_overhang_m"):
        value = getattr(vehicle, key)
        if value is not None:
            lines.append(f"{key} = {float(value)!r}")
    path = Path(out_dir) / "node.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


class _Drive:
    """One drive: the node on a thread, a client, the simulated robot and its clock."""

    def __init__(self, demo: DriveDemo, client, speed: float, say):
        self.demo = demo
        self.client = client
        self.speed = speed
        self.say = say
        self.sim_s = 0.0
        self.wall0 = time.monotonic()
        self.route: Route | None = None
        self.map_id = None
        self.goal_id = None
        self.path_seq = 0

    # -- talking to the node --------------------------------------------------------------
    def send_grid(self, map_id) -> None:
        self.map_id = map_id
        self.client.send_grid(self.demo.grids[map_id].classes, map_id=map_id, classes=True,
                              cell_size_m=self.demo.grids[map_id].cell_size_m)

    def send_pose(self) -> None:
        x, y, h, g = self.route.pose() if self.route else (*self.demo.site.start, 1)
        self.client.send_pose(x, y, h, t_s=self.sim_s)
        self.demo.trace.append((self.sim_s, x, y, h, g))

    def note(self, message: dict) -> None:
        """Keep a path or event the node published."""
        if message.get("kind") == "path":
            self.demo.paths.append(message)
            self.path_seq = max(self.path_seq, message["seq"])
        else:
            self.demo.events.append(message)

    def take(self, path: dict) -> None:
        if path["status"] != "found":
            raise DriveFailed(f"the node found no path ({path.get('reason')}: {path.get('detail')})")
        if self.route is None:
            self.route = Route(path["poses"])
            if self.demo.trace:  # the pose sent before the first path: standing, in the gear it starts in
                self.demo.trace[0] = (*self.demo.trace[0][:4], self.route.gear_ahead())
        else:
            self.route = self.route.switched_to(path["poses"], bool(path.get("starts_ahead")))
        self.say(f"  t={self.sim_s:5.1f} s  path {path['seq']} ({path['trigger']}) on map {path['map_id']}: "
                 f"{path['length_m']:.1f} m, {path['reverse_m']:.1f} m in reverse, {path['gear_changes']} gear "
                 f"change(s), planned in {path['stats']['plan_s']:.2f} s{', starts ahead' if path['starts_ahead'] else ''}")

    def wait_reaction(self, map_id) -> dict:
        """The node's answer to a new grid: a path planned on it, or a path_kept event naming it."""
        def answer(message):
            return message.get("map_id") == map_id and (message.get("kind") == "path"
                                                        or message.get("code") == "path_kept")
        message = self.client.wait_for(("path", "event"), timeout_s=REACTION_WAIT_S, predicate=answer,
                                       keep_others=True)
        self.note(message)
        return message

    def poll_outputs(self) -> None:
        """Paths the node publishes unasked (an off-path replan), taken at once."""
        for topic, message in self.client.drain():
            if topic == "path" and message["seq"] > self.path_seq:
                self.note(message)
                self.take(message)
            elif topic == "event":
                self.note(message)

    def set_goal(self) -> dict:
        self.goal_id = self.client.set_goal(*self.demo.site.goal)
        path = self.client.wait_path(timeout_s=REACTION_WAIT_S, goal_id=self.goal_id, after_seq=self.path_seq)
        self.note(path)
        return path

    # -- the clock --------------------------------------------------------------------------
    def pace(self) -> None:
        """Sleep so that simulated time runs ``speed`` times faster than real time."""
        ahead_s = self.sim_s / self.speed - (time.monotonic() - self.wall0)
        if ahead_s > 0:
            time.sleep(min(ahead_s, 0.5))

    def hold_clock(self, since: float) -> None:
        """The simulated clock stood still while the node answered: shift real time by the wait."""
        self.wall0 += time.monotonic() - since


def drive_demo(out_dir, *, speed: float = DEFAULT_SPEED, say=lambda line: None, report: bool = True) -> DriveDemo:
    """Run the drive (see the module docstring) into ``out_dir``; returns what happened.

    ``say(line)`` gets the progress lines; ``report`` false skips the replay report.
    The node, its thread and every socket are closed before this returns.
    """
    from veer.node.client import NodeClient
    from veer.node.server import NodeServer
    from veer.tools.scenarios import loading_yard

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    site = loading_yard()
    log_path = out / "drive.log"
    demo = DriveDemo(out, log_path, site, grids=dict(site.grids), speed=speed)
    names = [map_id for map_id, _ in site.grids]
    vehicle = site.vehicle
    say(f"veer demo: a {vehicle.length_m} x {vehicle.width_m} m yard tractor (wheelbase {vehicle.wheelbase_m} m, "
        f"turn radius {vehicle.min_turn_radius_m:.2f} m) leaves its bay in reverse and drives to the loading dock")
    say(f"veer demo: {site.description}; simulated time runs {speed:g}x real time")
    wall0 = time.monotonic()
    config = _node_config(site, log_path)
    server = NodeServer(config)
    stop = threading.Event()
    thread = None
    client = None
    try:
        server.bind()
        thread = threading.Thread(target=server.serve, args=(stop,), name="veer-demo-node", daemon=True)
        thread.start()
        e = server.endpoints
        say(f"veer demo: node on {e['inputs']} (inputs), {e['outputs']} (outputs), {e['control']} (control), "
            f"recording to {log_path}")
        client = NodeClient(e["inputs"], e["outputs"], e["control"], timeout_s=REACTION_WAIT_S)
        _drive(_Drive(demo, client, speed, say), site, names, client)
    finally:
        if client is not None:
            client.close()
        stop.set()
        if thread is not None:
            thread.join(10.0)
        server.close()
    demo.wall_s = time.monotonic() - wall0
    demo.files.append((log_path, "the node's own recording of the drive (python -m veer.node.recording reads it)"))
    settings_path = _write_node_settings(demo.out_dir, site.vehicle)
    demo.files.append((settings_path, f"the tractor as NODE.toml; replay with it: veer replay {log_path} "
                                      f"--config {settings_path}"))
    _write_pictures(demo)
    if report:
        _write_report(demo, config, say)
    demo.wall_s = time.monotonic() - wall0
    verdict = "reached the loading point" if demo.reached else "did NOT reach the loading point"
    say(f"veer demo: the tractor {verdict} after {demo.sim_s:.1f} s of simulated driving; "
        f"{len(demo.paths)} path(s) published, done in {demo.wall_s:.1f} s. Look at:")
    for path, what in demo.files:
        say(f"  {path}   {what}")
    return demo


def _change_map(drive: _Drive, demo: DriveDemo, name: str, what: str, say) -> dict:
    """Send the map ``name``, wait for the node's answer (a path or a path_kept event), follow a new path."""
    drive.send_grid(name)
    say(f"  t={drive.sim_s:5.1f} s  map {name}: {what}")
    answer = drive.wait_reaction(name)
    demo.map_changes.append((drive.sim_s, name, _what(answer)))
    if answer["kind"] == "path":
        drive.take(answer)
    return answer


def _drive(drive: _Drive, site, names, client) -> None:
    demo, say = drive.demo, drive.say
    drive.send_grid(names[0])
    drive.send_pose()
    client.wait_accepted(map_id=names[0], timeout_s=REACTION_WAIT_S)
    say(f"  t={drive.sim_s:5.1f} s  map {names[0]} sent; goal: the loading point at "
        f"({site.goal[0]:.1f}, {site.goal[1]:.1f}) m")
    drive.take(drive.set_goal())
    stage = 0
    next_grid_s = GRID_EVERY_S
    while drive.sim_s < MAX_SIM_S:
        drive.route.step(SIM_STEP_S)
        drive.sim_s += SIM_STEP_S
        drive.send_pose()
        x, y, _heading, gear = drive.route.pose()
        if stage == 0 and gear > 0 and y < site.truck_below_y_m:
            stage = 1
            since = time.monotonic()
            _change_map(drive, demo, names[1], "a trailer parks across the south passage ahead", say)
            drive.hold_clock(since)
        elif stage == 1 and gear > 0 and y > site.gate_above_y_m and x < site.buildings_x_m[0]:
            stage = 2
            since = time.monotonic()
            answer = _change_map(drive, demo, names[2], "the gate between the buildings opens", say)
            if answer["kind"] != "path":
                say(f"  t={drive.sim_s:5.1f} s  the node keeps path {answer['path_seq']} (event path_kept: "
                    f"{answer['detail']}); the dispatcher sends the goal again to take the shorter way")
                path = drive.set_goal()
                drive.take(path)
                time_s, map_id, what = demo.map_changes[-1]
                demo.map_changes[-1] = (time_s, map_id, f"{what}; goal sent again: path {path['seq']}, "
                                                        f"{path['length_m']:.1f} m")
            drive.hold_clock(since)
        elif drive.sim_s >= next_grid_s:
            drive.send_grid(drive.map_id)  # the robot's map as usual, unchanged
        if drive.sim_s >= next_grid_s:
            next_grid_s += GRID_EVERY_S
        drive.poll_outputs()
        if drive.route.finished:
            break
        drive.pace()
    demo.sim_s = drive.sim_s
    gx, gy, gh = site.goal
    fx, fy, fh = demo.final_pose
    demo.reached = (drive.route.finished and math.hypot(fx - gx, fy - gy) <= 0.2
                    and abs(_wrap(fh - gh)) <= math.radians(5.0))
    say(f"  t={drive.sim_s:5.1f} s  stopped at ({fx:.2f}, {fy:.2f}) m, heading {math.degrees(fh):.1f} deg")


def _what(answer: dict) -> str:
    if answer.get("kind") == "path":
        return f"replanned: path {answer['seq']} ({answer['trigger']})"
    return f"kept path {answer['path_seq']} (still free; checked by {answer.get('checked_by', 'the planner')})"


def _write_pictures(demo: DriveDemo) -> None:
    """DIR/maps/loading_yard.pgm (+ sidecar) of the final map, and DIR/drive.png: the drive as driven."""
    from veer.planning import Planner
    from veer.tools.picture import render_plan_picture
    from veer.tools.scenarios import Scenario, write_scenario_map

    site = demo.site
    final_id, final_grid = site.grids[-1]
    maps = demo.out_dir / "maps"
    maps.mkdir(exist_ok=True)
    demo.map_image = write_scenario_map(
        Scenario("loading_yard", "the demo site with the trailer parked and the gate open", final_grid,
                 site.start, site.goal, True, True), maps)
    if not demo.trace:
        return
    trace = np.array([row[1:] for row in demo.trace], float)
    keep = np.concatenate(([True], np.hypot(np.diff(trace[:, 0]), np.diff(trace[:, 1])) > 1e-6))
    trace = trace[keep]
    driven = float(np.hypot(np.diff(trace[:, 0]), np.diff(trace[:, 1])).sum())
    reverse = float(np.hypot(np.diff(trace[:, 0]), np.diff(trace[:, 1]))[trace[1:, 3] < 0].sum())
    notes = [f"driven {driven:.1f} m ({reverse:.1f} m in reverse) in {demo.sim_s:.1f} s of simulated time; "
             f"{len(demo.paths)} path(s) from the node"]
    notes += [f"at {t:.1f} s map {map_id}: {what}" for t, map_id, what in demo.map_changes]
    planner = Planner(site.vehicle)
    demo.picture = render_plan_picture(
        demo.out_dir / "drive.png", planner.inflated_grid(final_grid), site.vehicle, site.start, site.goal, trace,
        title="veer demo: the drive as driven, on the final map", notes=notes)
    demo.files.append((demo.picture, "the whole drive as the tractor drove it, on the final map"))
    (sx, sy, sh), (gx, gy, gh) = site.start, site.goal
    demo.files.append((demo.map_image, f"the final map of the site; try: veer plan {demo.map_image} --start {sx:g} "
                                       f"{sy:g} {math.degrees(sh):g} --goal {gx:g} {gy:g} {math.degrees(gh):g}"))


def _write_report(demo: DriveDemo, config, say) -> None:
    from veer.node.config import RecordSettings
    from veer.tools.replay import ReplayOptions, replay_logs, write_report

    say("veer demo: replaying the log through a fresh node for the report ...")
    replay_config = replace(config, record=RecordSettings())
    outcomes = replay_logs([str(demo.log_path)], replay_config, ReplayOptions(), ["demo"])
    notes = ["The drive of veer demo: a yard tractor leaves its bay in reverse and drives to the loading dock "
             "while the map changes twice."]
    notes += [f"At {t:.1f} s of the drive map {map_id} arrived: the node {what}." for t, map_id, what in
              demo.map_changes]
    notes.append(f"Times in the table and plot are the node's own clock as recorded (real seconds since the log "
                 f"began); the simulated drive ran {demo.speed:g} times faster, its clock standing still while "
                 "the node answered a map change.")
    if any(event.get("code") == "path_kept" for event in demo.events):
        notes.append("A path the new map leaves free is kept (event path_kept), not replanned; the dispatcher then "
                     "sent the goal again, which plans afresh (trigger goal).")
    demo.report = write_report(demo.out_dir / "report", outcomes, ["demo"], title="veer demo: the loading yard drive",
                               notes=notes)
    demo.files.insert(0, (demo.report.index_html, f"the replay report: {demo.report.replans} replan(s), "
                                                  "a picture of each, the table and a plot (open in a browser)"))


# ---------------------------------------------------------------------------------------------
# --scenarios: the five built-in scenarios, planned once each


def run_scenarios(out: Path) -> int:
    """Plan each built-in scenario on its written map; maps, path JSON and pictures into ``out``."""
    from veer.maps import load_map
    from veer.planning import EXAMPLE_VEHICLE, NoPath, Planner, SearchSettings
    from veer.planning.path import no_path_document
    from veer.tools.picture import render_plan_picture
    from veer.tools.plan import format_path_json, summary_line
    from veer.tools.scenarios import DEMO_SCENARIO, SCENARIO_NAMES, build_scenario, write_scenario_map

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


def main(argv: list[str] | None = None) -> int:
    """``python -m veer.tools.demo``: the same as ``veer demo``."""
    from veer.tools.cli import run_subcommand

    return run_subcommand("demo", argv)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
