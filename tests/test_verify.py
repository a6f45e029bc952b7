"""`modeldiff verify`: both revisions evaluated on the same data.

The expected numbers are computed here by hand, in plain Python over the CSV
rows, from semantics.md section 5 (not through the engine or DuckDB): with
revision 2's two-way trips_start_station, a filter on one day reaches
stations only through the trips that started that day, and stock_levels only
through those stations and the day. Checks of the data preconditions
(duplicate targets, overlapping type-2 versions, one current version per
member) are the usual warehouse integrity checks: common practice.
"""

from __future__ import annotations

import csv
import io
import json
from collections import defaultdict
from decimal import Decimal
from pathlib import Path

import pytest

from modeldiff import compare, demo_data, verify
from modeldiff.cli import main
from modeldiff.render import verify_out

ROOT = Path(__file__).resolve().parent.parent
MODEL = ROOT / "examples" / "bikeshare.model.yaml"
REVISION_2 = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"


# --- helpers ------------------------------------------------------------------------------------------


def run(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main(["verify", *map(str, argv)], stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def run_json(*argv) -> tuple[int, dict]:
    code, out, err = run(*argv, "--format", "json")
    assert err == "", err
    return code, json.loads(out)


def rows_of(folder: Path, table: str) -> list[dict[str, str]]:
    with (folder / f"{table}.csv").open(encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle))


def edited(tmp_path: Path, name: str, old: str, new: str, source: Path = MODEL) -> Path:
    text = source.read_text(encoding="utf-8")
    assert text.count(old) == 1, old
    path = tmp_path / f"{name}.model.yaml"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


def copy_data(src: Path, dst: Path, table: str | None = None, edit=None) -> Path:
    dst.mkdir(parents=True, exist_ok=True)
    for path in src.glob("*.csv"):
        text = path.read_text(encoding="utf-8")
        if path.stem == table:
            text = edit(text)
        (dst / path.name).write_text(text, encoding="utf-8")
    return dst


def set_field(text: str, row: int, column: int, value: str) -> str:
    """CSV text with one field replaced (row 0 is the header)."""
    lines = text.splitlines(keepends=True)
    cells = lines[row].rstrip("\n").split(",")
    cells[column] = value
    lines[row] = ",".join(cells) + "\n"
    return "".join(lines)


@pytest.fixture(scope="module")
def data(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("bikeshare-data")
    demo_data.write_demo_data(folder)
    return folder


@pytest.fixture(scope="module")
def hand(data) -> dict:
    """Stock values by day and by (day, station), worked out from the CSV rows alone."""
    day_of = {r["day_key"]: r["date"] for r in rows_of(data, "calendar")}
    station_name = {r["station_key"]: r["name"] for r in rows_of(data, "stations")}
    started = {(r["start_day_key"], r["start_station_key"]) for r in rows_of(data, "trips")}
    by_day_before: dict[str, Decimal] = defaultdict(Decimal)
    by_day_after: dict[str, Decimal] = defaultdict(Decimal)
    by_cell: dict[tuple[str, str], Decimal] = defaultdict(Decimal)
    lost = Decimal(0)
    for r in rows_of(data, "stock_levels"):
        value = Decimal(r["on_hand"]) * Decimal(r["unit_cost"])
        day = day_of[r["day_key"]]
        by_day_before[day] += value
        by_cell[(day, station_name[r["station_key"]])] += value
        if (r["day_key"], r["station_key"]) in started:
            by_day_after[day] += value
        else:
            lost += value
    cells_without_trip = {(day_of[d], station_name[s]) for d, s in
                          {(r["day_key"], r["station_key"]) for r in rows_of(data, "stock_levels")} - started}
    return {"before": dict(by_day_before), "after": dict(by_day_after), "cells": dict(by_cell),
            "cells_without_trip": cells_without_trip, "lost": lost}


@pytest.fixture(scope="module")
def revision_2(data) -> verify.Verification:
    return verify.verify(compare.compare_specs(str(MODEL), str(REVISION_2)), data_dir=str(data))


def comparison(v: verify.Verification, kind: str, name: str, by: tuple[str, ...] = ()) -> verify.Comparison:
    items = v.reports if kind == "report" else v.measures
    return next(c for c in items if c.name == name and (kind == "report" or c.by == by))


def money(value) -> Decimal:
    return Decimal(str(value)).quantize(Decimal("0.01"))


# --- the flipped link moves stock values ---------------------------------------------------------------


def test_flipped_link_moves_stock_value_by_day_as_computed_by_hand(revision_2, hand):
    measure = comparison(revision_2, "measure", "stock_value", ("calendar.date",))
    assert measure.moved
    found = {d.group[0][1].isoformat(): d for d in measure.differences if not d.no_match}
    # every day whose value moves by hand is listed, with the hand's numbers; no other day is
    moved_days = {day for day, before in hand["before"].items() if hand["after"].get(day, Decimal(0)) != before}
    assert set(found) == moved_days and moved_days
    for day, d in found.items():
        assert (d.before, d.after, d.present) == (hand["before"][day], hand["after"][day], "both")
        assert d.delta == hand["after"][day] - hand["before"][day]
    assert found["2025-04-24"].before == hand["before"]["2025-04-24"] > found["2025-04-24"].after
    # stock on days without a trip at that station falls in no group: the (no match) row, new only
    no_match = [d for d in measure.differences if d.no_match]
    assert [(d.present, d.before, d.after) for d in no_match] == [("after", None, hand["lost"])]


def test_station_stock_report_loses_exactly_the_station_days_without_a_trip(revision_2, hand):
    report = comparison(revision_2, "report", "station_stock")
    assert report.moved and report.groups_before == len(hand["cells"])
    value_rows = [d for d in report.differences if d.measure == "stock_value" and not d.no_match]
    lost = {(d.group[0][1].isoformat(), d.group[1][1]): d for d in value_rows}
    assert set(lost) == hand["cells_without_trip"]
    assert all(d.present == "before" and d.after is None and d.before == hand["cells"][cell]
               for cell, d in lost.items())
    # groups with a trip keep their numbers: none of them is listed
    assert not [d for d in report.differences if d.present == "both"]


def test_differences_come_largest_first(revision_2):
    sizes = [verify._magnitude(d) for d in comparison(revision_2, "measure", "stock_value", ("calendar.date",)).differences]
    assert sizes == sorted(sizes, reverse=True)


def test_trip_numbers_are_evaluated_and_do_not_move_on_the_demo_data(revision_2):
    # the flip makes a filter on trips come back through stations (trips -> stations -> trips), so the diff lists
    # the trip measures and their reports (changes.md, Impact); every demo trip has a station, so none moves
    assert [c.name for c in revision_2.reports] == ["daily_returns", "east_overview", "rider_trips", "station_stock",
                                                    "weekly_fares"]
    assert [c.name for c in revision_2.reports if c.moved] == ["station_stock"]
    assert {c.name for c in revision_2.measures if c.moved} == {"avg_unit_cost", "stock_on_hand", "stock_value"}
    assert "trip_count" in {c.name for c in revision_2.measures}
    assert revision_2.exit_code == 1 and not revision_2.roles and not revision_2.preconditions


def test_json_follows_the_contract(revision_2, hand):
    doc = verify_out.verification_json(revision_2, limit=3)
    assert doc["format"] == 1 and doc["new"] == {"rev": None, "path": str(REVISION_2)}
    report = next(r for r in doc["reports"] if r["name"] == "station_stock")
    assert (report["name"], report["moved"], len(report["differences"])) == ("station_stock", True, 3)
    assert report["differing"] == len(comparison(revision_2, "report", "station_stock").differences)
    measure = next(m for m in doc["measures"] if m["name"] == "stock_value" and m["source"] == "calendar")
    first_day = next(d for d in measure["differences"] if not d["no_match"])
    day = first_day["group"]["calendar.date"]
    assert set(first_day) >= {"group", "measure", "before", "after", "delta", "relative"}
    assert (money(first_day["before"]), money(first_day["after"])) == (hand["before"][day], hand["after"][day])
    assert first_day["relative"] == pytest.approx(float((hand["after"][day] - hand["before"][day]) / hand["before"][day]))
    assert doc["summary"]["exit_code"] == 1 and doc["roles"] == [] and doc["preconditions"] == []
    json.dumps(doc)  # everything is JSON-ready


def test_text_and_markdown_say_what_moved(revision_2):
    text, markdown = io.StringIO(), io.StringIO()
    verify_out.as_text(revision_2, text, limit=2)
    verify_out.as_markdown(revision_2, markdown, limit=2)
    assert "station_stock: MOVED: 810 differences" in text.getvalue()
    assert "stock_value by calendar.date: MOVED" in text.getvalue()
    assert "Verdict: numbers moved (exit 1)" in text.getvalue()
    assert "| calendar.date | stations.name | measure | before | after | delta | relative |" in markdown.getvalue()
    assert "(no match)" in markdown.getvalue()


def test_cli_exit_code_is_1_when_numbers_move(data):
    code, doc = run_json(MODEL, REVISION_2, "--data", data, "--limit", "1")
    assert code == 1 and doc["summary"]["reports_moved"] == 1


# --- nothing moves ---------------------------------------------------------------------------------------


def test_a_model_against_itself_moves_nothing(data):
    code, doc = run_json(MODEL, MODEL, "--data", data)
    assert code == 0
    assert (doc["reports"], doc["measures"], doc["roles"], doc["preconditions"]) == ([], [], [], [])
    assert doc["summary"]["exit_code"] == 0


def test_a_description_change_moves_nothing(data, tmp_path):
    new = edited(tmp_path, "described", "description: The city districts the scheme is run in.",
                 "description: The districts of the city.")
    code, out, err = run(MODEL, new, "--data", data)
    assert (code, err) == (0, "") and "Verdict: nothing moved (exit 0)" in out


def test_an_impacted_measure_whose_values_stay_the_same_is_reported_unmoved(data, tmp_path):
    # the diff cannot tell sum(a * b) from sum(b * a), so it lists the measure; the data shows no change
    new = edited(tmp_path, "commuted", "expr: sum(on_hand * unit_cost)", "expr: sum(unit_cost * on_hand)")
    code, doc = run_json(MODEL, new, "--data", data)
    assert [r["name"] for r in doc["reports"]] == ["east_overview", "station_stock"]
    assert not any(item["moved"] for item in doc["reports"] + doc["measures"])
    assert code == 0


def test_a_changed_definition_moves_every_group_of_its_reports(data, tmp_path):
    new = edited(tmp_path, "doubled", "expr: sum(on_hand * unit_cost)", "expr: sum(on_hand * unit_cost * 2)")
    code, doc = run_json(MODEL, new, "--data", data, "--limit", "0")
    overview = next(r for r in doc["reports"] if r["name"] == "east_overview")
    assert code == 1 and overview["moved"]
    assert all(d["after"] == pytest.approx(2 * d["before"]) and d["measure"] == "stock_value"
               for d in overview["differences"])
    total = next(m for m in doc["measures"] if m["name"] == "stock_value")
    assert (total["by"], total["source"], total["differing"]) == ([], None, 1)


# --- preconditions ---------------------------------------------------------------------------------------

STATIONS_MODEL = """\
model: stations_by_district
format: 1
tables:
  districts:
    kind: dimension
    key: district_key
    columns: {district_key: integer, code: CODE, name: text}
  stations:
    kind: dimension
    key: station_key
    columns: {station_key: integer, name: text, district_code: text}
  stock_levels:
    kind: fact
    key: [station_key, day]
    columns: {station_key: integer, day: date, on_hand: integer}
links:
  stations_district:
    from: stations.district_code
    to: districts.code
    cardinality: CARDINALITY
  stock_levels_station:
    from: stock_levels.station_key
    to: stations.station_key
measures:
  stock_on_hand: {table: stock_levels, expr: sum(on_hand)}
reports:
  stock_by_district:
    measures: [stock_on_hand]
    by: [districts.name]
"""


def stations_case(tmp_path: Path, districts: str) -> tuple[Path, Path, Path]:
    old = tmp_path / "old.model.yaml"
    new = tmp_path / "new.model.yaml"
    old.write_text(STATIONS_MODEL.replace("CODE", "text").replace("CARDINALITY", "many-to-many"), encoding="utf-8")
    new.write_text(STATIONS_MODEL.replace("CODE", "{type: text, unique: true}").replace("CARDINALITY", "many-to-one"),
                   encoding="utf-8")
    folder = tmp_path / "data"
    folder.mkdir()
    (folder / "districts.csv").write_text(districts, encoding="utf-8")
    (folder / "stations.csv").write_text("station_key,name,district_code\n1,Harbour Quay,HB\n2,Mill Bridge,RS\n",
                                         encoding="utf-8")
    (folder / "stock_levels.csv").write_text("station_key,day,on_hand\n1,2025-04-07,8\n2,2025-04-07,5\n",
                                             encoding="utf-8")
    return old, new, folder


def test_a_duplicate_target_fails_the_precondition_of_a_link_made_many_to_one(tmp_path):
    old, new, folder = stations_case(tmp_path, "district_key,code,name\n1,HB,Harbour\n2,RS,Riverside\n"
                                               "3,HB,Harbour North\n")
    code, doc = run_json(old, new, "--data", folder)
    assert [(p["check"], p["subject"], p["passed"], p["offending"], p["examples"]) for p in doc["preconditions"]] == [
        ("unique", "tables.districts.columns.code", False, 2, [{"code": "HB", "rows": 2}])]
    assert "many-to-one" in doc["preconditions"][0]["why"]
    assert code == 3 and doc["summary"]["preconditions_failed"] == 1


def test_a_unique_target_passes_the_precondition(tmp_path):
    old, new, folder = stations_case(tmp_path, "district_key,code,name\n1,HB,Harbour\n2,RS,Riverside\n")
    code, doc = run_json(old, new, "--data", folder)
    assert [(p["check"], p["passed"], p["offending"], p["examples"]) for p in doc["preconditions"]] == [
        ("unique", True, 0, [])]
    assert code == 0


MECHANICS_MODEL = """\
model: workshop
format: 1
tables:
  mechanics:
    kind: dimension
    key: mechanic_key
    natural_key: mechanic_code
    HISTORY
    columns: {mechanic_key: integer, mechanic_code: text, depot: text, valid_from: date, valid_to: date,
              is_current: boolean}
"""


def history_case(tmp_path: Path, rows: str) -> tuple[int, dict]:
    old, new = tmp_path / "old.model.yaml", tmp_path / "new.model.yaml"
    old.write_text(MECHANICS_MODEL.replace("    HISTORY\n", ""), encoding="utf-8")
    new.write_text(MECHANICS_MODEL.replace(
        "HISTORY", "history: {type: 2, valid_from: valid_from, valid_to: valid_to, current: is_current}"),
        encoding="utf-8")
    (tmp_path / "mechanics.csv").write_text("mechanic_key,mechanic_code,depot,valid_from,valid_to,is_current\n"
                                            + rows, encoding="utf-8")
    return run_json(old, new, "--data", tmp_path)


def test_overlapping_versions_and_two_current_rows_fail_type_2_history(tmp_path):
    code, doc = history_case(tmp_path, "1,M-01,Harbour,2025-01-01,2025-03-01,false\n"
                                       "2,M-01,Old Town,2025-02-15,,true\n"  # starts before version 1 ends
                                       "3,M-02,Hillside,2025-01-01,,true\n"
                                       "4,M-02,Riverside,2025-03-01,,true\n")  # overlaps, and a second current row
    found = {p["check"]: p for p in doc["preconditions"]}
    assert (found["no-overlapping-versions"]["passed"], found["no-overlapping-versions"]["offending"]) == (False, 2)
    assert found["one-current-row"]["examples"] == [{"mechanic_code": "M-02", "current_rows": 2}]
    assert code == 3


def test_clean_type_2_history_passes(tmp_path):
    code, doc = history_case(tmp_path, "1,M-01,Harbour,2025-01-01,2025-03-01,false\n"
                                       "2,M-01,Old Town,2025-03-01,,true\n"
                                       "3,M-02,Hillside,2025-01-01,,true\n")
    assert sorted((p["check"], p["passed"]) for p in doc["preconditions"]) == [
        ("no-overlapping-versions", True), ("one-current-row", True)]
    assert code == 0


def test_a_key_switch_needs_every_row_to_reach_the_target(data, tmp_path):
    switched = edited(tmp_path, "switched", "from: repairs.mechanic_key", "from: repairs.current_mechanic_key")
    broken = copy_data(data, tmp_path / "broken", "repairs", lambda text: set_field(text, 1, 4, "999"))
    code, doc = run_json(MODEL, switched, "--data", broken, "--limit", "1")
    found = {p["check"]: p for p in doc["preconditions"]}
    assert (found["not-null"]["passed"], found["referential-integrity"]["passed"]) == (True, False)
    assert found["referential-integrity"]["offending"] == 1
    assert found["referential-integrity"]["examples"][0]["current_mechanic_key"] == 999
    assert code == 3
    code, doc = run_json(MODEL, switched, "--data", data, "--limit", "1")
    assert all(p["passed"] for p in doc["preconditions"]) and len(doc["preconditions"]) == 2
    # repairs move to the mechanics' current versions; the switch lies on the roles' security path (issue 9,
    # point 3), so the roles are evaluated, and depot_staff's members now see repairs they did not see: exit 3
    roles = {r["name"]: r for r in doc["roles"]}
    assert set(roles) == {"depot_staff", "east_district_lead"}
    assert roles["depot_staff"]["exposed"] and code == 3


# --- roles ---------------------------------------------------------------------------------------------

ONE_WAY_SECURITY = ("    flow: two-way\n    security_flow: two-way", "    flow: two-way\n    security_flow: one-way")


def districts_of(data: Path, email: str) -> int:
    return sum(r["staff_email"] == email for r in rows_of(data, "district_access"))


def test_security_flow_turned_one_way_shows_more_rows_for_the_role(data, tmp_path):
    new = edited(tmp_path, "exposed", *ONE_WAY_SECURITY)
    code, doc = run_json(MODEL, new, "--data", data, "--user", "dara@example.org", "--limit", "1")
    role = next(r for r in doc["roles"] if r["name"] == "depot_staff")
    districts = next(t for t in role["tables"] if t["table"] == "districts")
    before, after = districts_of(data, "dara@example.org"), len(rows_of(data, "districts"))
    assert districts == {"table": "districts", "user": None, "before": before, "after": after,
                         "gained": after - before, "lost": 0}
    assert districts["before"] < districts["after"]
    assert role["exposed"] and doc["summary"]["roles_exposed"] == 1 and code == 3


def test_security_flow_turned_two_way_shows_fewer_rows_and_no_exposure(data, tmp_path):
    old = edited(tmp_path, "open", *ONE_WAY_SECURITY)
    code, doc = run_json(old, MODEL, "--data", data, "--user", "dara@example.org", "--limit", "1")
    role = next(r for r in doc["roles"] if r["name"] == "depot_staff")
    assert role["changed"] and not role["exposed"]
    assert all(t["after"] <= t["before"] for t in role["tables"])
    assert code == 1


def test_without_user_a_role_on_user_is_evaluated_for_each_viewer(data, tmp_path):
    new = edited(tmp_path, "exposed", *ONE_WAY_SECURITY)
    md = compare.compare_specs(str(MODEL), str(new))
    opened = verify.open_data(md, str(data), None)
    try:
        check = verify.check_role(md.result, "depot_staff", opened, None)
    finally:
        opened.close()
    emails = sorted({r["staff_email"] for r in rows_of(data, "district_access")})
    districts = {t.user: (t.before, t.after) for t in check.tables if t.table == "districts"}
    assert sorted(districts) == emails[:verify.VIEWER_CAP]
    assert all(before == districts_of(data, e) and after == 4 for e, (before, after) in districts.items())
    assert "depends on the person viewing" in check.notes[0]


# --- bad input -----------------------------------------------------------------------------------------


def assert_one_line_error(code: int, out: str, err: str, words: str) -> None:
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("modeldiff: ") and words in err and "Traceback" not in err


def test_missing_data_folder_is_one_line_exit_2(tmp_path):
    assert_one_line_error(*run(MODEL, REVISION_2, "--data", tmp_path / "nowhere"), "no such folder")


def test_missing_table_file_is_one_line_exit_2(data, tmp_path):
    folder = copy_data(data, tmp_path / "partial")
    (folder / "stations.csv").unlink()
    assert_one_line_error(*run(MODEL, REVISION_2, "--data", folder), "stations.csv")


def test_a_value_of_the_wrong_type_is_one_line_exit_2(data, tmp_path):
    folder = copy_data(data, tmp_path / "typo", "trips", lambda text: set_field(text, 1, 6, "forty"))
    assert_one_line_error(*run(MODEL, REVISION_2, "--data", folder), "'forty' in column minutes")


def test_data_breaking_a_declared_key_is_one_line_exit_2(data, tmp_path):
    folder = copy_data(data, tmp_path / "dup", "districts", lambda text: text + "1,Harbour Again,East\n")
    assert_one_line_error(*run(MODEL, REVISION_2, "--data", folder), "district_key")


def test_a_negative_limit_is_refused(data):
    assert_one_line_error(*run(MODEL, REVISION_2, "--data", data, "--limit", "-1"), "--limit")


# --- small parts ---------------------------------------------------------------------------------------


def test_floats_within_tolerance_are_the_same_number_and_others_are_not():
    assert verify.same_value(0.1 + 0.2, 0.3)
    assert not verify.same_value(0.3, 0.3001)
    assert verify.same_value(Decimal("1.10"), Decimal("1.1")) and not verify.same_value(Decimal("1.10"), Decimal("1.11"))
    assert verify.same_value(None, None) and not verify.same_value(None, 0)


def test_default_attribute_is_the_first_non_key_text_or_date_column_else_one_key_column():
    model = compare.read_model(str(MODEL))[1].model
    assert verify.default_attribute(model.tables["calendar"]) == ("date",)
    assert verify.default_attribute(model.tables["trips"]) == ("status",)
    # a key of several columns: one side (its first column), not the cross product of the key's columns
    assert verify.default_attribute(model.tables["stock_levels"]) == ("day_key",)


def test_one_sided_groups_sort_by_the_value_they_hold():
    group = (("stations.name", "Dock Gate"),)
    small = verify.Difference(group, "m", Decimal(5), Decimal(7))
    gone = verify.Difference((("stations.name", "Boathouse"),), "m", Decimal(50), None, "before")
    text = verify.Difference((("stations.name", "Mill Bridge"),), "m", "a", "b")
    assert verify.sort_differences([text, small, gone]) == (gone, small, text)
    assert (small.delta, small.relative, gone.delta) == (Decimal(2), 0.4, None)


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_only_on_a_terminal():
    quiet = io.StringIO()
    bar = verify._Progress(5, quiet)
    assert bar(" step", lambda: 42) == 42
    bar.close()
    assert quiet.getvalue() == "" and bar.bar is None
    terminal = _Terminal()
    bar = verify._Progress(5, terminal)
    bar("step", lambda: None)
    bar.close()
    assert bar.bar is not None and terminal.getvalue() != ""


def test_demo_verify_step_shows_the_flip_and_the_proposal_beside_it(capsys):
    from modeldiff import demo

    with demo._generated_data() as data:
        demo._verify_step(MODEL, REVISION_2, data)
    out = capsys.readouterr().out
    assert "4. modeldiff verify" in out and "trips_start_station is now two-way" in out
    assert "station_stock: MOVED" in out and "stock_value by calendar.date: MOVED" in out
    assert "Instead of two-way: trips_start_station (trips -> stations)" in out
    assert out.rstrip().endswith("(exit code 1: 0 nothing moved, 1 numbers moved, 3 a precondition fails or a role "
                                 "sees more rows)")
