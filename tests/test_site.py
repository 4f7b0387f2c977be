"""The published site: pages, links, determinism, sanitising, refusals and atomic replacement."""

from __future__ import annotations

import base64
import json
import shutil
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote, urlsplit

import numpy as np
import pytest

from generator import views
from generator.analysis import analyze
from generator.build import output, pages, site
from generator.charts import channel_charts, folding_chart
from generator.cli import EXIT_BAD_INPUT, EXIT_OK, main
from generator.errors import SpecError
from generator.load import load_spec
from generator.report import to_json
from generator.rules import run_rules

from .conftest import DEMO, MINIMAL

TOP_PAGES = ("index.html", "budgets.html", "findings.html", "rules.html", "book.html")


class _Page(HTMLParser):
    """Every tag with its attributes, the element ids, and the text inside each <script>."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.ids: set[str] = set()
        self.scripts: list[tuple[dict[str, str], str]] = []
        self._in_script: dict[str, str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "script":
            self._in_script = a
            self.scripts.append((a, ""))

    def handle_data(self, data: str) -> None:
        if self._in_script is not None:
            attrs, text = self.scripts[-1]
            self.scripts[-1] = (attrs, text + data)

    def handle_endtag(self, tag: str) -> None:
        if tag == "script":
            self._in_script = None


def parse(path: Path) -> _Page:
    p = _Page()
    p.feed(path.read_text(encoding="utf-8"))
    return p


def snapshot(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def html_files(folder: Path) -> list[Path]:
    return sorted(folder.rglob("*.html"))


@pytest.fixture(scope="module")
def demo_site(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "site"
    site.build(DEMO, out)
    return out


def _demo_ids() -> list[str]:
    return sorted(p.stem for p in (DEMO / "channels").rglob("*.md"))


# ---------------------------------------------------------------------------------------------
# The demo site
# ---------------------------------------------------------------------------------------------


def test_every_page_exists(demo_site: Path) -> None:
    for name in (*TOP_PAGES, "data/spec.json", "assets/site.css", "assets/site.js", pages.PLOTLY_ASSET, output.MARKER):
        assert (demo_site / name).is_file(), name
    for cid in _demo_ids():
        page = demo_site / "channels" / f"{cid}.html"
        assert page.is_file(), cid
        assert cid in page.read_text(encoding="utf-8")
    assert len(list((demo_site / "channels").iterdir())) == len(_demo_ids())


def test_every_relative_link_and_asset_resolves(demo_site: Path) -> None:
    ids_by_page = {p.resolve(): parse(p).ids for p in html_files(demo_site)}
    checked = 0
    for page in html_files(demo_site):
        for _tag, attrs in parse(page).tags:
            for name in ("href", "src"):
                if name not in attrs:
                    continue
                url = urlsplit(attrs[name])
                # nothing may leave the machine, and nothing may be addressed from the server root
                assert not url.scheme and not url.netloc, (page, attrs[name])
                assert not url.path.startswith("/"), (page, attrs[name])
                target = (page.parent / unquote(url.path)).resolve() if url.path else page.resolve()
                assert target.is_file(), f"{page.relative_to(demo_site)}: {attrs[name]}"
                assert demo_site.resolve() in target.parents
                if url.fragment and target.suffix == ".html":
                    assert url.fragment in ids_by_page[target], f"{page.relative_to(demo_site)}: {attrs[name]}"
                checked += 1
    assert checked > 100  # the nav alone gives 6 links on each of 22 pages


def test_exactly_one_plotly_bundle_shared_by_the_chart_pages(demo_site: Path) -> None:
    bundles = [p for p in demo_site.rglob("*.js") if "plotly" in p.name]
    assert bundles == [demo_site / pages.PLOTLY_ASSET]
    assert bundles[0].read_bytes() == pages.plotly_bundle().read_bytes()
    # plotly.js reads base64 typed arrays from 2.28 on (plotly.js changelog, from memory)
    head = bundles[0].read_text(encoding="utf-8", errors="replace")[:200]
    major, minor = (int(x) for x in head.split("plotly.js v", 1)[1].split(".")[:2])
    assert (major, minor) >= (2, 28)
    srcs = {a["src"] for _t, a in parse(demo_site / "channels" / "I-GEN-A.html").tags if _t == "script" and "src" in a}
    assert "../assets/plotly.min.js" in srcs


def test_second_build_is_byte_identical(demo_site: Path) -> None:
    before = snapshot(demo_site)
    site.build(DEMO, demo_site)  # over its own previous output: the marker allows it
    after = snapshot(demo_site)
    assert sorted(before) == sorted(after)
    changed = [name for name in before if before[name] != after[name]]
    assert not changed, changed


def test_spec_json_is_the_json_contract(demo_site: Path) -> None:
    analysis = analyze(load_spec(DEMO))
    expected = to_json(analysis, run_rules(analysis))
    assert (demo_site / "data" / "spec.json").read_text(encoding="utf-8") == expected


def test_channel_pages_are_small_and_show_every_figure(demo_site: Path) -> None:
    analysis = analyze(load_spec(DEMO))
    for result in analysis.channels:
        page = demo_site / "channels" / f"{result.channel.id}.html"
        assert page.stat().st_size < 60_000, page
        text = page.read_text(encoding="utf-8")
        for key in result.figures:
            assert f"<code>{key}</code>" in text, (result.channel.id, key)
    # engineering units, not raw SI floats: 51.2 kS/s shows as 51.2 kHz, fs/2 as 25.6 kHz
    text = (demo_site / "channels" / "ACC-GBX-01.html").read_text(encoding="utf-8")
    text = text.split('id="figures"', 1)[1].split('id="findings"', 1)[0]
    assert "51.2 kHz" in text and "25.6 kHz" in text and "51200.0" not in text


def test_overview_table_has_one_row_per_channel_with_sort_keys(demo_site: Path) -> None:
    page = parse(demo_site / "index.html")
    rows = [a for t, a in page.tags if t == "tr" and "data-kind" in a]
    assert len(rows) == len(_demo_ids())
    assert {a["data-status"] for a in rows} <= {"ok", "warning", "error"}
    assert "channel-table" in page.ids


def test_folding_chart_data_on_a_page_decodes_to_the_alias_frequencies(demo_site: Path) -> None:
    page = parse(demo_site / "channels" / "TACHO-HSS.html")
    figs = {a["id"]: json.loads(text) for a, text in page.scripts if a.get("type") == "application/json"}
    assert set(figs) == {"chart-folding-data", "chart-filter-data", "chart-tradeoff-data", "chart-noise-data"}
    fig = figs["chart-folding-data"]
    analysis = analyze(load_spec(DEMO))
    ch = analysis.result("TACHO-HSS").channel
    fs = ch.conversion.rate
    assert fs is not None
    landed = next(t for t in fig["data"] if t["name"].startswith("where it lands"))
    xs = np.frombuffer(base64.b64decode(landed["x"]["bdata"]), dtype="<f8")
    # f_a = |f - fs round(f/fs)| (Oppenheim & Schafer ch. 4), computed here independently with numpy
    f = np.array(sorted(t.frequency for t in ch.interference))
    np.testing.assert_allclose(xs, np.abs(f - fs * np.round(f / fs)), rtol=1e-12)


# ---------------------------------------------------------------------------------------------
# Charts on a fixture
# ---------------------------------------------------------------------------------------------


def _tree_with_tones(tmp_path: Path) -> Path:
    dest = tmp_path / "specs"
    shutil.copytree(MINIMAL, dest)
    acc = dest / "channels" / "ACC-1.md"
    text = acc.read_text(encoding="utf-8")
    text = text.replace('converter = "ds"\n', 'converter = "ds"\nrate = "10 kS/s"\n', 1)
    text = text.replace('band = ["2 Hz", "10 kHz"]', 'band = ["2 Hz", "2 kHz"]', 1)
    tones = (
        '\n[[interference]]\nfrequency = "7 kHz"\nlevel = "-20 dBFS"\nsource = "drive"\n'
        '\n[[interference]]\nfrequency = "15 kHz"\nlevel = "1 V"\nsource = "<img src=x onerror=alert(1)>"\n'
    )
    head, sep, body = text.partition("+++\n")  # the opening fence
    header, sep2, notes = body.partition("+++")
    acc.write_text(head + sep + header + tones + sep2 + notes, encoding="utf-8")
    return dest


def test_folding_chart_places_tones_where_they_fold(tmp_path: Path) -> None:
    analysis = analyze(load_spec(_tree_with_tones(tmp_path)))
    result = analysis.result("ACC-1")
    chart = folding_chart(result)
    assert chart is not None and chart.id == "chart-folding"
    traces = {t["name"]: t for t in chart.figure["data"]}
    landed = traces["where it lands after sampling"]
    xs = np.frombuffer(base64.b64decode(landed["x"]["bdata"]), dtype="<f8")
    # tests/REFERENCES.md R1.2 [OS], [MT-002]: 7 kHz at 10 kS/s -> 3 kHz;
    # 15 kHz at 10 kS/s -> 5 kHz (zone 4, inverted)
    np.testing.assert_allclose(xs, [3000.0, 5000.0], rtol=1e-12)
    before = traces["interference tone (before the filter)"]
    ys = np.frombuffer(base64.b64decode(before["y"]["bdata"]), dtype="<f8")
    # 1 V on a ±10 V converter at unity gain: 20 log10(1/10) = -20 dBFS (sine-referenced, AES17)
    np.testing.assert_allclose(ys, [-20.0, -20.0], atol=1e-9)
    # where they land: both tones sit in the decimation filter's stopband (>= 0.5465 fs = 5.465 kHz from
    # every multiple of the 6.144 MHz modulator rate), so each arrives 100 dB lower (system.toml of the fixture),
    # less the fixture's 3rd-order butterworth at 100 kHz: 10 log10(1 + (f / fc)^6) [WT]
    ys_after = np.frombuffer(base64.b64decode(landed["y"]["bdata"]), dtype="<f8")
    butter = [10 * np.log10(1 + (f / 100e3) ** 6) for f in (7e3, 15e3)]
    np.testing.assert_allclose(ys_after, [-120.0 - butter[0], -120.0 - butter[1]], atol=1e-9)
    assert "zone 4, inverted" in landed["text"][1]
    # the tone's source reaches plotly only escaped, and the JSON cannot close its <script>
    assert "<img" not in chart.to_json() and "&lt;img" in json.loads(chart.to_json())["data"][1]["text"][1]
    assert next(c.id for c in channel_charts(result)) == "chart-folding"
    assert result.sampling is not None  # the chart draws the analysis' tone levels
    assert result.sampling.tones[1].level_dbfs == pytest.approx(-20.0)


def test_no_folding_chart_for_an_image_channel() -> None:
    analysis = analyze(load_spec(DEMO))
    assert folding_chart(analysis.result("CAM-TIP")) is None  # an image channel


# ---------------------------------------------------------------------------------------------
# Sanitising
# ---------------------------------------------------------------------------------------------

XSS_TITLE = '<script>alert("title")</script>'
XSS_NOTES = """
Plain text, then attacks:

<script>alert("notes")</script>
<img src=x onerror="alert(1)">
<a href="javascript:alert(2)">click</a>
[md link](javascript:alert(3))
<div onmouseover="alert(4)">hover</div>
<iframe src="javascript:alert(5)"></iframe>
<svg onload=alert(6)></svg>
[fine](https://example.org/manual)
"""


def test_xss_payload_in_title_and_notes_comes_out_inert(tmp_path: Path) -> None:
    specs = _tree_with_tones(tmp_path)
    acc = specs / "channels" / "ACC-1.md"
    text = acc.read_text(encoding="utf-8").replace('title = "Test accelerometer"', f"title = '{XSS_TITLE}'")
    acc.write_text(text + XSS_NOTES, encoding="utf-8")
    out = tmp_path / "site"
    site.build(specs, out)
    for page in html_files(out):
        parsed = parse(page)
        for tag, attrs in parsed.tags:
            assert not any(k.startswith("on") for k in attrs), (page.name, tag, attrs)
            for name in ("href", "src", "action", "formaction"):
                assert not attrs.get(name, "").strip().lower().startswith("javascript:"), (page.name, attrs)
            assert tag not in ("iframe", "svg", "object", "embed"), (page.name, tag)
        for attrs, body in parsed.scripts:
            # only our own scripts: assets by src, or chart data that is JSON
            if "src" in attrs:
                assert attrs["src"].endswith(("assets/site.js", "assets/plotly.min.js")), attrs
                assert not body.strip()
            else:
                assert attrs.get("type") == "application/json", attrs
                json.loads(body)
        raw = page.read_text(encoding="utf-8")
        assert XSS_TITLE not in raw
    chan = (out / "channels" / "ACC-1.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(" in chan  # the title is shown, escaped
    assert 'href="https://example.org/manual"' in chan  # ordinary links survive
    assert "javascript:" not in views.notes_html(XSS_NOTES)


def test_notes_render_markdown() -> None:
    html = str(views.notes_html("**bold** and `code`\n\n- one\n- two\n"))
    assert "<strong>bold</strong>" in html and "<code>code</code>" in html and "<li>one</li>" in html


# ---------------------------------------------------------------------------------------------
# The output folder
# ---------------------------------------------------------------------------------------------


def test_refuses_a_foreign_non_empty_folder(tmp_path: Path) -> None:
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.tex").write_text("precious", encoding="utf-8")
    with pytest.raises(SpecError, match="did not make"):
        site.build(MINIMAL, out)
    assert snapshot(out) == {"thesis.tex": b"precious"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mine"]  # no temporary folder left


def test_refuses_the_specs_folder_and_its_parents(tmp_path: Path) -> None:
    specs = tmp_path / "specs"
    shutil.copytree(MINIMAL, specs)
    before = snapshot(tmp_path)
    for target in (specs, tmp_path):
        with pytest.raises(SpecError, match="specs folder"):
            site.build(specs, target)
    assert snapshot(tmp_path) == before


def test_a_folder_holding_only_gitignore_is_used_and_the_gitignore_kept(tmp_path: Path) -> None:
    out = tmp_path / "output"
    out.mkdir()
    (out / ".gitignore").write_text("*\n!.gitignore\n", encoding="utf-8")
    site.build(MINIMAL, out)
    assert (out / "index.html").is_file() and (out / output.MARKER).is_file()
    assert (out / ".gitignore").read_text(encoding="utf-8") == "*\n!.gitignore\n"
    site.build(MINIMAL, out)  # and again, over its own site
    assert (out / ".gitignore").read_text(encoding="utf-8") == "*\n!.gitignore\n"


def test_an_interrupted_build_leaves_the_old_site_intact(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "site"
    site.build(MINIMAL, out)
    before = snapshot(out)
    calls = {"n": 0}
    real = views.channel_page

    def failing(*args: object, **kwargs: object) -> views.ChannelPage:
        calls["n"] += 1
        if calls["n"] == 2:  # mid-way: the first channel page is already written
            raise KeyboardInterrupt
        return real(*args, **kwargs)  # type: ignore[arg-type]

    monkeypatch.setattr(views, "channel_page", failing)
    with pytest.raises(KeyboardInterrupt):
        site.build(MINIMAL, out, fresh=True)  # nothing changed: only a fresh build renders pages
    assert calls["n"] == 2
    assert snapshot(out) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["site"]  # the temporary folder is gone


def test_channel_paths_stay_inside_the_channels_folder() -> None:
    paths = views.channel_paths(["../../etc/passwd", "..", ".hidden", "a", "A", "ok-1.2"])
    assert len(set(p.lower() for p in paths.values())) == len(paths)
    for p in paths.values():
        assert p.startswith("channels/") and p.count("/") == 1 and "/." not in p
    assert paths["ok-1.2"] == "channels/ok-1.2.html"


# ---------------------------------------------------------------------------------------------
# Command line
# ---------------------------------------------------------------------------------------------


def test_cli_build_and_refusal(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "out"
    assert main(["build", str(MINIMAL), "-o", str(out)]) == EXIT_OK
    printed, err = capsys.readouterr()
    assert "built 7 pages for 2 channels" in printed and err == ""  # no progress bar off a terminal
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "x.txt").write_text("x", encoding="utf-8")
    assert main(["build", str(MINIMAL), "-o", str(foreign)]) == EXIT_BAD_INPUT
    assert "refusing" in capsys.readouterr().err


def test_engineering_unit_figures_are_not_converted_twice() -> None:
    # TACHO-HSS: 16 bits over ±10 V -> q = 20 V / 65536 = 305.2 µV [IEEE 1241]; at 5 mV/rpm that is
    # 0.06104 rpm per LSB (hand arithmetic). The rpm is 1/60 Hz, so a second conversion would read 3.662 rpm.
    from generator.analysis import analyze
    from generator.load import load_spec
    from generator.views import format_figure

    from .conftest import DEMO

    result = analyze(load_spec(DEMO)).result("TACHO-HSS")
    text = format_figure("lsb_units", result.figures["lsb_units"], result.channel)
    assert text == "0.06104 rpm"


def test_past_the_limit_proposals_are_left_to_the_command(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # The demo flags one channel (TACHO-HSS, band-edge-droop); with the limit at 0 the build designs
    # nothing and says how many channels `specfold propose` would look at.
    from generator.build import pages

    monkeypatch.setattr(pages, "SITE_PROPOSALS_LIMIT", 0)
    site.build(DEMO, tmp_path / "out", fresh=True)
    overview = (tmp_path / "out" / "index.html").read_text(encoding="utf-8")
    assert "flagged for specfold propose" in overview
    tacho = next((tmp_path / "out" / "channels").glob("TACHO-HSS*.html")).read_text(encoding="utf-8")
    assert 'id="proposal"' not in tacho
    monkeypatch.setattr(pages, "SITE_PROPOSALS_LIMIT", 50)
    site.build(DEMO, tmp_path / "out2", fresh=True)
    tacho = next((tmp_path / "out2" / "channels").glob("TACHO-HSS*.html")).read_text(encoding="utf-8")
    assert 'id="proposal"' in tacho
