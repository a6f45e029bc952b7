"""Derived changes and impacts (modeldiff.impact): scenario folders, and the rules behind them one by one.

Each folder of tests/impact_scenarios holds old.model.yaml, new.model.yaml and expected.json: the complete
list of changes as [kind, subject], and every impacted measure, role and report with the [kind, subject] of
the changes its reasons name, plus the exit code. `MODELDIFF_UPDATE_GOLDEN=1` rewrites expected.json on
purpose; review the diff before committing it.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from modeldiff import impact, load
from modeldiff.impact import DiffResult

SCENARIOS = Path(__file__).parent / "impact_scenarios"
TPCDS = Path(__file__).parent / "fixtures" / "tpcds.model.yaml"
UPDATE = os.environ.get("MODELDIFF_UPDATE_GOLDEN") == "1"


def analyse_files(old: Path | str, new: Path | str) -> DiffResult:
    a, b = load.load_path(old), load.load_path(new)
    return impact.analyse(a.model, b.model, a.findings, b.findings)


def analyse_texts(old: str, new: str) -> DiffResult:
    a = load.load_files([("old.model.yaml", old)])
    b = load.load_files([("new.model.yaml", new)])
    return impact.analyse(a.model, b.model, a.findings, b.findings)


def scenario(name: str) -> DiffResult:
    return analyse_files(SCENARIOS / name / "old.model.yaml", SCENARIOS / name / "new.model.yaml")


def summary(r: DiffResult) -> dict:
    """What expected.json holds: complete lists, every impact with the changes its reasons name."""
    by_id = {c.id: c for c in r.changes}

    def blamed(i):
        return sorted({(by_id[x.change].kind, by_id[x.change].subject) for x in i.reasons})

    return {
        "exit_code": r.exit_code,
        "changes": [[c.kind, c.subject] for c in r.changes],
        "measures": {i.name: [list(k) for k in blamed(i)] for i in r.measures},
        "roles": {i.name: [list(k) for k in blamed(i)] for i in r.roles},
        "reports": {i.name: [list(k) for k in blamed(i)] for i in r.reports},
    }


def golden_text(d: dict) -> str:
    """expected.json, one change or impact per line so that a review reads like a list."""
    def block(opening: str, closing: str, rows: list[str]) -> str:
        if not rows:
            return opening + closing
        return opening + "\n" + ",\n".join(f"  {row}" for row in rows) + "\n " + closing

    parts = [f' "exit_code": {d["exit_code"]}',
             ' "changes": ' + block("[", "]", [json.dumps(c) for c in d["changes"]])]
    for section in ("measures", "roles", "reports"):
        rows = [f"{json.dumps(n)}: {json.dumps(b)}" for n, b in d[section].items()]
        parts.append(f' "{section}": ' + block("{", "}", rows))
    return "{\n" + ",\n".join(parts) + "\n}\n"


def change(r: DiffResult, kind: str, subject: str):
    found = [c for c in r.changes if c.kind == kind and c.subject == subject]
    assert len(found) == 1, f"{kind} {subject}: {[(c.kind, c.subject) for c in r.changes]}"
    return found[0]


def impact_of(items, name: str):
    found = [i for i in items if i.name == name]
    assert found, f"{name} not impacted: {[i.name for i in items]}"
    return found[0]


def names(items) -> list[str]:
    return [i.name for i in items]


# --- the scenario folders --------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(p.name for p in SCENARIOS.iterdir() if p.is_dir()))
def test_scenario(name: str):
    got = summary(scenario(name))
    expected_file = SCENARIOS / name / "expected.json"
    if UPDATE:
        expected_file.write_text(golden_text(got))
    assert got == json.loads(expected_file.read_text())
