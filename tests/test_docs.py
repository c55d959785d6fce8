"""The repository's own docs name what users can set: keep them true as the code changes."""

from __future__ import annotations

import pathlib
from dataclasses import fields

from veer.planning import SearchSettings

DOCS = pathlib.Path(__file__).resolve().parent.parent / "docs"


def test_every_search_setting_is_documented():
    text = (DOCS / "files.md").read_text(encoding="utf-8")
    missing = [f.name for f in fields(SearchSettings) if f"`{f.name}`" not in text]
    assert missing == []
