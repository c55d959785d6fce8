"""Built-in scenarios: small invented maps with a start and a goal, for demos and checks.

Every scenario is sized for the example vehicle (disc of radius 1.0 m, minimum turn
radius 3.464 m) on 0.1 m cells, is built from fixed numbers and fixed random seeds (so
the same name always gives the same grid and the same ``map_id``), and has its start
and goal on cells the inflated grid leaves free.

===============  ============  ===========================================================
name             size (m)      what it exercises
===============  ============  ===========================================================
open_yard        40 x 40       scattered boxes and containers, a long open drive
parking_bay      30.6 x 22.6   reversing nose-out into a dead-end bay off a 10 m aisle
s_corridor       52.1 x 41.4   a 2.5 m wide S-bend corridor, 75 m long, 0.25 m lateral room
warehouse        80 x 60       rack rows with 4.5 m aisles, a cross aisle, a long route
enclosed_goal    30 x 30       a goal inside a closed room: no path exists
===============  ============  ===========================================================

:func:`loading_yard` is the site of the drive demo (``veer demo``), kept apart from the
five: a 50 x 34 m yard whose map changes twice (a trailer parks across a passage, a gate
opens), with a yard tractor of rectangle footprint.

Grids are drawn in cell (image) coordinates with OpenCV on a uint8 mask, row 0 at the
top; :class:`_Sketch` is the one place here that turns world metres into pixels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from veer.maps import FREE, OCCUPIED, UNKNOWN, OccupancyGrid

__all__ = [
    "CELL_SIZE_M",
    "DEMO_SCENARIO",
    "SCENARIO_NAMES",
    "Scenario",
    "ScenarioError",
    "DriveSite",
    "build_scenario",
    "loading_yard",
    "s_corridor_centreline",
    "write_scenario_map",
]

CELL_SIZE_M = 0.1
"""Cell edge of every built-in scenario, metres."""

SCENARIO_NAMES = ("open_yard", "parking_bay", "s_corridor", "warehouse", "enclosed_goal")
"""Names accepted by :func:`build_scenario`, in the order a listing shows them."""

DEMO_SCENARIO = "parking_bay"
"""The scenario ``veer demo --scenarios`` shows first: forward drive, a gear change and a reverse into a bay."""

# Shades written to scenario map images; the sidecar thresholds (100, 200) classify them back.
# Unknown must lie between the thresholds (a shade above free_above reads as free).
_PIXEL_FREE = 255
_PIXEL_OCCUPIED = 0
_PIXEL_UNKNOWN = 128
_SIDECAR_OCCUPIED_BELOW = 100
_SIDECAR_FREE_ABOVE = 200

# Sub-pixel bits for cv2.fillPoly: vertices are placed to 1/16 of a cell.
_SHIFT_BITS = 4


class ScenarioError(ValueError):
    """An unknown scenario name, or a scenario map that cannot be written."""


@dataclass(frozen=True)
class Scenario:
    """One built-in planning problem.

    Parameters
    ----------
    name : str
        One of :data:`SCENARIO_NAMES`.
    description : str
        One line for listings and picture titles.
    grid : OccupancyGrid
        The map, 0.1 m cells, origin at (0, 0).
    start, goal : tuple of float
        ``(x_m, y_m, heading_rad)`` of the rear-axle middle.
    reverse : bool
        Whether reverse driving is allowed when planning this scenario.
    expect_path : bool
        Whether a path exists for the example vehicle.
    """

    name: str
    description: str
    grid: OccupancyGrid
    start: tuple[float, float, float]
    goal: tuple[float, float, float]
    reverse: bool
    expect_path: bool


class _Sketch:
    """A blank map of ``width_m`` x ``height_m`` to draw obstacles on in world metres.

    Cells whose centre falls inside a drawn shape become occupied.
    """

    def __init__(self, width_m: float, height_m: float, cell_size_m: float = CELL_SIZE_M) -> None:
        self.cell_size_m = cell_size_m
        self.cols = int(round(width_m / cell_size_m))
        self.rows = int(round(height_m / cell_size_m))
        self.mask = np.zeros((self.rows, self.cols), np.uint8)

    def _pixel(self, x_m: float, y_m: float) -> tuple[float, float]:
        """Continuous image coordinates (u right, v down) with integers at cell centres."""
        return x_m / self.cell_size_m - 0.5, self.rows - 0.5 - y_m / self.cell_size_m

    def box(self, x0_m: float, y0_m: float, x1_m: float, y1_m: float) -> None:
        """Occupy the axis-aligned box [x0, x1] x [y0, y1]."""
        u0, v1 = self._pixel(x0_m, y0_m)
        u1, v0 = self._pixel(x1_m, y1_m)
        # Cells with centres inside; a tiny slack keeps 0.3 / 0.1 = 2.9999... on the right side.
        col0, col1 = math.ceil(u0 - 1e-9), math.floor(u1 + 1e-9)
        row0, row1 = math.ceil(v0 - 1e-9), math.floor(v1 + 1e-9)
        if col1 >= col0 and row1 >= row0:
            cv2.rectangle(self.mask, (col0, row0), (col1, row1), 255, thickness=-1)

    def polygon(self, corners_m: np.ndarray) -> None:
        """Occupy the convex or simple polygon with world corners ``corners_m`` (N, 2)."""
        pts = np.array([self._pixel(x, y) for x, y in corners_m])
        fixed = np.round(pts * (1 << _SHIFT_BITS)).astype(np.int32).reshape(-1, 1, 2)
        cv2.fillPoly(self.mask, [fixed], 255, lineType=cv2.LINE_8, shift=_SHIFT_BITS)

    def rotated_box(self, cx_m: float, cy_m: float, length_m: float, width_m: float, angle_rad: float) -> None:
        """Occupy a ``length_m`` x ``width_m`` box centred at (cx, cy), long side at ``angle_rad``."""
        self.polygon(_box_corners(cx_m, cy_m, length_m, width_m, angle_rad))

    def fence(self, thickness_m: float) -> None:
        """Occupy a border band of ``thickness_m`` on all four sides."""
        w, h = self.cols * self.cell_size_m, self.rows * self.cell_size_m
        self.box(0.0, 0.0, w, thickness_m)
        self.box(0.0, h - thickness_m, w, h)
        self.box(0.0, 0.0, thickness_m, h)
        self.box(w - thickness_m, 0.0, w, h)

    def room(self, x0_m: float, y0_m: float, x1_m: float, y1_m: float, thickness_m: float) -> None:
        """Occupy closed walls of ``thickness_m`` whose outer edge is the box [x0, x1] x [y0, y1]."""
        t = thickness_m
        self.box(x0_m, y0_m, x1_m, y0_m + t)
        self.box(x0_m, y1_m - t, x1_m, y1_m)
        self.box(x0_m, y0_m, x0_m + t, y1_m)
        self.box(x1_m - t, y0_m, x1_m, y1_m)

    def grid(self) -> OccupancyGrid:
        """The drawing as an occupancy grid with origin (0, 0)."""
        classes = np.where(self.mask > 0, OCCUPIED, FREE).astype(np.uint8)
        return OccupancyGrid(classes, cell_size_m=self.cell_size_m, origin_m=(0.0, 0.0))


def _box_corners(cx_m: float, cy_m: float, length_m: float, width_m: float, angle_rad: float) -> np.ndarray:
    """World corners (4, 2) of a rotated box."""
    c, s = math.cos(angle_rad), math.sin(angle_rad)
    half = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1]]) * (length_m / 2, width_m / 2)
    return np.column_stack((cx_m + c * half[:, 0] - s * half[:, 1], cy_m + s * half[:, 0] + c * half[:, 1]))


def _point_box_distance_m(x_m: float, y_m: float, box: tuple[float, float, float, float, float]) -> float:
    """Distance from a point to a filled rotated box ``(cx, cy, length, width, angle)``."""
    cx, cy, length, width, angle = box
    c, s = math.cos(angle), math.sin(angle)
    dx, dy = x_m - cx, y_m - cy
    along, across = c * dx + s * dy, -s * dx + c * dy
    return math.hypot(max(abs(along) - length / 2, 0.0), max(abs(across) - width / 2, 0.0))


# ---------------------------------------------------------------------------------------------
# open_yard


def _open_yard() -> Scenario:
    size_m = 40.0
    start = (4.0, 5.0, 0.0)
    goal = (35.0, 34.0, math.pi / 2)
    sketch = _Sketch(size_m, size_m)
    sketch.fence(0.3)
    rng = np.random.default_rng(20240611)
    placed: list[tuple[float, float, float, float, float]] = []
    # A few shipping containers first, then 1-3 m boxes; each keeps 2 m from start and goal
    # and a passage of at least 2.6 m (by circumscribed circles) to every box placed before.
    wanted = [("container", 4), ("box", 26)]
    for kind, count in wanted:
        got = 0
        for _ in range(2000):
            if got == count:
                break
            if kind == "container":
                length, width = 6.0, 2.4
                angle = float(rng.choice([0.0, math.pi / 2]))
            else:
                length, width = (float(v) for v in rng.uniform(1.0, 3.0, size=2))
                # Turned boxes stay well away from axis-aligned, where rasterising leaves steps.
                angle = float(rng.uniform(0.2, math.pi / 2 - 0.2)) if rng.random() < 0.5 else 0.0
            reach = math.hypot(length, width) / 2
            # Keep a passage of 2.6 m to the fence as well.
            cx, cy = (float(v) for v in rng.uniform(0.3 + 2.6 + reach, size_m - 0.3 - 2.6 - reach, size=2))
            candidate = (cx, cy, length, width, angle)
            if min(_point_box_distance_m(p[0], p[1], candidate) for p in (start, goal)) < 2.5:
                continue
            if any(math.hypot(cx - o[0], cy - o[1]) < reach + math.hypot(o[2], o[3]) / 2 + 2.6 for o in placed):
                continue
            placed.append(candidate)
            got += 1
    for box in placed:
        sketch.rotated_box(*box)
    return Scenario(
        name="open_yard",
        description="40 x 40 m fenced yard with scattered boxes and containers; long drive corner to corner",
        grid=sketch.grid(),
        start=start,
        goal=goal,
        reverse=True,
        expect_path=True,
    )


# ---------------------------------------------------------------------------------------------
# parking_bay

_BAY_INNER_WIDTH_M = 3.2
_BAY_DEPTH_M = 6.0
_BAY_WALL_M = 0.2
_LOT_FENCE_M = 0.3
_AISLE_WIDTH_M = 10.0
_BAYS_PER_ROW = 8
_GOAL_BAY = 5  # index in the top row, counted from the left


def _bay_centres_x_m() -> list[float]:
    """World x of each bay's centre line (both rows share them)."""
    pitch = _BAY_INNER_WIDTH_M + _BAY_WALL_M
    first = _LOT_FENCE_M + 2.0 + _BAY_WALL_M + _BAY_INNER_WIDTH_M / 2
    return [first + i * pitch for i in range(_BAYS_PER_ROW)]


def _parking_bay() -> Scenario:
    pitch = _BAY_INNER_WIDTH_M + _BAY_WALL_M
    width_m = 2 * _LOT_FENCE_M + 2.0 + _BAY_WALL_M + _BAYS_PER_ROW * pitch + 2.0
    bottom_row_y0 = _LOT_FENCE_M
    aisle_y0 = bottom_row_y0 + _BAY_DEPTH_M
    aisle_y1 = aisle_y0 + _AISLE_WIDTH_M
    top_row_y1 = aisle_y1 + _BAY_DEPTH_M
    height_m = top_row_y1 + _LOT_FENCE_M
    sketch = _Sketch(width_m, height_m)
    sketch.fence(_LOT_FENCE_M)
    centres = _bay_centres_x_m()
    # Dividers: walls between (and at both ends of) the bays, each as deep as a bay.
    for i in range(_BAYS_PER_ROW + 1):
        x0 = centres[0] - _BAY_INNER_WIDTH_M / 2 - _BAY_WALL_M + i * pitch
        sketch.box(x0, bottom_row_y0, x0 + _BAY_WALL_M, aisle_y0)
        sketch.box(x0, aisle_y1, x0 + _BAY_WALL_M, top_row_y1)
    # Parked cars (1.8 x 4.4 m) in some bays, never in the goal bay.
    car_length, car_width = 4.4, 1.8
    for i in (0, 2, 3, 7):
        sketch.box(centres[i] - car_width / 2, top_row_y1 - 0.5 - car_length, centres[i] + car_width / 2, top_row_y1 - 0.5)
    for i in (1, 2, 4, 5, 6):
        sketch.box(centres[i] - car_width / 2, bottom_row_y0 + 0.5, centres[i] + car_width / 2, bottom_row_y0 + 0.5 + car_length)
    start = (_LOT_FENCE_M + 3.0, (aisle_y0 + aisle_y1) / 2, 0.0)
    # Rear axle 2.0 m in from the back wall, nose towards the aisle (heading -y).
    goal = (centres[_GOAL_BAY], top_row_y1 - 2.0, -math.pi / 2)
    return Scenario(
        name="parking_bay",
        description="dead-end 3.2 x 6 m bays off a 10 m aisle; park nose-out (reverse in)",
        grid=sketch.grid(),
        start=start,
        goal=goal,
        reverse=True,
        expect_path=True,
    )


# ---------------------------------------------------------------------------------------------
# s_corridor

_CORRIDOR_HALF_WIDTH_M = 1.25
_CORRIDOR_RADIUS_M = 12.0
_CORRIDOR_STRAIGHTS_M = (12.0, 13.3, 12.0)
_CORRIDOR_MARGIN_M = 2.05  # keeps the first straight on cell centres (x.x5 m)
_CORRIDOR_END_GAP_M = 2.0  # start and goal this far (along the line) from the corridor's ends


def s_corridor_centreline(spacing_m: float = 0.05) -> np.ndarray:
    """World points (N, 2), metres, of the s_corridor centreline, about ``spacing_m`` apart.

    The line runs east, turns left through 90 degrees on a 12 m arc, runs north, turns right
    through 90 degrees on a 12 m arc and runs east again: 12 + 18.85 + 13.3 + 18.85 + 12 =
    75.0 m, tangent-continuous, curvature radius 12 m on the arcs and infinite elsewhere.
    """
    r = _CORRIDOR_RADIUS_M
    s1, s2, s3 = _CORRIDOR_STRAIGHTS_M
    x0 = y0 = _CORRIDOR_MARGIN_M
    pieces = []

    def straight(px: float, py: float, heading: float, length: float) -> tuple[float, float]:
        n = max(1, int(math.ceil(length / spacing_m)))
        t = np.linspace(0.0, length, n + 1)[:-1]
        pieces.append(np.column_stack((px + t * math.cos(heading), py + t * math.sin(heading))))
        return px + length * math.cos(heading), py + length * math.sin(heading)

    def arc(cx: float, cy: float, a0: float, a1: float) -> None:
        n = max(1, int(math.ceil(abs(a1 - a0) * r / spacing_m)))
        a = np.linspace(a0, a1, n + 1)[:-1]
        pieces.append(np.column_stack((cx + r * np.cos(a), cy + r * np.sin(a))))

    px, py = straight(x0, y0, 0.0, s1)
    arc(px, py + r, -math.pi / 2, 0.0)  # left turn, centre to the north
    px, py = straight(px + r, py + r, math.pi / 2, s2)
    arc(px + r, py, math.pi, math.pi / 2)  # right turn, centre to the east
    px, py = straight(px + r, py + r, 0.0, s3)
    pieces.append(np.array([[px, py]]))
    return np.concatenate(pieces)


def _distance_to_polyline_m(rows: int, cols: int, cell_size_m: float, line_m: np.ndarray, reach_m: float) -> np.ndarray:
    """Distance (rows, cols), metres, from each cell centre to the polyline; inf beyond ``reach_m``."""
    dist = np.full((rows, cols), np.inf)
    for (ax, ay), (bx, by) in zip(line_m[:-1], line_m[1:]):
        c0 = max(0, int((min(ax, bx) - reach_m) / cell_size_m))
        c1 = min(cols, int((max(ax, bx) + reach_m) / cell_size_m) + 2)
        r0 = max(0, rows - 1 - int((max(ay, by) + reach_m) / cell_size_m) - 1)
        r1 = min(rows, rows - int((min(ay, by) - reach_m) / cell_size_m) + 1)
        if c0 >= c1 or r0 >= r1:
            continue
        x = (np.arange(c0, c1) + 0.5) * cell_size_m
        y = (rows - np.arange(r0, r1) - 0.5) * cell_size_m
        px, py = np.meshgrid(x, y)
        dx, dy = bx - ax, by - ay
        length2 = dx * dx + dy * dy
        t = np.clip(((px - ax) * dx + (py - ay) * dy) / length2, 0.0, 1.0) if length2 > 0 else 0.0
        d = np.hypot(px - (ax + t * dx), py - (ay + t * dy))
        np.minimum(dist[r0:r1, c0:c1], d, out=dist[r0:r1, c0:c1])
    return dist


def _s_corridor() -> Scenario:
    line = s_corridor_centreline()
    width_m = line[:, 0].max() + _CORRIDOR_MARGIN_M
    height_m = line[:, 1].max() + _CORRIDOR_MARGIN_M
    cols = int(round(width_m / CELL_SIZE_M))
    rows = int(round(height_m / CELL_SIZE_M))
    dist = _distance_to_polyline_m(rows, cols, CELL_SIZE_M, line, _CORRIDOR_HALF_WIDTH_M + CELL_SIZE_M)
    classes = np.where(dist <= _CORRIDOR_HALF_WIDTH_M, FREE, OCCUPIED).astype(np.uint8)
    grid = OccupancyGrid(classes, cell_size_m=CELL_SIZE_M, origin_m=(0.0, 0.0))
    seg = np.hypot(*np.diff(line, axis=0).T)
    arclen = np.concatenate(([0.0], np.cumsum(seg)))

    def pose_at(s_m: float) -> tuple[float, float, float]:
        i = int(np.searchsorted(arclen, s_m))
        (ax, ay), (bx, by) = line[i - 1], line[i]
        t = (s_m - arclen[i - 1]) / (arclen[i] - arclen[i - 1])
        return (float(ax + t * (bx - ax)), float(ay + t * (by - ay)), math.atan2(by - ay, bx - ax))

    return Scenario(
        name="s_corridor",
        description="2.5 m wide, 75 m long S-bend corridor (12 m bend radius); 0.25 m lateral room for the 1 m disc",
        grid=grid,
        start=pose_at(_CORRIDOR_END_GAP_M),
        goal=pose_at(arclen[-1] - _CORRIDOR_END_GAP_M),
        reverse=True,
        expect_path=True,
    )


# ---------------------------------------------------------------------------------------------
# warehouse

_RACK_DEPTH_M = 1.2
_RACK_AISLE_M = 4.5
_RACK_ROWS = 8
_RACK_FIRST_Y_M = 8.0
_RACK_BLOCKS_X_M = ((8.0, 34.0), (40.0, 66.0))  # left block, cross aisle 34-40 m, right block


def _warehouse() -> Scenario:
    sketch = _Sketch(80.0, 60.0)
    sketch.fence(0.3)
    pitch = _RACK_DEPTH_M + _RACK_AISLE_M
    for x0, x1 in _RACK_BLOCKS_X_M:
        for k in range(_RACK_ROWS):
            y0 = _RACK_FIRST_Y_M + k * pitch
            sketch.box(x0, y0, x1, y0 + _RACK_DEPTH_M)
    # Pallet stacks in the staging area east of the racks, on a 4 m x 6 m lattice.
    for px in (71.0, 75.5):
        for py in (10.0, 16.0, 22.0, 34.0, 40.0, 46.0):
            sketch.box(px, py, px + 1.2, py + 1.2)
    # A dock office in the north-west corner.
    sketch.box(0.3, 53.0, 8.0, 59.7)
    aisle = 5  # between rack rows 5 and 6 of the right block
    aisle_y = _RACK_FIRST_Y_M + aisle * pitch + _RACK_DEPTH_M + _RACK_AISLE_M / 2
    return Scenario(
        name="warehouse",
        description="80 x 60 m warehouse, two blocks of 26 m racks with 4.5 m aisles and a 6 m cross aisle",
        grid=sketch.grid(),
        start=(3.5, 3.5, 0.0),
        goal=(55.0, aisle_y, math.pi),
        reverse=True,
        expect_path=True,
    )


# ---------------------------------------------------------------------------------------------
# enclosed_goal


def _enclosed_goal() -> Scenario:
    sketch = _Sketch(30.0, 30.0)
    sketch.fence(0.3)
    sketch.room(16.5, 16.5, 23.5, 23.5, 0.3)
    sketch.box(6.0, 14.0, 8.5, 16.0)
    sketch.rotated_box(13.0, 7.0, 3.0, 1.5, math.radians(30.0))
    sketch.box(24.0, 6.0, 26.0, 9.0)
    return Scenario(
        name="enclosed_goal",
        description="30 x 30 m yard; the goal is inside a closed 7 x 7 m room with no door: no path",
        grid=sketch.grid(),
        start=(4.0, 4.0, 0.0),
        goal=(20.0, 20.0, 0.0),
        reverse=True,
        expect_path=False,
    )


_BUILDERS = {
    "open_yard": _open_yard,
    "parking_bay": _parking_bay,
    "s_corridor": _s_corridor,
    "warehouse": _warehouse,
    "enclosed_goal": _enclosed_goal,
}


def build_scenario(name: str) -> Scenario:
    """Build the built-in scenario called ``name``.

    Parameters
    ----------
    name : str
        One of :data:`SCENARIO_NAMES`.

    Returns
    -------
    Scenario
        The same grid (same ``map_id``), start and goal on every call.

    Raises
    ------
    ScenarioError
        When ``name`` is not a built-in scenario.

    Examples
    --------
    >>> scenario = build_scenario("parking_bay")
    >>> scenario.expect_path, scenario.grid.cell_size_m
    (True, 0.1)
    """
    try:
        builder = _BUILDERS[name]
    except (KeyError, TypeError):
        raise ScenarioError(
            f"unknown scenario {name!r}; choose one of: {', '.join(SCENARIO_NAMES)}"
        ) from None
    return builder()


def write_scenario_map(scenario: Scenario, directory: str | Path) -> Path:
    """Write the scenario's map as ``NAME.pgm`` (binary P5) with its ``NAME.toml`` sidecar.

    Free cells are written as 255, occupied as 0 and unknown as 128; the sidecar's
    thresholds (``occupied_below = 100``, ``free_above = 200``) read them back as the same
    classes, so ``veer plan DIR/NAME.pgm`` plans on exactly this grid.

    Parameters
    ----------
    scenario : Scenario
        The scenario to write.
    directory : str or Path
        An existing folder.

    Returns
    -------
    Path
        The written ``.pgm`` file.

    Raises
    ------
    ScenarioError
        When ``directory`` does not exist or a file cannot be written.

    References
    ----------
    Netpbm PGM format, https://netpbm.sourceforge.net/doc/pgm.html
    """
    folder = Path(directory)
    if not folder.is_dir():
        raise ScenarioError(f"cannot write scenario map: folder {folder} does not exist; create it first")
    grid = scenario.grid
    shades = np.full(grid.classes.shape, _PIXEL_UNKNOWN, np.uint8)
    shades[grid.classes == FREE] = _PIXEL_FREE
    shades[grid.classes == OCCUPIED] = _PIXEL_OCCUPIED
    shades[grid.classes == UNKNOWN] = _PIXEL_UNKNOWN
    header = f"P5\n# veer scenario {scenario.name}\n{grid.cols} {grid.rows}\n255\n".encode("ascii")
    ox, oy = grid.origin_m
    sidecar = (
        f"# map sidecar for {scenario.name}.pgm: {scenario.description}\n"
        f"cell_size_m = {grid.cell_size_m!r}\n"
        f"origin_m = [{float(ox)!r}, {float(oy)!r}]\n"
        f"occupied_below = {_SIDECAR_OCCUPIED_BELOW}\n"
        f"free_above = {_SIDECAR_FREE_ABOVE}\n"
        f'unknown_is = "{grid.unknown_is}"\n'
    )
    image_path = folder / f"{scenario.name}.pgm"
    try:
        image_path.write_bytes(header + shades.tobytes())
        (folder / f"{scenario.name}.toml").write_text(sidecar, encoding="utf-8")
    except OSError as error:
        raise ScenarioError(f"cannot write scenario map into {folder}: {error.strerror or error}") from None
    return image_path


# ---------------------------------------------------------------------------------------------
# loading_yard: the site of the drive demo (veer demo); not one of SCENARIO_NAMES


@dataclass(frozen=True)
class DriveSite:
    """The invented site of ``veer demo``: a map that changes twice while a vehicle drives.

    ``grids`` holds the three stages in order, each with the ``map_id`` a robot would send:
    ``site`` (the yard; the middle gate between the buildings shut), ``site+truck`` (a
    trailer parked across the south passage, the route the first plan takes) and
    ``site+truck+gate_open`` (the middle gate open: a shorter way to the dock).
    ``start`` is the vehicle parked nose-in in a bay (it must leave in reverse); ``goal``
    the loading point in the dock recess. ``truck_below_y_m``: the trailer appears once the
    vehicle, out of its bay and driving forward, is further south than this (bound for the
    south passage); ``gate_above_y_m``: the gate opens once the vehicle, driving forward
    west of the buildings, is further north than this (on its way round by the north
    passage).
    """

    description: str
    vehicle: object
    grids: tuple
    start: tuple[float, float, float]
    goal: tuple[float, float, float]
    truck_below_y_m: float
    gate_above_y_m: float
    buildings_x_m: tuple[float, float]


_SITE_W_M, _SITE_H_M = 50.0, 34.0
_SITE_FENCE_M = 0.3
_SITE_BAY_CENTRES_Y_M = (6.0, 9.6, 13.2)
_SITE_BAY_DEPTH_M = 6.5
_SITE_BAY_WALL_M = 0.2
_SITE_BAY_INNER_M = 3.4
_SITE_BUILDINGS_X_M = (18.0, 31.0)
_SITE_SOUTH_PASSAGE_Y_M = (_SITE_FENCE_M, 5.5)
_SITE_MIDDLE_PASSAGE_Y_M = (15.0, 20.0)
_SITE_NORTH_PASSAGE_Y_M = (28.5, _SITE_H_M - _SITE_FENCE_M)
_SITE_GATE_X_M = (24.3, 24.7)
_SITE_DOCK_X_M = 44.0
_SITE_RECESS_Y_M = (10.8, 15.2)


def _site_vehicle():
    from veer.planning import Vehicle

    # a small yard tractor: 2.6 m wheelbase, 35 deg steering (3.71 m turn radius), 4.2 x 1.8 m body
    return Vehicle(wheelbase_m=2.6, max_steer_deg=35.0, radius_m=1.0, length_m=4.2, width_m=1.8,
                   rear_overhang_m=0.8)


def loading_yard() -> DriveSite:
    """The site of the drive demo (see :class:`DriveSite`); the same grids on every call."""
    def base() -> _Sketch:
        sketch = _Sketch(_SITE_W_M, _SITE_H_M)
        sketch.fence(_SITE_FENCE_M)
        # three bays on the west wall, open to the east; the outer two hold parked tractors
        half = _SITE_BAY_INNER_M / 2
        for k, centre in enumerate(_SITE_BAY_CENTRES_Y_M):
            sketch.box(_SITE_FENCE_M, centre - half - _SITE_BAY_WALL_M, _SITE_BAY_DEPTH_M, centre - half)
            sketch.box(_SITE_FENCE_M, centre + half, _SITE_BAY_DEPTH_M, centre + half + _SITE_BAY_WALL_M)
            if k != 1:
                sketch.box(0.8, centre - 0.9, 5.0, centre + 0.9)
        # two buildings in the middle of the yard: passages south, between them (gated) and north
        x0, x1 = _SITE_BUILDINGS_X_M
        sketch.box(x0, _SITE_SOUTH_PASSAGE_Y_M[1], x1, _SITE_MIDDLE_PASSAGE_Y_M[0])
        sketch.box(x0, _SITE_MIDDLE_PASSAGE_Y_M[1], x1, _SITE_NORTH_PASSAGE_Y_M[0])
        # the loading dock on the east wall: two platforms with a recess between them
        sketch.box(_SITE_DOCK_X_M, _SITE_FENCE_M, _SITE_W_M, _SITE_RECESS_Y_M[0])
        sketch.box(_SITE_DOCK_X_M, _SITE_RECESS_Y_M[1], _SITE_W_M, _SITE_H_M)
        # a few pallet stacks in the open yard, clear of the routes
        for px, py in ((10.0, 24.0), (12.0, 30.0), (37.0, 24.0), (38.5, 5.0)):
            sketch.box(px, py, px + 1.2, py + 1.2)
        return sketch

    def gate(sketch: _Sketch) -> None:
        sketch.box(_SITE_GATE_X_M[0], _SITE_MIDDLE_PASSAGE_Y_M[0], _SITE_GATE_X_M[1], _SITE_MIDDLE_PASSAGE_Y_M[1])

    def truck(sketch: _Sketch) -> None:
        # a trailer (2.5 m wide) parked across the south passage, from the fence to the building
        sketch.box(22.5, _SITE_SOUTH_PASSAGE_Y_M[0], 25.0, _SITE_SOUTH_PASSAGE_Y_M[1])

    first = base()
    gate(first)
    second = base()
    gate(second)
    truck(second)
    third = base()
    truck(third)
    grids = tuple((map_id, sketch.grid()) for map_id, sketch in
                  (("site", first), ("site+truck", second), ("site+truck+gate_open", third)))
    return DriveSite(
        description="50 x 34 m yard: leave a bay in reverse, cross the yard round two buildings, "
                    "reach the loading dock",
        vehicle=_site_vehicle(),
        grids=grids,
        start=(4.4, _SITE_BAY_CENTRES_Y_M[1], math.pi),
        goal=(45.2, sum(_SITE_RECESS_Y_M) / 2, 0.0),
        truck_below_y_m=8.0,
        gate_above_y_m=12.0,
        buildings_x_m=_SITE_BUILDINGS_X_M,
    )
