"""`verify --all`: everything evaluated, and what moved without the diff listing it shown first as a defect (exit 3).

Also issue 9 point 8: grouping columns chosen so a change can show (a type-2
table by an attribute that differs between versions, a bridge by one side),
and roles compared by which rows they see, not how many.
"""

from __future__ import annotations

import io
import json
from dataclasses import replace

import pytest

import soundness
from modeldiff import verify
from modeldiff.cli import main
from modeldiff.render import verify_out

# issue 9 point 1: f.r -> d.k made two-way; grouping by f.a now keeps only f rows whose r finds a d row
OLD = {"model": "loop", "format": 1,
       "tables": {"f": {"kind": "fact", "key": "k", "columns": {"k": "integer", "a": "text", "r": "integer"}},
                  "d": {"kind": "dimension", "key": "k", "columns": {"k": "integer", "name": "text"}}},
       "links": {"f_d": {"from": "f.r", "to": "d.k"}},
       "measures": {"n": {"table": "f", "expr": "count(*)"}},
       "reports": {"by_a": {"measures": ["n"], "by": ["f.a"]}}}
NEW = json.loads(json.dumps(OLD))
NEW["links"]["f_d"]["flow"] = "two-way"
ROWS = {"f": [{"k": 1, "a": "x", "r": 1}, {"k": 2, "a": "x", "r": 9}], "d": [{"k": 1, "name": "one"}]}


def _verify(old, new, rows=ROWS, drop_impacts=False):
    md = soundness.diff_of(old, new)
    if drop_impacts:  # a diff that misses everything: what verify --all must catch whatever impact.py does
        md = replace(md, result=replace(md.result, measures=(), roles=(), reports=()))
    return soundness.verify_all(md, rows)


def test_what_moved_without_the_diff_listing_it_is_a_defect_and_exit_3():
    v = _verify(OLD, NEW, drop_impacts=True)
    report = next(c for c in v.reports if c.name == "by_a")
    assert report.moved
    assert ("report", "by_a") in {(m.kind, m.name) for m in v.missed}
    assert ("measure", "n") in {(m.kind, m.name) for m in v.missed}
    assert v.exit_code == 3


def test_what_the_diff_lists_is_not_a_defect():
    md = soundness.diff_of(OLD, NEW)
    v = soundness.verify_all(md, ROWS)
    listed = {i.name for i in md.result.reports}
    assert all(m.name not in listed for m in v.missed if m.kind == "report")


def test_a_model_against_itself_moves_nothing_and_misses_nothing():
    v = _verify(OLD, OLD)
    assert v.missed == () and v.exit_code == 0
    assert v.reports and v.measures  # everything was looked at: with --all, not only what the diff lists
    assert not any(c.moved for c in v.reports + v.measures)


def test_the_defect_is_printed_first_in_text_markdown_and_json():
    v = _verify(OLD, NEW, drop_impacts=True)
    out = io.StringIO()
    verify_out.as_text(v, out)
    lines = [line for line in out.getvalue().splitlines() if line.strip()]
    assert lines[2].startswith("DEFECT OF MODELDIFF: the diff missed these")
    assert "report by_a" in lines[3] or "report by_a" in lines[4]
    md = io.StringIO()
    verify_out.as_markdown(v, md)
    assert md.getvalue().index("the diff missed these") < md.getvalue().index("### Reports")
    doc = verify_out.verification_json(v)
    assert doc["all"] is True
    assert {(m["kind"], m["name"]) for m in doc["missed"]} == {("report", "by_a"), ("measure", "n")}
    assert all(m["evidence"] for m in doc["missed"])
    assert doc["summary"]["missed"] == len(v.missed) and doc["summary"]["exit_code"] == 3


def test_nothing_missed_prints_no_defect():
    v = _verify(OLD, OLD)
    out = io.StringIO()
    verify_out.as_text(v, out)
    assert "DEFECT" not in out.getvalue() and verify_out.verification_json(v)["missed"] == []


def test_cli_all_evaluates_what_the_diff_does_not_list(tmp_path):
    import randmodel as R

    for name, doc in (("old", OLD), ("new", OLD)):
        (tmp_path / name).mkdir()
        (tmp_path / name / "loop.model.yaml").write_text(R.to_yaml(doc))
    data = tmp_path / "data"
    data.mkdir()
    (data / "f.csv").write_text("k,a,r\n1,x,1\n2,x,9\n")
    (data / "d.csv").write_text("k,name\n1,one\n")
    args = [str(tmp_path / "old" / "loop.model.yaml"), str(tmp_path / "new" / "loop.model.yaml"), "--data", str(data),
            "--format", "json"]
    out, err = io.StringIO(), io.StringIO()
    assert main(["verify", *args], out, err) == 0
    assert json.loads(out.getvalue())["reports"] == []  # the diff lists nothing: nothing evaluated
    out = io.StringIO()
    assert main(["verify", "--all", *args], out, err) == 0
    doc = json.loads(out.getvalue())
    assert [r["name"] for r in doc["reports"]] == ["by_a"] and doc["all"] is True and doc["missed"] == []


# --- point 8: grouping so the change can show ------------------------------------------------------------

TYPE2 = {"model": "hist", "format": 1,
         "tables": {
             "visits": {"kind": "fact", "key": "id", "columns": {"id": "integer", "doctor": "integer"}},
             "doctors": {"kind": "dimension", "key": "sk", "natural_key": "code",
                         "history": {"type": 2, "valid_from": "vf", "valid_to": "vt"},
                         "columns": {"sk": "integer", "code": "integer", "ward": "text", "vf": "date",
                                     "vt": "date", "grade": "text"}}},
         "links": {"visits_doctor": {"from": "visits.doctor", "to": "doctors.sk"}},
         "measures": {"n": {"table": "visits", "expr": "count(*)"}},
         "reports": {"r": {"measures": ["n"]}}}


def _type2_rows():
    import datetime as dt

    d = dt.date
    return {"visits": [{"id": 1, "doctor": 1}, {"id": 2, "doctor": 2}],
            "doctors": [{"sk": 1, "code": 7, "ward": "A", "grade": "junior", "vf": d(2024, 1, 1), "vt": d(2024, 2, 1)},
                        {"sk": 2, "code": 7, "ward": "A", "grade": "senior", "vf": d(2024, 2, 1), "vt": None}]}


def test_a_type_2_table_is_grouped_by_an_attribute_that_differs_between_versions():
    import randmodel as R

    model = R.load_model(TYPE2)
    with R.database(model, _type2_rows()) as db:
        # ward is the first attribute but equal across the versions of member 7; grade differs
        assert verify.grouping_columns(model.tables["doctors"], db) == ("grade",)
        assert verify.grouping_columns(model.tables["doctors"]) == ("ward",)  # without data: the first attribute
    assert verify.grouping_columns(model.tables["visits"]) == verify.default_attribute(model.tables["visits"])


def test_a_surrogate_to_natural_key_switch_shows_when_grouped_by_the_differing_attribute():
    new = json.loads(json.dumps(TYPE2))
    new["links"]["visits_doctor"] = {"from": "visits.doctor", "to": "doctors.code", "cardinality": "many-to-many"}
    rows = _type2_rows()
    rows["visits"] = [{"id": 1, "doctor": 1}, {"id": 2, "doctor": 7}]  # sk 1 before; code 7 after: both versions
    v = _verify(TYPE2, new, rows)
    by_doctors = [c for c in v.measures if c.name == "n" and c.source == "doctors"]
    assert by_doctors and by_doctors[0].by == ("doctors.grade",) and by_doctors[0].moved


def test_a_bridge_with_only_key_columns_is_grouped_by_one_side():
    import randmodel as R

    doc = {"model": "b", "format": 1,
           "tables": {"pairs": {"kind": "bridge", "key": ["left_id", "right_id"],
                                "columns": {"left_id": "integer", "right_id": "integer"}}}}
    assert verify.grouping_columns(R.load_model(doc).tables["pairs"]) == ("left_id",)


def test_roles_compare_which_rows_they_see_not_how_many():
    old = {"model": "sec", "format": 1,
           "tables": {"f": {"kind": "fact", "key": "k", "columns": {"k": "integer", "a": "text", "v": "integer"}}},
           "roles": {"viewer": {"filters": {"f": "a = 'x'"}}}}
    new = json.loads(json.dumps(old))
    new["roles"]["viewer"]["filters"]["f"] = "a = 'y'"
    rows = {"f": [{"k": 1, "a": "x", "v": 0}, {"k": 2, "a": "y", "v": 0}]}  # one row seen before, another after
    v = _verify(old, new, rows)
    (role,) = v.roles
    (f,) = [t for t in role.tables if t.table == "f"]
    assert (f.before, f.after, f.gained, f.lost) == (1, 1, 1, 1)
    assert role.changed and role.exposed


def test_a_role_seeing_the_same_rows_is_unchanged():
    old = {"model": "sec", "format": 1,
           "tables": {"f": {"kind": "fact", "key": "k", "columns": {"k": "integer", "a": "text", "v": "integer"}}},
           "roles": {"viewer": {"filters": {"f": "a = 'x'"}}}}
    new = json.loads(json.dumps(old))
    new["roles"]["viewer"]["filters"]["f"] = "a = 'x' AND v = 0"  # the same rows on this data
    rows = {"f": [{"k": 1, "a": "x", "v": 0}, {"k": 2, "a": "y", "v": 0}]}
    v = _verify(old, new, rows)
    (role,) = v.roles
    assert not role.changed and not role.exposed
