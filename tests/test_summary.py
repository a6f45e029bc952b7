"""Summaries by cause (`modeldiff.summary`): derived changes and impacts grouped under the structural change
that causes them, most severe first, and the one grouping in text, Markdown, notes and HTML."""

from __future__ import annotations

import io
from html import escape
import random
from pathlib import Path

import pytest
from scenariokit import SMALL, ordinary_changes, synthetic_model_text

from modeldiff import impact, load, summary
from modeldiff.changes import Change, rank
from modeldiff.compare import ModelDiff, Side
from modeldiff.impact import DiffResult, Impact, Reason
from modeldiff.model import Model
from modeldiff.render import causes_out, diff_out, html

EXAMPLES = Path(__file__).parent.parent / "examples"
OLD = EXAMPLES / "bikeshare.model.yaml"
NEW = EXAMPLES / "revision-2" / "bikeshare.model.yaml"
DESCRIPTION = "    description: Units held; adding it up over several days counts a unit once per day.\n"


def _analyse(old_text: str, new_text: str):
    a = load.load_files([("old.model.yaml", old_text)])
    b = load.load_files([("new.model.yaml", new_text)])
    return impact.analyse(a.model, b.model, a.findings, b.findings)


@pytest.fixture(scope="module")
def example():
    return _analyse(OLD.read_text(), NEW.read_text())


def test_the_two_way_link_carries_its_paths_ambiguity_and_impacts(example):
    found = summary.causes(example)
    first = found[0]
    assert (first.change.kind, first.change.subject) == ("link.flow_widened", "links.trips_start_station")
    assert first.severity == "breaking"  # the ambiguity it opens is breaking, the link change alone is not
    assert sorted(c.kind for c in first.derived) == ["ambiguity.introduced"] + ["path.added"] * 8
    assert [m.name for m in first.measures] == [m.name for m in example.measures]
    assert [r.name for r in first.reports] == [r.name for r in example.reports]
    # counted per table of the new model, derived measures apart (the trip measures move too: the filter comes
    # back to trips over the two-way link, docs/impact.md)
    expected: dict[str, int] = {}
    for m in first.measures:
        table = example.new.measures[m.name].table
        key = table if table is not None else "derived measures"
        expected[key] = expected.get(key, 0) + 1
    assert dict(first.tables) == expected and expected["stock_levels"] == 2 and expected["trips"] == 5
    line = summary.consequences(first, example)
    plain = sum(n for k, n in expected.items() if k != "derived measures")
    facts = len([k for k in expected if k != "derived measures"])
    assert line.startswith(f"8 new paths, 1 ambiguity, {len(first.measures)} measures in {facts} tables"
                           f" ({facts} fact), {len(first.reports)} reports"), line  # "2 fact [tables]"
    assert plain + expected["derived measures"] == len(first.measures)


def test_every_derived_change_is_under_exactly_one_cause(example):
    found = summary.causes(example)
    derived = [c.id for cause in found for c in cause.derived]
    assert sorted(derived) == sorted(c.id for c in example.changes if summary.is_derived(c))
    assert len(derived) == len(set(derived))


def test_a_diff_of_plain_edits_has_no_summary_by_cause():
    text = OLD.read_text()
    result = _analyse(text, text.replace(DESCRIPTION, "    description: Units held at close of day.\n"))
    assert [c.kind for c in result.changes] == ["measure.metadata_changed"]
    found = summary.causes(result)
    assert [c.size for c in found] == [0] and not causes_out.worth_showing(found)
    md = ModelDiff(Side(None, "old"), Side(None, "new"), result)
    out = io.StringIO()
    diff_out.as_text([md], out)
    assert "by cause" not in out.getvalue()
    out = io.StringIO()
    diff_out.as_markdown([md], out)
    assert "By cause" not in out.getvalue()


def test_the_text_markdown_and_html_show_the_same_causes(example):
    md = ModelDiff(Side(None, "old"), Side(None, "new"), example)
    found = summary.causes(example)
    text, markdown = io.StringIO(), io.StringIO()
    diff_out.as_text([md], text)
    diff_out.as_markdown([md], markdown)
    page = html.document([md])
    head = summary.title(found[0])
    assert "by cause" in text.getvalue() and "**By cause**" in markdown.getvalue()
    assert " ".join(text.getvalue().split()).count(head) == 1
    assert markdown.getvalue().count(head) == 1
    assert page.count(escape(head)) == 1


def test_a_derived_change_nothing_explains_goes_under_other():
    path = Change("path.added", "paths.a->b", "numbers", "A filter on a now reaches b.", after=[["x"]],
                  details={"links": ["x"]}, id="c2")
    edit = Change("table.metadata_changed", "tables.a", "safe", "Table a has a new description.", id="c1")
    moved = Impact("m1", "numbers", (Reason("c2", "Paths from a into b changed."),))
    result = DiffResult(Model("m", {}), Model("m", {}), (edit, path), (moved,), (), ())
    found = summary.causes(result)
    other = [c for c in found if c.change is None]
    assert len(other) == 1 and other[0].derived == (path,) and other[0].measures == (moved,)
    assert "other derived changes" in summary.title(other[0])
    assert [c.change for c in found if c.change is not None] == [edit]


def test_a_security_change_goes_under_its_roles_change():
    role = Change("role.filter_changed", "roles.r1", "numbers", "Role r1 filters something else.", id="c1")
    link = Change("link.flow_widened", "links.l1", "numbers", "Link l1 now two-way.", id="c2")
    exposed = Change("security.exposed", "roles.r1.tables.t", "breaking", "SECURITY: role r1 ...",
                     before=["l1"], id="c3")
    result = DiffResult(Model("m", {}), Model("m", {}), (role, link, exposed), (), (), ())
    by_id = {c.id: c for c in summary.causes(result)}
    assert by_id["c1"].derived == (exposed,) and by_id["c1"].severity == "breaking"
    assert by_id["c2"].derived == ()


def test_a_security_change_without_a_role_change_goes_under_a_link_on_its_path():
    link = Change("link.flow_widened", "links.l1", "numbers", "Link l1 now two-way.", id="c1")
    exposed = Change("security.exposed", "roles.r1.tables.t", "breaking", "SECURITY: role r1 ...",
                     before=["l0", "l1"], id="c2")
    (cause,) = summary.causes(DiffResult(Model("m", {}), Model("m", {}), (link, exposed), (), (), ()))
    assert cause.change == link and cause.derived == (exposed,)


def test_an_impact_with_two_causes_counts_under_both_and_reasons_read_defensively():
    a = Change("measure.logic_changed", "measures.m1", "numbers", "m1 changed.", id="c1")
    b = Change("link.flow_widened", "links.l1", "numbers", "l1 two-way.", id="c2")

    class Odd:  # a reason record of another shape (a field more, or one less) is read by its `change` alone
        change = "c2"

    moved = Impact("m1", "numbers", (Reason("c1", "m1 changed."), Odd()))
    found = summary.causes(DiffResult(Model("m", {}), Model("m", {}), (a, b), (moved,), (), ()))
    assert [c.measures for c in found] == [(moved,), (moved,)]


@pytest.mark.parametrize("seed", range(40))
def test_grouping_holds_on_seeded_synthetic_changes(seed):
    """Property: every derived change under one cause, every impact under each cause its reasons name, most severe
    first (seeded; the campaign benchmarks/campaigns/summary_campaign.py runs more seeds at larger sizes)."""
    rng = random.Random(seed)
    old = synthetic_model_text(**SMALL, seed=seed)
    new = ordinary_changes(old, rng.randint(1, 6), seed=seed)
    result = _analyse(old, new)
    assert summary.check_grouping(result) == []


def test_check_grouping_finds_a_broken_grouping(example, monkeypatch):
    real = summary.causes

    def dropped(result):
        found = real(result)
        return (found[0].__class__(found[0].change, found[0].derived[1:], *[getattr(found[0], f) for f in
                ("measures", "roles", "reports", "severity", "tables", "owners")]),) + found[1:]

    monkeypatch.setattr(summary, "causes", dropped)
    assert summary.check_grouping(example) != []
    assert rank("breaking") > rank("safe")
