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
        assert sql.words._word_snapshot() == (sql.words._live_reserved_words(), sql.words._live_known_functions())
    else:
        assert sql.words._word_snapshot() is None


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


# --- ambiguity in settings other than the default: only sources near a new route are analysed

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from modeldiff import graph  # noqa: E402

TABLES = ["a", "b", "c", "d", "e"]


def _every_setting_pair(model) -> set[tuple[str, str, tuple, tuple]]:
    """Reference: every setting analysed from every source, the first setting to report a pair wins."""
    reported, out = set(), set()
    for _, setting in check._settings(model):
        for s, x, first, second in graph.flow_graph(model, setting).ambiguous_pairs():
            if (s, x) not in reported:
                reported.add((s, x))
                out.add((s, x, first, second))
    return out


def _model_text(links, overrides) -> str:
    lines = ["model: m", "format: 1", "tables:"]
    for t in TABLES:
        lines.append(f"  {t}: {{kind: dimension, key: id, columns: {{id: integer, " +
                     ", ".join(f"{u}_id: integer" for u in TABLES) + "}}")
    lines.append("links:")
    for i, (x, y, two_way, standby) in enumerate(links):
        lines.append(f"  l{i}: {{from: {x}.{y}_id, to: {y}.id" + (", flow: two-way" if two_way else "")
                     + (", standby: true" if standby else "") + "}")
    lines.append("measures:")
    for i, (table, via, off) in enumerate(overrides):
        fields = [f"table: {table}", "expr: count(*)"]
        if via is not None and via < len(links):
            fields.append(f"via: [l{via}]")
        if off is not None and off < len(links):
            fields.append(f"flow: {{l{off}: two-way}}")
        lines.append(f"  m{i}: {{" + ", ".join(fields) + "}")
    return "\n".join(lines) + "\n"


link = st.tuples(st.sampled_from(TABLES), st.sampled_from(TABLES), st.booleans(), st.booleans()).filter(
    lambda t: t[0] != t[1])
override = st.tuples(st.sampled_from(TABLES), st.one_of(st.none(), st.integers(0, 7)),
                     st.one_of(st.none(), st.integers(0, 7)))


@settings(max_examples=60, deadline=None)
@given(links=st.lists(link, min_size=1, max_size=8), overrides=st.lists(override, max_size=4))
def test_ambiguity_findings_match_analysing_every_source_in_every_setting(links, overrides):
    result = load.load_files([("m.model.yaml", _model_text(links, overrides))])
    found = {(f.subject, f.paths) for f in check.check_model(result.model, result.findings)
             if f.rule == "ambiguous-paths"}
    expected = {(f"paths.{s}->{x}", (first, second)) for s, x, first, second in _every_setting_pair(result.model)}
    assert found == expected


def test_ambiguity_only_in_a_measures_setting_is_reported():
    # filters go b -> a -> c and c -> b; when the measure makes l2 two-way, b -> c directly as well
    links = [("a", "b", False, False), ("c", "a", False, False), ("b", "c", False, False)]
    text = _model_text(links, [("a", None, 2)])
    result = load.load_files([("m.model.yaml", text)])
    found = [f for f in check.check_model(result.model, result.findings) if f.rule == "ambiguous-paths"]
    assert [f.subject for f in found] == ["paths.b->c"]
    assert "in measure m0's setting" in found[0].message


def test_no_ambiguity_reported_when_no_setting_has_two_routes():
    links = [("a", "b", False, False), ("c", "a", False, False), ("b", "c", False, False)]
    result = load.load_files([("m.model.yaml", _model_text(links, [("a", None, None)]))])
    assert [f for f in check.check_model(result.model, result.findings) if f.rule == "ambiguous-paths"] == []


def _dataclasses_without_docstring(source: str) -> list[str]:
    import ast

    missing = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.ClassDef) and ast.get_docstring(node) is None and any(
                getattr(d.func if isinstance(d, ast.Call) else d, "id", "") == "dataclass" for d in node.decorator_list):
            missing.append(node.name)
    return missing


def test_every_dataclass_of_the_package_has_a_docstring():
    # Without one, `dataclasses` writes a docstring from inspect.signature when the class is made: about
    # 0.3 ms per class at every start-up (measured on this project's machine, docs/performance.md).
    from pathlib import Path

    package = Path(load.__file__).resolve().parents[1]  # (load is a package inside modeldiff)
    missing = {str(p.relative_to(package)): names for p in sorted(package.rglob("*.py"))
               if (names := _dataclasses_without_docstring(p.read_text(encoding="utf-8")))}
    assert missing == {}


def test_the_docstring_probe_finds_a_dataclass_without_one():
    # The twin of the test above: the probe does see a missing docstring, with or without arguments.
    source = ("from dataclasses import dataclass\n@dataclass(frozen=True)\nclass A:\n    x: int\n"
              "@dataclass\nclass B:\n    '''B.'''\n    y: int\n@dataclass\nclass C:\n    z: int\n")
    assert _dataclasses_without_docstring(source) == ["A", "C"]
