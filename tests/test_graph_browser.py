"""The SVG pictures measured in a real browser (headless Chromium): no two texts overlap, no label covers a
table, every table lies inside the drawing's viewport, and inside the page's width in the HTML report.

Chromium lays the texts out with its own fonts, so this checks what a reader sees, not the widths the
layout estimated. Skipped where chromium or dot is missing; under CI=true (tests/toolkit.py) it fails.
"""

from __future__ import annotations

import html
import io
import json
import re
import subprocess
from pathlib import Path

import pytest

from modeldiff import cli, picture
from modeldiff.impact import analyse
from modeldiff.load import load_path
from modeldiff.render.svg import svg_of
from toolkit import program

ROOT = Path(__file__).parent.parent
FIXTURES = Path(__file__).parent / "fixtures"
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"
CLINIC = FIXTURES / "clinic.model.yaml"
SCENARIOS = Path(__file__).parent / "impact_scenarios"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]

# Writes, for every drawing on the page, the boxes Chromium gave its labels, its tables and their names.
MEASURE = """
const rect = (e) => { const r = e.getBoundingClientRect(); return [r.left, r.top, r.right, r.bottom]; };
const found = [...document.querySelectorAll('svg.modeldiff-graph')].map((svg) => ({
  name: svg.closest('[data-name]') ? svg.closest('[data-name]').dataset.name : '',
  layout: svg.dataset.layout,
  box: rect(svg),
  clip: rect(svg.closest('figure') || svg),
  labels: [...svg.querySelectorAll('text.label')].map((t) => [t.textContent, rect(t)]),
  nodes: [...svg.querySelectorAll('g.node')].map((g) => [g.dataset.table, rect(g), rect(g.querySelector('text'))]),
}));
document.getElementById('measured').textContent = JSON.stringify(found);
"""


def measure(tmp_path: Path, body: str, width: int = 1600) -> list[dict]:
    """Every drawing of `body`, as Chromium lays it out in a window `width` px wide."""
    chromium = program("chromium")
    page = tmp_path / "page.html"
    page.write_text(f'<!DOCTYPE html><html><head><meta charset="utf-8"></head><body>{body}'
                    f'<pre id="measured"></pre><script>{MEASURE}</script></body></html>', encoding="utf-8")
    done = subprocess.run([chromium, *FLAGS, f"--user-data-dir={tmp_path / 'profile'}", f"--window-size={width},1000",
                           "--virtual-time-budget=5000", "--dump-dom", page.as_uri()],
                          capture_output=True, text=True, timeout=120, check=False)
    found = re.search(r'<pre id="measured">(.*?)</pre>', done.stdout, re.S)
    assert found and found.group(1), f"chromium measured nothing: {done.stderr[-400:]}"
    return json.loads(html.unescape(found.group(1)))


def overlap(a, b, slack: float = 0.5) -> bool:
    return min(a[2], b[2]) - max(a[0], b[0]) > slack and min(a[3], b[3]) - max(a[1], b[1]) > slack


def inside(a, b, slack: float = 0.5) -> bool:
    return a[0] >= b[0] - slack and a[1] >= b[1] - slack and a[2] <= b[2] + slack and a[3] <= b[3] + slack


def problems(drawing: dict) -> list[str]:
    """What a reader would stumble on in one measured drawing."""
    out = []
    texts = [(f"label {name}", box) for name, box in drawing["labels"]]
    texts += [(f"table name {name}", text) for name, _, text in drawing["nodes"]]
    for i, (a, box_a) in enumerate(texts):
        for b, box_b in texts[i + 1:]:
            if overlap(box_a, box_b):
                out.append(f"{a} overlaps {b}")
    for name, box in drawing["labels"]:
        for table, node, _ in drawing["nodes"]:
            if overlap(box, node):
                out.append(f"label {name} covers table {table}")
    for table, node, _ in drawing["nodes"]:
        if not inside(node, drawing["box"]):
            out.append(f"table {table} lies outside the drawing {drawing['box']}: {node}")
        if not inside(node, drawing["clip"]):
            out.append(f"table {table} is cut off by its frame {drawing['clip']}: {node}")
    return out


def models() -> dict[str, object]:
    return {"bikeshare": load_path(str(EXAMPLE)).model, "clinic": load_path(str(CLINIC)).model,
            "tpcds": load_path(str(FIXTURES / "tpcds.model.yaml")).model,
            "tpch": load_path(str(FIXTURES / "tpch.model.yaml")).model}


def pictures() -> dict[str, object]:
    found = {name: picture.picture(m) for name, m in models().items()}
    old, new = load_path(str(EXAMPLE)).model, load_path(str(REVISION_2)).model
    found["bikeshare diff"] = picture.diff_picture(analyse(old, new, (), ()))
    clinic = load_path(str(CLINIC)).model
    found["clinic setting"] = picture.picture(clinic, setting=picture.resolve(clinic, "measure:appointment_count")[0])
    found["clinic role"] = picture.role_picture(clinic, "clinic_staff")
    found["clinic security"] = picture.picture(clinic, security=True)
    return found


def page_of(engine: str) -> str:
    return "".join(f'<div data-name="{html.escape(name)}">{svg_of(pic, prefix=f"g{n}", engine=engine)}</div>'
                   for n, (name, pic) in enumerate(pictures().items()))


def test_dot_drawings_have_no_overlapping_texts_and_every_table_in_view(tmp_path):
    program("dot")
    drawings = measure(tmp_path, page_of("dot"))
    assert [d["name"] for d in drawings] == list(pictures())
    assert {d["layout"] for d in drawings} == {"dot"}
    assert all(d["labels"] and d["nodes"] for d in drawings)
    found = {d["name"]: problems(d) for d in drawings}
    assert found == {name: [] for name in found}


def test_the_measure_finds_overlaps_where_there_are_some(tmp_path):
    # twin: the same measurement on a drawing whose labels are stacked on one spot reports them
    pic = picture.picture(load_path(str(CLINIC)).model)
    svg = re.sub(r'(<text class="label") x="[^"]*" y="[^"]*"', r'\1 x="200" y="40"', svg_of(pic, engine="builtin"))
    svg = re.sub(r'(<g class="node[^"]*" data-table="invoices">.*?<rect x=")[^"]*"', r'\g<1>5000"', svg, flags=re.S)
    (drawing,) = measure(tmp_path, f'<div data-name="stacked">{svg}</div>')
    found = problems(drawing)
    assert any(p.startswith("label ") and " overlaps label " in p for p in found)
    assert any(p.startswith("table invoices lies outside the drawing") for p in found)


def test_the_builtin_layout_keeps_every_table_in_view(tmp_path):
    # the layout used when dot is missing: no overlap promise (labels go where they overlap least), but
    # nothing is cut off
    drawings = measure(tmp_path, page_of("builtin"))
    assert {d["layout"] for d in drawings} == {"builtin"}
    found = {d["name"]: [p for p in problems(d) if " outside " in p or " cut off " in p] for d in drawings}
    assert found == {name: [] for name in found}


def report_body(old: Path, new: Path) -> tuple[str, str]:
    """(style element, body) of `diff OLD NEW --format html`."""
    page = io.StringIO()
    cli.main(["diff", str(old), str(new), "--format", "html"], stdout=page, stderr=io.StringIO())
    report = page.getvalue()
    css = report[report.index("<style>"):report.index("</style>") + len("</style>")]
    return css, report[report.index("<body>") + len("<body>"):report.index("</body>")]


def test_the_html_report_shows_every_table_within_the_page(tmp_path):
    # reports in a window narrower than the drawings: each drawing shrinks to its frame instead of being cut
    # off, the role views too (two side by side)
    program("dot")
    text = CLINIC.read_text().replace("to: patients.patient_key}", "to: patients.patient_key, flow: two-way}")
    new_path = tmp_path / "clinic.model.yaml"
    new_path.write_text(text)
    css, clinic = report_body(CLINIC, new_path)
    security = SCENARIOS / "security_flow_one_way"
    _, secured = report_body(security / "old.model.yaml", security / "new.model.yaml")
    drawings = measure(tmp_path, f'{css}<div data-name="clinic">{clinic}</div><div data-name="security">{secured}</div>',
                       width=900)
    assert [d["name"] for d in drawings] == ["clinic", "security", "security", "security"]  # graph, before, after
    for d in drawings:
        assert d["box"][2] - d["box"][0] < 900 and problems(d) == [], d
