"""The report opened in headless Chromium: no script errors, every image decodes, rows match,
the verdict comes first and numbers are set to be read (screenshot in test-artifacts/)."""

from __future__ import annotations

import pytest

from dochar.report import write_report
from tests.helpers import REPO
from tests.helpers.browser import LAUNCH_ARGS, require_chromium

pytestmark = pytest.mark.browser


def test_report_renders_cleanly_in_chromium(funsd_root, tmp_path):
    chromium = require_chromium()
    from playwright.sync_api import sync_playwright

    from tests.helpers.report_runs import funsd_runs

    runs = funsd_runs(funsd_root)
    path = write_report(runs, tmp_path / "report.html", title="FUNSD word labelling")
    problems: list[str] = []
    requests: list[str] = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(chromium), args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            page.on("console", lambda m: problems.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda error: problems.append(str(error)))
            page.on("request", lambda r: requests.append(r.url))
            page.goto(path.as_uri(), wait_until="load")
            rows = page.locator("#leaderboard-table tbody tr").count()
            widths = page.eval_on_selector_all(
                "img", "images => images.map(i => i.complete ? i.naturalWidth : 0)")
            first_heading = page.locator("main section h2").first.inner_text()
            verdict = page.locator("header #verdict")
            verdict_text = verdict.inner_text()
            verdict_bottom = verdict.bounding_box()["y"] + verdict.bounding_box()["height"]
            table_top = page.locator("#leaderboard-table").bounding_box()["y"]
            number_style = page.eval_on_selector(
                "#leaderboard-table td.num", "cell => [getComputedStyle(cell).textAlign, "
                "getComputedStyle(cell).fontVariantNumeric]")
            section_number = page.eval_on_selector(
                "main section h2", "h => getComputedStyle(h, '::before').content")
            overlay_boxes = page.locator(".overlay svg rect.w").count()
            document, viewport, tables = _widths(page)
            screenshot = REPO / "test-artifacts" / "report.png"
            screenshot.parent.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(screenshot), full_page=True)
        finally:
            browser.close()
    assert problems == []
    # Only the file itself and inline data: URIs may be requested (common practice for an
    # offline report: nothing outside the file).
    assert [u for u in requests if not u.startswith(("file://", "data:"))] == []
    assert rows == len(runs)
    assert widths and all(w > 0 for w in widths)
    assert first_heading == "Runs ranked by word macro-F1"
    # The page answers first: the verdict sits above the leaderboard and names the measure.
    assert verdict_bottom < table_top and "word macro-F1" in verdict_text
    # Numbers are right-aligned in equal-width figures; sections are numbered.
    assert number_style[0] == "right" and "tabular-nums" in number_style[1]
    assert section_number not in ("none", "normal", "")
    assert overlay_boxes > 0
    assert document <= viewport and [t for t in tables if t[1] > t[2]] == []


def _widths(page) -> tuple[int, int, list[tuple[str, int, int]]]:
    """Page width, viewport width and, per table, its own width against the room it has."""
    document = page.evaluate("document.documentElement.scrollWidth")
    viewport = page.evaluate("window.innerWidth")
    tables = page.eval_on_selector_all(
        "table", "ts => ts.map(t => [t.id || t.closest('section').id, t.scrollWidth, "
                 "Math.min(t.parentElement.clientWidth, window.innerWidth)])")
    return document, viewport, tables


@pytest.mark.parametrize("width", [1280, 1400, 1920])
def test_demo_report_fits_the_page_in_chromium(width, demo_report):
    chromium = require_chromium()
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(chromium), args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": width, "height": 900})
            page.goto(demo_report.as_uri(), wait_until="load")
            document, viewport, tables = _widths(page)
            edges = page.locator(".overlay svg path.edge").count()
            pictures = page.locator(".overlay svg image").count()
            screenshot = REPO / "test-artifacts" / f"demo-report-{width}.png"
            screenshot.parent.mkdir(parents=True, exist_ok=True)
            page.screenshot(path=str(screenshot), full_page=True)
        finally:
            browser.close()
    # Nothing wider than the window: no sideways scrolling of the page or of any table
    # (common practice for a page read on a laptop screen).
    assert document <= viewport
    assert tables and [t for t in tables if t[1] > t[2]] == []
    assert edges > 0
    assert pictures == 3   # every drawn page over its picture (the report's default 3 pages)


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    from tests.helpers.split_runs import demo_runs

    runs = demo_runs()
    return write_report(runs, tmp_path_factory.mktemp("demo") / "demo.html",
                        title="dochar — demo-like")
