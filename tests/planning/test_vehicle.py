"""Tests for veer.planning.vehicle: turning radius, covering circles, footprint, bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from scipy.integrate import solve_ivp
from shapely import affinity

from veer.planning import EXAMPLE_VEHICLE, Vehicle, VehicleError, load_vehicle, vehicle_from_mapping

# ------------------------------------------------------------------ turning radius


@pytest.mark.parametrize(
    ("wheelbase_m", "max_steer_deg", "expected_m"),
    [
        (2.0, 30.0, 2.0 * math.sqrt(3.0)),  # tan 30 = 1/sqrt(3)
        (1.0, 45.0, 1.0),  # tan 45 = 1
        (3.0, 60.0, math.sqrt(3.0)),  # tan 60 = sqrt(3)
        (0.5, 30.0, 0.5 * math.sqrt(3.0)),
    ],
)
def test_min_turn_radius_is_wheelbase_over_tan_steer(wheelbase_m, max_steer_deg, expected_m):
    # rho_min = L / tan(delta_max) for the rear-axle reference point
    # source: LaValle, Planning Algorithms, 2006, section 13.1.2.1 kinematic bicycle model
    vehicle = Vehicle(wheelbase_m=wheelbase_m, max_steer_deg=max_steer_deg, radius_m=0.5)
    assert vehicle.min_turn_radius_m == pytest.approx(expected_m, rel=1e-12)
    assert vehicle.max_curvature_per_m == pytest.approx(1.0 / expected_m, rel=1e-12)


def _kerb_to_kerb_m(wheelbase_m: float, max_steer_deg: float, track_m: float) -> float:
    """Diameter of the circle the outer front wheel draws on full lock, by integrating the car.

    # source: scipy.integrate.solve_ivp of the kinematic car x' = cos(theta), y' = sin(theta),
    # theta' = tan(delta) / L (LaValle, Planning Algorithms, 2006, section 13.1.2.1), one full turn
    """
    curvature = math.tan(math.radians(max_steer_deg)) / wheelbase_m
    turn = solve_ivp(
        lambda _s, q: [math.cos(q[2]), math.sin(q[2]), curvature],
        (0.0, 2.0 * math.pi / curvature), [0.0, 0.0, 0.0], rtol=1e-10, atol=1e-12, dense_output=True,
    )
    x, y, heading = turn.sol(np.linspace(0.0, 2.0 * math.pi / curvature, 720, endpoint=False))
    # turning left, the outer front wheel is the right one: L ahead of the rear axle, t/2 to the right
    wheel_x = x + wheelbase_m * np.cos(heading) + track_m / 2.0 * np.sin(heading)
    wheel_y = y + wheelbase_m * np.sin(heading) - track_m / 2.0 * np.cos(heading)
    return float(2.0 * np.hypot(wheel_x - wheel_x.mean(), wheel_y - wheel_y.mean()).mean())


def test_spec_sheet_example():
    # L = 2.8 m, 35 deg, track 1.55 m -> r = 4.00 m, kerb-to-kerb ~= 11.07 m
    # source: docs/reference.md, "Vehicle" worked example (derived from LaValle 2006, 13.1.2.1)
    vehicle = Vehicle(wheelbase_m=2.8, max_steer_deg=35.0, radius_m=1.0)
    assert vehicle.min_turn_radius_m == pytest.approx(4.00, abs=0.005)
    kerb_m = _kerb_to_kerb_m(2.8, 35.0, 1.55)
    assert kerb_m == pytest.approx(11.07, abs=0.005)
    # the spec-sheet conversion D = 2 sqrt((r + t/2)^2 + L^2) with the code's r agrees with the integration
    assert 2.0 * math.hypot(vehicle.min_turn_radius_m + 1.55 / 2.0, 2.8) == pytest.approx(kerb_m, rel=1e-6)


@pytest.mark.parametrize(("wheelbase_m", "max_steer_deg"), [(2.6, 36.0), (2.7, 35.0), (2.85, 37.0)])
def test_passenger_car_turning_circle_is_10_to_12_m(wheelbase_m, max_steer_deg):
    # passenger cars turn in about 10-12 m kerb to kerb
    # common practice (manufacturers' spec sheets; docs/reference.md, "Vehicle")
    vehicle = Vehicle(wheelbase_m=wheelbase_m, max_steer_deg=max_steer_deg, radius_m=1.0)
    track_m = 1.55
    kerb_m = 2.0 * math.hypot(vehicle.min_turn_radius_m + track_m / 2.0, wheelbase_m)
    assert kerb_m == pytest.approx(_kerb_to_kerb_m(wheelbase_m, max_steer_deg, track_m), rel=1e-6)
    assert 10.0 <= kerb_m <= 12.0


def test_example_vehicle_matches_the_docs():
    # docs/files.md, "Vehicle file": wheelbase 2.0 m, 30 deg, disc radius 1.0 m
    assert (EXAMPLE_VEHICLE.wheelbase_m, EXAMPLE_VEHICLE.max_steer_deg, EXAMPLE_VEHICLE.radius_m) == (2.0, 30.0, 1.0)
    assert not EXAMPLE_VEHICLE.has_rectangle


def test_turn_in_place_has_zero_radius():
    vehicle = Vehicle(wheelbase_m=0.5, max_steer_deg=30.0, radius_m=0.4, turns_in_place=True)
    assert vehicle.min_turn_radius_m == 0.0
    assert math.isinf(vehicle.max_curvature_per_m)


# ------------------------------------------------------------------ covering circles

# source: docs/reference.md, "Collision checking": L = 4.8 m, W = 1.9 m, n = 1..5 discs centred at
# s_i = -L/2 + (2i - 1) L / (2n) (Ziegler & Stiller, IEEE IV 2010, covering circles; radii derived)
TABLE_LENGTH_M, TABLE_WIDTH_M = 4.8, 1.9
TABLE_RADII_M = {1: 2.581, 2: 1.531, 3: 1.242, 4: 1.124, 5: 1.064}


@pytest.mark.parametrize("n", sorted(TABLE_RADII_M))
def test_covering_radius_table_is_the_smallest_cover(n):
    # source: shapely (GEOS) difference / area: n discs of the table's radius cover the rectangle,
    # discs 2 mm smaller leave its corners out
    half = TABLE_LENGTH_M / 2
    centres = -half + (2 * np.arange(1, n + 1) - 1) * TABLE_LENGTH_M / (2 * n)
    body = shapely.box(-half, -TABLE_WIDTH_M / 2, half, TABLE_WIDTH_M / 2)
    radius_m = TABLE_RADII_M[n] + 5e-4  # the table rounds to the millimetre
    assert body.difference(_circle_union(centres, radius_m)).area < 1e-6 * body.area
    assert body.difference(_circle_union(centres, TABLE_RADII_M[n] - 2e-3)).area > 1e-7


def _circle_union(centres_x_m, radius_m, shrink=1.0):
    # shapely buffers are inscribed polygons; 256 segments per quarter keep the gap < 2e-6 m
    return shapely.union_all([shapely.Point(x, 0.0).buffer(radius_m * shrink, quad_segs=256) for x in centres_x_m])


@pytest.mark.parametrize(
    ("length_m", "width_m", "rear_overhang_m"),
    [(4.8, 1.9, 1.0), (3.2, 1.6, 0.6), (1.2, 0.8, 0.3), (6.0, 2.4, None)],
)
def test_covering_circles_cover_the_rectangle(length_m, width_m, rear_overhang_m):
    vehicle = Vehicle(
        wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0,
        length_m=length_m, width_m=width_m, rear_overhang_m=rear_overhang_m,
    )
    centres_m, radius_m = vehicle.covering_circles()
    n = len(centres_m)
    # the code's radius is the formula of docs/reference.md for the n it chose
    assert radius_m == pytest.approx(0.5 * math.hypot(length_m / n, width_m), rel=1e-12)
    # centres at s_i = -L/2 + (2i - 1) L / (2n), shifted into the rear-axle frame
    overhang = rear_overhang_m if rear_overhang_m is not None else (length_m - 2.0) / 2
    expected = -overhang + (2 * np.arange(1, n + 1) - 1) * length_m / (2 * n)
    np.testing.assert_allclose(centres_m, expected, atol=1e-12)
    # source: shapely (GEOS) difference / area
    body = shapely.box(-overhang, -width_m / 2, length_m - overhang, width_m / 2)
    uncovered = body.difference(_circle_union(centres_m, radius_m))
    assert uncovered.area < 1e-6 * body.area
    # and the radius is tight: circles 2 % smaller leave the corners out
    assert body.difference(_circle_union(centres_m, radius_m, shrink=0.98)).area > 1e-4


def test_covering_circles_of_the_table_example_pick_three():
    # bulge r_n - W/2 <= W/5 = 0.38 m first holds at n = 3 (table of docs/reference.md: 0.292 m)
    vehicle = Vehicle(wheelbase_m=2.9, max_steer_deg=35.0, radius_m=1.0, length_m=4.8, width_m=1.9, rear_overhang_m=1.0)
    centres_m, radius_m = vehicle.covering_circles()
    assert len(centres_m) == 3
    assert radius_m == pytest.approx(TABLE_RADII_M[3], abs=5e-4)


def test_disc_vehicle_has_one_circle_at_the_axle():
    centres_m, radius_m = EXAMPLE_VEHICLE.covering_circles()
    assert centres_m.tolist() == [0.0]
    assert radius_m == EXAMPLE_VEHICLE.radius_m


# ------------------------------------------------------------------ footprint corners


@pytest.mark.parametrize(
    ("x_m", "y_m", "heading_rad"),
    [(0.0, 0.0, 0.0), (3.0, -2.0, math.pi / 2), (10.5, 4.25, -2.4), (-7.0, 1.0, 3.0)],
)
def test_footprint_corners_match_shapely_rotate_translate(x_m, y_m, heading_rad):
    vehicle = Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)
    corners = vehicle.footprint_corners(x_m, y_m, heading_rad)
    assert corners.shape == (4, 2)
    # source: shapely.affinity.rotate (about the rear axle) and translate
    named_local = [(-0.6, -0.8), (2.6, -0.8), (2.6, 0.8), (-0.6, 0.8)]  # RR, FR, FL, RL
    for corner, local in zip(corners, named_local):
        moved = affinity.translate(
            affinity.rotate(shapely.Point(local), heading_rad, origin=(0, 0), use_radians=True), x_m, y_m
        )
        np.testing.assert_allclose(corner, (moved.x, moved.y), atol=1e-12)
    body = affinity.translate(
        affinity.rotate(shapely.box(-0.6, -0.8, 2.6, 0.8), heading_rad, origin=(0, 0), use_radians=True), x_m, y_m
    )
    assert shapely.Polygon(corners).symmetric_difference(body).area < 1e-12
    # the bounding radius contains the whole footprint
    assert vehicle.bounding_radius_m == pytest.approx(math.hypot(2.6, 0.8), rel=1e-12)


def test_footprint_corners_need_a_rectangle():
    with pytest.raises(VehicleError, match="length_m"):
        EXAMPLE_VEHICLE.footprint_corners(0.0, 0.0, 0.0)


# ------------------------------------------------------------------ bad values

GOOD = {"wheelbase_m": 2.0, "max_steer_deg": 30.0, "radius_m": 1.0}


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"wheelbase_m": 0.0}, "wheelbase_m"),
        ({"wheelbase_m": -1.5}, "wheelbase_m"),
        ({"wheelbase_m": math.nan}, "wheelbase_m"),
        ({"wheelbase_m": math.inf}, "wheelbase_m"),
        ({"wheelbase_m": "2"}, "wheelbase_m"),
        ({"max_steer_deg": 0.0}, "max_steer_deg"),
        ({"max_steer_deg": 90.0}, "max_steer_deg"),
        ({"max_steer_deg": -10.0}, "max_steer_deg"),
        ({"max_steer_deg": math.nan}, "max_steer_deg"),
        ({"radius_m": -0.1}, "radius_m"),
        ({"radius_m": math.nan}, "radius_m"),
        ({"length_m": 3.0}, "width_m"),
        ({"width_m": 1.5}, "length_m"),
        ({"length_m": 0.0, "width_m": 1.5}, "length_m"),
        ({"length_m": 3.0, "width_m": -1.0}, "width_m"),
        ({"length_m": 3.0, "width_m": math.nan}, "width_m"),
        ({"length_m": 3.0, "width_m": 1.5, "rear_overhang_m": 3.5}, "rear_overhang_m"),
        ({"length_m": 3.0, "width_m": 1.5, "rear_overhang_m": -0.2}, "rear_overhang_m"),
        ({"turns_in_place": "yes"}, "turns_in_place"),
    ],
)
def test_bad_vehicle_values_name_the_field(changes, field):
    with pytest.raises(VehicleError, match=field):
        Vehicle(**{**GOOD, **changes})


def _write(tmp_path, text: str):
    path = tmp_path / "vehicle.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_load_vehicle_reads_the_documented_example(tmp_path):
    # docs/files.md, "Vehicle file": the example plus a 3.2 x 1.6 m rectangle, 0.6 m rear overhang
    path = _write(
        tmp_path,
        "wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\n"
        "length_m = 3.2\nwidth_m = 1.6\nrear_overhang_m = 0.6\n",
    )
    vehicle = load_vehicle(path)
    assert vehicle == Vehicle(wheelbase_m=2.0, max_steer_deg=30.0, radius_m=1.0, length_m=3.2, width_m=1.6, rear_overhang_m=0.6)


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        ("wheelbase_m = 0.0\nmax_steer_deg = 30.0\nradius_m = 1.0\n", "wheelbase_m"),
        ("wheelbase_m = 2.0\nmax_steer_deg = 90.0\nradius_m = 1.0\n", "max_steer_deg"),
        ("wheelbase_m = nan\nmax_steer_deg = 30.0\nradius_m = 1.0\n", "wheelbase_m"),
        ("wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = -1.0\n", "radius_m"),
        ("wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\nlength_m = 3.0\n", "width_m"),
        (
            "wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\nlength_m = 3.0\nwidth_m = 1.5\nrear_overhang_m = 4.0\n",
            "rear_overhang_m",
        ),
        ("wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\nwheel_base = 2.0\n", "wheel_base"),
        ("wheelbase_m = 2.0\nradius_m = 1.0\n", "missing max_steer_deg"),
        ("max_steer_deg = 30.0\nradius_m = 1.0\n", "missing wheelbase_m"),
        ("wheelbase_m = 2.0\nmax_steer_deg = 30.0\n", "missing radius_m"),
        ("wheelbase_m = 2.0\nmax_steer_deg = [30.0\n", "not valid TOML"),
    ],
)
def test_bad_vehicle_file_names_file_and_field(tmp_path, text, pattern):
    path = _write(tmp_path, text)
    with pytest.raises(VehicleError, match=pattern) as caught:
        load_vehicle(path)
    message = str(caught.value)
    assert str(path) in message
    assert "\n" not in message.strip()


def test_missing_vehicle_file_is_a_vehicle_error(tmp_path):
    with pytest.raises(VehicleError, match="cannot read vehicle file"):
        load_vehicle(tmp_path / "absent.toml")


def test_vehicle_from_mapping_names_its_source():
    with pytest.raises(VehicleError, match=r"^robot\.toml: unknown key 'colour'"):
        vehicle_from_mapping({**GOOD, "colour": "red"}, source="robot.toml")
