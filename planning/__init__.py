"""veer.planning: hybrid A* for car-like vehicles on occupancy grids.

The one import a caller needs::

    from veer.planning import Planner, Vehicle, SearchSettings, NoPath

:class:`Planner` turns a grid (``veer.maps``), a vehicle and two poses into a
:class:`PlannedPath` or raises :class:`NoPath` with a reason code (docs/files.md, "Path JSON"); bad input
raises a :class:`PlanningError`. Nothing here knows about sockets or messages.
"""

from .curves import CurvePath, dubins_length, dubins_shortest, reeds_shepp_length, reeds_shepp_shortest
from .errors import NO_PATH_REASONS, NoPath, PlanningError, PoseError, SearchSettingsError, VehicleError
from .path import PlannedPath, no_path_document, path_metrics
from .search import GridContext, Planner, plan_path
from .settings import DEFAULT_SEARCH_SETTINGS, SearchSettings
from .vehicle import EXAMPLE_VEHICLE, Vehicle, load_vehicle, vehicle_from_mapping

__all__ = [
    "CurvePath",
    "DEFAULT_SEARCH_SETTINGS",
    "EXAMPLE_VEHICLE",
    "GridContext",
    "NO_PATH_REASONS",
    "NoPath",
    "PlannedPath",
    "Planner",
    "PlanningError",
    "PoseError",
    "SearchSettings",
    "SearchSettingsError",
    "Vehicle",
    "VehicleError",
    "dubins_length",
    "dubins_shortest",
    "load_vehicle",
    "no_path_document",
    "path_metrics",
    "plan_path",
    "reeds_shepp_length",
    "reeds_shepp_shortest",
    "vehicle_from_mapping",
]
