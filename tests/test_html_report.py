"""`modeldiff diff --format html`: one self-contained, well-formed, escaped page; rendered in headless Chromium when installed."""

from __future__ import annotations

import io
import re
import struct
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

from modeldiff import cli, impact
from modeldiff.compare import ModelDiff, Side
from modeldiff.render.html import document
from modelkit import bikeshare, edit, link, table
from toolkit import program

ROOT = Path(__file__).parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"
SCENARIOS = Path(__file__).parent / "impact_scenarios"
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


def html_of(*argv: str) -> str:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", *argv, "--format", "html"], stdout=out, stderr=err)
    assert err.getvalue() == "" and code in (0, 1, 3)
    return out.getvalue()


class Nesting(HTMLParser):
    """Every element closed, in order (void elements and `<x/>` excepted); records the tags seen."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.seen: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.seen.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.seen.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parsed(page: str) -> Nesting:
    p = Nesting()
    p.feed(page)
    p.close()
    assert p.errors == [] and p.stack == [], (p.errors, p.stack)
    return p


def test_report_is_well_formed_with_summary_changes_impacts_and_graph():
    page = html_of(str(EXAMPLE), str(REVISION_2))
    assert page.startswith("<!DOCTYPE html>")
    p = parsed(page)
    tags = [t for t, _ in p.seen]
    assert [a.get("class") for t, a in p.seen if t == "svg"] == [
        "modeldiff-graph", "swatch-fact", "swatch-dimension", "swatch-bridge", "swatch-access"]  # graph, legend
    tables = [a.get("class") for t, a in p.seen if t == "table"]
    assert tables == ["summary", "changes"]
    causes = [a for t, a in p.seen if t == "details" and a.get("class") == "cause"]
    # the two-way link with what follows, then the check warning the flip makes new (a cause of its own)
    assert [(c["data-severity"], c.get("data-kind")) for c in causes][1:] == [("safe", "warning.added")]
    assert causes[0]["data-severity"] == "breaking"
    text = "".join(p.text)
    assert "Impacted measures (11)" in text and "stock_value" in text and "station_stock" in text
    changed = [a["data-link"] for t, a in p.seen if t == "g" and a.get("class") == "edge changed"]
    assert changed == ["trips_start_station"]
    assert "graph LR" in text  # the Mermaid source, folded in <details>
    assert page.index("<summary>Mermaid source") > page.index("<svg")  # folded beneath the picture
    # the legend draws each kind's shape as the graph does: a hexagon for a bridge, a parallelogram for access
    legend = page[page.index('<p class="legend">'):]
    assert re.search(r'class="swatch-bridge".*?<polygon points="(\S+ ){5}\S+"', legend)
    assert re.search(r'class="swatch-access".*?<polygon points="(\S+ ){3}\S+"', legend)
    assert re.search(r'class="swatch-dimension".*?<rect [^>]*rx="6"', legend)


def test_a_small_change_draws_its_whole_picture_and_says_nothing_was_left_out():
    # twin of test_html_large's large change, whose diagram is cut to picture.READABLE_NODES tables
    from modeldiff.load import load_files
    from modeldiff.picture import diff_picture

    page = html_of(str(EXAMPLE), str(REVISION_2))
    old, new = (load_files([(p.name, p.read_text())]) for p in (EXAMPLE, REVISION_2))
    near = diff_picture(impact.analyse(old.model, new.model, old.findings, new.findings))
    start = page.index("<h3>Filter graph</h3>")
    figure = page[start:page.index("</figure>", start)]
    drawn = re.findall(r'<g class="node[^"]*" data-table="([^"]+)"', figure)
    assert sorted(drawn) == sorted(n.table for n in near.nodes) and drawn
    arrows = re.findall(r'data-link="[^"]+" data-index=', figure)
    assert len(arrows) == len(near.arrows)
    assert (f'<p class="left-out">All {len(drawn)} tables and {len(arrows)} links near what changed are drawn; '
            "nothing was left out.</p>") in page
    assert "left out." not in figure and "modeldiff graph" not in page


def test_report_loads_nothing_from_the_network():
    page = html_of(str(EXAMPLE), str(REVISION_2))
    # one inline script (the filters), nothing fetched: no src, no link, no import
    assert page.count("<script") == 1 and "<script>" in page
    assert "<link" not in page and "@import" not in page
    assert not re.search(r"\bsrc=", page)
    assert not re.search(r"\b(fetch|XMLHttpRequest|import)\s*\(", page)
    # the only URL is the SVG namespace, a name that is never fetched
    assert set(re.findall(r"https?://[^\s\"'<>]+", page)) == {"http://www.w3.org/2000/svg"}


def test_model_text_is_escaped():
    evil = "<script>alert(1)</script> & \"quotes\""
    old = bikeshare()
    trips = old.tables["trips"]
    old = edit(old, table("trips", "fact", columns={c: t.type for c, t in trips.columns.items()}, description=evil))
    new = edit(old, link("trips_bike", "trips.bike_key", "bikes.bike_key", flow="two-way"))
    page = document([ModelDiff(Side("main<b>", "m.model.yaml"), Side(None, "m.model.yaml"),
                               impact.analyse(old, new, (), ()))])
    parsed(page)
    assert "<script>alert" not in page and "<b>" not in page and page.count("<script") == 1
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &quot;quotes&quot;" in page  # the table's tooltip in the SVG
    assert "main&lt;b&gt;:m.model.yaml" in page


def test_security_caution_only_with_an_exposure():
    exposed = html_of(*(str(SCENARIOS / "security_flow_one_way" / f) for f in ("old.model.yaml", "new.model.yaml")))
    twin = html_of(*(str(SCENARIOS / "security_flow_two_way" / f) for f in ("old.model.yaml", "new.model.yaml")))
    assert 'class="security"' in exposed and "SECURITY:" in exposed
    assert "SECURITY" not in twin and 'class="security"' not in twin


def test_no_changes_says_so_and_draws_nothing():
    page = html_of(str(EXAMPLE), str(EXAMPLE))
    parsed(page)
    assert "No changes." in page and "<svg" not in page


# --- in a browser -------------------------------------------------------------------------------------

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from a PNG's IHDR chunk (PNG specification: 8-byte signature, then IHDR)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def test_report_renders_in_headless_chromium(tmp_path):
    chromium = program("chromium")  # skipped where missing, failed under CI=true
    page = tmp_path / "report.html"
    page.write_text(html_of(str(EXAMPLE), str(REVISION_2)), encoding="utf-8")
    shot = tmp_path / "report.png"
    base = [chromium, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}"]
    subprocess.run([*base, f"--screenshot={shot}", "--window-size=1280,2000", page.as_uri()],
                   capture_output=True, timeout=120, check=False)
    assert shot.exists(), "chromium wrote no screenshot"
    data = shot.read_bytes()
    assert png_size(data) == (1280, 2000)
    assert len(data) > 60_000  # a blank 1280x2000 page compresses to a few KB
    dom = subprocess.run([*base, "--dump-dom", page.as_uri()], capture_output=True, text=True, timeout=120,
                         check=False).stdout
    assert "<svg" in dom and 'class="changes"' in dom and 'data-link="trips_start_station"' in dom


def test_a_security_change_shows_its_role_before_and_after():
    page = html_of(*(str(SCENARIOS / "security_flow_one_way" / f) for f in ("old.model.yaml", "new.model.yaml")))
    p = parsed(page)
    assert "Row security, role by role" in page
    heads = re.findall(r'<h4 class="role-view">(.*?)</h4>', page)
    assert heads == ["Role <code>depot_staff</code> (exposed: districts, mechanics, repairs, station_parts, stations, "
                     "stock_levels, trips)"]
    figures = [a.get("class") for t, a in p.seen if t == "figure"]
    assert figures[-2:] == ["role-before", "role-after"]
    before = page[page.index('class="role-before"'):page.index('class="role-after"')]
    after = page[page.index('class="role-after"'):]
    # before, the role's filter on district_access reached districts and on; after, it stops there
    assert 'class="node role-restricted" data-table="districts"' in before
    assert 'data-table="districts"' in after and 'class="node role-restricted" data-table="districts"' not in after
    assert 'class="node role-filter" data-table="district_access"' in after
    assert "which restrict 7 more tables" in before and "which restrict 0 more tables" in after


def test_no_security_change_no_role_view():  # twin: a flow change that moves no role's rows
    page = html_of(str(EXAMPLE), str(REVISION_2))
    assert "Row security, role by role" not in page and "role-before" not in page and "role-view" not in page
