"""Fuzz the file names the loaders are given (load_map, read_sidecar, load_vehicle).

Names come from the command line and from NODE.toml strings, which may hold any
character. Names are drawn inside a scratch folder: missing files, folders, names with
odd characters (NUL included), very long names.

Property: a valid result or the project's own error with a code and a one-line message.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from fuzzkit import fuzz_settings, outcome
from veer.maps import MapError, OccupancyGrid, load_map, read_sidecar
from veer.planning import PlanningError, Vehicle, load_vehicle


@pytest.fixture(scope="module")
def scratch(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz_paths")
    (folder / "map.pgm").write_bytes(b"P2\n2 1\n255\n0 255\n")
    (folder / "map.toml").write_text("cell_size_m = 0.5\n", encoding="utf-8")
    (folder / "robot.toml").write_text("wheelbase_m = 1.0\nmax_steer_deg = 30\nradius_m = 0.5\n", encoding="utf-8")
    (folder / "sub").mkdir()
    return folder


def names():
    odd = st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="/"), max_size=20)
    return st.one_of(
        st.sampled_from(["map.pgm", "map.toml", "robot.toml", "sub", "missing.pgm", ".", "..", ""]),
        odd,
        st.builds(lambda a, b: a + "\x00" + b, odd, odd),
        st.integers(250, 5000).map(lambda n: "x" * n),  # beyond the file name limit of most systems
    )


@given(name=names())
@fuzz_settings(ci=300, deep=3000)
def test_any_file_name_loads_or_is_refused(scratch, name):
    grid, _ = outcome(load_map, scratch / name, max_cells=1000, allowed=(MapError,))
    if grid is not None:
        assert isinstance(grid, OccupancyGrid)
    outcome(read_sidecar, scratch / name, allowed=(MapError,))
    vehicle, _ = outcome(load_vehicle, scratch / name, allowed=(PlanningError,))
    if vehicle is not None:
        assert isinstance(vehicle, Vehicle)
