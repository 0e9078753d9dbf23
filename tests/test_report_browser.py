"""The HTML report in a real headless browser (Debian's chromium, driven by playwright).

The page is loaded from a file:// URL with the network off (the browser context is
offline and every request other than the page itself is aborted and recorded); it must
raise no console error, draw one point per front design and show the chosen design's
detail. Skipped only where /usr/bin/chromium is missing (.ci/run installs it).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from chiropt.cli import main

CHROMIUM = Path("/usr/bin/chromium")
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]

pytestmark = pytest.mark.skipif(not CHROMIUM.exists(), reason=(
    "no /usr/bin/chromium: install Debian's chromium (apt-get install -y chromium, as "
    ".ci/run does) to run the browser tests of the report"))


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=FLAGS)
        yield b
        b.close()


class Page:
    """A report opened offline; ``problems`` collects console errors, page errors and any
    request that is not the page file itself."""

    def __init__(self, browser, path: Path):
        self.context = browser.new_context(offline=True, viewport={"width": 1400,
                                                                   "height": 900})
        self.page = self.context.new_page()
        self.page.set_default_timeout(60_000)
        self.problems: list[str] = []
        url = path.resolve().as_uri()

        def route(r):
            if r.request.url != url:
                self.problems.append(f"request {r.request.url}")
                return r.abort()
            return r.continue_()

        self.page.route("**/*", route)
        self.page.on("console", lambda m: m.type == "error" and self.problems.append(
            f"console: {m.text}"))
        self.page.on("pageerror", lambda e: self.problems.append(f"page error: {e}"))
        self.page.goto(url)
        self.page.wait_for_selector(".detail-title")

    def close(self):
        self.context.close()


def _front_rows(run_dir: Path) -> int:
    lines = (run_dir / "front.csv").read_text().splitlines()
    return sum(1 for ln in lines if not ln.startswith("#")) - 1


def test_report_page_works_offline_and_shows_the_chosen_design(browser, report_runs,
                                                               tmp_path, capsys):
    # common practice, no source: the page is usable as shipped, from a file, offline
    run_dir = report_runs["si"]
    out = tmp_path / "report.html"
    assert main(["report", str(run_dir), "--out", str(out), "--quiet"]) == 0
    page = Page(browser, out)
    try:
        p = page.page
        n = _front_rows(run_dir)
        assert n >= 3
        points = p.locator("#front-0 circle.pt")
        assert points.count() == n
        assert p.inner_text("#detail-0 .detail-title") == "Front design 0"
        assert p.locator("#detail-low-0 .maps svg image").count() == 3
        points.nth(n - 1).click()
        assert p.inner_text("#detail-0 .detail-title") == f"Front design {n - 1}"
        assert p.get_attribute("#detail-low-0", "data-index") == str(n - 1)
        # the values shown are that design's row of front.csv
        shown = p.inner_text("#detail-0")
        assert "particles[0].radius_nm" in shown and "lattice.period_nm" in shown
        p.keyboard.press("ArrowLeft")
        assert p.inner_text("#detail-0 .detail-title") == f"Front design {n - 2}"
        assert page.problems == []
    finally:
        page.close()


def test_report_of_two_runs_overlays_the_fronts(browser, report_runs, tmp_path, capsys):
    runs = [report_runs["si"], report_runs["tio2"]]
    out = tmp_path / "two.html"
    assert main(["report", *map(str, runs), "--out", str(out), "--quiet"]) == 0
    page = Page(browser, out)
    try:
        p = page.page
        sizes = [_front_rows(r) for r in runs]
        assert p.locator("#overlay circle.overlay-pt").count() == sum(sizes)
        assert p.locator("#front-1 circle.pt").count() == sizes[1]
        assert p.is_hidden("#run-1")
        p.locator('#overlay circle[data-run="1"]').nth(sizes[1] - 1).click()
        assert p.is_visible("#run-1") and p.is_hidden("#run-0")
        assert p.inner_text("#detail-1 .detail-title") == f"Front design {sizes[1] - 1}"
        assert page.problems == []
    finally:
        page.close()
