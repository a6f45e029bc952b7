"""TPC-H Q1, Q3 and Q10 as reports, evaluated by the engine on TPC-H data at scale factor 0.01.

Outside sources:
- the data in fixtures/tpch/*.parquet is DuckDB's port of the TPC-H data
  generator (`CALL dbgen(sf=0.01)`, extension tpch 1.5.5), written once by
  fixtures/tpch/make_tpch_data.py;
- fixtures/tpch/qNN.answer.psv are that extension's `tpch_answers()` for
  scale factor 0.01: the query results DuckDB publishes for the
  specification's validation parameters;
- the hand-written SQL below is Q3 and Q10 of the TPC-H specification
  (clause 2.4), written FROM MEMORY, without ORDER BY and LIMIT.

What a report cannot say, and how the tests deal with it:
- ORDER BY ... LIMIT (Q3's top 10, Q10's top 20): the test sorts the
  report's rows in Python and compares the top rows with the published
  answer; the whole report is compared with the hand-written SQL.
- Date arithmetic in the predicate (`date '1998-12-01' - interval '90' day`,
  Q10's `+ interval '3' month`) is plain SQL in a report's `where`: Q1 writes
  the computed date, Q10 keeps the interval.
- Q10 groups by the customer's nation, which also reaches lineitem through
  the supplier; its measure turns supplier_nation off (see the fixture).
"""

from __future__ import annotations

from decimal import Decimal
from pathlib import Path

import pytest

from modeldiff.data import NO_MATCH, Database, evaluate_report
from modeldiff.load import load_path

FIXTURES = Path(__file__).parent / "fixtures"
DATA = FIXTURES / "tpch"


@pytest.fixture(scope="module")
def tpch():
    result = load_path(FIXTURES / "tpch.model.yaml")
    assert result.findings == ()
    model = result.model
    with Database.open(model, FIXTURES / "tpch.model.yaml", data_dir=str(DATA)) as db:
        yield model, db


def answer(number: int) -> tuple[list[str], list[list[str]]]:
    lines = (DATA / f"q{number:02d}.answer.psv").read_text(encoding="utf-8").splitlines()
    return lines[0].split("|"), [line.split("|") for line in lines[1:]]


def close(ours, published: str, places: int) -> bool:
    """Equal after rounding to the places the published answer shows (or 1e-9 relative for averages)."""
    expected = Decimal(published)
    value = Decimal(str(ours))
    if places >= 5:
        return abs(value - expected) <= abs(expected) * Decimal("1e-9") + Decimal("1e-9")
    return abs(value - expected) <= Decimal(1).scaleb(-places) / 2 + Decimal("1e-9")


def places_of(text: str) -> int:
    return len(text.partition(".")[2])


def test_q1_equals_the_published_answer(tpch):
    model, db = tpch
    result = evaluate_report(model, "q1_pricing_summary", db)
    header, rows = answer(1)
    # the report names Q1's sum_disc_price `revenue` (the same expression as Q3's)
    names = ["lineitem.l_returnflag", "lineitem.l_linestatus", "sum_qty", "sum_base_price", "revenue",
             "sum_charge", "avg_qty", "avg_price", "avg_disc", "count_order"]
    assert [h.replace("sum_disc_price", "revenue") for h in header] == [n.split(".")[-1] for n in names]
    assert result.columns == tuple(names)
    assert len(result.rows) == len(rows) == 4  # Q1's ORDER BY is the report's order: by the grouping columns
    for ours, published in zip(result.rows, rows):
        assert list(ours[:2]) == published[:2]
        for value, text in zip(ours[2:], published[2:]):
            assert close(value, text, places_of(text)), (ours, published)


def test_q1_with_another_cutoff_date_differs_from_the_answer(tpch):
    # The twin: the comparison can fail. Shipped a day earlier, the counts differ.
    from dataclasses import replace

    from modeldiff import engine

    model, db = tpch
    report = replace(model.reports["q1_pricing_summary"], where={"lineitem": "l_shipdate <= date '1998-06-01'"})
    changed = replace(model, reports={**model.reports, "q1_pricing_summary": report})
    rows = db.run(engine.report_query(changed, "q1_pricing_summary"))
    _, published = answer(1)
    assert [row[9] for row in rows] != [int(p[9]) for p in published]


Q3_SQL = """
SELECT l_orderkey, sum(l_extendedprice * (1 - l_discount)) AS revenue, o_orderdate, o_shippriority
FROM customer, orders, lineitem
WHERE c_mktsegment = 'BUILDING' AND c_custkey = o_custkey AND l_orderkey = o_orderkey
  AND o_orderdate < date '1995-03-15' AND l_shipdate > date '1995-03-15'
GROUP BY l_orderkey, o_orderdate, o_shippriority
"""


def hand_written(db: Database, sql: str) -> list[tuple]:
    """Plain SQL over the loaded tables (the same connection, so the same rows)."""
    return db.connection.execute(sql).fetchall()


def test_q3_top_ten_equals_the_published_answer(tpch):
    model, db = tpch
    result = evaluate_report(model, "q3_shipping_priority", db)
    assert result.columns == ("lineitem.l_orderkey", "orders.o_orderdate", "orders.o_shippriority", "revenue")
    assert all(row[0] is not NO_MATCH for row in result.rows)
    top = sorted(result.rows, key=lambda r: (-r[3], r[1]))[:10]  # ORDER BY revenue DESC, o_orderdate; LIMIT 10
    header, published = answer(3)
    assert header == ["l_orderkey", "revenue", "o_orderdate", "o_shippriority"]
    for ours, row in zip(top, published, strict=True):
        assert (str(ours[0]), ours[1].isoformat(), str(ours[2])) == (row[0], row[2], row[3])
        assert close(ours[3], row[1], places_of(row[1]))


def test_q3_every_group_equals_hand_written_sql(tpch):
    model, db = tpch
    ours = {(r[0], r[1], r[2]): r[3] for r in evaluate_report(model, "q3_shipping_priority", db).rows}
    theirs = {(r[0], r[2], r[3]): r[1] for r in hand_written(db, Q3_SQL)}
    assert ours == theirs and len(ours) > 10


Q10_SQL = """
SELECT c_custkey, c_name, sum(l_extendedprice * (1 - l_discount)) AS revenue, c_acctbal, n_name,
       c_address, c_phone, c_comment
FROM customer, orders, lineitem, nation
WHERE c_custkey = o_custkey AND l_orderkey = o_orderkey
  AND o_orderdate >= date '1993-10-01' AND o_orderdate < date '1993-10-01' + interval '3' month
  AND l_returnflag = 'R' AND c_nationkey = n_nationkey
GROUP BY c_custkey, c_name, c_acctbal, c_phone, n_name, c_address, c_comment
"""


def test_q10_top_twenty_equals_the_published_answer(tpch):
    model, db = tpch
    result = evaluate_report(model, "q10_returned_items", db)
    assert result.columns[-1] == "revenue_customer_nation"
    top = sorted(result.rows, key=lambda r: -r[7])[:20]  # ORDER BY revenue DESC LIMIT 20
    header, published = answer(10)
    assert header == ["c_custkey", "c_name", "revenue", "c_acctbal", "n_name", "c_address", "c_phone", "c_comment"]
    for ours, row in zip(top, published, strict=True):
        custkey, name, acctbal, phone, nation, address, comment, revenue = ours
        assert [str(custkey), name, nation, address, phone, comment] == [row[0], row[1], row[4], row[5], row[6], row[7]]
        assert close(acctbal, row[3], 2) and close(revenue, row[2], places_of(row[2]))


def test_q10_every_group_equals_hand_written_sql(tpch):
    model, db = tpch
    ours = {r[:7]: r[7] for r in evaluate_report(model, "q10_returned_items", db).rows}
    theirs = {(r[0], r[1], r[3], r[6], r[4], r[5], r[7]): r[2] for r in hand_written(db, Q10_SQL)}
    assert ours == theirs and len(ours) > 20


def test_q10_with_the_supplier_route_on_is_not_q10(tpch):
    # The twin: without turning supplier_nation off, the nation group also filters lineitem by the
    # supplier's nation, and the numbers are no longer Q10's.
    from dataclasses import replace

    from modeldiff import engine

    model, db = tpch
    plain = replace(model.measures["revenue_customer_nation"], overrides=replace(
        model.measures["revenue_customer_nation"].overrides, flow={}))
    changed = replace(model, measures={**model.measures, "revenue_customer_nation": plain})
    rows = db.run(engine.report_query(changed, "q10_returned_items"))
    theirs = {(r[0], r[1], r[3], r[6], r[4], r[5], r[7]): r[2] for r in hand_written(db, Q10_SQL)}
    assert {r[:7]: r[7] for r in rows if not r[-1]} != theirs
