"""Fixtures shared by every test folder, the ``--runslow`` option and the path to tests/verify.py.

The suite runs with ``--import-mode=importlib``, which puts no test folder on ``sys.path``;
this file puts tests/ there so that any test module can ``import verify`` (the suite's one
path verifier). The ``verify`` fixture hands over the same module.
"""

from __future__ import annotations

import ast
import pathlib
import sys

import pytest

_TESTS_DIR = str(pathlib.Path(__file__).resolve().parent)
if _TESTS_DIR not in sys.path:
    sys.path.insert(0, _TESTS_DIR)

import verify as _verify  # noqa: E402  (needs the path above)


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False, help="also run the tests marked slow")


def pytest_collection_modifyitems(config, items):
    """Skip the tests marked ``slow`` unless ``--runslow`` is given."""
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


def _imports(path: pathlib.Path) -> list[tuple[str, int]]:
    """(module, relative level) of every import statement in a Python file."""
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.extend((alias.name, 0) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            found.append((node.module or "", node.level))
    return found


@pytest.fixture(scope="session")
def imports_of():
    """``imports_of(path)``: the modules a source file imports, with their relative level."""
    return _imports


@pytest.fixture(scope="session")
def verify():
    """The path verifier module (tests/verify.py): ``verify.path_problems(...)`` and friends."""
    return _verify
