"""One soundness case, in process: a random model and data, one random change, `verify --all` against the diff.

    outcome = run_case(seed)     # Outcome: the change's kind, what the diff listed, what moved, what it missed

Used by tests/test_impact_soundness.py and benchmarks/campaigns/impact_soundness.py.
"""

from __future__ import annotations

import random
from dataclasses import dataclass, field

import randmodel as R


@dataclass
class Outcome:
    """What one case showed: the mutation, items listed by the diff and items that moved on the data."""

    seed: int
    kind: str
    listed: set[tuple[str, str]] = field(default_factory=set)  # (kind, name) the diff lists as impacted
    moved: set[tuple[str, str]] = field(default_factory=set)  # (kind, name) verify --all saw moving
    missed: list = field(default_factory=list)  # verify.Missed records
    old_doc: dict | None = None
    new_doc: dict | None = None
    rows: dict | None = None


def diff_of(old_doc: dict, new_doc: dict):
    """The compare.ModelDiff of two model dicts, as `modeldiff diff` makes it."""
    from modeldiff import compare, impact, load

    old = load.load_files([("old/rand.model.yaml", R.to_yaml(old_doc))])
    new = load.load_files([("new/rand.model.yaml", R.to_yaml(new_doc))])
    result = impact.analyse(old.model, new.model, old.findings, new.findings)
    return compare.ModelDiff(compare.Side(None, "old/rand.model.yaml"), compare.Side(None, "new/rand.model.yaml"),
                             result)


def verify_all(md, rows: dict, user: str | None = None):
    """`verify --all` of a diff on the given rows (one database when both revisions declare the same tables)."""
    from modeldiff import verify

    result = md.result
    new_db = R.database(verify.loading_model(result), rows)
    old_db = new_db if result.old.tables == result.new.tables else R.database(result.old, rows)
    data = verify._Data(old_db, new_db, "random rows")
    try:
        return verify.verify_on(md, data, user, everything=True)
    finally:
        data.close()


def moves(md, rows: dict, only_unlisted: bool = False, user: str | None = None):
    """(items that moved, verify.Missed records): what `verify --all` shows, found with as little work as possible.

    The same evaluations as `verify --all` (verify.compare_report,
    compare_measure over verify.all_measure_items, check_role with every
    table), but a measure is not evaluated again once one of its groupings
    moved, and with `only_unlisted` what the diff lists is not evaluated at
    all (enough to find what it missed).
    """
    from modeldiff import verify

    result = md.result
    names = verify._old_names(result)
    listed = listed_items(result)
    skip = listed if only_unlisted else set()
    new_db = R.database(verify.loading_model(result), rows)
    old_db = new_db if result.old.tables == result.new.tables else R.database(result.old, rows)
    data = verify._Data(old_db, new_db, "random rows")
    reports, measures, roles = [], [], []
    try:
        for n in result.new.reports:
            if ("report", n) not in skip and names.reports.get(n, n) in result.old.reports:
                reports.append(verify.compare_report(result, n, data, user))
        moved_measures: set[str] = set()
        for item in verify.all_measure_items(result):
            if ("measure", item.measure) in skip or item.measure in moved_measures:
                continue
            c = verify.compare_measure(result, item, data, user)
            measures.append(c)
            if c.moved:
                moved_measures.add(item.measure)
        for n in result.new.roles:
            if ("role", n) not in skip and names.roles.get(n, n) in result.old.roles:
                roles.append(verify.check_role(result, n, data, user, everything=True))
    finally:
        data.close()
    moved = {(c.kind, c.name) for c in reports + measures if c.moved} | {("role", r.name) for r in roles if r.changed}
    return moved, list(verify.missed_by_the_diff(result, tuple(reports), tuple(measures), tuple(roles)))


def listed_items(result) -> set[tuple[str, str]]:
    return {("measure", i.name) for i in result.measures} | {("role", i.name) for i in result.roles} | \
           {("report", i.name) for i in result.reports}


def run_case(seed: int, kind: str | None = None, only_unlisted: bool = False) -> Outcome:
    """One case; `only_unlisted`: evaluate only what the diff does not list (enough to find what it missed)."""
    case = R.generate(seed)
    kind, new_doc = R.mutate(case.doc, random.Random(seed * 7919 + 1), kind)
    md = diff_of(case.doc, new_doc)
    moved, missed = moves(md, case.rows, only_unlisted)
    return Outcome(seed, kind, listed_items(md.result), moved, missed, case.doc, new_doc, case.rows)
