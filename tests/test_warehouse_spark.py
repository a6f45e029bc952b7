"""`eval` inside Spark (`--db spark:local[N]`): the same numbers as DuckDB.

One local Spark session for the whole run (tests/conftest.py `spark`; start-up
is slow, so these tests are few): skipped with its reason when it cannot
start here, a failure under CI=true. The data is Parquet, read by Spark where
it lies (`--data DIR`).

Outside references: TPC-H Q1, Q3 and Q10 at scale factor 0.01 against the
published answers (sources in tests/test_tpch_answers.py).
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pytest

import randmodel as R
import warehousekit as W
from clikit import run
from modeldiff.backends import open_database
from modeldiff.data import Database, evaluate_report
from modeldiff.load import load_path
from test_warehouse_postgres import report_rows

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "bikeshare.model.yaml"
FIXTURES = Path(__file__).parent / "fixtures"


def test_bikeshare_eval_prints_what_duckdb_prints(spark):
    from modeldiff.demo_data import write_demo_data

    folder = Path(tempfile.mkdtemp(prefix="modeldiff-bike-"))
    write_demo_data(folder)
    model = load_path(EXAMPLE).model
    parquet = Path(tempfile.mkdtemp(prefix="modeldiff-bike-parquet-"))
    with Database.open(model, data_dir=str(folder)) as duck:
        W.to_parquet(duck.connection, sorted(model.tables), parquet)
    reports = ("repair_costs_by_depot", "daily_returns")  # a division of decimals, a date per row
    args = [arg for name in reports for arg in ("--report", name)]
    code, on_duckdb, err = run("eval", EXAMPLE, "--data", folder, *args)
    assert code == 0, err
    code, on_spark, err = run("eval", EXAMPLE, "--db", "spark:local[2]", "--data", parquet, *args)
    assert code == 0, err
    assert on_spark == on_duckdb
    assert "report daily_returns" in on_spark


def test_tpch_q1_q3_q10_give_the_published_answers(spark):
    from test_tpch_answers import answer, close, places_of

    model = load_path(FIXTURES / "tpch.model.yaml").model
    with open_database(model, data_dir=str(FIXTURES / "tpch"), db_url="spark:local[1]") as db:
        q1 = evaluate_report(model, "q1_pricing_summary", db)
        q3 = evaluate_report(model, "q3_shipping_priority", db)
        q10 = evaluate_report(model, "q10_returned_items", db)
    _, rows = answer(1)
    assert len(q1.rows) == len(rows) == 4
    for ours, published in zip(q1.rows, rows):
        assert list(ours[:2]) == published[:2]
        assert all(close(v, t, places_of(t)) for v, t in zip(ours[2:], published[2:])), (ours, published)
    top = sorted(q3.rows, key=lambda r: (-r[3], r[1]))[:10]
    for ours, row in zip(top, answer(3)[1], strict=True):
        assert (str(ours[0]), ours[1].isoformat(), str(ours[2])) == (row[0], row[2], row[3])
        assert close(ours[3], row[1], places_of(row[1]))
    top = sorted(q10.rows, key=lambda r: -r[7])[:20]
    for ours, row in zip(top, answer(10)[1], strict=True):
        assert [str(ours[0]), ours[1], ours[4]] == [row[0], row[1], row[4]]
        assert close(ours[7], row[2], places_of(row[2]))


SEEDS = range(2)  # Spark answers in seconds per query: a few cases here, more in benchmarks/campaigns


def test_random_reports_are_equal_on_duckdb_and_spark(spark):
    compared, found = 0, []
    for seed in SEEDS:
        case = R.generate(seed)
        model = R.load_model(case.doc)
        folder = Path(tempfile.mkdtemp(prefix=f"modeldiff-rand{seed}-"))
        with R.database(model, case.rows) as duck:
            W.to_parquet(duck.connection, sorted(model.tables), folder)
            with open_database(model, data_dir=str(folder), db_url="spark:local[1]") as db:
                for name, report in model.reports.items():
                    user = R.viewers(case.doc, report.role)[0]
                    compared += 1
                    ours, theirs = report_rows(model, duck, name, user), report_rows(model, db, name, user)
                    if ours != theirs:
                        found.append(f"seed {seed} report {name}: {ours} != {theirs}")
    assert found == []
    assert compared >= 3


def test_a_csv_folder_is_refused_with_one_line(spark, tmp_path):
    model = load_path(EXAMPLE).model
    from modeldiff.demo_data import write_demo_data

    write_demo_data(tmp_path)
    with pytest.raises(Exception, match=r"has no bikes.parquet; Spark reads Parquet files"):
        open_database(model, data_dir=str(tmp_path), db_url="spark:local[1]")


def test_spark_urls_are_read_and_bad_ones_refused():
    from modeldiff.backends import parse_url
    from modeldiff.errors import ModeldiffError

    assert parse_url("spark:local[2]").kind == "spark"
    assert parse_url("spark:local[*]").dialect == "spark"
    connect = parse_url("sc://spark.example.org:15002/;token=Sp-tok-123;user_id=ana")
    assert "Sp-tok-123" not in connect.shown and "Sp-tok-123" not in connect.redact(f"bad {connect.url}")
    for bad in ("spark:yarn", "spark:local[two]", "mysql://x"):
        with pytest.raises(ModeldiffError):
            parse_url(bad)
