"""The plan picture: a PNG of the map, the inflated margin, the path and the vehicle along it.

Layout, top to bottom: a title band (title, an optional "no path" banner, note lines),
the map scaled so its longer side is 1200-1600 px (nearest neighbour, so every cell stays
a crisp square), and a band with the legend and a scale bar. Drawing is OpenCV only:
anti-aliased lines with sub-pixel vertices, Hershey simplex text, dark on light.

Colours (named in BGR order, as OpenCV stores pixels):

=====================  ==============  =======================================================
what                   colour          drawn as
=====================  ==============  =======================================================
free cell              white           map
occupied cell          near-black      map
unknown cell           mid grey        map
inflated margin        pale orange     map: blocked for the reference point, free on the map
forward driving        blue            thick line
reverse driving        red             thick line
gear change            yellow dot      black ring, at the pose where the gear flips
vehicle outline        dark teal       thin; rectangle footprint, or disc with a heading tick
start                  green           arrow along the heading, with the vehicle outline
goal                   magenta         arrow, vehicle outline and the goal tolerance circle
changed cell           cyan            map, blended: cells whose class changed (replay report)
=====================  ==============  =======================================================

:func:`plan_picture_image` returns the picture as an array (for a caller that composes
pictures, e.g. :func:`side_by_side`); :func:`render_plan_picture` writes it as a PNG.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Iterable, Sequence

import cv2
import numpy as np

__all__ = [
    "FORWARD_BGR",
    "FREE_BGR",
    "GEAR_CHANGE_BGR",
    "GOAL_BGR",
    "MARGIN_BGR",
    "OCCUPIED_BGR",
    "OUTLINE_BGR",
    "PictureError",
    "REVERSE_BGR",
    "START_BGR",
    "UNKNOWN_BGR",
    "CHANGED_BGR",
    "encode_png",
    "plan_picture_image",
    "render_plan_picture",
    "side_by_side",
]

FREE_BGR = (255, 255, 255)
OCCUPIED_BGR = (40, 40, 40)
UNKNOWN_BGR = (150, 150, 150)
MARGIN_BGR = (170, 214, 255)  # pale orange
FORWARD_BGR = (220, 90, 20)  # blue
REVERSE_BGR = (30, 30, 215)  # red
GEAR_CHANGE_BGR = (0, 215, 255)  # yellow
OUTLINE_BGR = (120, 110, 0)  # dark teal
START_BGR = (0, 160, 0)  # green
GOAL_BGR = (200, 0, 200)  # magenta
CHANGED_BGR = (255, 230, 0)  # cyan
_CHANGED_ALPHA = 0.7  # share of the highlight colour in a changed cell

DEFAULT_GOAL_TOLERANCE_M = 0.2
"""Radius of the goal tolerance circle when the caller gives none (docs/files.md, "Path JSON": 0.2 m)."""

_TEXT_BGR = (20, 20, 20)
_NOTE_BGR = (60, 60, 60)
_BANNER_BGR = (0, 0, 190)
_BAND_BGR = (250, 250, 250)
_LEGEND_BGR = (238, 238, 238)
_FRAME_BGR = (120, 120, 120)

_FONT = cv2.FONT_HERSHEY_SIMPLEX
_MAP_LONG_SIDE_PX = 1400  # aim; an integer cells-to-pixels factor is used when it lands in range
_MAP_LONG_SIDE_RANGE_PX = (1200, 1600)
_PAD_PX = 24
_MIN_CANVAS_WIDTH_PX = 1100
_MAX_NOTE_LINES = 5
_SCALE_BAR_MAX_PX = 320.0
_SHIFT_BITS = 4  # sub-pixel bits for OpenCV vertices
_NICE_LENGTHS_M = (0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000)


class PictureError(OSError):
    """The plan picture cannot be written where asked (missing folder, not .png, no permission)."""


def _map_scale_px(rows: int, cols: int) -> float:
    """Pixels per cell edge so that the longer map side is 1200-1600 px."""
    longest = max(rows, cols)
    whole = round(_MAP_LONG_SIDE_PX / longest)
    low, high = _MAP_LONG_SIDE_RANGE_PX
    if whole >= 1 and low <= whole * longest <= high:
        return float(whole)
    return _MAP_LONG_SIDE_PX / longest


class _Canvas:
    """The picture being drawn, with the one world-to-pixel conversion of this module."""

    def __init__(self, grid, top_px: int, bottom_px: int) -> None:
        self.grid = grid
        self.scale_px = _map_scale_px(grid.rows, grid.cols)
        self.map_w = int(round(grid.cols * self.scale_px))
        self.map_h = int(round(grid.rows * self.scale_px))
        self.width = max(self.map_w + 2 * _PAD_PX, _MIN_CANVAS_WIDTH_PX)
        self.height = top_px + self.map_h + bottom_px
        self.map_left = (self.width - self.map_w) // 2
        self.map_top = top_px
        self.image = np.full((self.height, self.width, 3), _BAND_BGR, np.uint8)
        self.px_per_m = self.scale_px / grid.cell_size_m

    def to_px(self, xy_m: np.ndarray) -> np.ndarray:
        """Continuous pixel coordinates (N, 2) (u right, v down; integers at pixel centres)."""
        xy = np.asarray(xy_m, np.float64).reshape(-1, 2)
        ox, oy = self.grid.origin_m
        u = self.map_left + (xy[:, 0] - ox) * self.px_per_m - 0.5
        v = self.map_top + (self.grid.rows * self.scale_px - (xy[:, 1] - oy) * self.px_per_m) - 0.5
        return np.column_stack((u, v))

    @staticmethod
    def fixed(px: np.ndarray) -> np.ndarray:
        """Pixel coordinates as int32 with ``_SHIFT_BITS`` fraction bits, shape (N, 2)."""
        return np.round(np.asarray(px) * (1 << _SHIFT_BITS)).astype(np.int32).reshape(-1, 2)

    def polyline(self, xy_m: np.ndarray, colour, thickness: int) -> None:
        pts = self.fixed(self.to_px(xy_m))
        cv2.polylines(self.image, [pts.reshape(-1, 1, 2)], False, colour, thickness, cv2.LINE_AA, _SHIFT_BITS)

    def polygon(self, xy_m: np.ndarray, colour, thickness: int) -> None:
        pts = self.fixed(self.to_px(xy_m))
        cv2.polylines(self.image, [pts.reshape(-1, 1, 2)], True, colour, thickness, cv2.LINE_AA, _SHIFT_BITS)

    def circle(self, x_m: float, y_m: float, radius_px: float, colour, thickness: int) -> None:
        centre = self.fixed(self.to_px([x_m, y_m]))[0]
        radius = int(round(radius_px * (1 << _SHIFT_BITS)))
        cv2.circle(self.image, (int(centre[0]), int(centre[1])), radius, colour, thickness, cv2.LINE_AA, _SHIFT_BITS)

    def arrow(self, pose: Sequence[float], length_px: float, colour, thickness: int) -> None:
        x, y, heading = pose
        length_m = length_px / self.px_per_m
        tip = (x + length_m * math.cos(heading), y + length_m * math.sin(heading))
        base_px, tip_px = self.fixed(self.to_px([[x, y], tip]))
        cv2.arrowedLine(
            self.image, tuple(int(v) for v in base_px), tuple(int(v) for v in tip_px), colour, thickness,
            cv2.LINE_AA, _SHIFT_BITS, tipLength=0.35,
        )
        self.circle(x, y, thickness, colour, -1)


def _text(image: np.ndarray, text: str, org: tuple[int, int], scale: float, colour, thickness: int = 1) -> None:
    cv2.putText(image, text, org, _FONT, scale, colour, thickness, cv2.LINE_AA)


def _fit_text(text: str, scale: float, thickness: int, width_px: int) -> str:
    """``text`` shortened with '...' until it fits in ``width_px``."""
    if cv2.getTextSize(text, _FONT, scale, thickness)[0][0] <= width_px:
        return text
    while text and cv2.getTextSize(text + "...", _FONT, scale, thickness)[0][0] > width_px:
        text = text[:-1]
    return text + "..."


def _check_pose(pose: object, name: str) -> tuple[float, float, float]:
    try:
        values = tuple(float(v) for v in pose)  # type: ignore[union-attr]
    except (TypeError, ValueError):
        raise ValueError(f"picture {name} must be (x_m, y_m, heading_rad), got {pose!r}") from None
    if len(values) != 3 or not all(math.isfinite(v) for v in values):
        raise ValueError(f"picture {name} must be three finite numbers (x_m, y_m, heading_rad), got {pose!r}")
    return values  # type: ignore[return-value]


def _check_poses(poses: object) -> np.ndarray:
    array = np.asarray(poses, dtype=np.float64)
    if array.ndim != 2 or array.shape[1] != 4 or array.shape[0] < 1:
        raise ValueError(f"picture poses must be an (N, 4) array of x_m, y_m, heading_rad, gear; got shape {array.shape}")
    if not np.all(np.isfinite(array)):
        raise ValueError("picture poses must all be finite numbers")
    if not np.all(np.isin(array[:, 3], (-1.0, 1.0))):
        raise ValueError("picture poses: gear (column 3) must be +1 (forward) or -1 (reverse)")
    return array


def _check_out_path(out_path: str | Path) -> Path:
    path = Path(out_path)
    if path.suffix.lower() != ".png":
        raise PictureError(f"picture path {path} must end in .png (the picture is always a PNG)")
    if not path.parent.is_dir():
        raise PictureError(f"cannot write picture {path}: folder {path.parent} does not exist; create it first")
    return path


def _map_raster(inflated, width_px: int, height_px: int) -> np.ndarray:
    """Colour image (height_px, width_px, 3) of the cell classes, inflated margin tinted.

    Cells are scaled as class codes by nearest neighbour, then coloured, so a large map
    costs one uint8 array, not three. Shrunk maps (cells smaller than a pixel) may drop
    walls thinner than a pixel.
    """
    from veer.maps import FREE, OCCUPIED  # deferred: picture users may not need the map package otherwise

    grid = inflated.grid
    # Codes index the palette: 0 unknown, 1 free, 2 occupied, 3 inflated margin.
    codes = np.zeros((grid.rows, grid.cols), np.uint8)
    codes[grid.classes == FREE] = 1
    codes[grid.classes == OCCUPIED] = 2
    codes[np.asarray(inflated.blocked, bool) & ~np.asarray(grid.blocked, bool)] = 3
    palette = np.array([UNKNOWN_BGR, FREE_BGR, OCCUPIED_BGR, MARGIN_BGR], np.uint8)
    scaled = cv2.resize(codes, (width_px, height_px), interpolation=cv2.INTER_NEAREST)
    return palette[scaled]


def _draw_vehicle(canvas: _Canvas, vehicle, pose: Sequence[float], colour, thickness: int) -> None:
    """Vehicle footprint at ``pose``: the rectangle, or the disc with a tick along the heading."""
    x, y, heading = pose
    if vehicle.has_rectangle:
        corners = np.asarray(vehicle.footprint_corners(x, y, heading), np.float64)
        canvas.polygon(corners, colour, thickness)
        front_mid = (corners[1] + corners[2]) / 2
        canvas.polyline(np.array([[x, y], front_mid]), colour, thickness)
    else:
        radius_m = float(vehicle.radius_m)
        canvas.circle(x, y, max(radius_m * canvas.px_per_m, 2.0), colour, thickness)
        tip = (x + radius_m * math.cos(heading), y + radius_m * math.sin(heading))
        canvas.polyline(np.array([[x, y], tip]), colour, thickness)


def _outline_indices(poses: np.ndarray, vehicle_extent_m: float) -> list[int]:
    """Pose indices for the vehicle outlines: every few metres and at each gear change.

    Outlines sit about a twelfth of the path apart, 2-8 m, and never closer than 1.25 vehicle
    lengths so they do not merge into a chain.
    """
    step_m = np.hypot(*np.diff(poses[:, :2], axis=0).T)
    travelled_m = np.concatenate(([0.0], np.cumsum(step_m)))
    spacing_m = max(min(max(travelled_m[-1] / 12.0, 2.0), 8.0), 1.25 * vehicle_extent_m)
    marks = np.searchsorted(travelled_m, np.arange(spacing_m, travelled_m[-1] - spacing_m / 2, spacing_m))
    cusps = np.flatnonzero(poses[1:, 3] != poses[:-1, 3])
    return sorted(set(int(i) for i in marks) | set(int(i) for i in cusps))


def _draw_path(canvas: _Canvas, poses: np.ndarray, thickness: int) -> list[int]:
    """Draw the path in gear-coloured runs; return the indices of the gear-change poses."""
    gears = poses[:, 3]
    flips = np.flatnonzero(gears[1:] != gears[:-1])  # pose i ends one gear, pose i + 1 starts the next
    bounds = [0, *(int(i) for i in flips), len(poses) - 1]
    for a, b in zip(bounds[:-1], bounds[1:]):
        run = poses[a : b + 1, :2]
        colour = FORWARD_BGR if gears[min(a + 1, b)] > 0 else REVERSE_BGR
        if len(run) == 1:
            canvas.circle(run[0, 0], run[0, 1], thickness / 2, colour, -1)
        else:
            canvas.polyline(run, colour, thickness)
    return [int(i) for i in flips]


def _choose_scale_bar_m(px_per_m: float, max_px: float) -> float:
    """Longest round length (1, 2, 5 x 10^k metres) whose bar fits in ``max_px``."""
    fitting = [length for length in _NICE_LENGTHS_M if length * px_per_m <= max_px]
    return float(fitting[-1] if fitting else _NICE_LENGTHS_M[0])


def _format_m(length_m: float) -> str:
    return f"{length_m:g} m"


def _legend_items(inflated, changed: bool = False) -> list[tuple[str, str]]:
    items = [
        ("free", "free"),
        ("occupied", "occupied"),
        ("unknown", "unknown"),
        ("margin", f"inflated margin ({round(inflated.radius_m, 2):g} m)"),
        ("forward", "forward"),
        ("reverse", "reverse"),
        ("gear", "gear change"),
        ("outline", "vehicle outline"),
        ("start", "start"),
        ("goal", "goal, tolerance"),
    ]
    if changed:
        items.append(("changed", "changed cells"))
    return items


_SWATCH_W = 34
_ITEM_H = 30
_ITEM_GAP = 26
_LEGEND_FONT = 0.6
_TITLE_FONT = 1.0
_NOTE_FONT = 0.7


def _layout_legend(items: list[tuple[str, str]], width_px: int) -> list[list[tuple[str, str, int]]]:
    """Split legend items into rows that fit ``width_px``; each entry carries its width."""
    rows: list[list[tuple[str, str, int]]] = [[]]
    used = 0
    for key, label in items:
        w = _SWATCH_W + 8 + cv2.getTextSize(label, _FONT, _LEGEND_FONT, 1)[0][0]
        if rows[-1] and used + w > width_px:
            rows.append([])
            used = 0
        rows[-1].append((key, label, w))
        used += w + _ITEM_GAP
    return rows


def _draw_swatch(image: np.ndarray, key: str, x: int, y_mid: int, line_px: int) -> None:
    x0, x1 = x, x + _SWATCH_W
    box = ((x0 + 4, y_mid - 9), (x1 - 4, y_mid + 9))
    fills = {"free": FREE_BGR, "occupied": OCCUPIED_BGR, "unknown": UNKNOWN_BGR, "margin": MARGIN_BGR,
             "changed": CHANGED_BGR}
    if key in fills:
        cv2.rectangle(image, box[0], box[1], fills[key], -1)
        cv2.rectangle(image, box[0], box[1], _FRAME_BGR, 1)
    elif key in ("forward", "reverse"):
        colour = FORWARD_BGR if key == "forward" else REVERSE_BGR
        cv2.line(image, (x0 + 2, y_mid), (x1 - 2, y_mid), colour, line_px, cv2.LINE_AA)
    elif key == "gear":
        cv2.circle(image, (x0 + _SWATCH_W // 2, y_mid), 8, GEAR_CHANGE_BGR, -1, cv2.LINE_AA)
        cv2.circle(image, (x0 + _SWATCH_W // 2, y_mid), 8, (0, 0, 0), 2, cv2.LINE_AA)
    elif key == "outline":
        cv2.rectangle(image, (x0 + 3, y_mid - 7), (x1 - 3, y_mid + 7), OUTLINE_BGR, 1, cv2.LINE_AA)
        cv2.line(image, (x0 + 10, y_mid), (x1 - 3, y_mid), OUTLINE_BGR, 1, cv2.LINE_AA)
    elif key in ("start", "goal"):
        colour = START_BGR if key == "start" else GOAL_BGR
        cv2.arrowedLine(image, (x0 + 4, y_mid), (x1 - 2, y_mid), colour, 3, cv2.LINE_AA, tipLength=0.4)
        if key == "goal":
            cv2.circle(image, (x0 + 4, y_mid), 7, colour, 1, cv2.LINE_AA)


def render_plan_picture(
    out_path: str | Path,
    inflated,
    vehicle,
    start: Sequence[float],
    goal: Sequence[float],
    poses: np.ndarray | None = None,
    *,
    title: str = "",
    notes: Iterable[str] = (),
    goal_tolerance_m: float = DEFAULT_GOAL_TOLERANCE_M,
    changed_cells: np.ndarray | None = None,
) -> Path:
    """Draw the map, the inflated margin, start, goal and (when given) the path as a PNG.

    Parameters
    ----------
    out_path : str or Path
        Where to write; must end in ``.png`` and its folder must exist.
    inflated : InflatedGrid
        The inflated map (``inflated.grid`` the map itself, ``inflated.blocked`` (rows, cols)
        bool the cells the reference point may not occupy).
    vehicle : Vehicle
        Its footprint is drawn at the start, the goal and every few metres along the path.
    start, goal : sequence of float
        ``(x_m, y_m, heading_rad)``.
    poses : ndarray, shape (N, 4), optional
        ``x_m, y_m, heading_rad, gear`` per pose, gear +1 forward or -1 reverse (the gear of
        the step arriving at the pose); None when no path was found.
    title : str
        First line of the picture.
    notes : iterable of str
        Up to five lines under the title (more are summarised). Without a path, a note
        starting with "no path" becomes the red banner; without such a note the banner
        just says "no path".
    goal_tolerance_m : float
        Radius of the circle drawn round the goal position.
    changed_cells : ndarray of bool, shape (rows, cols), optional
        Cells to highlight (cyan, blended over the map), e.g. those whose class changed
        since an earlier grid; a legend entry is added when given.

    Returns
    -------
    Path
        ``out_path``.

    Raises
    ------
    PictureError
        When ``out_path`` does not end in .png, its folder does not exist, or writing fails.
    ValueError
        When ``start``, ``goal`` or ``poses`` have the wrong shape or non-finite values.
    """
    path = _check_out_path(out_path)
    image = plan_picture_image(inflated, vehicle, start, goal, poses, title=title, notes=notes,
                               goal_tolerance_m=goal_tolerance_m, changed_cells=changed_cells)
    try:
        path.write_bytes(encode_png(image))
    except OSError as error:
        raise PictureError(f"cannot write picture {path}: {error.strerror or error}") from None
    return path


def encode_png(image: np.ndarray) -> bytes:
    """The bytes of ``image`` (BGR uint8) as a PNG file."""
    ok, encoded = cv2.imencode(".png", image)
    if not ok:  # pragma: no cover - OpenCV always encodes a uint8 BGR image
        raise PictureError("cannot encode the picture as PNG")
    return encoded.tobytes()


def plan_picture_image(
    inflated,
    vehicle,
    start: Sequence[float],
    goal: Sequence[float],
    poses: np.ndarray | None = None,
    *,
    title: str = "",
    notes: Iterable[str] = (),
    goal_tolerance_m: float = DEFAULT_GOAL_TOLERANCE_M,
    changed_cells: np.ndarray | None = None,
) -> np.ndarray:
    """The picture of :func:`render_plan_picture` as a BGR uint8 array, not written anywhere."""
    start = _check_pose(start, "start")
    goal = _check_pose(goal, "goal")
    path_poses = None if poses is None else _check_poses(poses)
    notes = [str(n) for n in notes]
    banner = None
    if path_poses is None:
        banner = next((n for n in notes if n.lower().startswith("no path")), "no path")
        notes = [n for n in notes if n is not banner]
    if len(notes) > _MAX_NOTE_LINES:
        notes = notes[: _MAX_NOTE_LINES - 1] + [f"(+{len(notes) - _MAX_NOTE_LINES + 1} more notes)"]

    grid = inflated.grid
    scale_px = _map_scale_px(grid.rows, grid.cols)
    canvas_w = max(int(round(grid.cols * scale_px)) + 2 * _PAD_PX, _MIN_CANVAS_WIDTH_PX)
    changed = None
    if changed_cells is not None:
        changed = np.asarray(changed_cells, bool)
        if changed.shape != (grid.rows, grid.cols):
            raise ValueError(f"picture changed_cells must have the grid's shape {(grid.rows, grid.cols)}, "
                             f"got {changed.shape}")
    legend_rows = _layout_legend(_legend_items(inflated, changed is not None), canvas_w - 2 * _PAD_PX - int(_SCALE_BAR_MAX_PX) - 40)
    top_px = 18 + 36 + (42 if banner else 0) + 30 * len(notes) + 14
    bottom_px = 16 + len(legend_rows) * _ITEM_H + 12 + 18
    canvas = _Canvas(grid, top_px, bottom_px)
    image = canvas.image
    text_w = canvas.width - 2 * _PAD_PX

    # Map: cells upscaled as crisp squares, then a thin frame round it.
    raster = _map_raster(inflated, canvas.map_w, canvas.map_h)
    if changed is not None and changed.any():
        mask = cv2.resize(changed.astype(np.uint8), (canvas.map_w, canvas.map_h),
                          interpolation=cv2.INTER_NEAREST).astype(bool)
        tint = np.array(CHANGED_BGR, np.float64)
        raster[mask] = np.round(_CHANGED_ALPHA * tint + (1 - _CHANGED_ALPHA) * raster[mask]).astype(np.uint8)
    image[canvas.map_top : canvas.map_top + canvas.map_h, canvas.map_left : canvas.map_left + canvas.map_w] = raster
    cv2.rectangle(
        image,
        (canvas.map_left - 1, canvas.map_top - 1),
        (canvas.map_left + canvas.map_w, canvas.map_top + canvas.map_h),
        _FRAME_BGR,
        1,
    )

    long_side = max(canvas.map_w, canvas.map_h)
    path_px = max(3, int(round(long_side / 350)))
    outline_px = 1 if long_side < 1500 else 2

    # Outlines under the path, the path, gear changes, then start and goal on top.
    if path_poses is not None:
        extent_m = float(vehicle.length_m) if vehicle.has_rectangle else 2.0 * float(vehicle.radius_m)
        for i in _outline_indices(path_poses, extent_m):
            _draw_vehicle(canvas, vehicle, path_poses[i, :3], OUTLINE_BGR, outline_px)
        for i in _draw_path(canvas, path_poses, path_px):
            x, y = path_poses[i, :2]
            canvas.circle(x, y, path_px + 5, GEAR_CHANGE_BGR, -1)
            canvas.circle(x, y, path_px + 5, (0, 0, 0), 2)
    _draw_vehicle(canvas, vehicle, start, START_BGR, outline_px + 1)
    _draw_vehicle(canvas, vehicle, goal, GOAL_BGR, outline_px + 1)
    # Never smaller than the arrow's base dot, so the circle stays visible round it.
    canvas.circle(goal[0], goal[1], max(goal_tolerance_m * canvas.px_per_m, path_px + 6.0), GOAL_BGR, 2)
    # Arrows reach past the vehicle's front so they read outside its outline.
    front_m = (float(vehicle.length_m) - vehicle.rear_overhang_or_default_m) if vehicle.has_rectangle else float(vehicle.radius_m)
    arrow_px = min(max((front_m + 1.0) * canvas.px_per_m, 45.0), 130.0)
    canvas.arrow(start, arrow_px, START_BGR, path_px + 1)
    canvas.arrow(goal, arrow_px, GOAL_BGR, path_px + 1)

    # Title band.
    y = 18 + 26
    _text(image, _fit_text(title, _TITLE_FONT, 2, text_w), (_PAD_PX, y), _TITLE_FONT, _TEXT_BGR, 2)
    y += 10
    if banner:
        y += 34
        _text(image, _fit_text(banner, _TITLE_FONT, 2, text_w), (_PAD_PX, y), _TITLE_FONT, _BANNER_BGR, 2)
        y += 8
    for note in notes:
        y += 30
        _text(image, _fit_text(note, _NOTE_FONT, 1, text_w), (_PAD_PX, y), _NOTE_FONT, _NOTE_BGR, 1)

    # Legend box, bottom left.
    y0 = canvas.map_top + canvas.map_h + 16
    legend_w = max(sum(w for _, _, w in row) + _ITEM_GAP * (len(row) - 1) for row in legend_rows) + 20
    cv2.rectangle(image, (_PAD_PX, y0), (_PAD_PX + legend_w, y0 + len(legend_rows) * _ITEM_H + 12), _LEGEND_BGR, -1)
    cv2.rectangle(image, (_PAD_PX, y0), (_PAD_PX + legend_w, y0 + len(legend_rows) * _ITEM_H + 12), _FRAME_BGR, 1)
    for r, row in enumerate(legend_rows):
        x = _PAD_PX + 10
        y_mid = y0 + 6 + r * _ITEM_H + _ITEM_H // 2
        for key, label, w in row:
            _draw_swatch(image, key, x, y_mid, path_px)
            _text(image, label, (x + _SWATCH_W + 8, y_mid + 6), _LEGEND_FONT, _TEXT_BGR, 1)
            x += w + _ITEM_GAP

    # Scale bar, bottom right: a round length in metres.
    bar_m = _choose_scale_bar_m(canvas.px_per_m, min(_SCALE_BAR_MAX_PX, 0.25 * canvas.map_w))
    bar_px = int(round(bar_m * canvas.px_per_m))
    x1 = canvas.width - _PAD_PX - 10
    x0 = x1 - bar_px
    yb = y0 + 16
    cv2.rectangle(image, (x0, yb), (x1, yb + 10), (0, 0, 0), -1)
    cv2.rectangle(image, (x0 + bar_px // 2, yb + 2), (x1 - 2, yb + 8), (255, 255, 255), -1)
    for x in (x0, x1):
        cv2.line(image, (x, yb - 5), (x, yb + 10), (0, 0, 0), 2)
    label = _format_m(bar_m)
    (tw, _), _ = cv2.getTextSize(label, _FONT, _NOTE_FONT, 2)
    _text(image, label, ((x0 + x1 - tw) // 2, yb + 36), _NOTE_FONT, _TEXT_BGR, 2)

    return image


def side_by_side(images: Sequence[np.ndarray], labels: Sequence[str] = (), gap_px: int = 16) -> np.ndarray:
    """Pictures next to each other, tops aligned, each under a label band (e.g. "A", "B")."""
    if not images:
        raise ValueError("side_by_side needs at least one picture")
    band_px = 44 if any(labels) else 0
    height = max(image.shape[0] for image in images) + band_px
    width = sum(image.shape[1] for image in images) + gap_px * (len(images) - 1)
    out = np.full((height, width, 3), _BAND_BGR, np.uint8)
    x = 0
    for i, image in enumerate(images):
        out[band_px : band_px + image.shape[0], x : x + image.shape[1]] = image
        if i < len(labels) and labels[i]:
            _text(out, _fit_text(labels[i], _TITLE_FONT, 2, image.shape[1] - 2 * _PAD_PX), (_PAD_PX + x, 32),
                  _TITLE_FONT, _TEXT_BGR, 2)
        x += image.shape[1]
        if i < len(images) - 1:
            out[:, x : x + gap_px] = _FRAME_BGR
            x += gap_px
    return out
