"""The public surface of veer.planning: one-way imports, __all__, runnable docstring examples."""

from __future__ import annotations

import doctest
import importlib
import pathlib

import pytest

import veer.planning

PLANNING_DIR = pathlib.Path(veer.planning.__file__).parent
MODULES = sorted(p.stem for p in PLANNING_DIR.glob("*.py") if p.stem != "__init__")


@pytest.mark.parametrize("name", MODULES + ["__init__"])
def test_planning_never_imports_node_or_tools(name, imports_of):
    for target, _ in imports_of(PLANNING_DIR / f"{name}.py"):
        assert not target.startswith(("veer.node", "veer.tools")), f"{name}.py imports {target}"


@pytest.mark.parametrize("name", MODULES)
def test_module_all_lists_only_what_exists(name):
    module = importlib.import_module(f"veer.planning.{name}")
    for item in module.__all__:
        assert hasattr(module, item), f"{name}.__all__ lists missing {item}"


def test_package_all_is_importable_and_unique():
    assert len(veer.planning.__all__) == len(set(veer.planning.__all__))
    for item in veer.planning.__all__:
        assert hasattr(veer.planning, item)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(f"veer.planning.{name}")
    failures, _ = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert failures == 0
