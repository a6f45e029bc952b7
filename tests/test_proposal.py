"""Instead of two-way (issue 13): the proposal, its patch, and its evidence on the bike-share data.

Outside check (the issue's): on the bike-share example, flipping trips -> stations
to two-way and keeping it one-way with a condition on trip count list the same
stations per day in station_stock, and `verify` shows the stock measures moved
under the flip and unmoved under the proposal. Every "detects" test has an
"absent" twin.
"""

from __future__ import annotations

import io
import json
import shutil
import subprocess
from pathlib import Path

import pytest

from modeldiff import compare, demo_data, load, proposal, verify
from modeldiff.check import check_model
from modeldiff.cli import main

ROOT = Path(__file__).resolve().parent.parent
OLD = ROOT / "examples" / "bikeshare.model.yaml"
FLIP = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"


def run(*argv) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main([str(a) for a in argv], out, err)
    assert err.getvalue() == ""
    return code, out.getvalue()


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bikeshare-data")
    demo_data.write_demo_data(folder)
    return folder


@pytest.fixture(scope="module")
def flip():
    return compare.compare_specs(str(OLD), str(FLIP))


# --- which reports, which measure --------------------------------------------------------------------------


def test_a_link_made_two_way_gets_a_proposal_for_the_reports_grouped_by_its_table(flip):
    (p,) = proposal.proposals(flip)
    assert (p.link, p.from_table, p.to_table, p.measure, p.added_measure) == \
        ("trips_start_station", "trips", "stations", "trip_count", False)
    # station_stock groups by stations; east_overview by districts, a table stations' links lead to. weekly_fares
    # and rider_trips show only trip measures: their groups have trips already, so they get nothing.
    assert [(r.report, r.having, r.groups_by) for r in p.reports] == [
        ("east_overview", "trip_count > 0", ("districts.name",)),
        ("station_stock", "trip_count > 0", ("stations.name",))]


def test_no_proposal_when_no_link_becomes_two_way():
    narrowed = compare.compare_specs(str(FLIP), str(OLD))  # the same link, made one-way again
    assert [c.kind for c in narrowed.result.changes if c.kind == "link.flow_widened"] == []
    assert proposal.proposals(narrowed) == []
    same = compare.compare_specs(str(OLD), str(OLD))
    assert proposal.proposals(same) == []


def test_rollups_follow_links_from_to():
    model = load.load_path(OLD).model
    assert proposal.rollups(model, "stations") == {"stations", "districts"}
    assert proposal.rollups(model, "districts") == {"districts"}


# --- the patch --------------------------------------------------------------------------------------------


def _apply(patch: str, files: dict[str, str], tmp_path: Path) -> dict[str, str]:
    """Apply `patch` with git apply in a folder holding `files` (repository-relative names)."""
    for name, text in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(text)
    subprocess.run(["git", "init", "-q"], cwd=tmp_path, check=True)
    subprocess.run(["git", "apply", "-"], cwd=tmp_path, input=patch.encode(), check=True)
    return {name: (tmp_path / name).read_text() for name in files}


def test_the_patch_applies_and_gives_the_proposed_model(flip, tmp_path):
    (p,) = proposal.proposals(flip)
    shown = str(FLIP).lstrip("/")
    assert p.patch.startswith(f"--- a/{shown}\n+++ b/{shown}\n")
    (after,) = _apply(p.patch, {shown: FLIP.read_text()}, tmp_path).values()
    loaded = load.load_files([("proposed.model.yaml", after)])
    expected = proposal.proposed_model(flip.result.new, p)
    assert loaded.model.links == expected.links and loaded.model.reports == expected.reports
    assert loaded.model.measures == expected.measures
    assert [f for f in check_model(loaded.model) if f.severity == "error"] == []
    assert "two-way" not in loaded.model.links["trips_start_station"].flow


FLOW_STYLE = """model: m
format: 1
tables:
  sales: {kind: fact, key: id, columns: {id: integer, shop: integer, amount: decimal}}
  shops: {kind: dimension, key: shop, columns: {shop: integer, name: text}}
  stock: {kind: fact, key: id, columns: {id: integer, shop: integer, units: integer}}
links:
  sales_shop: {from: sales.shop, to: shops.shop%s}
  stock_shop: {from: stock.shop, to: shops.shop}
measures:
  revenue: {table: sales, expr: sum(amount)}
  units: {table: stock, expr: sum(units)}
reports:
  by_shop: {measures: [units], by: [shops.name]%s}
"""


def _flow_style_diff(tmp_path, having=""):
    old, new = tmp_path / "old.model.yaml", tmp_path / "new.model.yaml"
    old.write_text(FLOW_STYLE % ("", having))
    new.write_text(FLOW_STYLE % (", flow: two-way", having))
    return compare.compare_specs(str(old), str(new)), new


def test_a_measure_is_added_when_the_fact_has_no_row_count_and_flow_mappings_are_edited(tmp_path):
    md, new = _flow_style_diff(tmp_path)
    (p,) = proposal.proposals(md)
    assert (p.measure, p.added_measure) == ("sales_rows", True)
    assert [(r.report, r.having) for r in p.reports] == [("by_shop", "sales_rows > 0")]
    name = str(new).lstrip("/")
    (after,) = _apply(p.patch, {name: new.read_text()}, tmp_path / "apply").values()
    loaded = load.load_files([("proposed.model.yaml", after)])
    assert loaded.model.reports["by_shop"].having == "sales_rows > 0"
    assert loaded.model.measures["sales_rows"].expr == "count(*)"
    assert loaded.model.links["sales_shop"].flow == "one-way"
    assert [f for f in check_model(loaded.model) if f.severity == "error"] == []


def test_a_condition_the_report_has_is_kept_and_joined(tmp_path):
    md, new = _flow_style_diff(tmp_path, ', having: "units >= 1"')
    (p,) = proposal.proposals(md)
    assert [r.having for r in p.reports] == ["(units >= 1) AND sales_rows > 0"]
    (after,) = _apply(p.patch, {str(new).lstrip("/"): new.read_text()}, tmp_path / "apply").values()
    assert load.load_files([("p.model.yaml", after)]).model.reports["by_shop"].having == \
        "(units >= 1) AND sales_rows > 0"


def test_no_patch_when_the_file_cannot_be_read_again(flip, tmp_path):
    copy = tmp_path / "gone.model.yaml"
    shutil.copy(FLIP, copy)
    md = compare.compare_specs(str(OLD), str(copy))
    copy.unlink()
    (p,) = proposal.proposals(md)
    assert p.patch == "" and "could not be read" in p.patch_note


# --- on the bike-share data (the outside check) ----------------------------------------------------


@pytest.fixture(scope="module")
def side_by_side(flip, data):
    found = verify.verify(flip, str(data))
    (d,) = found.proposals
    return d


def test_the_proposal_lists_the_same_stations_as_the_flip(side_by_side):
    station_stock = next(r for r in side_by_side.reports if r.report == "station_stock")
    assert station_stock.same_groups and station_stock.groups_two_way == station_stock.groups_proposed > 0
    assert station_stock.no_match_two_way and not station_stock.no_match_proposed


def test_the_old_revision_lists_more_stations_than_both(flip, data):
    from modeldiff.data import Database, evaluate_report

    with Database.open(flip.result.old, str(OLD), str(data)) as db:
        old_rows = evaluate_report(flip.result.old, "station_stock", db)
    with Database.open(flip.result.new, str(FLIP), str(data)) as db:
        flip_rows = evaluate_report(flip.result.new, "station_stock", db)
    assert len(old_rows.rows) > len(flip_rows.rows)  # the flip drops the days a station had no trip


def test_verify_shows_the_stock_measures_moved_by_the_flip_and_unmoved_by_the_proposal(side_by_side):
    stock = {(m.report, m.measure): m for m in side_by_side.measures if m.measure in ("stock_value", "stock_on_hand")}
    assert stock[("station_stock", "stock_value")].moved_by_flip
    assert stock[("station_stock", "stock_on_hand")].moved_by_flip
    assert not any(m.moved_by_proposal for m in stock.values())
    assert {"stock_value", "stock_on_hand"} <= set(side_by_side.flip_moved_measures)
    assert side_by_side.proposal_moves_measures == ()


def test_a_measure_the_flip_does_not_move_is_not_said_to_be_left_alone(side_by_side):
    repairs = [m for m in side_by_side.measures if m.measure == "repair_cost"]
    assert repairs and not any(m.moved_by_flip for m in repairs)
    assert not any(m.measure == "repair_cost" for m in side_by_side.left_alone)


# --- where it is shown ----------------------------------------------------------------------------------


def test_plan_shows_the_proposal_with_its_patch_in_text_markdown_and_json():
    code, text = run("plan", OLD, FLIP)
    assert code == 0 and "Instead of two-way: trips_start_station (trips -> stations)" in text
    assert '+    having: "trip_count > 0"' in text and "-    flow: two-way" in text
    _, markdown = run("plan", OLD, FLIP, "--format", "markdown")
    assert "### Instead of two-way: `trips_start_station`" in markdown and "```diff" in markdown
    _, document = run("plan", OLD, FLIP, "--format", "json")
    (found,) = json.loads(document)["instead_of_two_way"]
    assert found["measure"] == "trip_count" and found["patch"].startswith("--- a/")


def test_plan_without_a_link_made_two_way_shows_no_proposal():
    code, text = run("plan", FLIP, OLD)
    assert code == 0 and "Instead of two-way" not in text
    _, document = run("plan", FLIP, OLD, "--format", "json")
    assert json.loads(document)["instead_of_two_way"] == []


def test_the_markdown_and_html_diff_reports_show_the_proposal():
    _, markdown = run("diff", OLD, FLIP, "--format", "markdown", "--budget", "none")
    assert "#### Instead of two-way: `trips_start_station`" in markdown
    _, html = run("diff", OLD, FLIP, "--format", "html")
    assert "Instead of two-way: trips_start_station (trips → stations)" in html
    assert "station_stock (grouped by stations.name): having trip_count &gt; 0" in html


def test_the_diff_reports_show_no_proposal_without_a_flip():
    _, markdown = run("diff", FLIP, OLD, "--format", "markdown", "--budget", "none")
    _, html = run("diff", FLIP, OLD, "--format", "html")
    assert "Instead of two-way" not in markdown and "Instead of two-way" not in html


def test_verify_prints_the_proposal_on_data(data):
    code, text = run("verify", OLD, FLIP, "--data", data, "--limit", "1")
    assert code == 1
    assert "station_stock: the same" in text and "the flip moves and the proposal leaves alone: stock_value" in text
    _, document = run("verify", OLD, FLIP, "--data", data, "--limit", "1", "--format", "json")
    (found,) = json.loads(document)["instead_of_two_way"]
    assert found["on_data"]["proposal_moves_measures"] == []


def test_verify_without_a_flip_prints_no_proposal(data):
    _, text = run("verify", FLIP, OLD, "--data", data, "--limit", "1")
    assert "Instead of two-way" not in text


def test_make_demo_ends_with_the_proposal_applied_on_data(capsys, data):
    from modeldiff import demo

    demo._proposal_step(OLD, FLIP, data)
    out = capsys.readouterr().out
    assert "5. Instead of two-way: the proposal applied" in out
    assert "station_stock: MOVED" in out and "east_overview: unchanged" in out
    assert "(absent)" in out  # groups without trips disappear ...
    assert "Measures: none impacted" in out  # ... and no measure can move
    assert out.rstrip().endswith("every group kept shows the numbers it had)")


def test_the_demo_patch_helper_refuses_a_patch_that_does_not_fit():
    from modeldiff import demo

    patch = "--- a/x\n+++ b/x\n@@ -1,1 +1,1 @@\n-flow: two-way\n+flow: one-way\n"
    assert demo._patched("flow: two-way\n", patch) == "flow: one-way\n"
    with pytest.raises(RuntimeError):
        demo._patched("flow: one-way\n", patch)


def test_a_shortened_markdown_keeps_the_proposal_and_says_when_its_patch_is_left_out():
    _, tight = run("diff", OLD, FLIP, "--format", "markdown", "--budget", "4000")
    assert "#### Instead of two-way: `trips_start_station`" in tight and "```diff" not in tight
    assert "1 patches of proposals" in tight.rstrip().splitlines()[-1]
    _, roomy = run("diff", OLD, FLIP, "--format", "markdown", "--budget", "30000")
    assert "```diff" in roomy and "patches of proposals" not in roomy


def test_a_measure_that_is_not_sql_is_passed_over_without_a_traceback(tmp_path):
    old, new = tmp_path / "old.model.yaml", tmp_path / "new.model.yaml"
    broken = FLOW_STYLE.replace("revenue: {table: sales, expr: sum(amount)}",
                                'revenue: {table: sales, expr: "count(*"}')
    old.write_text(broken % ("", ""))
    new.write_text(broken % (", flow: two-way", ""))
    (p,) = proposal.proposals(compare.compare_specs(str(old), str(new)))
    assert (p.measure, p.added_measure) == ("sales_rows", True)
    code, text = run("plan", old, new)
    assert code == 0 and "Instead of two-way: sales_shop (sales -> shops)" in text
