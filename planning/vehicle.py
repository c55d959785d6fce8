"""Vehicle model: kinematic bicycle geometry and the footprint used for collision checks.

The reference point of every pose is the middle of the rear axle. With the front wheels
held at steering angle delta the reference point moves on a circle of radius
``wheelbase / tan(delta)``, so the minimum turn radius is ``wheelbase / tan(max steer)``
(LaValle, *Planning Algorithms*, 2006, section 13.1.2.1).

The footprint is the disc of ``radius_m`` around the reference point, or, when
``length_m`` and ``width_m`` are given, that rectangle. A rectangle is checked first
with covering circles on its long axis (Ziegler & Stiller, "Fast collision checking for
intelligent vehicle motion planning", IEEE IV 2010) and, where the circles are
inconclusive, exactly against the blocked squares.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np

from veer.planning.errors import VehicleError
from veer.planning.inputs import brief, finite_number

__all__ = ["Vehicle", "EXAMPLE_VEHICLE", "load_vehicle", "vehicle_from_mapping"]


_MAX_SIZE_M = 1000.0  # no vehicle dimension beyond this: a typo in units, and tables would not fit
_MAX_TURN_RADIUS_M = 10_000.0  # a steering limit so small that the turn is wider than this is a typo


@dataclass(frozen=True)
class Vehicle:
    """A car-like (or turn-in-place) base.

    Parameters
    ----------
    wheelbase_m : float
        Rear axle to front axle.
    max_steer_deg : float
        Front wheel limit, 0 < max_steer_deg < 90.
    radius_m : float
        Disc around the reference point, used when no rectangle is given.
    length_m, width_m, rear_overhang_m : float or None
        Optional rectangle footprint; ``rear_overhang_m`` is rear axle to back bumper.
    turns_in_place : bool
        True for bases that can rotate on the spot (differential drive); the minimum turn
        radius is then 0 and the search adds rotate-in-place motions.

    Examples
    --------
    >>> round(Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0).min_turn_radius_m, 3)
    3.464
    """

    wheelbase_m: float
    max_steer_deg: float
    radius_m: float
    length_m: float | None = None
    width_m: float | None = None
    rear_overhang_m: float | None = None
    turns_in_place: bool = False

    def __post_init__(self) -> None:
        def finite(name: str) -> float:
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not finite_number(value):
                raise VehicleError(f"vehicle {name} must be a finite number, got {brief(value)}")
            if abs(value) > _MAX_SIZE_M and name.endswith("_m"):
                raise VehicleError(f"vehicle {name} must be at most {_MAX_SIZE_M:g} m, got {brief(value)}; check the units")
            return float(value)

        if finite("wheelbase_m") <= 0:
            raise VehicleError(f"vehicle wheelbase_m must be > 0, got {self.wheelbase_m}")
        if not 0 < finite("max_steer_deg") < 90:
            raise VehicleError(
                f"vehicle max_steer_deg must be between 0 and 90 (exclusive), got {self.max_steer_deg}"
            )
        if finite("radius_m") < 0:
            raise VehicleError(f"vehicle radius_m must be >= 0, got {self.radius_m}")
        tan_steer = math.tan(math.radians(self.max_steer_deg))
        turn_radius_m = self.wheelbase_m / tan_steer if tan_steer > 0.0 else math.inf
        if not turn_radius_m <= _MAX_TURN_RADIUS_M:  # also catches inf and nan
            raise VehicleError(
                f"vehicle turns on a circle of radius {turn_radius_m:.3g} m (wheelbase_m / tan(max_steer_deg)); "
                f"at most {_MAX_TURN_RADIUS_M:g} m is planned for: check wheelbase_m and max_steer_deg"
            )
        rect = [self.length_m, self.width_m]
        if any(v is not None for v in rect + [self.rear_overhang_m]):
            if self.length_m is None or self.width_m is None:
                raise VehicleError("vehicle rectangle needs both length_m and width_m (or neither)")
            if finite("length_m") <= 0 or finite("width_m") <= 0:
                raise VehicleError(
                    f"vehicle length_m and width_m must be > 0, got {self.length_m} and {self.width_m}"
                )
            if self.rear_overhang_m is not None:
                overhang = finite("rear_overhang_m")
                if not 0 <= overhang <= self.length_m:
                    raise VehicleError(
                        f"vehicle rear_overhang_m must be between 0 and length_m ({self.length_m}), "
                        f"got {overhang}"
                    )
        if not isinstance(self.turns_in_place, bool):
            raise VehicleError(f"vehicle turns_in_place must be true or false, got {self.turns_in_place!r}")

    @property
    def min_turn_radius_m(self) -> float:
        """Smallest radius of the reference point's circle; 0 for turn-in-place bases."""
        if self.turns_in_place:
            return 0.0
        return self.wheelbase_m / math.tan(math.radians(self.max_steer_deg))

    @property
    def max_curvature_per_m(self) -> float:
        """1 / min turn radius (infinite for turn-in-place bases)."""
        radius = self.min_turn_radius_m
        return math.inf if radius == 0 else 1.0 / radius

    @property
    def has_rectangle(self) -> bool:
        return self.length_m is not None

    @property
    def rear_overhang_or_default_m(self) -> float:
        """Rear overhang; without one the rectangle is centred on the wheelbase."""
        if self.rear_overhang_m is not None:
            return float(self.rear_overhang_m)
        return max(0.0, (self.length_m - self.wheelbase_m) / 2.0)

    def footprint_corners(self, x_m: float, y_m: float, heading_rad: float) -> np.ndarray:
        """World corners (4, 2) of the rectangle footprint: rear-right, front-right, front-left, rear-left."""
        if not self.has_rectangle:
            raise VehicleError("this vehicle has no rectangle footprint (give length_m and width_m)")
        rear = -self.rear_overhang_or_default_m
        front = rear + self.length_m
        half_w = self.width_m / 2.0
        local = np.array([[rear, -half_w], [front, -half_w], [front, half_w], [rear, half_w]])
        c, s = math.cos(heading_rad), math.sin(heading_rad)
        return np.column_stack(
            (x_m + c * local[:, 0] - s * local[:, 1], y_m + s * local[:, 0] + c * local[:, 1])
        )

    def covering_circles(self) -> tuple[np.ndarray, float]:
        """Centres along the long axis (metres ahead of the rear axle) and their common radius.

        n equal circles each circumscribe an (L/n) x W slice of the rectangle, so
        r_n = sqrt((L/n)^2 + W^2) / 2; n grows until the sideways bulge r_n - W/2 is at most
        a fifth of the width (or n = 6). For the disc footprint: one circle at the rear axle.
        """
        if not self.has_rectangle:
            return np.zeros(1), float(self.radius_m)
        length, width = float(self.length_m), float(self.width_m)
        n = 1
        while n < 6 and 0.5 * math.hypot(length / n, width) - width / 2 > 0.2 * width:
            n += 1
        rear = -self.rear_overhang_or_default_m
        centres = rear + (2 * np.arange(1, n + 1) - 1) * length / (2 * n)
        return centres, 0.5 * math.hypot(length / n, width)

    @property
    def bounding_radius_m(self) -> float:
        """Radius around the reference point that contains the whole footprint."""
        if not self.has_rectangle:
            return float(self.radius_m)
        return float(np.max(np.hypot(*self.footprint_corners(0.0, 0.0, 0.0).T)))


#: The example vehicle (docs/files.md, "Vehicle"): used when no vehicle file is given.
EXAMPLE_VEHICLE = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0)

_VEHICLE_KEYS = tuple(f.name for f in fields(Vehicle))


def vehicle_from_mapping(values: dict, source: str = "vehicle") -> Vehicle:
    """Build a :class:`Vehicle` from a TOML table, naming ``source`` in every error."""
    unknown = sorted(set(values) - set(_VEHICLE_KEYS))
    if unknown:
        raise VehicleError(
            f"{source}: unknown key {unknown[0]!r}; accepted keys: {', '.join(_VEHICLE_KEYS)}"
        )
    missing = [k for k in ("wheelbase_m", "max_steer_deg", "radius_m") if k not in values]
    if missing:
        raise VehicleError(f"{source}: missing {missing[0]}; add e.g. '{missing[0]} = ...' to the file")
    try:
        return Vehicle(**values)
    except VehicleError as error:
        raise VehicleError(f"{source}: {error}") from None


def load_vehicle(path: str | Path) -> Vehicle:
    """Read a vehicle TOML file (docs/files.md, "Vehicle")."""
    path = Path(path)
    shown = str(path) if str(path).isprintable() else repr(str(path))
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, ValueError) as error:  # ValueError: a NUL byte in the name
        if isinstance(error, UnicodeDecodeError):
            raise VehicleError(f"vehicle file {shown} is not UTF-8 text; write it as a TOML file") from None
        raise VehicleError(f"cannot read vehicle file {shown}: {getattr(error, 'strerror', None) or error}") from None
    try:
        values = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise VehicleError(f"vehicle file {shown} is not valid TOML: {error}") from None
    return vehicle_from_mapping(values, source=f"vehicle file {shown}")
