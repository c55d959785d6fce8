"""node/ builds on the public surface of maps and planning only, and never on tools."""

from __future__ import annotations

import pathlib

import pytest

import veer.node

NODE_DIR = pathlib.Path(veer.node.__file__).parent
MODULES = sorted(p.stem for p in NODE_DIR.glob("*.py"))


@pytest.mark.parametrize("name", MODULES)
def test_node_imports_only_public_packages(name, imports_of):
    for target, level in imports_of(NODE_DIR / f"{name}.py"):
        if level:
            continue  # a sibling in node/
        assert not target.startswith("veer.tools"), f"{name}.py imports {target}"
        if target.startswith(("veer.maps", "veer.planning")):
            assert target in ("veer.maps", "veer.planning"), f"{name}.py reaches into {target}"
