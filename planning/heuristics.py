"""The two heuristics of hybrid A* (Dolgov, Thrun, Montemerlo & Diebel, AAAI STAIR 2008).

* **Holonomic with obstacles**: shortest 8-connected distance to the goal over a coarse
  copy of the inflated grid (a coarse cell is open when any of its fine cells is open,
  so connectivity is never under-estimated and an unreachable goal is proven so).
  Computed by a vectorised label-correcting wavefront (Bellman-Ford on the frontier).
* **Non-holonomic without obstacles**: the Reeds-Shepp (reverse allowed) or Dubins
  (forward only) length, read from a table in units of the turning radius, computed
  once per process and kept in a disk cache (the paper also precomputes it offline).

Each is a lower bound obtained by dropping one set of constraints (LaValle, *Planning
Algorithms*, 2006, section 15.1), so their maximum guides the search past
both wrong headings and dead ends. The table is read at the nearest entry and the grid
distance uses octile steps, so the combination is close to, but not strictly, admissible:
it can over-estimate by a fraction of a grid step or a few percent of the length.
"""

from __future__ import annotations

import logging
import math
import os
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from veer.planning import curves

__all__ = ["coarse_max", "HolonomicField", "holonomic_field", "TurningTable", "turning_table", "build_turning_table", "coarse_open_mask"]

log = logging.getLogger("veer.planning")

_SQRT2 = math.sqrt(2.0)


def coarse_max(values: np.ndarray, factor: int) -> np.ndarray:
    """Maximum over each factor x factor block (blocks at the bottom/right edge may be partial).

    A max filter anchored at the block's top-left corner (``cv2.dilate``), read at every
    ``factor``-th cell: the same as reshaping into blocks, an order of magnitude faster.
    """
    rows, cols = values.shape
    rows_c, cols_c = -(-rows // factor), -(-cols // factor)
    if factor == 1:
        return values.copy()
    if values.dtype == bool:
        source, fill = values.view(np.uint8), 0
    else:
        source = np.ascontiguousarray(values, dtype=np.float32)
        fill = float(np.finfo(np.float32).min)
    padded = np.full((rows_c * factor, cols_c * factor), fill, dtype=source.dtype)
    padded[:rows, :cols] = source
    kernel = np.ones((factor, factor), np.uint8)
    pooled = cv2.dilate(padded, kernel, anchor=(0, 0), borderType=cv2.BORDER_CONSTANT, borderValue=fill)
    out = pooled[::factor, ::factor]
    return out.astype(bool) if values.dtype == bool else out.astype(values.dtype)


def coarse_open_mask(blocked: np.ndarray, factor: int) -> np.ndarray:
    """(ceil(rows/f), ceil(cols/f)) bool: True where any fine cell of the block is open."""
    return coarse_max(~blocked, factor)


@dataclass(frozen=True)
class HolonomicField:
    """Distance to the goal (metres) on the coarse lattice; ``inf`` where unreachable.

    ``distance_m`` has shape (rows_c, cols_c), row 0 at the top like the map;
    ``lower_bound_m`` is the same, reduced by one coarse diagonal so it never exceeds the
    straight-line distance from any point of a cell to any point of the goal's cell.
    """

    cell_m: float
    distance_m: np.ndarray
    lower_bound_flat: np.ndarray

    def reachable(self, row: int, col: int) -> bool:
        return bool(np.isfinite(self.distance_m[row, col]))


def holonomic_field(open_mask: np.ndarray, goal_cell: tuple[int, int], cell_m: float) -> HolonomicField:
    """Octile distance from ``goal_cell`` over ``open_mask`` by a vectorised wavefront.

    Each round relaxes the 8 neighbours of every cell whose distance fell in the round
    before (label correcting); it ends when nothing improves, after about as many rounds as
    the longest shortest path has cells. Cost: O(cells x rounds / frontier share).
    """
    rows, cols = open_mask.shape
    width = cols + 2
    open_padded = np.zeros((rows + 2, width), dtype=bool)
    open_padded[1:-1, 1:-1] = open_mask
    open_flat = open_padded.ravel()
    dist = np.full(open_flat.size, np.inf)
    goal = (goal_cell[0] + 1) * width + goal_cell[1] + 1
    if open_flat[goal]:
        dist[goal] = 0.0
        frontier = np.array([goal], dtype=np.intp)
    else:
        frontier = np.empty(0, dtype=np.intp)
    steps = [(-width, 1.0), (width, 1.0), (-1, 1.0), (1, 1.0),
             (-width - 1, _SQRT2), (-width + 1, _SQRT2), (width - 1, _SQRT2), (width + 1, _SQRT2)]
    while frontier.size:
        base = dist[frontier]
        improved = []
        for offset, cost in steps:
            neighbours = frontier + offset
            candidate = base + cost
            better = open_flat[neighbours] & (candidate < dist[neighbours])
            if better.any():
                n = neighbours[better]
                np.minimum.at(dist, n, candidate[better])
                improved.append(n)
        frontier = np.unique(np.concatenate(improved)) if improved else np.empty(0, dtype=np.intp)
    dist2d = dist.reshape(rows + 2, width)[1:-1, 1:-1] * cell_m
    lower = np.maximum(dist2d - _SQRT2 * cell_m, 0.0)
    return HolonomicField(cell_m=cell_m, distance_m=dist2d, lower_bound_flat=np.ascontiguousarray(lower).ravel())


# --------------------------------------------------------------------------- turning table

_TABLE_VERSION = 1
_TABLE_RANGE = 6.0  # turning radii covered on each side of the goal
_TABLE_POS_STEP = 0.125  # turning radii
_TABLE_HEADINGS = 72
_tables: dict[str, "TurningTable"] = {}


@dataclass(frozen=True)
class TurningTable:
    """Shortest obstacle-free length for unit turning radius, by relative pose to the goal.

    ``lengths[iu, iv, ih]`` for u = iu * step (ahead of the goal, in its frame), v = iv * step
    (to its left) and heading ih * 2pi / bins relative to the goal. Reeds-Shepp tables hold
    u, v >= 0 only (the length is unchanged by reflection and time-flip, Reeds & Shepp 1990);
    Dubins tables hold u of both signs.
    """

    kind: str  # "reeds_shepp" | "dubins"
    pos_step: float
    heading_bins: int
    u_offset: int
    lengths: np.ndarray

    def spread(self, cells: int) -> "TurningTable":
        """The table's lower envelope over +-``cells`` entries in u, v and heading.

        Reading the envelope at the entry nearest a pose gives a lower bound for every pose
        within ``cells`` entries of it, so a search may read it at a lattice cell's centre
        and still not over-estimate for poses anywhere in the cell (while the cell is
        smaller than ``cells`` table steps). The folds of the table (u = 0, v = 0) are
        padded with their mirror images so the envelope is right across them.
        """
        if cells <= 0:
            return self
        table = self.lengths
        n_h = self.heading_bins
        flip = (-np.arange(n_h)) % n_h  # heading index of -phi
        pad_v = np.concatenate((table[:, cells:0:-1][..., flip], table), axis=1)
        if self.kind == "reeds_shepp":
            padded = np.concatenate((pad_v[cells:0:-1][..., flip], pad_v), axis=0)
            u0 = cells
        else:
            edge_lo = np.repeat(pad_v[:1], cells, axis=0)
            padded = np.concatenate((edge_lo, pad_v), axis=0)
            u0 = cells
        edge_hi_u = np.repeat(padded[-1:], cells, axis=0)
        padded = np.concatenate((padded, edge_hi_u), axis=0)
        edge_hi_v = np.repeat(padded[:, -1:], cells, axis=1)
        padded = np.concatenate((padded, edge_hi_v), axis=1)
        nu, nv, _ = table.shape
        out = np.full(table.shape, np.inf, dtype=table.dtype)
        for du in range(-cells, cells + 1):
            for dv in range(-cells, cells + 1):
                window = padded[u0 + du : u0 + du + nu, cells + dv : cells + dv + nv]
                for dh in range(-cells, cells + 1):
                    np.minimum(out, np.roll(window, -dh, axis=2), out=out)
        return TurningTable(self.kind, self.pos_step, self.heading_bins, self.u_offset, out)

    def lookup_separable(self, u, v, phi) -> np.ndarray:
        """:meth:`lookup` for every combination of 2-D positions (u, v) and headings phi.

        ``u``, ``v`` of one shape S, ``phi`` 1-D of length H; returns shape S + (H,).
        The folding is worked out once per position and once per heading, so a window of
        lattice cells x heading bins costs one gather.
        """
        u = np.asarray(u, dtype=float)
        v = np.asarray(v, dtype=float)
        phi = np.asarray(phi, dtype=float)
        to_bin = self.heading_bins / (2 * math.pi)
        ih_pos = np.rint(phi * to_bin).astype(np.intp) % self.heading_bins
        ih_neg = np.rint(-phi * to_bin).astype(np.intp) % self.heading_bins
        if self.kind == "reeds_shepp":
            flip = (u < 0) ^ (v < 0)
            iu = np.rint(np.abs(u) / self.pos_step).astype(np.intp)
        else:
            # time-flip (u, phi) -> (-u, -phi), then reflect when v < 0 (negates phi again)
            flip = ~(v < 0)
            iu = np.rint(-u / self.pos_step).astype(np.intp) + self.u_offset
        iv = np.rint(np.abs(v) / self.pos_step).astype(np.intp)
        nu, nv, _ = self.lengths.shape
        inside = (iu >= 0) & (iu < nu) & (iv < nv)
        ih = np.where(flip[..., None], ih_neg, ih_pos)
        flat = (np.clip(iu, 0, nu - 1) * nv + np.clip(iv, 0, nv - 1)) * self.heading_bins
        value = self.lengths.reshape(-1)[flat[..., None] + ih]
        outside = ~inside
        if outside.any():
            value[outside] = np.hypot(u, v)[outside][:, None]
        return value

    def lookup(self, u, v, phi) -> np.ndarray:
        """Unit-radius length from poses (u, v, phi) in the goal frame to the goal.

        Outside the table the straight-line distance is returned (a lower bound).
        """
        u = np.asarray(u, dtype=float)
        v = np.asarray(v, dtype=float)
        phi = np.asarray(phi, dtype=float)
        if self.kind == "reeds_shepp":
            # L(pose -> goal) = L(goal -> pose); fold into u, v >= 0 by reflection/time-flip
            flip = (u < 0) ^ (v < 0)
            phi = np.where(flip, -phi, phi)
            iu = np.rint(np.abs(u) / self.pos_step).astype(np.intp)
        else:
            # forward from pose to goal = time-flipped reverse path from goal to pose
            u, phi = -u, -phi
            phi = np.where(v < 0, -phi, phi)
            iu = np.rint(u / self.pos_step).astype(np.intp) + self.u_offset
        iv = np.rint(np.abs(v) / self.pos_step).astype(np.intp)
        ih = np.rint(phi * (self.heading_bins / (2 * math.pi))).astype(np.intp) % self.heading_bins
        nu, nv, _ = self.lengths.shape
        inside = (iu >= 0) & (iu < nu) & (iv < nv)
        value = np.hypot(u, v)
        if inside.any():
            value = np.where(inside, self.lengths[np.clip(iu, 0, nu - 1), np.clip(iv, 0, nv - 1), ih], value)
        return value


def _cache_dir() -> Path:
    base = os.environ.get("VEER_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"), "veer"
    )
    return Path(base)


def _curves_digest() -> str:
    """Short hash of the curve code and table layout: a change to either makes a new cache file."""
    import hashlib

    digest = hashlib.sha256(Path(curves.__file__).read_bytes())
    digest.update(f"{_TABLE_VERSION}/{_TABLE_RANGE}/{_TABLE_POS_STEP}/{_TABLE_HEADINGS}".encode())
    return digest.hexdigest()[:12]


def build_turning_table(kind: str) -> TurningTable:
    """Compute the unit-radius table of ``kind`` ("reeds_shepp" or "dubins") from scratch, bypassing every cache."""
    n = int(round(_TABLE_RANGE / _TABLE_POS_STEP))
    values = np.arange(n + 1) * _TABLE_POS_STEP
    if kind == "reeds_shepp":
        us, u_offset = values, 0
    else:
        us, u_offset = np.concatenate((-values[:0:-1], values)), n
    heads = np.arange(_TABLE_HEADINGS) * (2 * math.pi / _TABLE_HEADINGS)
    uu, vv, hh = np.meshgrid(us, values, heads, indexing="ij")
    func = curves.reeds_shepp_lengths_unit if kind == "reeds_shepp" else curves.dubins_lengths_unit
    lengths = func(uu.ravel(), vv.ravel(), hh.ravel()).reshape(uu.shape).astype(np.float32)
    return TurningTable(kind, _TABLE_POS_STEP, _TABLE_HEADINGS, u_offset, lengths)


def turning_table(kind: str, spread: int = 0) -> TurningTable:
    """The unit-radius table of ``kind``, from memory, the disk cache, or built (about a second).

    ``spread`` > 0 returns the lower envelope of :meth:`TurningTable.spread` (kept in memory).
    """
    if spread:
        key = f"{kind}/spread{spread}"
        if key not in _tables:
            _tables[key] = turning_table(kind).spread(spread)
        return _tables[key]
    if kind in _tables:
        return _tables[kind]
    name = f"turning_{kind}_v{_TABLE_VERSION}_{_curves_digest()}_{_TABLE_RANGE}_{_TABLE_POS_STEP}_{_TABLE_HEADINGS}.npy"
    path = _cache_dir() / name
    n = int(round(_TABLE_RANGE / _TABLE_POS_STEP)) + 1
    shape = (n, n, _TABLE_HEADINGS) if kind == "reeds_shepp" else (2 * n - 1, n, _TABLE_HEADINGS)
    table = None
    try:
        lengths = np.load(path, allow_pickle=False)
        if lengths.shape == shape and lengths.dtype == np.float32 and np.isfinite(lengths).all():
            table = TurningTable(kind, _TABLE_POS_STEP, _TABLE_HEADINGS, 0 if kind == "reeds_shepp" else n - 1, lengths)
    except (OSError, ValueError):
        table = None
    if table is None:
        log.debug("building the %s turning table (%s entries)", kind, np.prod(shape))
        table = build_turning_table(kind)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp = path.with_suffix(f".{os.getpid()}.tmp.npy")
            np.save(tmp, table.lengths, allow_pickle=False)
            os.replace(tmp, path)
        except OSError as error:  # a read-only home only costs the rebuild next time
            log.debug("cannot cache the turning table at %s: %s", path, error)
    _tables[kind] = table
    return table
