"""Errors of the planner, each carrying the short code that the path JSON, the node and the CLI use.

::

    PlanningError (ValueError)          code "planning_error"
     +-- VehicleError                    code "bad_vehicle"     bad vehicle file or values
     +-- PoseError                       code "bad_pose"        start/goal off the map or in collision
     +-- SearchSettingsError             code "bad_search_settings"
    NoPath (Exception)                   the request was valid but no path was found;
                                         ``reason`` is the path JSON's short code

Input errors (the caller's fault, CLI exit 2) stand apart from ``NoPath`` (CLI exit 1),
whose ``reason`` says whether the goal is provably unreachable (``goal_enclosed``) or
the search gave up (``budget_exhausted``, ``deadline``, ``cancelled``,
``no_path_at_resolution``).
"""

from __future__ import annotations

__all__ = [
    "PlanningError",
    "VehicleError",
    "PoseError",
    "SearchSettingsError",
    "NoPath",
    "NO_PATH_REASONS",
]


class PlanningError(ValueError):
    """Bad input to the planner; the message says what is wrong and what to do."""

    code = "planning_error"


class VehicleError(PlanningError):
    """The vehicle description is unreadable or physically inconsistent."""

    code = "bad_vehicle"


class PoseError(PlanningError):
    """A start or goal pose is off the map or in collision."""

    code = "bad_pose"


class SearchSettingsError(PlanningError):
    """A search setting (budget, resolution, cost weight) is out of range."""

    code = "bad_search_settings"


#: Every value ``NoPath.reason`` can take, with what it means.
NO_PATH_REASONS = {
    "goal_enclosed": "the goal cannot be reached even ignoring the turning limit",
    "budget_exhausted": "the expansion budget ran out before a path was found",
    "deadline": "the time budget ran out before a path was found",
    "cancelled": "the caller cancelled the search",
    "no_path_at_resolution": "every pose reachable at this search resolution was tried",
}


class NoPath(Exception):
    """A valid request with no path; ``reason`` is one of ``NO_PATH_REASONS``."""

    def __init__(self, reason: str, detail: str, stats: dict | None = None):
        if reason not in NO_PATH_REASONS:
            raise ValueError(f"unknown no-path reason {reason!r}")
        super().__init__(f"{reason}: {detail}")
        self.reason = reason
        self.detail = detail
        self.stats = dict(stats or {})
