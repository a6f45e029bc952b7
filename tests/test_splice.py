"""Splicing (load.splice_files): a revision read as its base's records plus its changed items equals a full read.

The second revision of a diff is read by reusing the first revision's records
for items written byte for byte the same; these tests hold the result to
`load.load_files` of the same files (records, their order, findings,
positions, error messages) on every fixture pair and on generated edits, and
check that the splice is taken for plain layouts and refused for unusual ones.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from modeldiff import load
from modeldiff.errors import ModeldiffError
from modeldiff.model import SECTIONS

from scenariokit import ROOT, SMALL, scenario_pairs, synthetic_model_text  # noqa: F401

pytest.importorskip("yaml_rs", reason="splicing needs the fast reader")

_pairs = scenario_pairs


PAIRS = _pairs()


def _files(name: str, text: str) -> list[tuple[str, bytes]]:
    return [(name, text.encode())]


def _full(files):
    try:
        return load.load_files(files)
    except ModeldiffError as exc:
        return str(exc)


def _spliced(files, base_files, base):
    try:
        return load.splice_files(files, base_files, base)
    except ModeldiffError as exc:
        return str(exc)


def _assert_same(got, want) -> None:
    assert type(got) is type(want)
    if isinstance(want, str):
        assert got == want  # the same error message
        return
    assert got == want  # records and findings
    for section in SECTIONS:
        assert list(getattr(got.model, section)) == list(getattr(want.model, section))  # order too
    assert type(got.model.positions) is type(want.model.positions)
    assert dict(got.model.positions) == dict(want.model.positions)


def test_every_fixture_pair_spliced_equals_a_full_read():
    taken = 0
    for old, new in PAIRS:
        base_files, files = load.path_files(old), load.path_files(new)
        base = load.load_files(base_files)
        _assert_same(_spliced(files, base_files, base), _full(files))
        taken += load.splice._spliced(files, base_files, base) is not None
    assert len(PAIRS) >= 50
    assert taken >= len(PAIRS) * 3 // 4  # the splice is the common case, not a rare one


def test_splice_reuses_the_base_records_of_unchanged_items():
    old_text = synthetic_model_text(**SMALL)
    new_text = synthetic_model_text(flip="l0", **SMALL)
    base_files, files = _files("a.model.yaml", old_text), _files("b.model.yaml", new_text)
    base = load.load_files(base_files)
    got = load.splice._spliced(files, base_files, base)
    assert got is not None
    assert got.model.links["l1"] is base.model.links["l1"]
    assert got.model.links["l0"] is not base.model.links["l0"]
    assert got.model.links["l0"].flow != base.model.links["l0"].flow
    _assert_same(got, _full(files))


def test_splice_is_refused_for_unusual_layouts():
    """Each of these reads in full (the splice cannot vouch for the split): the answer is still a full read's."""
    old_text = synthetic_model_text(**SMALL)
    edits = [
        ("links:\n", "links:\n   # three spaces before a comment is fine, but next a key at one column\n l_odd: x\n"),
        ("links:\n", "links: \n  lx: &a {from: fact_0.id, to: dim_0.id}\n  ly: *a\n"),  # anchors and aliases
        ("roles:\n", "roles: {}\nrolesx:\n"),  # a section in flow style, an unknown key
        ("model: synthetic\n", "model: synthetic\ntables:\n  extra: {kind: fact, columns: {id: integer}}\n"),  # twice
        ("  l0:\n", "  l0:\n\t\n"),  # a tab
        ("  l0:\n", '  "l0":\n'),  # a quoted name
    ]
    base_files = _files("a.model.yaml", old_text)
    base = load.load_files(base_files)
    for old, new in edits:
        files = _files("b.model.yaml", old_text.replace(old, new, 1))
        assert load.splice._spliced(files, base_files, base) is None, new
        _assert_same(_spliced(files, base_files, base), _full(files))


def test_splice_is_taken_for_a_plain_edit_with_comments():
    old_text = synthetic_model_text(**SMALL)
    new_text = old_text.replace("links:\n", "links:\n# links follow\n  # and so on\n", 1).replace(
        "  l3:\n", "  l3:\n    standby: true  # kept for later\n", 1)
    base_files, files = _files("a.model.yaml", old_text), _files("b.model.yaml", new_text)
    base = load.load_files(base_files)
    got = load.splice._spliced(files, base_files, base)
    assert got is not None
    assert got.model.links["l3"].standby
    _assert_same(got, _full(files))


def test_a_broken_changed_item_is_reported_as_a_full_read_reports_it():
    old_text = synthetic_model_text(**SMALL)
    base_files = _files("a.model.yaml", old_text)
    base = load.load_files(base_files)
    for old, new in (("  l0:\n", "  l0: [\n"), ("  l1:\n", "  l0:\n    from: a.b\n    to: c.d\n  l1:\n"),
                     ("  m1:\n", "  m1:\n    flow: sideways\n"), ("  m1:\n", '  m1: "unclosed\n')):
        files = _files("b.model.yaml", old_text.replace(old, new, 1))
        want = _full(files)
        assert isinstance(want, str) or want.findings  # each edit is a problem a full read reports
        _assert_same(_spliced(files, base_files, base), want)


_LINES = ["    standby: true", "    flow: two-way", "    description: changed", "    where: qty > 1",
          "    expr: sum(qty)", "    kind: bridge", "      extra: text", "  # a comment", "# a comment",
          "", "    expr: [", "    unit: '1'"]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.integers(0, 10_000), st.sampled_from(_LINES), st.booleans()), min_size=1, max_size=4))
def test_generated_edits_spliced_equal_a_full_read(edits):
    old_text = synthetic_model_text(**SMALL)
    lines = old_text.split("\n")
    for where, line, replace in edits:
        at = 3 + where % (len(lines) - 4)
        if replace and lines[at].startswith("    "):
            lines[at] = line
        else:
            lines.insert(at, line)
    base_files, files = _files("a.model.yaml", old_text), _files("b.model.yaml", "\n".join(lines))
    base = load.load_files(base_files)
    _assert_same(_spliced(files, base_files, base), _full(files))


def test_the_plain_measure_maker_makes_the_records_measure_makes():
    import dataclasses
    import pickle

    from modeldiff.model import NO_OVERRIDES, Measure

    fields = {"folder": "Rides", "expr": "count(*)", "where": "status = 'done'", "table": "trips",
              "description": "Trips", "unit": "trips"}  # in another order than the class's
    made = load.fast._plain_measure("trip_count", fields)
    want = Measure("trip_count", "count(*)", "trips", "status = 'done'", NO_OVERRIDES, "Trips", "trips", None, "Rides")
    assert made == want and repr(made) == repr(want)
    assert list(vars(made)) == list(load.fast._MEASURE_FIELDS)
    assert fields == {"folder": "Rides", "expr": "count(*)", "where": "status = 'done'", "table": "trips",
                      "description": "Trips", "unit": "trips"}  # the caller's dict is left alone
    bare = load.fast._plain_measure("n", {"expr": "sum(x)"})
    assert bare == Measure("n", "sum(x)") and bare.overrides is NO_OVERRIDES
    with pytest.raises(dataclasses.FrozenInstanceError):
        made.expr = "sum(x)"  # still frozen
    assert dataclasses.asdict(made) == dataclasses.asdict(want)
    assert pickle.loads(pickle.dumps(made)) == want
    assert made != dataclasses.replace(want, where=None)  # a different record is told apart
    assert tuple(f.name for f in dataclasses.fields(Measure)) == load.fast._MEASURE_FIELDS  # else the maker calls Measure


def test_plain_names_only_accepts_plain_names_and_refuses_others():
    assert load.fast._plain_names_only({"trips": 1, "bike_key2": 2, "B": 3})
    assert load.fast._plain_names_only({})
    for bad in ("2trips", "trips\nbikes", "trips ", "", "trips-x", "é"):
        assert not load.fast._plain_names_only({"stations": 1, bad: 2}), repr(bad)
    assert not load.fast._plain_names_only({1: "x"})  # not text
