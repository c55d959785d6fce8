"""Motion primitives of the search: arcs of the kinematic bicycle model, precomputed per heading.

Every primitive turns a whole number of heading bins, so a search started at heading
theta0 only ever holds headings theta0 + k * bin (positions stay continuous, as in hybrid
A*: Dolgov, Thrun, Montemerlo & Diebel, "Practical search techniques in path planning
for autonomous driving", AAAI STAIR workshop 2008). That lets each primitive's end point,
collision samples and circle centres be tabulated once per heading index k; expanding a
pose is then a few array additions and one lookup in the blocked mask.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from veer.planning.costs import CostModel
from veer.planning.errors import SearchSettingsError
from veer.planning.settings import SearchSettings
from veer.planning.vehicle import Vehicle

__all__ = ["Primitive", "PrimitiveTable", "arc_pose", "arc_poses", "build_primitive_table", "primitive_step_m"]


@dataclass(frozen=True)
class Primitive:
    """One motion: ``length_m`` signed (negative = reverse), curvature in 1/m (left > 0),
    ``turn_bins`` heading bins turned; ``rotation_rad`` non-zero only for turn-in-place motions."""

    length_m: float
    curvature_per_m: float
    turn_bins: int
    rotation_rad: float = 0.0

    @property
    def gear(self) -> int:
        return -1 if self.length_m < 0 else 1


def arc_pose(x_m: float, y_m: float, heading_rad: float, length_m: float, curvature_per_m: float):
    """End pose of a constant-curvature arc of signed length from (x, y, heading), closed form."""
    if abs(curvature_per_m) < 1e-12:
        return x_m + length_m * math.cos(heading_rad), y_m + length_m * math.sin(heading_rad), heading_rad
    turn = curvature_per_m * length_m
    h2 = heading_rad + turn
    return (
        x_m + (math.sin(h2) - math.sin(heading_rad)) / curvature_per_m,
        y_m - (math.cos(h2) - math.cos(heading_rad)) / curvature_per_m,
        h2,
    )


def arc_poses(x_m, y_m, heading_rad, length_m, curvature_per_m, fractions) -> np.ndarray:
    """Poses (len(fractions), 3) at the given fractions (0..1) along an arc, closed form."""
    t = np.asarray(fractions, dtype=float) * length_m
    if abs(curvature_per_m) < 1e-12:
        return np.column_stack(
            (x_m + t * math.cos(heading_rad), y_m + t * math.sin(heading_rad), np.full_like(t, heading_rad))
        )
    h = heading_rad + curvature_per_m * t
    return np.column_stack(
        (
            x_m + (np.sin(h) - math.sin(heading_rad)) / curvature_per_m,
            y_m - (np.cos(h) - math.cos(heading_rad)) / curvature_per_m,
            h,
        )
    )


@dataclass(frozen=True)
class PrimitiveTable:
    """Primitives and their offsets, tabulated for every heading index.

    Attributes (k = heading index, P = primitives, S = samples per primitive, C = circles)
    ----------
    primitives : tuple[Primitive, ...]
    step_m, heading_bin_rad, sample_step_m : float
    end_dx_m, end_dy_m : ndarray (K, P)
        End point of each primitive relative to the start position.
    end_heading_index : ndarray (K, P) int
    sample_dx_m, sample_dy_m, sample_heading_rad : ndarray (K, P, S)
        Poses along each primitive (excluding its start, including its end).
    circle_dx_m, circle_dy_m : ndarray (K, P, S * C)
        Covering-circle centres at every sample, relative to the start position.
    gears : ndarray (P,) int
    transition_cost : ndarray (P + 1, P)
        Cost of primitive p after primitive q (row P: the first motion of the search), from
        the one :class:`~veer.planning.costs.CostModel`.
    """

    primitives: tuple
    step_m: float
    heading_bin_rad: float
    sample_step_m: float
    end_dx_m: np.ndarray
    end_dy_m: np.ndarray
    end_heading_index: np.ndarray
    sample_dx_m: np.ndarray
    sample_dy_m: np.ndarray
    sample_heading_rad: np.ndarray
    circle_dx_m: np.ndarray
    circle_dy_m: np.ndarray
    gears: np.ndarray
    transition_cost: np.ndarray
    motion_length_m: np.ndarray


def primitive_step_m(vehicle: Vehicle, settings: SearchSettings, cell_size_m: float) -> float:
    """Arc length of one primitive: ``step_m``, or the arc that turns ``steer_levels`` bins at full lock.

    Turn-in-place bases drive straight steps of four cells (at least 0.5 m) by default.
    """
    if settings.step_m:
        return settings.step_m
    if vehicle.turns_in_place:
        return max(4 * cell_size_m, 0.5)
    return settings.steer_levels * settings.heading_bin_rad * vehicle.min_turn_radius_m


def _primitive_set(vehicle: Vehicle, settings: SearchSettings, cell_size_m: float) -> tuple[list[Primitive], float]:
    bin_rad = settings.heading_bin_rad
    directions = (1, -1) if settings.allow_reverse else (1,)
    prims: list[Primitive] = []
    if vehicle.turns_in_place:
        step = primitive_step_m(vehicle, settings, cell_size_m)
        for d in directions:
            prims.append(Primitive(d * step, 0.0, 0))
        for turn in (1, -1):
            prims.append(Primitive(0.0, 0.0, turn, rotation_rad=turn * bin_rad))
        return prims, step
    radius = vehicle.min_turn_radius_m
    step = primitive_step_m(vehicle, settings, cell_size_m)
    max_bins = int(math.floor(step / radius / bin_rad + 1e-9))
    if max_bins < 1:
        raise SearchSettingsError(
            f"step_m {step:.3f} is too short to turn one heading bin at the minimum turn radius "
            f"{radius:.3f} m; use step_m >= {radius * bin_rad:.3f} or fewer heading_bins"
        )
    levels = sorted({round(i * max_bins / settings.steer_levels) for i in range(-settings.steer_levels, settings.steer_levels + 1)})
    for d in directions:
        for m in levels:
            # heading change d * kappa * step = m bins  =>  kappa = m * bin / (d * step)
            prims.append(Primitive(d * step, m * bin_rad / (d * step), m))
    return prims, step


def build_primitive_table(
    vehicle: Vehicle,
    settings: SearchSettings,
    start_heading_rad: float,
    *,
    cell_size_m: float,
    sample_step_m: float,
    circle_offsets_m: np.ndarray,
    costs: CostModel | None = None,
) -> PrimitiveTable:
    """Tabulate the primitives for every heading index of a search from ``start_heading_rad``.

    ``costs`` defaults to the cost model of ``settings`` for ``vehicle``.
    """
    costs = costs or CostModel.for_vehicle(vehicle, settings)
    prims, step = _primitive_set(vehicle, settings, cell_size_m)
    bins = settings.heading_bins
    bin_rad = settings.heading_bin_rad
    reach_m = vehicle.bounding_radius_m
    counts = []
    for p in prims:
        travel = abs(p.length_m) + abs(p.rotation_rad) * reach_m
        counts.append(max(1, int(math.ceil(travel / sample_step_m - 1e-9))))
    samples = max(counts)
    n_prims = len(prims)
    circles = np.asarray(circle_offsets_m, dtype=float)
    headings = start_heading_rad + bin_rad * np.arange(bins)

    # local poses of each primitive, start heading 0; shorter primitives repeat their end
    local = np.zeros((n_prims, samples, 3))
    for i, p in enumerate(prims):
        frac = np.minimum(np.arange(1, samples + 1) / counts[i], 1.0)
        if p.rotation_rad:
            local[i, :, 2] = frac * p.rotation_rad
        else:
            local[i] = arc_poses(0.0, 0.0, 0.0, p.length_m, p.curvature_per_m, frac)
    c = np.cos(headings)[:, None, None]
    s = np.sin(headings)[:, None, None]
    lx, ly, lh = local[None, :, :, 0], local[None, :, :, 1], local[None, :, :, 2]
    sample_dx = c * lx - s * ly
    sample_dy = s * lx + c * ly
    sample_h = headings[:, None, None] + lh
    ch, sh = np.cos(sample_h)[..., None], np.sin(sample_h)[..., None]
    circle_dx = (sample_dx[..., None] + circles * ch).reshape(bins, n_prims, samples * len(circles))
    circle_dy = (sample_dy[..., None] + circles * sh).reshape(bins, n_prims, samples * len(circles))
    turn = np.array([p.turn_bins for p in prims])
    end_index = (np.arange(bins)[:, None] + turn[None, :]) % bins

    gears = np.array([p.gear for p in prims])
    length = np.array([abs(p.length_m) for p in prims])
    # wheel fraction of full lock, signed like the wheel angle (curvature per signed metre)
    max_curvature = vehicle.max_curvature_per_m
    wheel = [0.0 if p.rotation_rad or math.isinf(max_curvature) else p.curvature_per_m / max_curvature for p in prims]
    ends = [(p.gear if p.length_m else 0, u) for p, u in zip(prims, wheel)]
    base = np.array([costs.motion(p.length_m, p.gear, u) + costs.rotation(p.rotation_rad) for p, u in zip(prims, wheel)])
    transition = np.empty((n_prims + 1, n_prims))
    for q in range(n_prims):
        transition[q] = base + np.array([costs.junction(ends[q], end) for end in ends])
    transition[n_prims] = base  # the first motion of a search follows no motion
    return PrimitiveTable(
        primitives=tuple(prims),
        step_m=step,
        heading_bin_rad=bin_rad,
        sample_step_m=sample_step_m,
        end_dx_m=np.ascontiguousarray(sample_dx[:, :, -1]),
        end_dy_m=np.ascontiguousarray(sample_dy[:, :, -1]),
        end_heading_index=end_index,
        sample_dx_m=sample_dx,
        sample_dy_m=sample_dy,
        sample_heading_rad=sample_h,
        circle_dx_m=np.ascontiguousarray(circle_dx),
        circle_dy_m=np.ascontiguousarray(circle_dy),
        gears=gears,
        transition_cost=transition,
        motion_length_m=length,
    )
