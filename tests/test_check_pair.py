"""check.check_pair: the two revisions' record-rule findings, equal to check_model of each revision.

check_pair skips a rule on the new revision when it found nothing on the old
one and everything it reads is equal; these tests hold it to running
check_model on each side, on every fixture pair and on edits that break a
reference in the new revision only.
"""

from __future__ import annotations

import sys
from pathlib import Path

from modeldiff import check, load

from scenariokit import ROOT, SMALL, scenario_pairs, synthetic_model_text  # noqa: F401

_pairs = scenario_pairs


def _both(old_result, new_result):
    return (check.check_model(old_result.model, old_result.findings, graph_rules=False),
            check.check_model(new_result.model, new_result.findings, graph_rules=False))


def _positions(findings):
    return [f.pos for f in findings]


def test_check_pair_equals_check_model_on_every_fixture_pair():
    count = 0
    for old, new in _pairs():
        old_files, new_files = load.path_files(old), load.path_files(new)
        try:
            old_result = load.load_files(old_files)
            new_result = load.splice_files(new_files, old_files, old_result)
        except Exception:  # noqa: BLE001 - a pair that does not load is another test's business
            continue
        got = check.check_pair(old_result.model, old_result.findings, new_result.model, new_result.findings)
        want = _both(old_result, new_result)
        assert got == want
        assert [_positions(x) for x in got] == [_positions(x) for x in want]
        count += 1
    assert count >= 50


def _edited(old_text: str, new_text: str):
    old_files, new_files = [("a.model.yaml", old_text.encode())], [("b.model.yaml", new_text.encode())]
    old_result = load.load_files(old_files)
    new_result = load.splice_files(new_files, old_files, old_result)
    return old_result, new_result


def test_check_pair_finds_a_reference_broken_in_the_new_revision_only():
    text = synthetic_model_text(**SMALL)
    edits = [
        ("    expr: sum(qty)", "    expr: sum(no_such_column)"),  # a base measure's column
        ("  l1:\n", "  l1:\n    standby: true\n"),  # a standby link no measure uses
        ("  p0:\n", "  p0:\n    role: no_such_role\n"),  # a report's role
        ("  r0:\n    filters:\n", "  r0:\n    filters:\n      no_such_table: x = 1\n"),  # a role's filter
    ]
    for before, after in edits:
        old_result, new_result = _edited(text, text.replace(before, after, 1))
        old_found, new_found = check.check_pair(old_result.model, old_result.findings,
                                                new_result.model, new_result.findings)
        assert (old_found, new_found) == _both(old_result, new_result)
        assert not old_found and new_found, after


def test_check_pair_reports_nothing_new_when_nothing_breaks():
    text = synthetic_model_text(**SMALL)
    old_result, new_result = _edited(text, synthetic_model_text(flip="l0", **SMALL))
    old_found, new_found = check.check_pair(old_result.model, old_result.findings,
                                            new_result.model, new_result.findings)
    assert (old_found, new_found) == _both(old_result, new_result)
    assert not old_found and not [f for f in new_found if f.severity == "error"]
    assert {f.rule for f in new_found} <= {"security-stops"}  # l0 made two-way stops a role's filter: a new warning
