"""Shortcuts taken for speed give the answers of the long way (docs/performance.md)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from modeldiff import _sqlwords, check, load, sql

ROOT = Path(__file__).resolve().parent.parent

BASE = """model: m
format: 1
tables:
  trips:
    kind: fact
    key: id
    columns: {id: integer, fare: decimal, bike_id: integer}
  repairs:
    kind: fact
    key: id
    columns: {id: integer, cost: decimal, bike_id: integer}
measures:
"""


def _findings(text: str) -> list[tuple[str, str, str]]:
    result = load.load_files([("m.model.yaml", text)])
    return [(f.rule, f.subject, f.message) for f in check.check_model(result.model, result.findings)]


def test_a_shared_measure_text_is_judged_per_table():
    # `sum(fare)` is clean on trips and reads a missing column on repairs: the memo is keyed by table too
    text = BASE + "  a: {table: trips, expr: sum(fare)}\n  b: {table: repairs, expr: sum(fare)}\n  c: {table: trips, expr: sum(fare)}\n"
    found = _findings(text)
    assert [(rule, subject) for rule, subject, _ in found] == [("broken-reference", "measures.b")]


def test_a_shared_clean_text_raises_nothing():
    text = BASE + "  a: {table: trips, expr: sum(fare)}\n  c: {table: trips, expr: sum(fare)}\n"
    assert _findings(text) == []


def test_a_shared_where_text_is_judged_as_a_where():
    # the same text is a fine `expr` and a bad `where` (an aggregate in a row condition)
    text = BASE + "  a: {table: trips, expr: sum(fare)}\n  b: {table: trips, expr: count(*), where: sum(fare)}\n"
    assert [(rule, subject) for rule, subject, _ in _findings(text)] == [("invalid-model", "measures.b")]


def test_word_snapshot_is_sqlglots_own_lists_for_its_version():
    # when the installed sqlglot is the snapshot's version the snapshot must match it exactly;
    # for any other version sql.py must not use the snapshot at all
    if sql.installed_sqlglot_version() == _sqlwords.SQLGLOT_VERSION:
        assert sql._word_snapshot() == (sql._live_reserved_words(), sql._live_known_functions())
    else:
        assert sql._word_snapshot() is None


def test_installed_version_is_read_without_importing_sqlglot():
    code = ("import sys; from modeldiff import sql; v = sql.installed_sqlglot_version(); "
            "import sqlglot; assert v == sqlglot.__version__, (v, sqlglot.__version__)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert done.returncode == 0, done.stderr


def test_common_measure_shapes_are_read_without_importing_sqlglot():
    code = ("import sys; from modeldiff import sql; "
            "sql.facts('sum(fare)'); sql.facts('count(*)'); sql.derived_refs_fast('a / nullif(b, 0)', {'a', 'b'}); "
            "print('sqlglot' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert done.returncode == 0, done.stderr
    expected = "False" if sql.installed_sqlglot_version() == _sqlwords.SQLGLOT_VERSION else "True"
    assert done.stdout.strip() == expected
