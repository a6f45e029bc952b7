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


# --- the outpatient-clinic example: the warnings check gives to teach ----------------------------------

CLINIC, CLINIC_2 = "examples/clinic/clinic.model.yaml", "examples/clinic/revision-2/clinic.model.yaml"
CLINIC_TITLE = "The outpatient-clinic example"


def clinic_text() -> str:
    return " ".join(section(CLINIC_TITLE).split())


def clinic_source() -> str:
    return (ROOT / CLINIC).read_text(encoding="utf-8")


def check_json(path: str | Path) -> tuple[int, list[dict]]:
    code, out = run(["check", str(path), "--format", "json"])
    return code, json.loads(out)["findings"]


def check_variant(tmp_path: Path, old: str, new: str) -> list[dict]:
    """Check the clinic model with one piece of text replaced (which must be there)."""
    source = clinic_source()
    assert source.count(old) == 1
    path = tmp_path / "clinic.model.yaml"
    path.write_text(source.replace(old, new), encoding="utf-8")
    code, found = check_json(path)
    assert code == 0 and {f["severity"] for f in found} <= {"warning"}  # still a valid model: one thing changed
    return found


def of_rule(found: list[dict], rule: str) -> list[dict]:
    return [f for f in found if f["rule"] == rule]


def test_the_clinic_block_runs_with_the_exit_codes_the_readme_gives():
    block = section(CLINIC_TITLE).split("```sh", 1)[1].split("```", 1)[0]
    commands = [shlex.split(line)[1:] for line in block.strip().splitlines()]
    assert commands == [["check", CLINIC], ["check", CLINIC_2]]
    text = clinic_text()
    assert "The first command exits 0 (warnings only)" in text and "The second command exits 3 (errors)" in text
    assert [run(argv)[0] for argv in commands] == [0, 3]
    code, found = check_json(CLINIC)
    assert {f["severity"] for f in found} == {"warning"}  # "no errors"
    assert {f["rule"] for f in found} == {"two-way-drops-unmatched", "ambiguous-paths"}  # "two kinds of warning"


def test_revision_2_differs_from_the_model_by_one_word_outside_comments():
    assert "the same model with one word changed: `standby: yes`" in clinic_text()

    def lines(path: str) -> list[str]:
        return [line for line in (ROOT / path).read_text(encoding="utf-8").splitlines() if not line.startswith("#")]

    old, new = lines(CLINIC), lines(CLINIC_2)
    changed = [(a, b) for a, b in zip(old, new) if a != b]
    assert len(old) == len(new) and changed == [("    standby: true", "    standby: yes")]


def test_the_bridge_link_drops_unmatched_rows_from_the_reports_the_readme_names():
    text = clinic_text()
    assert "`two-way-drops-unmatched` on `links.diagnoses_appointment`" in text
    (found,) = of_rule(check_json(CLINIC)[1], "two-way-drops-unmatched")
    assert found["subject"] == "links.diagnoses_appointment"
    named = re.search(r"It names the reports and measures that lose rows \(([^)]*)\)", text).group(1)
    losing, kept = named.split(", not ")
    for report in re.findall(r"`(\w+)`", losing):
        assert f"report {report} (" in found["message"]
    assert re.findall(r"`(\w+)`", kept) == ["patient_billing"] and "patient_billing" not in found["message"]
    assert "`(no match)`" in found["message"] and "`(no match)`" in text
    assert "Keep diagnoses_appointment one-way" in found["message"]
    assert "`flow: {diagnoses_appointment: one-way}` on the reports that must keep every row" in text
    assert "`flow: {diagnoses_appointment: one-way}` on the reports that must keep every row" in found["message"]


def test_with_the_bridge_link_one_way_the_warning_is_gone(tmp_path):
    assert "With the link one-way, the warning is gone." in clinic_text()
    found = check_variant(tmp_path, "    to: appointments.appointment_key\n    flow: two-way\n",
                          "    to: appointments.appointment_key\n")
    assert of_rule(found, "two-way-drops-unmatched") == []


def test_the_ambiguity_sits_at_the_measure_that_causes_it_with_its_fix():
    text = clinic_text()
    subjects = re.findall(r"`(paths\.[\w>-]+)`", text.split("`ambiguous-paths` on", 1)[1].split("Not warned", 1)[0])
    found = of_rule(check_json(CLINIC)[1], "ambiguous-paths")
    assert sorted(f["subject"] for f in found) == sorted(subjects) and len(subjects) == 4
    line = 1 + clinic_source().splitlines().index("  home_clinic_visits:")
    assert "All four findings sit at the line of `measures.home_clinic_visits`" in text
    assert "set `flow: {appointments_doctor: off}` on measure home_clinic_visits" in text
    for f in found:
        assert f["location"] == {"file": CLINIC, "line": line, "column": 3}
        assert "in measure home_clinic_visits's setting" in f["message"]
        assert "Set `flow: {appointments_doctor: off}` on measure home_clinic_visits" in f["message"]


def test_either_route_switched_off_on_the_measure_ends_the_ambiguity(tmp_path):
    assert "Either route switched off on the measure ends the ambiguity" in clinic_text()
    for off in ("appointments_doctor", "appointments_clinic"):
        found = check_variant(tmp_path, "    via: [doctors_clinic]\n",
                              f"    via: [doctors_clinic]\n    flow: {{{off}: off}}\n")
        assert of_rule(found, "ambiguous-paths") == [], off
        assert of_rule(found, "two-way-drops-unmatched")  # the other warning stays: the twin changes one thing


def test_the_access_link_carrying_row_security_is_not_warned_and_without_it_is(tmp_path):
    text = clinic_text()
    assert "Not warned, on purpose: `access_clinic`" in text
    assert "Without `security_flow: two-way` the same link gets `two-way-drops-unmatched`" in text
    assert "links.access_clinic" not in {f["subject"] for f in check_json(CLINIC)[1]}
    found = check_variant(tmp_path, "    flow: two-way\n    security_flow: two-way\n", "    flow: two-way\n")
    assert "links.access_clinic" in {f["subject"] for f in of_rule(found, "two-way-drops-unmatched")}


def test_revision_2_reports_the_reading_problem_first_then_what_follows():
    text = clinic_text()
    code, found = check_json(CLINIC_2)
    assert code == 3
    first, second = found[:2]
    assert "1. `invalid-model` on `links.appointments_booked_day.standby`" in text
    assert (first["rule"], first["subject"]) == ("invalid-model", "links.appointments_booked_day.standby")
    assert "yes is not a boolean in this format; write true" in text
    assert "yes is not a boolean in this format; write true" in first["message"]
    assert "2. `duplicate-live-link` on `links.appointments_day`" in text
    assert (second["rule"], second["subject"]) == ("duplicate-live-link", "links.appointments_day")
    assert all(f["severity"] == "warning" for f in found[2:])
    rest = {(f["rule"], f["subject"]) for f in found[2:]}
    for subject in ("paths.calendar->appointments", "paths.calendar->appointment_diagnoses"):
        assert f"`{subject}`" in text and ("ambiguous-paths", subject) in rest
    assert "`via-not-standby` on `measures.booked_count`" in text
    assert ("via-not-standby", "measures.booked_count") in rest


def test_the_model_with_standby_true_has_none_of_revision_2_s_findings():
    found = {(f["rule"], f["subject"]) for f in check_json(CLINIC)[1]}
    assert {rule for rule, _ in found}.isdisjoint({"invalid-model", "duplicate-live-link", "via-not-standby"})
    assert not any(subject.startswith("paths.calendar->") for _, subject in found)


def test_a_measure_s_own_ambiguity_names_only_that_measure_as_reading_it():
    # the setting is home_clinic_visits' own: the other measures on appointments are not computed in it
    code, out = run(["check", CLINIC, "--format", "json"])
    found = [f for f in json.loads(out)["findings"] if f["rule"] == "ambiguous-paths"
             and "home_clinic_visits's setting" in f["message"]]
    assert found and all("measure home_clinic_visits reads it" in f["message"] for f in found)
    assert not any("appointment_count" in f["message"] for f in found)
