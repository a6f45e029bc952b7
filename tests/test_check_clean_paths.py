"""The check's shortcuts for clean measures say "no finding" exactly when the full rules would word none.

`rule_measure_references` passes over a plain measure when `_is_clean_base_text`
(base measures) or `_is_clean_derived_text` (derived ones) holds, without
running the generators that word findings. Each shortcut must agree with its
generator on every text: clean means the generator yields nothing.
"""

from __future__ import annotations

import pytest

from modeldiff import check
from modeldiff.model import Column, Measure, Model, Table

TRIPS = Table("trips", "fact", ("trip_key",), {
    "trip_key": Column("trip_key", "integer"), "fare": Column("fare", "decimal"),
    "Distance": Column("Distance", "decimal"), "status": Column("status", "text")})
MEASURES = {name: Measure(name, "sum(fare)", "trips") for name in ("fare_total", "trip_count", "Distance_Total")}
MODEL = Model("bikeshare", {"trips": TRIPS}, measures=MEASURES)

TEXTS = [
    "fare_total + trip_count", "fare_total / nullif(trip_count, 0)", "FARE_TOTAL * 2", "distance_total - 1",
    "sum(fare_total)", "trips.fare_total + 1", "missing + fare_total", "(select 1)", ":user + fare_total",
    "fare_total +", "'text'", "count(*)", "fare = 1", "sum(fare)", "sum(fare) / count(*)", "fare * 2",
    "status = 'done'", "sum(trips.fare)", "sum(rides.fare)", "sum(nosuch)", "avg(Distance)", "max(distance)",
    "sum(fare) + :user", "sum(fare) filter (where status = 'done')", "fare > (select 1)", "1", "",
    "case when fare_total > 0 then trip_count end", "coalesce(fare_total, 0)", "sum(sum(fare))", "?",
]


@pytest.mark.parametrize("text", TEXTS)
def test_clean_derived_text_means_no_finding(text):
    ctx = check._Context(MODEL)
    measure = Measure("derived", text)
    worded = list(check._derived_measure(ctx, measure, "measures.derived"))
    assert check._is_clean_derived_text(ctx, text) == (not worded), worded


@pytest.mark.parametrize("text", TEXTS)
def test_clean_base_expr_means_no_finding(text):
    ctx = check._Context(MODEL)
    worded = list(check._base_measure(ctx, Measure("base", text, "trips"), TRIPS, "measures.base"))
    assert check._is_clean_base_text("expr", text, TRIPS) == (not worded), worded


@pytest.mark.parametrize("text", TEXTS)
def test_clean_base_where_means_no_finding(text):
    ctx = check._Context(MODEL)
    worded = list(check._base_measure(ctx, Measure("base", "sum(fare)", "trips", text), TRIPS, "measures.base"))
    assert check._is_clean_base_text("where", text, TRIPS) == (not worded), worded


def test_the_corpus_holds_clean_and_unclean_texts_of_each_kind():
    # Both answers occur for each shortcut, so the agreement above is not vacuous.
    ctx = check._Context(MODEL)
    derived = {check._is_clean_derived_text(ctx, t) for t in TEXTS}
    expr = {check._is_clean_base_text("expr", t, TRIPS) for t in TEXTS}
    where = {check._is_clean_base_text("where", t, TRIPS) for t in TEXTS}
    assert derived == expr == where == {True, False}
