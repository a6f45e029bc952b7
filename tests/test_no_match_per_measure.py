"""`(no match)` per measure in its own setting (semantics.md section 5, issue 9 point 6).

A report mixing measures whose settings differ: a `where` on the fact
`sales` and a measure that follows the standby link `sales_store_alt`. In
that measure's setting the `where` empties `stores`, so `stores.name` has no
value there; the report's groups come from the other measure's setting, and
the visits of `visits` are shown in those groups. They must not also be
gathered in `(no match)`: a row is in some group or in `(no match)`, never both.
"""

from __future__ import annotations

from modelkit import link, measure, model, ov, report, table
from modeldiff.data import NO_MATCH, Database, evaluate_report

import section5


def _model(follow_standby: bool):
    return model(
        table("stores", columns={"store_key": "integer", "name": "text"}),
        table("sales", "fact", columns={"sale_key": "integer", "store_key": "integer", "alt_store_key": "integer",
                                        "channel": "text"}),
        table("visits", "fact", columns={"visit_key": "integer", "kind": "text"}),
        link("sales_store", "sales.store_key", "stores.store_key"),
        link("sales_store_alt", "sales.alt_store_key", "stores.store_key", flow="two-way", standby=True),
        measure("sale_count", "count(*)", "sales"),
        measure("visit_count", "count(*)", "visits", overrides=ov("sales_store_alt") if follow_standby else ov()),
        report("mixed", ["sale_count", "visit_count"], ["stores.name", "visits.kind"],
               where={"sales": "channel = 'web'"}),
    )


ROWS = {
    "stores": [(1, "North")],
    # sale 2 has no store: it is in no group of sale_count, so (no match) exists for it
    "sales": [(1, 1, 9, "web"), (2, 7, 9, "web"), (3, 1, 1, "shop")],
    "visits": [(1, "walk-in"), (2, "online")],
}


def _rows(m):
    with Database.from_rows(m, ROWS) as db:
        return evaluate_report(m, "mixed", db).rows


def _reference(m):
    data = {t: [dict(zip(m.tables[t].columns, r)) for r in rows] for t, rows in ROWS.items()}
    return [tuple(NO_MATCH if v == section5.NO_MATCH else v for v in row)
            for row in section5.report(m, data, "mixed")]


def test_a_row_shown_in_a_group_is_not_counted_again_in_no_match():
    rows = _rows(_model(follow_standby=True))
    assert rows == (("North", "online", 1, 1), ("North", "walk-in", 1, 1), (NO_MATCH, NO_MATCH, 1, 0))
    assert rows == tuple(_reference(_model(follow_standby=True)))


def test_each_measure_adds_up_to_its_total_over_groups_and_no_match():
    rows = _rows(_model(follow_standby=True))
    visits = {r[1] for r in rows if r[1] is not NO_MATCH and r[3]}
    assert visits == {"online", "walk-in"}
    assert sum(r[3] for r in rows) == len(ROWS["visits"])  # one row per kind: groups do not overlap here


def test_without_the_standby_link_no_row_was_ever_counted_twice():
    # the twin: one setting for both measures; this answer was already right before the fix
    rows = _rows(_model(follow_standby=False))
    assert rows == (("North", "online", 1, 1), ("North", "walk-in", 1, 1), (NO_MATCH, NO_MATCH, 1, 0))
    assert rows == tuple(_reference(_model(follow_standby=False)))
