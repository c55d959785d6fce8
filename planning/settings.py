"""Search settings: resolution, cost weights, budgets; every field carries its unit."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace

from veer.planning.errors import SearchSettingsError
from veer.planning.inputs import brief, finite_number

__all__ = ["SearchSettings", "DEFAULT_SEARCH_SETTINGS"]


@dataclass(frozen=True)
class SearchSettings:
    """How the hybrid A* search discretises and prices motion.

    Parameters
    ----------
    heading_bins : int
        Bins per full turn of the visited table (36 = 10-degree bins, common practice).
    steer_levels : int
        Steering values on each side of straight; the outermost is the vehicle's limit.
    step_m : float or None
        Arc length of one motion primitive. Default: the arc that turns ``steer_levels``
        heading bins at the minimum turn radius, so every primitive ends on a heading bin.
    lattice_cell_m : float or None
        Edge of a visited-table cell (rounded to a whole number of map cells). Default:
        about half of ``step_m``, so a straight step always leaves its parent's cell.
    allow_reverse : bool
        Reverse primitives and Reeds-Shepp (rather than Dubins) goal curves.
    reverse_cost_factor : float
        Multiplier (>= 1) on the length driven in reverse.
    gear_change_cost_m : float
        Extra cost, in metres of driving, for each change of gear.
    steer_cost_factor : float
        Extra cost per metre, scaled by |steering| / max steering.
    steer_change_cost_m : float
        Extra cost for a change of steering between primitives, scaled by the change / max.
    clearance_cost_factor : float
        Extra cost per metre driven with less than ``clearance_range_m`` of free space
        beyond the footprint, rising linearly to this factor at contact.
    clearance_range_m : float
        Free space beyond the footprint that counts as comfortable.
    max_expansions : int
        Expansion budget; past it the answer is ``no_path`` with ``budget_exhausted``.
    max_time_s : float
        Time budget for one search; past it ``no_path`` with ``deadline``.
    goal_curve_every : int
        Analytic expansion: try a Reeds-Shepp (Dubins) curve to the exact goal from the
        node being expanded every this many expansions when far from the goal; within
        ``goal_curve_near_m`` ever more often, every expansion at the goal.
    goal_curve_near_m : float or None
        Distance from the goal within which goal curves are tried more often (default 4
        min turn radii).
    goal_curve_candidates : int
        How many curves one try checks for collisions. Every word of the curve family is
        priced with the search's own cost model and the cheapest are checked first, so
        a curve that is short but mostly reversing loses to a slightly longer forward one.
    goal_curve_accept_ratio : float
        A collision-free goal curve ends the search at once when its total cost is at most
        this times the f-value of the node it leaves from (the least any open node
        promises); a dearer one waits in the open list as a finished path, taken when
        nothing cheaper remains, and is the answer if the budget runs out first.
    goal_tolerance_m, goal_tolerance_deg : float
        How close the last pose must come to the goal.
    output_step_m : float
        Largest spacing of poses in the output path (docs/files.md: at most 0.25 m).
    refine_on_exhaustion : bool
        When every pose reachable at this resolution has been tried (narrow passages
        defeat coarse steering), search once more with twice the heading bins and
        steering values (same step), within the same time budget.
    heuristic_weight : float
        Weight w >= 1 on h (weighted A*, Pohl 1970): the path costs at most w times the
        best at this resolution, and the search expands fewer nodes.
    use_heuristic_field, use_turning_heuristic, use_goal_curves : bool
        Switch off parts of the method; all off gives the plain textbook mode
        (Euclidean heuristic only) used as the benchmark baseline.
    smooth : bool
        Shorten the found path by replacing runs of primitives with single Reeds-Shepp
        (Dubins) curves where these are collision-free and no dearer; curvature stays
        within the limit.
    goal_test_lattice : bool
        Also stop on reaching the goal's lattice cell and heading bin, the goal test of
        grid A*. Without goal curves a search seldom lands within the goal tolerance,
        so the plain baseline uses this; its path then ends up to a lattice cell short of
        the goal and is for measurement only, not for driving.
    """

    heading_bins: int = 36
    steer_levels: int = 2
    step_m: float | None = None
    lattice_cell_m: float | None = None
    allow_reverse: bool = True
    reverse_cost_factor: float = 1.5
    gear_change_cost_m: float = 3.0
    steer_cost_factor: float = 0.05
    steer_change_cost_m: float = 0.1
    clearance_cost_factor: float = 0.3
    clearance_range_m: float = 1.0
    max_expansions: int = 200_000
    max_time_s: float = 10.0
    goal_curve_every: int = 8
    goal_curve_near_m: float | None = None
    goal_curve_candidates: int = 2
    goal_curve_accept_ratio: float = 1.4
    goal_tolerance_m: float = 0.2
    goal_tolerance_deg: float = 5.0
    output_step_m: float = 0.25
    heuristic_weight: float = 1.2
    refine_on_exhaustion: bool = True
    use_heuristic_field: bool = True
    use_turning_heuristic: bool = True
    use_goal_curves: bool = True
    goal_test_lattice: bool = False
    smooth: bool = True

    def __post_init__(self) -> None:
        def number(name: str, low: float, high: float = math.inf, *, optional: bool = False) -> None:
            value = getattr(self, name)
            if value is None and optional:
                return
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not finite_number(value):
                raise SearchSettingsError(f"search setting {name} must be a finite number, got {brief(value)}")
            if not low <= value <= high:
                raise SearchSettingsError(f"search setting {name} must be in [{low}, {high}], got {value}")

        for name in ("heading_bins", "steer_levels", "max_expansions", "goal_curve_every", "goal_curve_candidates"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int):
                raise SearchSettingsError(f"search setting {name} must be a whole number, got {value!r}")
        number("heading_bins", 8, 720)
        number("steer_levels", 1, 8)
        number("max_expansions", 1, 10**9)
        number("goal_curve_every", 1, 10**6)
        number("goal_curve_candidates", 1, 64)
        number("goal_curve_accept_ratio", 1.0, 100.0)
        number("step_m", 1e-3, 100.0, optional=True)
        number("lattice_cell_m", 1e-3, 100.0, optional=True)
        number("reverse_cost_factor", 1.0, 100.0)
        number("gear_change_cost_m", 0.0, 1e4)
        number("steer_cost_factor", 0.0, 100.0)
        number("steer_change_cost_m", 0.0, 1e4)
        number("clearance_cost_factor", 0.0, 100.0)
        number("clearance_range_m", 0.0, 100.0)
        number("max_time_s", 1e-3, 1e6)
        number("goal_curve_near_m", 0.0, 1e6, optional=True)
        number("goal_tolerance_m", 1e-6, 100.0)
        number("goal_tolerance_deg", 1e-6, 180.0)
        number("output_step_m", 1e-3, 0.25)
        number("heuristic_weight", 1.0, 10.0)
        for name in ("allow_reverse", "refine_on_exhaustion", "goal_test_lattice", "smooth", "use_heuristic_field", "use_turning_heuristic", "use_goal_curves"):
            if not isinstance(getattr(self, name), bool):
                raise SearchSettingsError(f"search setting {name} must be true or false")

    @property
    def heading_bin_rad(self) -> float:
        return 2.0 * math.pi / self.heading_bins

    def plain(self) -> "SearchSettings":
        """The textbook baseline: same search, Euclidean heuristic only, no goal curves."""
        return replace(
            self, use_heuristic_field=False, use_turning_heuristic=False, use_goal_curves=False,
            heuristic_weight=1.0, goal_test_lattice=True, smooth=False,
        )

    @classmethod
    def from_mapping(cls, values: dict, source: str = "search settings") -> "SearchSettings":
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(values) - known)
        if unknown:
            raise SearchSettingsError(
                f"{source}: unknown key {unknown[0]!r}; accepted keys: {', '.join(sorted(known))}"
            )
        try:
            return cls(**values)
        except SearchSettingsError as error:
            raise SearchSettingsError(f"{source}: {error}") from None


DEFAULT_SEARCH_SETTINGS = SearchSettings()
