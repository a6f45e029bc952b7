"""`diff --format markdown` within a budget (render/md_budget.py) and diagrams cut to a readable size.

The large change: a synthetic model (benchmarks/synth.py) of 300 tables and 3,000 measures after 30 ordinary
changes (links made two-way, conditions edited, descriptions touched): about 1.4 MB of Markdown in full,
with some hundred breaking changes; small enough to analyse in a second or two.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pytest
from scenariokit import ordinary_changes, synthetic_model_text

from modeldiff import cli, impact, load
from modeldiff.compare import ModelDiff, Side
from modeldiff.picture import Arrow, Node, Picture, diff_picture, readable
from modeldiff.render import diff_out, md_budget

EXAMPLES = Path(__file__).parent.parent / "examples"
COMMENT = 65_536


@pytest.fixture(scope="module")
def large(tmp_path_factory):
    folder = tmp_path_factory.mktemp("large")
    old = synthetic_model_text(tables=300, links=450, measures=3000, roles=10)
    new = ordinary_changes(old, 30)
    (folder / "old").mkdir()
    (folder / "new").mkdir()
    (folder / "old" / "synthetic.model.yaml").write_text(old)
    (folder / "new" / "synthetic.model.yaml").write_text(new)
    a, b = load.load_files([("old.model.yaml", old)]), load.load_files([("new.model.yaml", new)])
    result = impact.analyse(a.model, b.model, a.findings, b.findings)
    return folder, result


def _diff(folder: Path, *argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", str(folder / "old" / "synthetic.model.yaml"), str(folder / "new" / "synthetic.model.yaml"),
                     "--format", "markdown", "--no-cache", *argv], out, err)
    return code, out.getvalue(), err.getvalue()


def _breaking_rows(result) -> list[str]:
    return [f"| {c.id} | `{c.kind}` | `{c.subject}` | {diff_out._md(c.message)} |"
            for c in result.changes if c.severity == "breaking"]


def test_the_large_change_fits_a_comment_with_every_breaking_change_whole(large):
    folder, result = large
    code, full, _ = _diff(folder, "--budget", "none")
    assert len(full) > COMMENT  # without the budget it would not fit
    code, text, err = _diff(folder)
    assert (code, err) == (3, "")
    assert len(text) <= COMMENT
    rows = _breaking_rows(result)
    assert len(rows) >= 20
    lines = set(text.splitlines())
    assert [row for row in rows if row not in lines] == []  # every breaking change, whole
    assert text.count("**By cause**") == 1
    last = text.rstrip("\n").splitlines()[-1]
    assert last.startswith("_Shortened to fit 65,536 characters; left out: ")
    assert "`--format json`" in last and "`--format html`" in last and "`--budget none`" in last
    assert re.search(r"[0-9,]+ changes that can move numbers", last)
    # what is folded says how many it holds and how many it shows
    assert re.search(r"<details><summary>\d+ impacted measures in `synthetic`: the first \d+ shown</summary>", text)


def test_budget_none_is_the_whole_markdown(large):
    folder, result = large
    _, text, _ = _diff(folder, "--budget", "none")
    whole = io.StringIO()
    diff_out.as_markdown([ModelDiff(Side(None, str(folder / "old" / "synthetic.model.yaml")),
                                     Side(None, str(folder / "new" / "synthetic.model.yaml")), result)], whole)
    assert text == whole.getvalue() and "Shortened to fit" not in text


def test_a_job_summary_budget_holds_more(large):
    folder, result = large
    _, summary, _ = _diff(folder, "--budget", "1MiB")
    assert COMMENT < len(summary) <= 1 << 20
    # every change fits once each impacted item's line is cut short; the last line says so, and counts the
    # impacted measures it had no room for: those listed and those counted make up all of them
    last = summary.rstrip("\n").splitlines()[-1]
    assert last.startswith("_Shortened to fit 1,048,576 characters; left out: ")
    assert "reasons of impacted items (lines cut short)" in last and "changes that can move numbers" not in last
    listed = re.findall(r"^- \*\*(m\d+)\*\* \(", summary, flags=re.M)
    assert set(listed) <= {m.name for m in result.measures} and len(set(listed)) == len(listed)
    counted = re.search(r"([0-9,]+) impacted measures", last)
    left = int(counted.group(1).replace(",", "")) if counted else 0
    assert len(listed) + left == len(result.measures)
    assert len(listed) > len(re.findall(r"^- \*\*(m\d+)\*\* \(", _diff(folder)[1], flags=re.M))  # holds more


def test_a_change_that_fits_is_written_whole_without_a_note():
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", str(EXAMPLES / "bikeshare.model.yaml"), str(EXAMPLES / "revision-2" / "bikeshare.model.yaml"),
                     "--format", "markdown", "--no-cache"], out, err)
    whole = io.StringIO()
    cli.main(["diff", str(EXAMPLES / "bikeshare.model.yaml"), str(EXAMPLES / "revision-2" / "bikeshare.model.yaml"),
              "--format", "markdown", "--no-cache", "--budget", "none"], whole, io.StringIO())
    assert code == 3 and out.getvalue() == whole.getvalue() and "Shortened" not in out.getvalue()


@pytest.mark.parametrize("budget", [4_000, 9_000])
def test_breaking_changes_beyond_a_small_budget_are_named_short_or_counted_and_the_budget_holds(large, budget):
    _, result = large
    md = ModelDiff(Side(None, "old"), Side(None, "new"), result)
    text = md_budget.shortened([md], budget)
    assert len(text) <= budget  # a comment over its limit is not posted at all
    breaking = [c for c in result.changes if c.severity == "breaking"]
    named = [c for c in breaking if f"| {c.id} | `{c.kind}` | `{c.subject}` |" in text]
    short = [c for c in named if f"| {c.id} | `{c.kind}` | `{c.subject}` | (message left out for length) |" in text]
    last = text.splitlines()[-1]
    counted = re.search(r"([0-9,]+) breaking changes \(beyond the budget\)", last)
    assert len(named) + (int(counted.group(1).replace(",", "")) if counted else 0) == len(breaking)
    if short:
        assert f"{len(short):,} messages of breaking changes" in last
    # the whole messages come first: no short form before a whole one
    rows = [line for line in text.splitlines() if line.startswith("| c") and "`" in line]
    kinds = ["short" if "(message left out for length)" in row else "whole" for row in rows[:len(named)]]
    assert kinds == sorted(kinds, key=lambda k: k == "short")


@pytest.mark.parametrize("value", ["12", "lots", "-5", "1.5M"])
def test_a_bad_budget_is_one_line_and_exit_2(value):
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", str(EXAMPLES / "bikeshare.model.yaml"), str(EXAMPLES / "bikeshare.model.yaml"),
                     "--format", "markdown", "--budget", value], out, err)
    assert code == 2 and out.getvalue() == "" and len(err.getvalue().strip().splitlines()) == 1
    assert "--budget" in err.getvalue()


def test_budget_goes_with_markdown_only():
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["diff", str(EXAMPLES / "bikeshare.model.yaml"), str(EXAMPLES / "bikeshare.model.yaml"),
                     "--format", "json", "--budget", "1MiB"], out, err)
    assert code == 2 and "--budget goes with --format markdown" in err.getvalue()


@pytest.mark.parametrize("text, expected", [("none", None), ("65536", 65536), ("1MiB", 1 << 20), ("64k", 65536)])
def test_budget_values(text, expected):
    assert md_budget.parse_budget(text) == expected


def test_a_large_diagram_is_cut_to_the_changed_links_and_their_nearest_tables(large):
    _, result = large
    full = diff_picture(result)
    cut = readable(full)
    assert len(full.nodes) > 40 and len(cut.nodes) <= 40
    red = {(a.link, a.src, a.dst) for a in full.arrows if a.red}
    kept = {n.table for n in cut.nodes}
    # every changed link whose two tables were kept is still drawn red; the first changed links always are
    assert {(a.link, a.src, a.dst) for a in cut.arrows if a.red} == {r for r in red if r[1] in kept and r[2] in kept}
    first = next(a for a in full.arrows if a.red)
    assert {first.src, first.dst} <= kept
    assert [a.index for a in cut.arrows] == list(range(len(cut.arrows)))  # linkStyle indices counted again
    assert f"showing {len(cut.nodes)} of the {len(full.nodes)} tables" in cut.caption
    assert "left out" in cut.caption


def test_a_small_diagram_is_left_as_it_is():
    nodes = tuple(Node(f"t_{n}", n, "dimension") for n in "abc")
    pic = Picture("m", nodes, (Arrow(0, "l", "a", "b", "one-way", True),), None)
    assert readable(pic) is pic
