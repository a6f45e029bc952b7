"""The evaluation engine against two references, on random small models and data.

1. tests/section5.py, the plain-Python reading of semantics.md section 5 that
   tests/test_section5_reference.py also compares with the engine (visible
   rows by semi-joins until nothing changes, role cuts first, one evaluation
   per combination of group values, `(no match)` per measure in its own
   setting, derived measures). This file once had a reading of its own; it
   predated the corrected `(no match)` rule and counted a row both in a group
   and in `(no match)` (see test_a_row_shown_in_a_group_is_not_also_in_no_match),
   so the two references were folded into one. The models here are drawn by
   hypothesis, unlike tests/randmodel.py's seeded ones: any table linked to
   any other or to itself, flow overrides on any link, tiny data full of
   NULLs.
2. For tree-shaped models (one-way many-to-one links, no cycles), plain join
   SQL run by sqlite3 from Python's standard library: inner joins along the
   keys, GROUP BY, aggregates with FILTER.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from modeldiff.data import NO_MATCH, Database, evaluate_report
from modeldiff.model import Column, Link, Measure, Model, Overrides, Report, Role, Table

import section5

COLUMNS = ("k", "a", "b", "f0", "f1")
VALUES = st.sampled_from((None, 0, 1, 1, 2))
FOREIGN = st.sampled_from((None, 0, 1, 2, 3))

# aggregate SQL -> Python over a list of row dicts
AGGREGATES = {
    "count(*)": lambda rows: len(rows),
    "sum(b)": lambda rows: _sum([r["b"] for r in rows]),
    "count(DISTINCT a)": lambda rows: len({r["a"] for r in rows if r["a"] is not None}),
    "max(k)": lambda rows: max((r["k"] for r in rows), default=None),
    "min(a)": lambda rows: min((r["a"] for r in rows if r["a"] is not None), default=None),
}
SQLITE_AGGREGATES = {"count(*)": "count(*)", "sum(b)": "sum({t}.b)", "count(DISTINCT a)": "count(DISTINCT {t}.a)",
                     "max(k)": "max({t}.k)", "min(a)": "min({t}.a)"}
OPERATORS = ("=", "<>", ">=", "IS NULL", "IS NOT NULL")


def _sum(values):
    present = [v for v in values if v is not None]
    return sum(present) if present else None


@dataclass(frozen=True)
class Pred:
    column: str
    op: str
    value: int = 0

    @property
    def sql(self) -> str:
        return f"{self.column} {self.op}" if "NULL" in self.op else f"{self.column} {self.op} {self.value}"

    def holds(self, row: dict) -> bool:  # SQL's three-valued logic: unknown filters the row out
        v = row[self.column]
        if self.op == "IS NULL":
            return v is None
        if self.op == "IS NOT NULL":
            return v is not None
        if v is None:
            return False
        return {"=": v == self.value, "<>": v != self.value, ">=": v >= self.value}[self.op]


preds = st.builds(Pred, st.sampled_from(("a", "b", "k")), st.sampled_from(OPERATORS), st.integers(0, 2))


@dataclass(frozen=True)
class Scenario:
    model: Model
    rows: dict[str, list[tuple]]
    where: dict[str, Pred]
    role: dict[str, Pred]
    measure_where: dict[str, Pred]  # measure name -> its where


def _table(name: str) -> Table:
    return Table(name, "dimension", ("k",), {c: Column(c, "integer") for c in COLUMNS})


@st.composite
def scenarios(draw, tree: bool = False):
    n = draw(st.sampled_from((2, 3, 3, 4)))
    names = [f"t{i}" for i in range(n)]
    links = {}
    if tree:  # t_p references t_i (many-to-one, one-way) for a parent p < i
        for i in range(1, n):
            parent = draw(st.integers(0, i - 1))
            column = draw(st.sampled_from(("f0", "f1")))
            if any(l.from_table == names[parent] and l.from_columns == (column,) for l in links.values()):
                continue
            links[f"L{i}"] = Link(f"L{i}", names[parent], (column,), names[i], ("k",))
    else:
        for i in range(draw(st.integers(1, 5))):
            src, dst = draw(st.sampled_from(names)), draw(st.sampled_from(names))
            cardinality = draw(st.sampled_from(("many-to-one", "many-to-one", "one-to-one", "many-to-many")))
            flow = draw(st.sampled_from(("one-way", "two-way")))
            links[f"L{i}"] = Link(f"L{i}", src, (draw(st.sampled_from(("f0", "f1"))),), dst,
                                  ("a",) if cardinality == "many-to-many" else ("k",), cardinality, flow,
                                  draw(st.sampled_from(("one-way", "two-way"))))
    rows = {}
    for name in names:
        count = draw(st.sampled_from((0, 2, 3, 4, 5)))
        rows[name] = [(k, draw(VALUES), draw(VALUES), draw(FOREIGN), draw(FOREIGN)) for k in range(count)]
    where = draw(st.dictionaries(st.sampled_from(names), preds, max_size=2))
    role = {} if tree else draw(st.dictionaries(st.sampled_from(names), preds, max_size=2))
    measures, measure_where = {}, {}
    for i in range(draw(st.integers(1, 3))):
        name = f"m{i}"
        home = draw(st.sampled_from(names))
        mw = draw(st.one_of(st.none(), preds))
        overrides = Overrides()
        if not tree and links and draw(st.booleans()):
            overrides = Overrides((), {draw(st.sampled_from(sorted(links))): draw(st.sampled_from(("two-way", "off")))})
        measures[name] = Measure(name, draw(st.sampled_from(sorted(AGGREGATES))), home, mw.sql if mw else None,
                                 overrides)
        if mw:
            measure_where[name] = mw
    shown = sorted(measures)
    if not tree and len(measures) >= 2 and draw(st.booleans()):
        measures["d"] = Measure("d", "m0 + m1")
        shown.append("d")
    by_choices = [f"{t}.{c}" for t in names for c in ("a", "b", "a", "k")]
    grouped = draw(st.sampled_from((True, True, True, False)))
    by = tuple(draw(st.lists(st.sampled_from(by_choices), min_size=int(grouped), max_size=int(grouped) * (1 if tree else 2),
                             unique=True)))
    report = Report("r", tuple(shown), by, {t: p.sql for t, p in where.items()},
                    role="viewer" if role else None)
    model = Model("random", {n: _table(n) for n in names}, links, measures,
                  roles={"viewer": Role("viewer", {t: p.sql for t, p in role.items()})} if role else {},
                  reports={"r": report})
    return Scenario(model, rows, where, role, measure_where)


# --- reference 1: section 5 in Python (tests/section5.py) ------------------------------


def _dicts(scenario: Scenario) -> dict[str, list[dict]]:
    return {t: [dict(zip(COLUMNS, row)) for row in rows] for t, rows in scenario.rows.items()}


def reference(scenario: Scenario) -> list[tuple]:
    """The report's rows by tests/section5.py, the one plain-Python reading of section 5 the tests share."""
    rows = section5.report(scenario.model, _dicts(scenario), "r")
    return [tuple(NO_MATCH if v == section5.NO_MATCH else v for v in row) for row in rows]


@pytest.fixture(scope="module", autouse=True)
def _shared_connection():
    """One DuckDB connection for every example (opening one costs more than a query)."""
    import duckdb

    connection = duckdb.connect(":memory:")
    SHARED.append(connection)
    yield
    SHARED.clear()
    connection.close()


SHARED: list = []


def engine_rows(scenario: Scenario) -> list[tuple]:
    db = Database.from_rows(scenario.model, scenario.rows, SHARED[0] if SHARED else None)
    return list(evaluate_report(scenario.model, "r", db).rows)


def _key(row):
    return tuple((value is NO_MATCH, repr(value)) for value in row)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenarios())
def test_engine_equals_the_python_reading_of_section_5(scenario):
    assert sorted(engine_rows(scenario), key=_key) == sorted(reference(scenario), key=_key)



def _two_settings(orphan: bool) -> Scenario:
    """Shrunk from a hypothesis example: m0 and m1 count the same table t0 in two settings.

    The report filters t1 (`a = 0`: no row passes) and groups by t2.a. In m0's
    setting L0 is one-way, so the filter stops at t1 and t2.a has the value
    NULL; in m1's, L0 is two-way and the filter empties t2, so t2.a has no value
    in m1's own total. t0 is linked to t2 only with `orphan` (L2, one-way, and
    a t0 row whose f1 is NULL, in no group of m0).
    """
    links = {"L0": Link("L0", "t1", ("f0",), "t2", ("k",))}
    rows = {"t0": [(0, None, None, None, 0)], "t1": [(0, None, None, None, None)], "t2": [(0, None, None, None, None)]}
    if orphan:
        links["L2"] = Link("L2", "t0", ("f1",), "t2", ("k",))
        rows["t0"].append((1, None, None, None, None))
    measures = {"m0": Measure("m0", "count(*)", "t0"),
                "m1": Measure("m1", "count(*)", "t0", overrides=Overrides((), {"L0": "two-way"}))}
    report = Report("r", ("m0", "m1"), ("t2.a",), {"t1": "a = 0"})
    model = Model("m", {n: _table(n) for n in ("t0", "t1", "t2")}, links, measures, reports={"r": report})
    return Scenario(model, rows, {"t1": Pred("a", "=", 0)}, {}, {})


def test_a_row_shown_in_a_group_is_not_also_in_no_match():
    # semantics.md section 5: "for each measure a row is either in some group or in `(no match)`, never
    # both". The group NULL is in the answer through m0; m1 sees t0's row there (t0 is not linked to t2 in
    # m1's setting), so that row is not gathered in `(no match)` as well. This file's former reference
    # answered [(None, 1, 1), ((no match), 0, 1)].
    scenario = _two_settings(orphan=False)
    assert engine_rows(scenario) == reference(scenario) == [(None, 1, 1)]


def test_no_match_stays_when_a_measure_has_a_row_in_no_group():
    # the twin: t0's row 1 has no t2 row in m0's setting, so (no match) is there for m0; in m1's setting the
    # filter empties t2 and, through L2, t0: m1 is 0 everywhere
    scenario = _two_settings(orphan=True)
    expected = sorted([(None, 1, 0), (NO_MATCH, 1, 0)], key=_key)
    assert sorted(engine_rows(scenario), key=_key) == sorted(reference(scenario), key=_key) == expected

# --- reference 2: plain joins in sqlite3 for tree-shaped models -------------------------


def _path(model: Model, home: str, target: str) -> list[Link] | None:
    """Links from `home` down to `target` (home references ... references target), or None."""
    if home == target:
        return []
    for link in model.links.values():
        if link.from_table == home:
            rest = _path(model, link.to_table, target)
            if rest is not None:
                return [link] + rest
    return None


def sqlite_rows(scenario: Scenario) -> list[tuple] | None:
    """The report by joins; None when it groups by a table its measures' tables do not reference."""
    model = scenario.model
    report = model.reports["r"]
    con = sqlite3.connect(":memory:")
    for name, rows in scenario.rows.items():
        con.execute(f"CREATE TABLE {name} (_row INTEGER, {', '.join(COLUMNS)})")
        con.executemany(f"INSERT INTO {name} VALUES (?, ?, ?, ?, ?, ?)", [(i,) + r for i, r in enumerate(rows)])
    by = report.by[0].split(".") if report.by else None
    out_groups: dict = {}
    leftovers = []
    for name in report.measures:
        m = model.measures[name]
        filtered = [t for t in scenario.where if _path(model, m.table, t) is not None]
        group_path = _path(model, m.table, by[0]) if by else []
        if group_path is None:
            return None

        def joins(targets):
            used, sql = [], ""
            for target in targets:
                for link in _path(model, m.table, target):
                    if link.name not in used:
                        used.append(link.name)
                        sql += (f" JOIN {link.to_table} ON {link.from_table}.{link.from_columns[0]}"
                                f" = {link.to_table}.{link.to_columns[0]}")
            return sql

        conds = " AND ".join(f"{t}.{scenario.where[t].sql}" for t in filtered) or "1"
        agg = SQLITE_AGGREGATES[m.expr].format(t=m.table)
        mw = scenario.measure_where.get(name)
        agg += f" FILTER (WHERE {m.table}.{mw.sql})" if mw else ""
        total = f"SELECT {m.table}._row FROM {m.table}{joins(filtered)} WHERE {conds}"
        if by:
            grouped = (f"SELECT {by[0]}.{by[1]}, {agg} FROM {m.table}{joins(filtered + [by[0]])} WHERE {conds} "
                       f"GROUP BY {by[0]}.{by[1]}")
            for group, val in con.execute(grouped).fetchall():
                out_groups.setdefault((group,), {})[name] = val
            in_groups = f"SELECT {m.table}._row FROM {m.table}{joins(filtered + [by[0]])} WHERE {conds}"
            lost = (f"SELECT {agg}, count(*) FROM {m.table} WHERE _row IN ({total}) AND _row NOT IN ({in_groups})")
            leftovers.append(con.execute(lost).fetchone())
        else:
            out_groups.setdefault((), {})[name] = con.execute(
                f"SELECT {agg} FROM {m.table} WHERE _row IN ({total})").fetchone()[0]
    empty = {name: AGGREGATES[model.measures[name].expr]([]) for name in report.measures}
    out = [group + tuple(vals.get(n, empty[n]) for n in report.measures) for group, vals in out_groups.items()]
    if by and any(count for _, count in leftovers):
        out.append((NO_MATCH,) + tuple(value for value, _ in leftovers))
    return out


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenarios(tree=True))
def test_tree_shaped_models_equal_plain_joins_in_sqlite(scenario):
    expected = sqlite_rows(scenario)
    if expected is None:  # grouped by a table no measure reaches: outside what plain joins say
        return
    assert sorted(engine_rows(scenario), key=_key) == sorted(expected, key=_key)


def test_the_sqlite_reference_is_not_vacuous():
    # The twin of the property: a changed filter gives different rows, so the comparison can fail.
    names = ["t0", "t1"]
    links = {"L1": Link("L1", "t0", ("f0",), "t1", ("k",))}
    measures = {"m0": Measure("m0", "count(*)", "t0")}
    rows = {"t0": [(0, 1, 1, 0, None), (1, 1, 1, 1, None), (2, 0, 0, 4, None)], "t1": [(0, 0, 0, None, None),
                                                                                      (1, 1, 0, None, None)]}
    report = Report("r", ("m0",), ("t1.a",), {})
    model = Model("m", {n: _table(n) for n in names}, links, measures, reports={"r": report})
    scenario = Scenario(model, rows, {}, {}, {})
    assert sorted(engine_rows(scenario), key=_key) == sorted(sqlite_rows(scenario), key=_key) == sorted(
        [(0, 1), (1, 1), (NO_MATCH, 1)], key=_key)
    filtered = Scenario(model, rows, {"t1": Pred("a", "=", 1)}, {}, {})
    assert sorted(sqlite_rows(filtered), key=_key) != sorted(engine_rows(scenario), key=_key)
