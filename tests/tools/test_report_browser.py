"""The replay report in a real browser: headless Chromium loads index.html from disk.

Checks: every picture loads (the page's own inline script writes ``data-loaded`` on each
<img> from ``naturalWidth`` once the page has loaded, and Chromium's ``--dump-dom`` gives
the DOM back after that), the replan table has one row per replan of replans.csv, and
the browser logs no console message (Chromium's ``--enable-logging=stderr`` prints each
console message as a ``CONSOLE`` line). Two pages with a planted fault (a missing
picture, a console error) show that each check can fail.

Chromium comes from the distribution's packages (.ci/run installs it when missing).
"""

from __future__ import annotations

import csv
import os
import shutil
import subprocess
from html.parser import HTMLParser

import pytest
import replay_world as world

from veer.tools.cli import main

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
# on a developer's machine without it the browser tests are skipped; in CI (.ci/run installs it) they must run
pytestmark = pytest.mark.skipif(CHROMIUM is None and not os.environ.get("CI"),
                                reason="chromium is not installed (.ci/run installs it)")
BROWSER_TIMEOUT_S = 90


class _Dom(HTMLParser):
    """The parts of the dumped DOM the checks need: images, body attributes, rows per table."""

    def __init__(self):
        super().__init__()
        self.images: list[dict] = []
        self.body: dict = {}
        self.rows: dict[str, int] = {}
        self._tables: list[str] = []
        self._in_body_of: list[bool] = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs)
        elif tag == "body":
            self.body = attrs
        elif tag == "table":
            self._tables.append(attrs.get("id", ""))
        elif tag == "tbody":
            self._in_body_of.append(True)
        elif tag == "tr" and self._tables and self._in_body_of:
            self.rows[self._tables[-1]] = self.rows.get(self._tables[-1], 0) + 1

    def handle_endtag(self, tag):
        if tag == "table" and self._tables:
            self._tables.pop()
        elif tag == "tbody" and self._in_body_of:
            self._in_body_of.pop()


def _render(page, profile) -> tuple[_Dom, list[str]]:
    """Load ``page`` in headless Chromium; the DOM after load and every console line it logged."""
    done = subprocess.run(
        [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={profile}",
         "--enable-logging=stderr", "--v=0", "--virtual-time-budget=10000", "--dump-dom", page.as_uri()],
        capture_output=True, text=True, timeout=BROWSER_TIMEOUT_S,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    dom = _Dom()
    dom.feed(done.stdout)
    console = [line for line in done.stderr.splitlines() if ":CONSOLE" in line]
    return dom, console


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("browser")
    log = world.write_drive_log(folder / "drive.log", extra_goal_s=6.0)
    assert main(["replay", str(log), "--out", str(folder / "report")]) == 0
    return folder / "report"


def test_every_picture_loads_one_row_per_replan_no_console_message(report, tmp_path):
    with open(report / "replans.csv", newline="", encoding="utf-8") as file:
        rows = list(csv.DictReader(file))
    dom, console = _render(report / "index.html", tmp_path / "profile")
    assert len(rows) == 3
    assert len(dom.images) == len(rows)  # one picture per replan
    assert [image.get("data-loaded") for image in dom.images] == ["yes"] * len(rows)
    assert dom.body.get("data-images-loaded") == f"{len(rows)}/{len(rows)}"
    assert dom.rows.get("replans") == len(rows)
    assert console == []


def test_the_compare_report_loads_too(tmp_path, report):
    log = report.parent / "drive.log"
    a, b = tmp_path / "A.toml", tmp_path / "B.toml"
    a.write_text("", encoding="utf-8")
    b.write_text("[search]\nmax_expansions = 5\n", encoding="utf-8")
    assert main(["replay", str(log), "--compare", str(a), str(b), "--out", str(tmp_path / "cmp")]) == 1
    with open(tmp_path / "cmp/replans.csv", newline="", encoding="utf-8") as file:
        rows = list(csv.DictReader(file))
    dom, console = _render(tmp_path / "cmp/index.html", tmp_path / "profile")
    assert dom.images and all(image.get("data-loaded") == "yes" for image in dom.images)
    assert dom.rows.get("replans") == len(rows)  # A's and B's replans
    assert dom.rows.get("totals", 0) > 0 and dom.rows.get("pairs", 0) > 0
    assert console == []


def test_the_checks_catch_a_missing_picture_and_a_console_error(report, tmp_path):
    broken = tmp_path / "broken"
    shutil.copytree(report, broken)
    first = sorted((broken / "pictures").glob("*.png"))[0]
    first.unlink()
    page = broken / "index.html"
    page.write_text(page.read_text(encoding="utf-8").replace(
        "</body>", '<script>console.error("planted fault");</script></body>'), encoding="utf-8")
    dom, console = _render(page, tmp_path / "profile")
    loaded = [image.get("data-loaded") for image in dom.images]
    assert loaded.count("no") == 1 and loaded.count("yes") == len(loaded) - 1
    assert any("planted fault" in line for line in console)
