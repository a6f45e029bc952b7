"""Compare modeldiff.data.evaluate_report with the plain-Python reading of section 5 (tests/section5.py)."""

from __future__ import annotations

import randmodel as R
import section5


def typed_rows(model, rows):
    """The rows as the model's column types hold them (the same values the engine's database gets)."""
    out = {}
    for name, tuples in R.tuples(model, rows).items():
        columns = list(model.tables[name].columns)
        out[name] = [dict(zip(columns, t)) for t in tuples]
    return out


def _key(values):
    return tuple(("<no match>",) if v == section5.NO_MATCH else (type(v).__name__ if v is not None else "", v)
                 for v in values)


def disagreements(model, rows, db, report: str, user: str | None) -> list[str]:
    """Differences between the engine's rows and the reference's, in words (empty when they agree)."""
    from modeldiff.data import NO_MATCH, evaluate_report
    from modeldiff.util import same_value

    got = evaluate_report(model, report, db, user)
    groups = got.groups
    engine = {}
    for row in got.rows:
        g = tuple(section5.NO_MATCH if v is NO_MATCH else v for v in row[:groups])
        engine[g] = row[groups:]
    mine = {}
    for row in section5.report(model, typed_rows(model, rows), report, user):
        mine[tuple(row[:groups])] = row[groups:]
    out = []
    for g in sorted(set(engine) | set(mine), key=lambda g: repr(_key(g))):
        if g not in engine:
            out.append(f"group {g}: only the reference has it: {mine[g]}")
        elif g not in mine:
            out.append(f"group {g}: only the engine has it: {engine[g]}")
        elif not all(same_value(a, b) for a, b in zip(engine[g], mine[g])):
            out.append(f"group {g}: engine {engine[g]} reference {mine[g]}")
    return out
