"""Messages agree with their counts: "both" for two links, "explains" for one change, "without it" for one column."""

from __future__ import annotations

import re

import io
from pathlib import Path

import pytest

from modeldiff.cli import main
from modeldiff.render.github import more_notice
from modeldiff.words import agree, and_list, counted, named
from tests.test_check import edited, findings_of

ROOT = Path(__file__).resolve().parent.parent


def test_words():
    assert [and_list(x) for x in ([], ["a"], ["a", "b"], ["a", "b", "c"])] == ["", "a", "a and b", "a, b and c"]
    assert (agree(1, "is", "are"), agree(0, "is", "are"), agree(2, "is", "are")) == ("is", "are", "are")
    assert (counted(1, "error"), counted(3, "error"), counted(2, "query", "queries")) == ("1 error", "3 errors", "2 queries")
    assert (named("aggregate", ["sum"]), named("aggregate", ["sum", "count"])) == ("aggregate sum", "aggregates sum and count")


def messages(text: str, rule: str) -> list[str]:
    return [f.message for f in findings_of(text) if f.rule == rule]


def test_two_live_links_both_join_and_neither_is_on_standby():
    [message] = messages(_two_live(), "duplicate-live-link")
    assert message.startswith("Links trips_end_day and trips_start_day both join calendar and trips and neither is on standby")
    assert "on one of them and name it in `via`" in message
    assert " all " not in message and "none" not in message


def _two_live() -> str:
    return edited(("trips_end_day: {from: trips.end_day_key, to: calendar.day_key, standby: true}",
                   "trips_end_day: {from: trips.end_day_key, to: calendar.day_key}"))


def test_three_live_links_all_join_and_none_is_on_standby():
    text = _two_live().replace("trips_end_day: {from: trips.end_day_key, to: calendar.day_key}",
                               "trips_end_day: {from: trips.end_day_key, to: calendar.day_key}\n"
                               "  trips_paid_day: {from: trips.end_day_key, to: calendar.day_key}")
    found = messages(text, "duplicate-live-link")
    assert len(found) == 2
    for message in found:
        assert message.startswith("Links trips_end_day, trips_paid_day and trips_start_day all join calendar and trips "
                                  "and none is on standby")
        assert "on all but one and name them in `via`" in message


def test_history_lacking_one_column_says_it_and_two_say_them():
    history = "history: {type: 2, valid_from: valid_from, valid_to: valid_to}"
    [one] = messages(edited((history, "history: {type: 2, valid_from: valid_from}")), "history-incomplete")
    assert "lacks valid_to; without it the versions" in one and one.endswith("Add it.")
    [two] = messages(edited((history, "history: {type: 2}")), "history-incomplete")
    assert "lacks valid_from and valid_to; without them the versions" in two and two.endswith("Add them.")


@pytest.mark.parametrize("text, words", [
    ("sum(fare) > 0", "aggregate sum;"),
    ("sum(fare) > count(*)", "aggregates count and sum;"),
])
def test_a_filter_names_its_aggregate_or_aggregates(text, words):
    from tests.test_sql import predicate_problems

    [problem] = [p for p in predicate_problems(text, "trips", ["trip_key", "fare"]) if "aggregate" in p]
    assert f"uses the {words}" in problem


def plan_text(new: Path) -> str:
    out, err = io.StringIO(), io.StringIO()
    assert main(["plan", str(ROOT / "examples" / "bikeshare.model.yaml"), str(new)], stdout=out, stderr=err) == 0
    return out.getvalue()


def test_one_change_explains_and_two_changes_explain(tmp_path):
    text = (ROOT / "examples" / "bikeshare.model.yaml").read_text(encoding="utf-8")
    link = "  trips_start_station:\n    from: trips.start_station_key\n    to: stations.station_key\n"
    assert text.count(link) == 1
    new = tmp_path / "new.model.yaml"
    new.write_text(text.replace(link, link + "    flow: two-way\n    cardinality: one-to-one\n"), encoding="utf-8")
    plan = plan_text(new)
    found = re.findall(r"differ only where (c\d+(?:(?:, | and )c\d+)*) (explains|explain) it", plan)
    assert found
    for ids, verb in found:
        assert verb == ("explains" if re.fullmatch(r"c\d+", ids) else "explain"), (ids, verb)
    assert "c1, c2 explain" not in plan
    from modeldiff.words import agree, and_list  # both numbers, on the joiner the plan uses
    assert f"{and_list(['c1'])} {agree(1, 'explains', 'explain')}" == "c1 explains"
    assert f"{and_list(['c1', 'c2'])} {agree(2, 'explains', 'explain')}" == "c1 and c2 explain"


def test_github_notice_counts_agree():
    one = more_notice({"error": 1, "warning": 0, "notice": 0}, "see the log")
    assert one.message.startswith("1 more error is not shown as annotations")
    many = more_notice({"error": 2, "warning": 1, "notice": 0}, "see the log")
    assert many.message.startswith("2 more errors and 1 more warning are not shown as annotations")
    assert more_notice({"error": 0, "warning": 0, "notice": 0}, "see the log") is None
