"""Hostile text in every free-text field of a spec comes out inert on every built page.

The payloads in ``tests/data/xss/payloads.txt`` (script tags, event handlers, ``javascript:`` and
``data:`` URLs, SVG and MathML, frames, style tricks, template syntax, entity and broken-tag
tricks) are planted in a copy of the demo: titles, measurands, tags, notes, interference sources,
waiver reasons, safety notes and the system name.  Each page is then parsed with
``html.parser`` and held to a short list of what the site itself emits; a sample is opened in
headless Chromium, where no dialog may fire.  Ids are restricted by the loader, so a hostile id
must be refused there (see also tests/test_output_safety.py).
"""

from __future__ import annotations

import html
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest
from markupsafe import escape

from generator.build import site
from generator.errors import SpecErrors
from generator.load import load_spec

from .conftest import DATA, DEMO
from .test_browser import Watch, browser_page, chart_problems, visit  # noqa: F401  (browser_page is a fixture)

PAYLOADS = [line for line in (DATA / "xss" / "payloads.txt").read_text(encoding="utf-8").splitlines()
            if line.strip() and not line.startswith("#")]
TEMPLATE_TEXT = "{{ 7*7 }}"
RAW_TEXT = "{% raw %}{{ config }}{% endraw %}"

# What the site itself puts on a page, and nothing else of these kinds.
FORBIDDEN_TAGS = {
    "iframe", "frame", "frameset", "object", "embed", "applet", "svg", "math", "base", "form", "input",
    "button", "textarea", "style", "noscript", "details", "img", "video", "audio", "source",
}  # fmt: skip
URL_ATTRIBUTES = ("href", "src", "action", "formaction", "data", "xlink:href", "poster", "background", "srcdoc")
BAD_SCHEMES = ("javascript:", "data:", "vbscript:")
# The overview's own filter form, exactly as site_templates/overview.html writes it.
OWN_FORM = {
    "form": {"class": "filters", "role": "search", "data-table": "channel-table"},
    "input": {"type": "search", "name": "q", "placeholder": "id, title, filter…", "autocomplete": "off"},
}
CHART_DATA_ID = re.compile(r"^chart-[a-z]+-data$")
ROWS_DATA_ID = "channel-rows"  # the overview's channel rows as JSON (generator/views.py rows_json)


def _rows_problems(body: str) -> list[str]:
    """The overview's row data: a JSON array of 13-string rows whose links stay inside the site."""
    try:
        rows = json.loads(body)
    except ValueError:
        return ["channel rows are not JSON"]
    if not isinstance(rows, list):
        return ["channel rows are not a list"]
    problems = []
    for row in rows:
        if not (isinstance(row, list) and len(row) == 13 and all(isinstance(v, str) for v in row)):
            problems.append(f"channel row {str(row)[:80]!r} is not 13 strings")
        elif not row[1].startswith("channels/") or _scheme(row[1]).startswith(BAD_SCHEMES) or ":" in row[1]:
            problems.append(f"channel row link {row[1]!r}")
    return problems


def _toml(text: str) -> str:
    """A TOML basic string: JSON's escapes (\\", \\\\, \\n, \\uXXXX) are all valid TOML."""
    return json.dumps(text, ensure_ascii=False)


def _pick(k: int, n: int = 3) -> list[str]:
    """Payloads k, k+17, k+34...: over 17 channels every payload lands in every short field."""
    return [PAYLOADS[(k + 17 * i) % len(PAYLOADS)] for i in range(n)]


def _plant(specs: Path) -> dict[str, str]:
    """Plant the corpus in every channel of ``specs``; returns channel id -> planted title."""
    system = specs / "system.toml"
    text, n = re.subn(r'^name = ".*"$', "name = " + _toml("Rig " + PAYLOADS[0] + " " + TEMPLATE_TEXT),
                      system.read_text(encoding="utf-8"), count=1, flags=re.M)
    assert n == 1
    system.write_text(text, encoding="utf-8")
    everything = " ".join(PAYLOADS)
    titles: dict[str, str] = {}
    for k, path in enumerate(sorted((specs / "channels").glob("*.md"))):
        _, header, notes = path.read_text(encoding="utf-8").split("+++\n", 2)
        title = " ".join([TEMPLATE_TEXT, *_pick(k), RAW_TEXT])
        titles[path.stem] = title
        header, n = re.subn(r'^title = ".*"$', "title = " + _toml(title), header, count=1, flags=re.M)
        assert n == 1
        header = re.sub(r"^(measurand|tags) = .*\n", "", header, flags=re.M)
        top = f"measurand = {_toml(' '.join(_pick(k + 1)))}\ntags = [{', '.join(_toml(p) for p in _pick(k + 2))}]\n"
        header = re.sub(r"^(title = .*\n)", lambda m, top=top: m.group(1) + top, header, count=1, flags=re.M)
        header = re.sub(r"^reason = .*$", lambda _m: "reason = " + _toml(everything), header, flags=re.M)
        if re.search(r"^\[safety\]$", header, flags=re.M):
            header = re.sub(r"^note = .*$", lambda _m: "note = " + _toml(everything), header, flags=re.M)
        else:
            header += f"\n[safety]\nnote = {_toml(everything)}\n"
        if re.search(r'^kind = "input"$', header, flags=re.M):
            for i, p in enumerate(_pick(k + 3)):
                header += f'\n[[interference]]\nfrequency = "{70 + i} kHz"\nlevel = "-40 dBFS"\nsource = {_toml(p)}\n'
        notes = notes + "\n\n" + "\n\n".join(PAYLOADS) + "\n"
        path.write_text("+++\n" + header + "+++\n" + notes, encoding="utf-8")
    return titles


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.scripts: list[tuple[dict[str, str], str]] = []
        self.h1: list[str] = []
        self._open: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append((tag, a))
        if tag in ("script", "h1"):
            self._open = tag
            if tag == "script":
                self.scripts.append((a, ""))
            else:
                self.h1.append("")

    def handle_data(self, data: str) -> None:
        if self._open == "script":
            self.scripts[-1] = (self.scripts[-1][0], self.scripts[-1][1] + data)
        elif self._open == "h1":
            self.h1[-1] += data

    def handle_endtag(self, tag: str) -> None:
        if tag == self._open:
            self._open = None


def _scheme(value: str) -> str:
    """The URL as a browser reads its scheme: control characters and spaces dropped, lower case."""
    return "".join(c for c in html.unescape(value) if c > " ").lower()


def page_problems(page: Path, site_root: Path) -> list[str]:
    """Everything on one built page that the site did not put there itself."""
    parsed = _Page()
    parsed.feed(page.read_text(encoding="utf-8"))
    root = "../" if page.parent != site_root else ""
    problems: list[str] = []
    for tag, attrs in parsed.tags:
        if tag in FORBIDDEN_TAGS and not (page.name == "index.html" and OWN_FORM.get(tag) == attrs):
            problems.append(f"<{tag}> {attrs}")
        for name, value in attrs.items():
            if name.startswith("on"):
                problems.append(f"<{tag}> handler {name}={value!r}")
            if name in URL_ATTRIBUTES and _scheme(value).startswith(BAD_SCHEMES):
                problems.append(f"<{tag}> {name}={value!r}")
            if name == "style" and re.search(r"expression|url\(|javascript|@import", value, re.I):
                problems.append(f"<{tag}> style={value!r}")
        if tag == "link" and attrs != {"rel": "stylesheet", "href": f"{root}assets/site.css"}:
            problems.append(f"<link> {attrs}")
        if tag == "meta" and set(attrs) - {"charset", "name", "content"}:
            problems.append(f"<meta> {attrs}")
    own_sources = {f"{root}assets/site.js", f"{root}assets/plotly.min.js"}
    for attrs, body in parsed.scripts:
        if "src" in attrs:  # the site's two bundles, and nothing inline beside them
            if set(attrs) != {"src"} or attrs["src"] not in own_sources or body.strip():
                problems.append(f"<script> {attrs} {body[:80]!r}")
        elif (set(attrs) == {"type", "id"} and attrs == {"type": "application/json", "id": ROWS_DATA_ID}
              and page.name == "index.html" and page.parent == site_root):
            problems.extend(_rows_problems(body))  # the overview's rows, on the overview only
        elif set(attrs) == {"type", "id"} and attrs["type"] == "application/json" and CHART_DATA_ID.match(attrs["id"]):
            try:
                json.loads(body)  # chart data: inert JSON that never closes its element early
            except ValueError:
                problems.append(f"chart data {attrs['id']} is not JSON")
        else:
            problems.append(f"<script> {attrs} {body[:80]!r}")
    return problems


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, str]]:
    root = tmp_path_factory.mktemp("xss")
    specs = root / "specs"
    shutil.copytree(DEMO, specs)
    titles = _plant(specs)
    out = root / "site"
    site.build(specs, out)
    return out, titles


def test_the_corpus_is_broad() -> None:
    assert len(PAYLOADS) >= 30 and len(set(PAYLOADS)) == len(PAYLOADS)
    text = "\n".join(PAYLOADS).lower()
    for kind in ("<script", " onerror=", "javascript:", "data:text/html", "<svg", "<iframe", "<object", "<embed",
                 "expression(", TEMPLATE_TEXT, "{% raw %}", "&#60;", "<math"):
        assert kind in text, kind


def test_every_page_is_inert(hostile: tuple[Path, dict[str, str]]) -> None:
    out, titles = hostile
    pages = sorted(out.rglob("*.html"))
    assert len(pages) == 5 + len(titles)
    for page in pages:
        assert page_problems(page, out) == [], page.relative_to(out)
        raw = page.read_text(encoding="utf-8")
        # the system name is on every page: template text shows literally, never evaluated
        assert TEMPLATE_TEXT in raw, page.relative_to(out)


def test_planted_text_is_shown_as_text(hostile: tuple[Path, dict[str, str]]) -> None:
    out, titles = hostile
    for cid, title in titles.items():
        page = out / "channels" / f"{cid}.html"
        parsed = _Page()
        raw = page.read_text(encoding="utf-8")
        parsed.feed(raw)
        assert parsed.h1 and title in parsed.h1[0], cid  # every character of the title reaches the reader
        assert RAW_TEXT in raw and TEMPLATE_TEXT in raw
        assert "&lt;script&gt;" in raw  # escaped, not dropped
    index = (out / "index.html").read_text(encoding="utf-8")
    assert index.count(TEMPLATE_TEXT) >= len(titles)  # every title in the channel table, literally
    parsed = _Page()
    parsed.feed(index)
    data = [body for attrs, body in parsed.scripts if attrs.get("id") == ROWS_DATA_ID]
    assert len(data) == 1  # the row data the checker accepts is there, once, and holds every title intact
    assert {row[0]: row[2] for row in json.loads(data[0])} == titles
    # waiver reasons and safety notes hold the whole corpus; jinja's escape is the expected text
    everything = str(escape(" ".join(PAYLOADS)))
    assert everything in (out / "findings.html").read_text(encoding="utf-8")
    for cid in ("I-GEN-A", "PITCH-VLV", "SHK-DRV"):  # channels whose caution box shows the note
        assert everything in (out / "channels" / f"{cid}.html").read_text(encoding="utf-8"), cid


def _strings(value: object) -> list[str]:
    if isinstance(value, str):
        return [value]
    if isinstance(value, dict):
        return [s for v in value.values() for s in _strings(v)]
    if isinstance(value, list):
        return [s for v in value for s in _strings(v)]
    return []


def test_chart_labels_carry_interference_sources_escaped(hostile: tuple[Path, dict[str, str]]) -> None:
    # plotly renders hover text as a subset of HTML, so a source must reach it escaped
    out, _titles = hostile
    seen = 0
    for page in sorted((out / "channels").glob("*.html")):
        parsed = _Page()
        parsed.feed(page.read_text(encoding="utf-8"))
        for attrs, body in parsed.scripts:
            if attrs.get("type") != "application/json":
                continue
            for text in _strings(json.loads(body)):
                own = re.sub(r"<br>|</?extra>|</?b>|</?i>", "", text)  # the site's own hover markup
                assert "<" not in own, (page.name, text)
                seen += "&lt;" in text
    assert seen > 10  # the planted sources did reach the charts


def test_the_checker_catches_what_it_looks_for(tmp_path: Path) -> None:
    # each kind of breach, written into a page by hand, is reported
    bad = [
        "<script>alert(1)</script>", '<img src=x onerror="alert(1)">', '<a href=" JaVa&#x09;script:alert(1)">x</a>',
        '<a href="data:text/html,x">x</a>', "<iframe></iframe>", "<svg></svg>", '<div style="x:expression(1)">',
        '<script src="https://evil.invalid/x.js"></script>',
        '<script type="application/json" id="chart-x-data">{</script>',
        '<script type="application/json" id="channel-rows">[["a"</script>',
        '<script type="application/json" id="channel-rows">{"a": 1}</script>',
        '<script type="application/json" id="channel-rows">[["A","javascript:alert(1)"' + ',"x"' * 11 + ']]</script>',
        '<script type="application/json" id="channel-rows">[["A","channels/A.html"]]</script>',
        '<script type="application/json" id="channel-rows" onload="x">[]</script>',
        '<script type="text/javascript" id="channel-rows">[]</script>',
        '<link rel="stylesheet" href="https://evil.invalid/x.css">', '<meta http-equiv="refresh" content="0">',
    ]
    for snippet in bad:
        for name in ("p.html", "index.html"):  # index.html: where the row data may be, and only valid
            page = tmp_path / name
            page.write_text(f"<html><body>{snippet}</body></html>", encoding="utf-8")
            assert page_problems(page, tmp_path), (name, snippet)
        (tmp_path / "index.html").unlink()
    good = tmp_path / "g.html"
    good.write_text('<link rel="stylesheet" href="assets/site.css"><script src="assets/site.js"></script>'
                    '<script type="application/json" id="chart-noise-data">{"a": "\\u003c/script>"}</script>',
                    encoding="utf-8")
    assert page_problems(good, tmp_path) == []
    rows = ('<script type="application/json" id="channel-rows">[["A","channels/A.html"' + ',"\\u003c/script>"' * 11
            + ']]</script>')
    index = tmp_path / "index.html"
    index.write_text(rows, encoding="utf-8")
    assert page_problems(index, tmp_path) == []
    (tmp_path / "channels").mkdir()
    elsewhere = tmp_path / "channels" / "index.html"  # the row data belongs to the overview alone
    elsewhere.write_text(rows, encoding="utf-8")
    assert page_problems(elsewhere, tmp_path)
    assert page_problems(good, tmp_path) == []


@pytest.mark.parametrize("name", ["<script>", "a onerror=x", "{{ 7*7 }}", 'x"y', "javascript:alert(1)"])
def test_a_hostile_id_is_refused_by_the_loader(tmp_path: Path, name: str) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(DATA / "minimal", specs)
    shutil.copyfile(specs / "channels" / "ACC-1.md", specs / "channels" / f"{name}.md")
    with pytest.raises(SpecErrors) as caught:
        load_spec(specs)
    messages = [e.format() for e in caught.value.errors]
    assert any("not a usable channel id" in m and name in m for m in messages), messages


SAMPLE = ("index.html", "findings.html", "book.html", "channels/ACC-GBX-01.html", "channels/SHK-DRV.html",
          "channels/TMP-MB-01.html")


@pytest.mark.parametrize("rel", SAMPLE)
def test_no_dialog_fires_in_the_browser(browser_page: tuple[Any, Watch],  # noqa: F811
                                        hostile: tuple[Path, dict[str, str]], rel: str) -> None:
    page, watch = browser_page
    out, _titles = hostile
    visit(page, watch, out / rel)
    for link in page.locator("main a", has_text=re.compile(r"click u\d")).all():
        link.click(timeout=2000)  # a javascript: or data: link that survived would act here
    page.hover("main h1")
    page.wait_for_timeout(200)
    assert watch.dialogs == []
    assert page.evaluate("() => window.__xss === undefined")
    # plotly draws its own <svg> inside each div.chart and one measuring svg#js-plotly-tester in <body>;
    # anything else of these kinds was planted
    planted = page.evaluate("""() => Array.from(document.querySelectorAll('iframe, object, embed, img, svg, math'))
                                  .filter(el => !el.closest('div.chart') && el.id !== 'js-plotly-tester')
                                  .map(el => el.outerHTML.slice(0, 80))""")
    assert planted == []
    assert page.locator("[id='xss-img']").count() == 0
    if rel.startswith("channels/"):
        assert TEMPLATE_TEXT in (page.locator("main h1").text_content() or "")
        assert chart_problems(page) == []
    assert watch.problems == [], watch.problems
