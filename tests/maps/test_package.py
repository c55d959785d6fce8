"""The public surface of veer.maps: __all__, one-way imports, runnable docstring examples."""

from __future__ import annotations

import doctest
import importlib
import inspect
import pathlib
import types

import pytest

import veer.maps

MAPS_DIR = pathlib.Path(veer.maps.__file__).parent
MODULES = sorted(p.stem for p in MAPS_DIR.glob("*.py") if p.stem != "__init__")


def test_all_matches_public_names():
    public = {
        name
        for name, value in vars(veer.maps).items()
        if not name.startswith("_") and not isinstance(value, types.ModuleType) and name != "annotations"
    }
    assert set(veer.maps.__all__) == public
    assert len(veer.maps.__all__) == len(set(veer.maps.__all__))
    exported = set()
    for name in MODULES:
        module = importlib.import_module(f"veer.maps.{name}")
        if not name.startswith("_"):
            exported |= set(module.__all__)
        for item in getattr(module, "__all__", ()):
            assert hasattr(module, item), f"{name}.__all__ lists missing {item}"
    assert exported == set(veer.maps.__all__)


def test_api_signatures_stay_put():
    # Others build on these; keep the keyword-only arguments keyword-only.
    params = inspect.signature(veer.maps.load_map).parameters
    assert params["cell_size_m"].kind is inspect.Parameter.KEYWORD_ONLY
    assert params["max_cells"].default == veer.maps.DEFAULT_MAX_CELLS == 100_000_000
    params = inspect.signature(veer.maps.inflate).parameters
    assert list(params) == ["grid", "radius_m", "extra_margin_m", "clearance_m"]
    assert (veer.maps.FREE, veer.maps.OCCUPIED, veer.maps.UNKNOWN) == (0, 1, 2)


@pytest.mark.parametrize("name", MODULES + ["__init__"])
def test_no_module_imports_other_veer_packages(name, imports_of):
    for target, level in imports_of(MAPS_DIR / f"{name}.py"):
        assert level <= 1, f"{name}.py reaches above veer.maps with a relative import"
        assert not target.startswith(("veer.planning", "veer.node", "veer.tools", "planning", "node", "tools")), (
            f"{name}.py imports {target}"
        )


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(f"veer.maps.{name}")
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
