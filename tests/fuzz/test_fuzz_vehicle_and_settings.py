"""Fuzz vehicle files (load_vehicle, vehicle_from_mapping) and SearchSettings.from_mapping.

Property: a valid Vehicle / SearchSettings, or a PlanningError with a code and a one-line
message; no other exception, no hang.
"""

from __future__ import annotations

import dataclasses
import math

import pytest
from hypothesis import event, given
from hypothesis import strategies as st

from fuzzkit import fuzz_settings, mutated, number_like, outcome, toml_table, toml_values
from veer.planning import PlanningError, SearchSettings, Vehicle, load_vehicle, vehicle_from_mapping

VEHICLE_KEYS = tuple(f.name for f in dataclasses.fields(Vehicle))
SETTING_KEYS = tuple(f.name for f in dataclasses.fields(SearchSettings))


def vehicle_tables():
    plausible = st.fixed_dictionaries(
        {"wheelbase_m": st.floats(0.1, 5.0), "max_steer_deg": st.floats(1.0, 89.0), "radius_m": st.floats(0.0, 3.0)},
        optional={"length_m": st.floats(0.1, 8.0), "width_m": st.floats(0.1, 4.0),
                  "rear_overhang_m": st.floats(0.0, 2.0), "turns_in_place": st.booleans()},
    )
    changes = st.dictionaries(st.sampled_from(VEHICLE_KEYS) | st.text(max_size=8),
                              toml_values() | st.booleans(), max_size=3)
    return st.builds(lambda base, more: {**base, **more}, plausible, changes) | st.dictionaries(
        st.sampled_from(VEHICLE_KEYS), toml_values(), max_size=7)


def vehicle_with_sizes(build, *args):
    """The vehicle ``build(*args)`` returns, with its derived sizes (which must not raise either)."""
    vehicle = build(*args)
    return vehicle, vehicle.min_turn_radius_m, vehicle.bounding_radius_m


def check_vehicle(found) -> None:
    vehicle, turn_radius_m, bounding_radius_m = found
    assert isinstance(vehicle, Vehicle)
    assert math.isfinite(vehicle.wheelbase_m) and vehicle.wheelbase_m > 0
    assert 0 < vehicle.max_steer_deg < 90
    if math.isinf(turn_radius_m):
        # open bug: test_regressions.py::test_a_vehicle_without_a_finite_turn_radius_is_refused
        event("known bug, see test_regressions.py::test_a_vehicle_without_a_finite_turn_radius_is_refused")
        return
    assert math.isfinite(turn_radius_m) and turn_radius_m >= 0
    assert math.isfinite(bounding_radius_m) and bounding_radius_m >= 0


@given(table=vehicle_tables())
@fuzz_settings(ci=400, deep=5000)
def test_vehicle_tables_give_a_vehicle_or_are_refused(table):
    found, _ = outcome(vehicle_with_sizes, vehicle_from_mapping, table, allowed=(PlanningError,))
    if found is not None:
        check_vehicle(found)


@pytest.fixture(scope="module")
def work_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz_vehicles")


SEED_VEHICLE_FILE = (b"wheelbase_m = 2.0\nmax_steer_deg = 30.0\nradius_m = 1.0\nlength_m = 4.2\n"
                     b"width_m = 1.8\nrear_overhang_m = 0.9\nturns_in_place = false\n")


@given(content=vehicle_tables().map(lambda t: toml_table(t).encode("utf-8", "surrogatepass"))
       | mutated(st.just(SEED_VEHICLE_FILE)) | st.binary(max_size=120))
@fuzz_settings(ci=400, deep=5000)
def test_vehicle_files_load_or_are_refused(work_dir, content):
    path = work_dir / "vehicle.toml"
    path.write_bytes(content)
    found, _ = outcome(vehicle_with_sizes, load_vehicle, path, allowed=(PlanningError,))
    if found is not None:
        check_vehicle(found)


def setting_values():
    return st.one_of(number_like(), st.booleans(), st.none(), toml_values())


@given(table=st.dictionaries(st.sampled_from(SETTING_KEYS) | st.text(max_size=8), setting_values(), max_size=5))
@fuzz_settings(ci=500, deep=6000)
def test_search_settings_tables_give_settings_or_are_refused(table):
    found, _ = outcome(SearchSettings.from_mapping, table, allowed=(PlanningError,))
    if found is not None:
        assert isinstance(found, SearchSettings)
        assert 8 <= found.heading_bins <= 720 and found.max_expansions >= 1
        assert math.isfinite(found.max_time_s) and found.max_time_s > 0
        assert found.heading_bin_rad > 0
