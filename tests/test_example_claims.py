"""examples/README.md says what the commands it shows will print: run them and hold it to each claim."""

from __future__ import annotations

import io
import json
import re
import shlex
from pathlib import Path

import pytest

from modeldiff.cli import main

ROOT = Path(__file__).resolve().parent.parent
README = ROOT / "examples" / "README.md"
OLD, NEW = "examples/bikeshare.model.yaml", "examples/revision-2/bikeshare.model.yaml"


def readme() -> str:
    return README.read_text(encoding="utf-8")


def run(argv: list[str]) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(ROOT)
        mp.setenv("MODELDIFF_NO_CACHE", "1")
        code = main(argv, stdout=out, stderr=err)
    assert err.getvalue() == ""
    return code, out.getvalue()


def try_it_commands() -> list[list[str]]:
    """The commands of the README's "Try it" block, as argument lists without the program name."""
    block = readme().split("## Try it", 1)[1].split("```sh", 1)[1].split("```", 1)[0]
    return [shlex.split(line)[1:] for line in block.strip().splitlines() if line.startswith("modeldiff ")]


def section(title: str) -> str:
    return readme().split(f"## {title}", 1)[1].split("\n## ", 1)[0]


@pytest.fixture(scope="module")
def diff() -> dict:
    code, out = run(["diff", OLD, NEW, "--format", "json"])
    assert code == 3  # breaking
    return json.loads(out)


def test_the_try_it_block_runs_with_the_exit_codes_the_readme_implies():
    # the model "checks clean, no findings"; revision 2 has warnings only; the diff is breaking
    assert try_it_commands() == [["check", OLD], ["check", NEW], ["diff", OLD, NEW]]
    assert [run(argv)[0] for argv in try_it_commands()] == [0, 0, 3]
    assert "checks clean, no findings" in readme()
    code, out = run(["check", OLD, "--format", "json"])
    assert json.loads(out)["findings"] == []


def test_the_structural_and_derived_changes_are_those_the_readme_lists(diff):
    text = section("The change in revision 2")
    assert "`link.flow_widened` on `links.trips_start_station`" in text
    assert "`ambiguity.introduced` on\n  `paths.calendar->stock_levels`" in text
    kinds = {(c["kind"], c["subject"]) for c in diff["changes"]}
    structural = {k for k in kinds if not k[0].startswith(("path.", "ambiguity.", "security.", "reference.", "warning."))}
    assert structural == {("link.flow_widened", "links.trips_start_station")}
    assert "`warning.added` on\n  `roles.student_programme_analyst`" in text
    assert {k for k in kinds if k[0] == "warning.added"} == {("warning.added", "roles.student_programme_analyst")}
    # "new filter paths into `stations` and `stock_levels` (from `calendar`, `bikes`, `riders`, `trips`)"
    sources = re.search(r"new filter paths into `stations` and `stock_levels` \(from ([^)]*)\)", " ".join(text.split()))
    named = re.findall(r"`(\w+)`", sources.group(1))
    assert sorted(named) == ["bikes", "calendar", "riders", "trips"]
    added = {s for k, s in kinds if k == "path.added"}
    assert added == {f"paths.{s}->{t}" for s in named for t in ("stations", "stock_levels")}
    assert ("ambiguity.introduced", "paths.calendar->stock_levels") in kinds
    assert diff["summary"]["exit_code"] == 3


def test_the_stock_measures_and_station_stock_are_impacted_and_repairs_are_not(diff):
    text = " ".join(section("The change in revision 2").split())
    measures = {m["name"] for m in diff["impacts"]["measures"]}
    reports = {r["name"] for r in diff["impacts"]["reports"]}
    for name in ("stock_on_hand", "stock_value", "avg_unit_cost"):
        assert f"`{name}`" in text and name in measures
    assert "`station_stock`" in text and "station_stock" in reports
    for name in ("repair_cost", "repair_count", "cost_per_repair"):
        assert f"`{name}`" in text and name not in measures
    assert "`repair_costs_by_depot` are not impacted" in text and "repair_costs_by_depot" not in reports


def test_east_overview_is_impacted_through_the_route_that_comes_back(diff):
    assert "`east_overview` (grouped by district" in " ".join(section("The change in revision 2").split())
    assert "east_overview" in {r["name"] for r in diff["impacts"]["reports"]}


def test_revision_2_warns_that_the_students_filter_stops_at_the_new_two_way_link():
    assert "warns that `student_programme_analyst`'s filter\n  stops at the new two-way link" in readme()
    code, out = run(["check", NEW, "--format", "json"])
    found = {(f["rule"], f["subject"]) for f in json.loads(out)["findings"]}
    assert ("security-stops", "roles.student_programme_analyst") in found
    assert ("ambiguous-paths", "paths.calendar->stock_levels") in found
    assert {rule for rule, _ in found} == {"security-stops", "ambiguous-paths"}
