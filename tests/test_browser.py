"""The built demo site in real headless Chromium: pages load clean, charts draw, the table works.

Chromium comes from the system (Debian's ``chromium`` package at /usr/bin/chromium) and is
driven through Playwright with ``executable_path``; Playwright's own browser download is never
used.  Without Chromium or Playwright these tests skip, except when the environment variable
``CI`` is set: there a missing browser fails the run.

One browser and one page serve every navigation of this module: a fresh page would parse the
4.8 MB plotly bundle from scratch each time.  Screenshots land in ``test-artifacts/`` at the
repository root (gitignored) for a person to look at.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from generator import views
from generator.build import site

from .conftest import DEMO, ROOT

CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-background-networking",
    "--disable-component-update", "--no-first-run",
]
ARTIFACTS = ROOT / "test-artifacts"

# A sample of channel pages: inputs with a folding chart, an output, the image channel.
SAMPLE_CHANNELS = ("ACC-GBX-01", "TACHO-HSS", "PITCH-VLV", "CAM-TIP")
TOP_PAGES = ("index.html", "budgets.html", "findings.html", "rules.html")

XSS_TITLE = "Gearbox <img id=xss-title src=x onerror=alert(1)> probe <script>alert(2)</script>"
XSS_NOTES = """
<script>window.__xss = 1; alert(3)</script>
<img id="xss-notes-img" src="x" onerror="alert(4)">
<svg id="xss-notes-svg" onload="alert(5)"></svg>
[click me](javascript:alert(6))
<a id="xss-notes-a" href="javascript:alert(7)">also me</a>
<iframe id="xss-notes-frame" srcdoc="<script>parent.alert(8)</script>"></iframe>
"""
XSS_IDS = ("xss-title", "xss-notes-img", "xss-notes-svg", "xss-notes-a", "xss-notes-frame")


def _missing_browser() -> str | None:
    """Why the browser tests cannot run here, or None when they can."""
    try:
        import playwright.sync_api  # noqa: F401
    except ImportError:
        return "playwright is not installed (pip install -e '.[test]')"
    if not CHROMIUM.is_file():
        return f"Chromium is not installed at {CHROMIUM} (apt-get install chromium)"
    return None


class Watch:
    """Console errors, page errors, failed requests and dialogs seen since the last reset."""

    def __init__(self) -> None:
        self.problems: list[str] = []
        self.dialogs: list[str] = []

    def reset(self) -> None:
        self.problems.clear()
        self.dialogs.clear()


@pytest.fixture(scope="module")
def browser_page() -> Iterator[tuple[Any, Watch]]:
    reason = _missing_browser()
    if reason is not None:
        if os.environ.get("CI"):
            pytest.fail(f"browser tests must run in CI: {reason}", pytrace=False)
        pytest.skip(reason)
    from playwright.sync_api import sync_playwright

    watch = Watch()
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=LAUNCH_ARGS, headless=True)
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        page.on("console", lambda m: watch.problems.append(f"console {m.type}: {m.text}")
                if m.type == "error" else None)
        page.on("pageerror", lambda e: watch.problems.append(f"page error: {e}"))
        page.on("requestfailed", lambda r: watch.problems.append(f"failed request: {r.url} ({r.failure})"))

        def on_dialog(d: Any) -> None:
            watch.dialogs.append(f"{d.type}: {d.message}")
            d.dismiss()

        page.on("dialog", on_dialog)
        try:
            yield page, watch
        finally:
            browser.close()


@pytest.fixture(scope="module")
def demo_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("browser") / "site"
    site.build(DEMO, out)
    return out


def visit(page: Any, watch: Watch, path: Path) -> None:
    watch.reset()
    page.emulate_media(media="screen")
    page.goto(path.resolve().as_uri(), wait_until="load")


def chart_problems(page: Any, timeout_ms: int = 8000) -> list[str]:
    """Every chart container on the open page, checked against the figure it promises.

    Returns one line per problem: a container with no ``svg.main-svg`` inside, or whose drawn
    trace count (plotly's ``el.data`` and the ``g.trace`` groups in the SVG) differs from the
    number of traces in the embedded figure JSON.  An empty list means every chart drew.
    """
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    with contextlib.suppress(PlaywrightTimeout):  # the per-chart report below says which one failed
        page.wait_for_function(
            """() => Array.from(document.querySelectorAll('div.chart[data-figure]'))
                   .every(el => el.querySelector('svg.main-svg'))""",
            timeout=timeout_ms,
        )
    found: list[dict[str, Any]] = page.evaluate(
        """() => Array.from(document.querySelectorAll('div.chart[data-figure]')).map(el => {
              const holder = document.getElementById(el.getAttribute('data-figure'));
              return {
                id: el.id,
                figure: holder ? holder.textContent : null,
                svg: el.querySelectorAll('svg.main-svg').length,
                data: Array.isArray(el.data) ? el.data.length : -1,
                groups: el.querySelectorAll('g.trace').length,
              };
           })"""
    )
    problems: list[str] = []
    for c in found:
        if c["figure"] is None:
            problems.append(f"{c['id']}: no embedded figure data")
            continue
        promised = len(json.loads(c["figure"])["data"])
        if c["svg"] == 0:
            problems.append(f"{c['id']}: no svg.main-svg drawn")
        if c["data"] != promised:
            problems.append(f"{c['id']}: plotly holds {c['data']} traces, the figure promises {promised}")
        if c["groups"] != promised:
            problems.append(f"{c['id']}: {c['groups']} trace groups drawn, the figure promises {promised}")
    return problems


def promised_charts(path: Path) -> int:
    return len(re.findall(r'<div class="chart"[^>]*data-figure=', path.read_text(encoding="utf-8")))


# ---------------------------------------------------------------------------------------------
# Pages load clean and charts draw
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("rel", [*TOP_PAGES, *(f"channels/{c}.html" for c in SAMPLE_CHANNELS)])
def test_page_loads_clean_and_charts_draw(browser_page: tuple[Any, Watch], demo_site: Path, rel: str) -> None:
    page, watch = browser_page
    visit(page, watch, demo_site / rel)
    assert page.locator("main h1").count() == 1
    problems = chart_problems(page)
    assert problems == []
    expected = promised_charts(demo_site / rel)
    assert page.locator("div.chart svg.main-svg").count() >= expected
    assert watch.problems == [], watch.problems
    assert watch.dialogs == []


def test_sample_includes_drawn_charts(demo_site: Path) -> None:
    # the chart checks above must see real charts, not only chart-free pages
    assert sum(promised_charts(demo_site / "channels" / f"{c}.html") for c in SAMPLE_CHANNELS) >= 2


def test_screenshots_for_a_person(browser_page: tuple[Any, Watch], demo_site: Path) -> None:
    page, watch = browser_page
    ARTIFACTS.mkdir(exist_ok=True)
    for rel, name in (("index.html", "overview.png"), ("channels/ACC-GBX-01.html", "channel-ACC-GBX-01.png")):
        visit(page, watch, demo_site / rel)
        assert chart_problems(page) == []
        target = ARTIFACTS / name
        page.screenshot(path=str(target), full_page=True)
        assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert target.stat().st_size > 10_000


# ---------------------------------------------------------------------------------------------
# The channel table
# ---------------------------------------------------------------------------------------------


def _visible_rows(page: Any) -> list[dict[str, str]]:
    rows: list[dict[str, str]] = page.evaluate(
        """() => Array.from(document.querySelectorAll('#channel-table tbody tr'))
              .filter(r => !r.hidden && r.offsetParent !== null)
              .map(r => ({text: r.textContent.toLowerCase(), status: r.getAttribute('data-status'),
                          rate: r.cells[7].getAttribute('data-sort'), id: r.cells[0].textContent.trim()}))"""
    )
    return rows


def test_filter_narrows_rows(browser_page: tuple[Any, Watch], demo_site: Path) -> None:
    page, watch = browser_page
    visit(page, watch, demo_site / "index.html")
    every = _visible_rows(page)
    assert len(every) == len(list((DEMO / "channels").glob("*.md")))
    page.fill("form.filters input[name=q]", "acc-")
    narrowed = _visible_rows(page)
    assert 0 < len(narrowed) < len(every)
    assert all("acc-" in r["text"] for r in narrowed)
    assert len(narrowed) == sum("acc-" in r["text"] for r in every)
    assert page.locator("form.filters output[name=shown]").text_content() == f"{len(narrowed)} of {len(every)}"
    page.fill("form.filters input[name=q]", "no-such-channel-anywhere")
    assert _visible_rows(page) == []
    page.fill("form.filters input[name=q]", "")
    assert len(_visible_rows(page)) == len(every)
    assert watch.problems == []


def test_sort_by_data_rate_is_numeric(browser_page: tuple[Any, Watch], demo_site: Path) -> None:
    page, watch = browser_page
    visit(page, watch, demo_site / "index.html")
    header = page.locator("#channel-table thead th", has_text="Data rate")
    header.click()
    rates = [r["rate"] for r in _visible_rows(page)]
    numbers = [float(r) for r in rates if r]
    assert numbers == sorted(numbers)
    assert rates[: len(numbers)] == [r for r in rates if r]  # blank rates, if any, last
    # the demo's rates differ in digit count, so text order would differ from numeric order
    assert sorted(numbers, key=str) != sorted(numbers)
    assert header.get_attribute("aria-sort") == "ascending"
    header.click()
    down = [float(r["rate"]) for r in _visible_rows(page) if r["rate"]]
    assert down == sorted(numbers, reverse=True)
    assert header.get_attribute("aria-sort") == "descending"
    assert watch.problems == []


def test_status_filter(browser_page: tuple[Any, Watch], demo_site: Path) -> None:
    page, watch = browser_page
    visit(page, watch, demo_site / "index.html")
    every = _visible_rows(page)
    statuses = sorted({r["status"] for r in every})
    assert len(statuses) >= 2  # the demo has ok and warning channels
    for status in statuses:
        page.select_option("form.filters select[name=status]", status)
        shown = _visible_rows(page)
        assert shown, status
        assert {r["status"] for r in shown} == {status}
        assert len(shown) == sum(r["status"] == status for r in every)
    page.select_option("form.filters select[name=status]", "")
    assert len(_visible_rows(page)) == len(every)
    assert watch.problems == []


# The data-driven table past its first rows: the demo built with 5 rows written as HTML, so sort,
# filter, "show more" and print work on rows the page never wrote as HTML.
# ---------------------------------------------------------------------------------------------

FIRST = 5


@pytest.fixture(scope="module")
def chunked_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("chunked") / "site"
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(views, "TABLE_FIRST_ROWS", FIRST)
        site.build(DEMO, out)
    return out


def _all_rows(site_dir: Path) -> list[list[str]]:
    html = (site_dir / "index.html").read_text(encoding="utf-8")
    found = re.search(r'<script type="application/json" id="channel-rows">(.*?)</script>', html, re.S)
    assert found
    rows: list[list[str]] = json.loads(found.group(1))
    return rows


def test_chunked_table_shows_more_on_demand(browser_page: tuple[Any, Watch], chunked_site: Path) -> None:
    page, watch = browser_page
    every = _all_rows(chunked_site)
    assert len(every) == len(list((DEMO / "channels").glob("*.md"))) > 2 * FIRST
    visit(page, watch, chunked_site / "index.html")
    written = _visible_rows(page)  # the rows the page wrote as HTML
    assert [r["id"] for r in written] == [r[0] for r in every[:FIRST]]
    assert page.locator("form.filters output[name=shown]").text_content() == f"{len(every)} of {len(every)}"
    page.fill("form.filters input[name=q]", "a")
    page.fill("form.filters input[name=q]", "")  # now every row shown is drawn from the data
    drawn = _visible_rows(page)
    assert [re.sub(r"\s+", "", r["text"]) for r in drawn] == [re.sub(r"\s+", "", r["text"]) for r in written]
    assert page.locator("#channel-table").get_attribute("aria-rowcount") == str(len(every) + 1)
    page.locator("#channel-table-more button", has_text="more").click()
    assert [r["id"] for r in _visible_rows(page)] == [r[0] for r in every[: 2 * FIRST]]
    page.locator("#channel-table-more button", has_text="all").click()
    shown = _visible_rows(page)
    assert [r["id"] for r in shown] == [r[0] for r in every]
    assert not page.locator("#channel-table-more").is_visible()
    # the rows drawn from the data carry what the HTML rows carry: link, kind, status, sort keys
    html_rows = (chunked_site / "index.html").read_text(encoding="utf-8").count('<tr data-kind="')
    assert html_rows == FIRST
    for r, row in zip(shown, every, strict=True):
        assert r["status"] == row[12] and r["rate"] == row[11]
    assert page.locator("#channel-table tbody a").nth(len(every) - 1).get_attribute("href") == every[-1][1]
    assert watch.problems == []


def test_chunked_filter_and_sort_use_every_row(browser_page: tuple[Any, Watch], chunked_site: Path) -> None:
    page, watch = browser_page
    every = _all_rows(chunked_site)
    visit(page, watch, chunked_site / "index.html")
    # the status filter counts rows the page never wrote as HTML
    status = "warning"
    expected = [r[0] for r in every if r[12] == status]
    assert 0 < len(expected) < len(every)
    page.select_option("form.filters select[name=status]", status)
    assert page.locator("form.filters output[name=shown]").text_content() == f"{len(expected)} of {len(every)}"
    assert [r["id"] for r in _visible_rows(page)] == expected[:FIRST]
    page.select_option("form.filters select[name=status]", "")
    # sorting by data rate puts the smallest rates of the whole set first, not of the first rows
    page.locator("#channel-table thead th", has_text="Data rate").click()
    smallest = sorted(float(r[11]) for r in every if r[11])[:FIRST]
    assert [float(r["rate"]) for r in _visible_rows(page)] == smallest
    page.locator("#channel-table thead th", has_text="Data rate").click()
    largest = sorted((float(r[11]) for r in every if r[11]), reverse=True)[:FIRST]
    assert [float(r["rate"]) for r in _visible_rows(page)] == largest
    # printing shows every matching row
    page.fill("form.filters input[name=q]", "-")
    matching = page.locator("form.filters output[name=shown]").text_content() or ""
    count = int(matching.split(" of ")[0])
    assert count > FIRST and len(_visible_rows(page)) == FIRST
    page.evaluate("() => window.dispatchEvent(new Event('beforeprint'))")
    assert len(_visible_rows(page)) == count
    assert watch.problems == []


# ---------------------------------------------------------------------------------------------
# Hostile spec text, print, and a broken bundle
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def hostile_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("hostile")
    specs = root / "specs"
    shutil.copytree(DEMO, specs)
    path = specs / "channels" / "ACC-GBX-01.md"
    text = path.read_text(encoding="utf-8")
    text, n = re.subn(r'^title = ".*"$', "title = " + json.dumps(XSS_TITLE), text, count=1, flags=re.M)
    assert n == 1
    path.write_text(text.rstrip("\n") + "\n" + XSS_NOTES, encoding="utf-8")
    out = root / "site"
    site.build(specs, out)
    return out


@pytest.mark.parametrize("rel", ["channels/ACC-GBX-01.html", "index.html", "book.html"])
def test_planted_script_does_not_run(browser_page: tuple[Any, Watch], hostile_site: Path, rel: str) -> None:
    page, watch = browser_page
    html = (hostile_site / rel).read_text(encoding="utf-8")
    assert "probe" in html  # the planted title is on this page, as text
    visit(page, watch, hostile_site / rel)
    for link in page.locator("a", has_text="click me").all() + page.locator("a", has_text="also me").all():
        link.click(timeout=2000)  # a javascript: link that survived would fire its dialog here
    page.wait_for_timeout(200)
    assert watch.dialogs == []
    assert page.evaluate("() => window.__xss === undefined")
    for element_id in XSS_IDS:
        assert page.locator(f"[id='{element_id}']").count() == 0, element_id
    assert page.locator("main script:not([type='application/json'])").count() == 0
    assert page.locator("main iframe, main [onerror], main [onload]").count() == 0
    if rel.startswith("channels/"):
        assert "<img id=xss-title" in (page.locator("main h1").text_content() or "")  # shown, not run
        assert chart_problems(page) == []
    assert watch.problems == [], watch.problems


def test_print_hides_navigation_keeps_figures(browser_page: tuple[Any, Watch], demo_site: Path) -> None:
    page, watch = browser_page
    visit(page, watch, demo_site / "channels" / "ACC-GBX-01.html")
    assert page.locator("header.top nav").is_visible()
    page.emulate_media(media="print")
    assert page.evaluate("() => matchMedia('print').matches")
    assert not page.locator("header.top").is_visible()
    assert not page.locator("header.top nav").is_visible()
    assert not page.locator("p.crumbs").is_visible()
    figures = page.locator("table.figures")
    assert figures.is_visible()
    assert figures.locator("tbody tr").count() > 3
    page.emulate_media(media="screen")
    assert page.locator("header.top nav").is_visible()


@pytest.mark.parametrize("bundle", [b"", b"this is not javascript {{{ ]]]"], ids=["empty", "garbage"])
def test_chart_check_fails_on_a_broken_bundle(browser_page: tuple[Any, Watch], demo_site: Path,
                                              tmp_path: Path, bundle: bytes) -> None:
    page, watch = browser_page
    broken = tmp_path / "site"
    shutil.copytree(demo_site, broken)
    bundles = sorted((broken / "assets").glob("plotly*.js"))
    assert bundles
    for b in bundles:
        b.write_bytes(bundle)
    rel = "channels/ACC-GBX-01.html"
    assert promised_charts(broken / rel) >= 1
    visit(page, watch, broken / rel)
    problems = chart_problems(page, timeout_ms=1500)
    assert problems, "the chart check passed with a broken plotly bundle"
    assert any("no svg.main-svg" in p for p in problems)
    with pytest.raises(AssertionError):
        assert chart_problems(page, timeout_ms=100) == []
