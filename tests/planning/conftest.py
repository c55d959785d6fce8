"""Shared fixtures for the planning tests.

Paths are checked by the suite's one verifier, tests/verify.py (shapely only, never the
planner's own collision code); the ``geo`` fixture hands it over under its old name.
"""

from __future__ import annotations

import pytest
import verify


@pytest.fixture(scope="session", autouse=True)
def fresh_turning_tables(tmp_path_factory):
    """Build the turning tables from the code under test, never from an older disk cache."""
    from veer.planning import heuristics

    with pytest.MonkeyPatch.context() as patch:
        patch.setenv("VEER_CACHE_DIR", str(tmp_path_factory.mktemp("veer_cache")))
        patch.setattr(heuristics, "_tables", {})
        yield


@pytest.fixture(scope="session")
def geo():
    """The path verifier and its map helpers (tests/verify.py), for the planning test modules."""
    return verify
