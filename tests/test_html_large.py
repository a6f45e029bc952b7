"""The HTML report of a large change: grouped by cause, folded, filterable; loaded in headless Chromium.

The large change: a synthetic model (benchmarks/synth.py) of 600 tables and 9,000 measures after 40 ordinary
changes (links made two-way, conditions edited, descriptions touched): some 900 changes and over 3,000
impacted measures. The filters are set from the page's address (`#severity=...&table=...&q=...`), and what
the page's script shows is compared with the same rule computed here from the page's own data attributes.

Without Chromium the browser tests are skipped, except under CI=true, where they fail.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from html.parser import HTMLParser

import pytest
from scenariokit import ordinary_changes, synthetic_model_text

from modeldiff import impact, load
from modeldiff.compare import ModelDiff, Side
from modeldiff.render import html_scale
from modeldiff.render.html import document
from test_html_report import CHROMIUM_FLAGS, Nesting, png_size

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
IN_CI = os.environ.get("CI", "").lower() == "true"
browser = pytest.mark.skipif(CHROMIUM is None and not IN_CI,
                             reason="chromium is not installed (apt-get install -y chromium); under CI=true this fails")


@pytest.fixture(scope="module")
def large():
    old = synthetic_model_text(tables=600, links=900, measures=9000, roles=10)
    new = ordinary_changes(old, 40)
    a, b = load.load_files([("old.model.yaml", old)]), load.load_files([("new.model.yaml", new)])
    result = impact.analyse(a.model, b.model, a.findings, b.findings)
    return result, document([ModelDiff(Side("main", "models/synthetic.model.yaml"),
                                       Side(None, "models/synthetic.model.yaml"), result)])


class Items(HTMLParser):
    """Every element carrying `data-filter`: its attributes, whether it is hidden, and its text (descendants too)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.items: list[dict] = []
        self.open: list[tuple[str, int | None]] = []  # (tag, index of the item it opens, or None)

    def handle_starttag(self, tag, attrs):
        found = dict(attrs)
        index = None
        if "data-filter" in found:
            index = len(self.items)
            self.items.append({**found, "text": ""})
        if tag not in ("meta", "input", "br", "img", "link", "hr", "wbr", "col", "area", "source", "track", "embed"):
            self.open.append((tag, index))

    def handle_endtag(self, tag):
        while self.open:
            opened, _ = self.open.pop()
            if opened == tag:
                break

    def handle_data(self, data):
        for _, index in self.open:
            if index is not None:
                self.items[index]["text"] += data


def _items(page: str) -> list[dict]:
    parser = Items()
    parser.feed(page)
    parser.close()
    return parser.items


def _matches(item: dict, want: dict[str, str]) -> bool:
    """The page's rule: every chosen filter is one of the item's tokens, the search text is in its text."""
    for name, value in want.items():
        if name == "q":
            if value.lower() not in item["text"].lower():
                return False
        elif value not in (item.get(f"data-{name}") or "").split():
            return False
    return True


def _run(tmp_path, *args: str) -> subprocess.CompletedProcess:
    assert CHROMIUM, "CI=true: chromium must be installed to test the HTML report in a browser"
    base = [CHROMIUM, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}", "--virtual-time-budget=20000"]
    return subprocess.run([*base, *args], capture_output=True, text=True, timeout=300, check=False)


# --- without a browser -----------------------------------------------------------------------------


def test_the_large_report_is_grouped_folded_and_carries_the_filters(large):
    result, page = large
    assert len(result.measures) > 3000 and len(result.changes) > 500
    parser = Nesting()
    parser.feed(page)
    parser.close()
    assert parser.errors == [] and parser.stack == []
    seen = parser.seen
    # the long lists start folded, a short one open
    assert f'<details class="list"><summary>Changes ({len(result.changes)})</summary>' in page
    assert f'<details class="list"><summary>Impacted measures ({len(result.measures)})</summary>' in page
    from modeldiff.render.html_scale import OPEN_LIMIT

    shown = " open" if len(result.reports) <= OPEN_LIMIT else ""  # a list longer than the limit starts folded
    assert f'<details class="list"{shown}><summary>Impacted reports ({len(result.reports)})</summary>' in page
    causes = [a for t, a in seen if t == "details" and a.get("class") == "cause"]
    assert len(causes) >= 10 and sum("open" in a for a in causes) <= html_scale.CAUSES_OPEN
    # the first screen: title, filters, summary and causes come before any long list
    assert page.index('id="filters"') < page.index("By cause (") < page.index('<details class="list"')
    items = _items(page)
    assert {i["data-severity"] for i in items} <= {"breaking", "numbers", "safe"}
    tables = {t for i in items for t in i["data-table"].split()}
    assert len(tables) > 50
    options = [a.get("value") for t, a in seen if t == "option"]
    assert set(options) >= tables | {"breaking", "numbers", "safe"}


def test_a_small_report_is_not_folded():
    from test_html_report import EXAMPLE, REVISION_2, html_of

    page = html_of(str(EXAMPLE), str(REVISION_2))
    assert '<details class="list" open>' in page and '<details class="list">' not in page


# --- in a browser --------------------------------------------------------------------------------------


@browser
def test_the_first_screen_of_the_large_report(large, tmp_path):
    _, page = large
    path = tmp_path / "report.html"
    path.write_text(page, encoding="utf-8")
    dom = _run(tmp_path, "--dump-dom", path.as_uri()).stdout
    items = _items(dom)
    assert items, "chromium returned no document"
    assert '<div class="filters" id="filters">' in dom  # the script ran: the bar is shown
    assert f'id="f-shown">{len(items)} of {len(items)} items shown<' in dom
    assert not any("hidden" in i for i in items)  # no filter: nothing hidden
    for width, height in ((1280, 900), (420, 900)):  # a desktop and a phone's width
        shot = tmp_path / f"first-{width}.png"
        _run(tmp_path, f"--screenshot={shot}", f"--window-size={width},{height}", path.as_uri())
        data = shot.read_bytes()
        assert png_size(data) == (width, height)
        assert len(data) > 20_000  # text on the screen, not a blank page (a blank one is a few KB)


def _busiest_table(items: list[dict], severity: str) -> str:
    counts: dict[str, int] = {}
    for item in items:
        if item["data-severity"] == severity:
            for table in item["data-table"].split():
                counts[table] = counts.get(table, 0) + 1
    return max(sorted(counts), key=counts.get)


@browser
@pytest.mark.parametrize("choose", ["severity", "severity-and-table", "search"])
def test_a_filter_shows_exactly_the_matching_items(large, tmp_path, choose):
    _, page = large
    want = {"severity": {"severity": "breaking"},
            "severity-and-table": {"severity": "numbers", "table": _busiest_table(_items(page), "numbers")},
            "search": {"q": "m1234"}}[choose]
    path = tmp_path / "report.html"
    path.write_text(page, encoding="utf-8")
    dom = _run(tmp_path, "--dump-dom", f"{path.as_uri()}#" + "&".join(f"{k}={v}" for k, v in want.items())).stdout
    items = _items(dom)
    assert items, "chromium returned no document"
    shown = [i for i in items if "hidden" not in i]
    expected = [i for i in items if _matches(i, want)]
    assert 0 < len(expected) < len(items)
    assert [i["text"] for i in shown] == [i["text"] for i in expected]
    assert f'id="f-shown">{len(expected)} of {len(items)} items shown<' in dom


def _filter_graph(page: str) -> tuple[str, str]:
    """(the filter graph's figure, the line under it) of a one-model report."""
    start = page.index("<h3>Filter graph</h3>")
    end = page.index("</figure>", start)
    line = page[end:page.index("</p>", end)]
    return page[start:end], line


def test_a_large_change_draws_at_most_the_readable_tables_and_says_what_it_left_out(large):
    from modeldiff.picture import READABLE_NODES, diff_picture, readable

    result, page = large
    near = diff_picture(result)
    assert len(near.nodes) > READABLE_NODES  # the change reaches more tables than a diagram can show
    figure, line = _filter_graph(page)
    drawn = re.findall(r'<g class="node[^"]*" data-table="([^"]+)"', figure)
    assert 0 < len(drawn) <= READABLE_NODES
    assert set(drawn) == {n.table for n in readable(near).nodes}  # Markdown's selection, not a second one
    arrows = re.findall(r'data-link="[^"]+" data-index=', figure)
    assert f'<p class="left-out">{len(near.nodes) - len(drawn)} tables and {len(near.arrows) - len(arrows)} ' \
           "links left out." in line
    assert "modeldiff graph models/synthetic.model.yaml --format svg" in line and "--format json" in line
    assert f"showing {len(drawn)} of the {len(near.nodes)} tables" in figure  # the caption too
    source = page[page.index("<pre>", page.index("<summary>Mermaid source")):]
    source = source[:source.index("</pre>")]
    assert len(re.findall(r"^  t_\w+[^\w\s]", source, re.M)) == len(drawn)  # the Mermaid source: the same cut
