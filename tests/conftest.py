"""Fixtures shared by every test folder."""

from __future__ import annotations

import ast
import pathlib

import pytest


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
