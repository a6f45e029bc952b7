"""render/svg.py's two layouts: Graphviz dot where installed, the one computed here as the fallback.

dot's input carries identifiers and numbers only; dot failing, hanging or missing gives the fallback
with a note in the drawing; MODELDIFF_LAYOUT=builtin forces the fallback.
"""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path

import pytest

from modeldiff import picture
from modeldiff.load import load_files, load_path
from modeldiff.render import svg
from toolkit import program

CLINIC = Path(__file__).parent / "fixtures" / "clinic.model.yaml"


@pytest.fixture(scope="module")
def pic():
    return picture.picture(load_path(str(CLINIC)).model)


def fake_dot(folder: Path, script: str) -> None:
    """A program called `dot` in `folder` that runs `script` (sh)."""
    path = folder / "dot"
    path.write_text("#!/bin/sh\n" + script + "\n")
    path.chmod(path.stat().st_mode | stat.S_IXUSR)


def only_path(monkeypatch, folder: Path) -> None:
    monkeypatch.setenv("PATH", str(folder) + os.pathsep + "/usr/bin" + os.pathsep + "/bin")


def test_dot_lays_out_every_table_and_arrow(pic):
    program("dot")
    lay = svg.layout(pic, "dot")
    assert lay.engine == "dot" and lay.note is None
    assert set(lay.boxes) == {n.table for n in pic.nodes}
    assert set(lay.routes) == set(lay.labels) == {a.index for a in pic.arrows}
    for box in lay.boxes.values():  # every table inside the drawing
        assert box.x >= 0 and box.y >= 0 and box.x + box.w <= lay.width and box.y + box.h <= lay.height
    for a in pic.arrows:  # each arrow starts at its source table and ends at its target (arrowheads included)
        (x0, y0), (x1, y1) = lay.routes[a.index][0][0], lay.routes[a.index][-1][-1]
        src, dst = lay.boxes[a.src], lay.boxes[a.dst]
        assert src.x - 2 <= x0 <= src.x + src.w + 2 and src.y - 2 <= y0 <= src.y + src.h + 2, a.link
        assert dst.x - 2 <= x1 <= dst.x + dst.w + 2 and dst.y - 2 <= y1 <= dst.y + dst.h + 2, a.link
    assert 'data-layout="dot"' in svg.svg_of(pic)


def test_dot_reads_no_model_text(pic):
    source = svg.dot_source(pic)
    names = {n.table for n in pic.nodes} | {a.link for a in pic.arrows}
    assert not any(re.search(rf"\b{name}\b", source) for name in names)
    # only identifiers, numbers and the fixed words of the input format
    assert set(re.findall(r"[A-Za-z_]+", source)) <= {
        "digraph", "modeldiff", "graph", "rankdir", "LR", "nodesep", "ranksep", "margin", "pad", "node", "shape",
        "box", "fixedsize", "true", "label", "edge", "arrowsize", "width", "height", "id", "e", "dir", "both",
        "TABLE", "BORDER", "CELLBORDER", "CELLSPACING", "CELLPADDING", "TR", "TD", "FIXEDSIZE", "TRUE", "WIDTH",
        "HEIGHT"} | {n.id for n in pic.nodes}


def test_text_that_looks_like_dot_stays_text(pic):
    # a description full of dot's and SVG's special characters: not in dot's input, escaped in the drawing
    text = CLINIC.read_text().replace('description: "One row', 'description: "}; digraph x { a -> b } </svg> \\\\ \\" One row')
    model = load_files([("clinic.model.yaml", text)]).model
    assert "digraph x" in model.tables["appointments"].description
    drawn = svg.svg_of(picture.picture(model), engine="dot" if svg.shutil.which("dot") else "builtin")
    assert 'digraph x { a -&gt; b } &lt;/svg&gt; \\ &quot; One row' in drawn and drawn.count("</svg>") == 1


def test_a_failing_dot_falls_back_with_a_note(pic, tmp_path, monkeypatch):
    fake_dot(tmp_path, 'echo "Error: syntax error in line 1" >&2; exit 3')
    only_path(monkeypatch, tmp_path)
    lay = svg.layout(pic)
    assert lay.engine == "builtin" and set(lay.boxes) == {n.table for n in pic.nodes}
    assert lay.note == "Graphviz dot failed (exit code 3: Error: syntax error in line 1); laid out by modeldiff itself"
    drawn = svg.svg_of(pic)
    assert 'data-layout="builtin"' in drawn and '<desc class="layout-note">Graphviz dot failed' in drawn


def test_a_dot_that_hangs_is_stopped_and_the_fallback_used(pic, tmp_path, monkeypatch):
    fake_dot(tmp_path, "exec sleep 30")
    only_path(monkeypatch, tmp_path)
    monkeypatch.setattr(svg, "DOT_TIMEOUT", 0.5)
    lay = svg.layout(pic)
    assert lay.engine == "builtin" and lay.note == ("Graphviz dot failed (no answer within 0.5 s); "
                                                    "laid out by modeldiff itself")


@pytest.mark.parametrize("answer, reason", [("not json", "its output is not JSON"),
                                            ('{"objects": []}', "its answer lacks")])
def test_an_unreadable_answer_falls_back(pic, tmp_path, monkeypatch, answer, reason):
    fake_dot(tmp_path, f"cat >/dev/null; echo '{answer}'")
    only_path(monkeypatch, tmp_path)
    lay = svg.layout(pic)
    assert lay.engine == "builtin" and reason in lay.note


def test_the_environment_forces_the_fallback_without_a_note(pic, monkeypatch):
    monkeypatch.setenv(svg.LAYOUT_ENV, "builtin")
    lay = svg.layout(pic)
    assert lay.engine == "builtin" and lay.note is None and lay.routes == {}
    assert 'data-layout="builtin"' in svg.svg_of(pic) and "layout-note" not in svg.svg_of(pic)


def test_without_dot_the_fallback_is_silent_unless_dot_was_asked_for(pic, tmp_path, monkeypatch):
    only_path(monkeypatch, tmp_path)  # no dot in an empty folder, /usr/bin and /bin ...
    if svg.shutil.which("dot") is not None:  # ... unless it is installed there: hide it
        monkeypatch.setattr(svg.shutil, "which", lambda name: None)
    monkeypatch.delenv(svg.LAYOUT_ENV, raising=False)
    assert svg.layout(pic).engine == "builtin" and svg.layout(pic).note is None
    assert svg.layout(pic, "dot").note == "Graphviz dot is not installed"
