"""Hypothesis profiles of the fuzz tests and the path to their helper module.

Two profiles, chosen with the environment variable ``VEER_FUZZ_PROFILE``:

``ci`` (the default)
    ``derandomize=True`` and no example database, so every run tries the same inputs
    (a CI failure replays on any machine); modest example counts, so the whole folder
    runs in about a minute on two shared cores.
``deep``
    Random seeds, the example database on, many more examples per target
    (``VEER_FUZZ_PROFILE=deep .venv/bin/python -m pytest -q tests/fuzz``).

The profiles are registered here but never loaded globally: each fuzz test takes its
settings from :func:`fuzzkit.fuzz_settings`, which builds on the active profile, so the
other hypothesis tests of the suite keep their own settings. Example counts per target:
docs/reliability.md, "Fuzzing".
"""

from __future__ import annotations

import os
import pathlib
import sys

import pytest
from hypothesis import HealthCheck, settings

_FUZZ_DIR = str(pathlib.Path(__file__).resolve().parent)
if _FUZZ_DIR not in sys.path:
    sys.path.insert(0, _FUZZ_DIR)  # the suite runs with --import-mode=importlib: `import fuzzkit` needs this

_QUIET_CHECKS = [
    HealthCheck.too_slow,
    HealthCheck.data_too_large,
    HealthCheck.filter_too_much,
    HealthCheck.large_base_example,
]

settings.register_profile(
    "ci",
    derandomize=True,
    database=None,
    deadline=None,
    max_examples=100,
    print_blob=True,
    suppress_health_check=_QUIET_CHECKS,
)
settings.register_profile(
    "deep",
    derandomize=False,
    deadline=None,
    max_examples=2000,
    print_blob=True,
    suppress_health_check=_QUIET_CHECKS,
)

PROFILE_VARIABLE = "VEER_FUZZ_PROFILE"


def pytest_configure(config):
    """Refuse an unknown profile name at once rather than fuzzing with the wrong one."""
    name = os.environ.get(PROFILE_VARIABLE, "ci")
    if name not in ("ci", "deep"):
        raise pytest.UsageError(f"{PROFILE_VARIABLE}={name!r}: use ci (the default) or deep")

