"""Report conditions: a report's `having`, SQL's HAVING over measure names (docs/format.md, Reports).

A condition is evaluated once per group of the report, the `(no match)` row
included, over the values the measures take in that group; a group is shown
only where it is true (NULL, as in SQL, is not true). It may name measures the
report does not show. It never makes a group appear: the groups are those of
the report's shown measures (docs/meaning.md section 5), the condition only
drops some. A report without `by` has no groups: its one row is its total,
which a condition does not touch.

This module answers the small questions check, impact and the engine ask of
a condition; sqlglot is imported on first use.
"""

from __future__ import annotations

from typing import Mapping

from modeldiff.model import Measure, Model, Report

# Aggregates whose value is a number whatever they read: a condition that is only such a measure is not a test.
_NUMERIC_AGGREGATES = frozenset(("count", "sum", "avg"))


def measures_named(report: Report, measures: Mapping[str, Measure]) -> tuple[str, ...]:
    """The measures of `measures` the report's condition names, sorted ('()' without a condition or when unreadable)."""
    if report.having is None:
        return ()
    from modeldiff import sql

    try:
        return tuple(sorted(sql.measure_refs(report.having, measures)))
    except sql.SqlError:
        return ()


def names_written(report: Report) -> frozenset[str]:
    """The names a report's condition reads, as written, measures or not (none without a condition or when not SQL)."""
    if report.having is None:
        return frozenset()
    from modeldiff import sql

    try:
        return sql.names(report.having)
    except sql.SqlError:
        return frozenset()


def extra_measures(report: Report, measures: Mapping[str, Measure]) -> tuple[str, ...]:
    """The measures only the condition names (the report does not show them), sorted."""
    shown = set(report.measures)
    return tuple(m for m in measures_named(report, measures) if m not in shown)


def not_a_test(text: str, model: Model) -> str | None:
    """Why `text` is not a true-or-false test (a number, arithmetic, a bare counting measure), or None.

    Raises sql.SqlError for text that is not SQL.
    """
    from sqlglot import exp

    from modeldiff import sql

    found = sql.facts(text)
    if not found.condition_like:
        return "it computes a value, not a test"
    tree = sql.parse(text)
    while isinstance(tree, exp.Paren):
        tree = tree.this
    if isinstance(tree, exp.Column) and isinstance(tree.this, exp.Identifier):
        named = sql.measure_refs(tree.this.this, model.measures)
        measure = model.measures.get(next(iter(named))) if len(named) == 1 else None
        if measure is not None and measure.is_base:
            try:
                aggregates = set(sql.facts(measure.expr).aggregates)
            except sql.SqlError:
                return None
            if aggregates and aggregates <= _NUMERIC_AGGREGATES:
                return f"measure {measure.name} alone is a number"
    return None
