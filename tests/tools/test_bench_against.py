"""bench_against: an earlier revision, exported aside, planned beside this tree in one run."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from veer.tools import bench_against

REPO = Path(__file__).resolve().parents[2]


def _in_git_checkout() -> bool:
    if shutil.which("git") is None:
        return False
    done = subprocess.run(["git", "-C", str(REPO), "rev-parse", "HEAD"], capture_output=True)
    return done.returncode == 0


@pytest.mark.skipif(not _in_git_checkout(), reason="needs a git checkout of veer")
def test_the_committed_tree_against_this_tree_gives_the_same_answers():
    rows = bench_against.compare_with_revision("HEAD", ["enclosed_goal"], repeat=1)
    assert [(row["scenario"], row["vehicle"]) for row in rows] == [("enclosed_goal", "disc"), ("enclosed_goal", "rect")]
    assert all(row["old_result"] == row["new_result"] == "goal_enclosed" for row in rows)
    assert all(row["old_s"] > 0 and row["new_s"] > 0 for row in rows)
    table = bench_against.format_comparison("HEAD", rows)
    assert table.count("\n") == 2 + len(rows)


@pytest.mark.skipif(not _in_git_checkout(), reason="needs a git checkout of veer")
def test_an_unknown_revision_is_one_clear_line():
    with pytest.raises(SystemExit, match="cannot export"):
        bench_against.compare_with_revision("no-such-revision-anywhere", ["enclosed_goal"], repeat=1)
