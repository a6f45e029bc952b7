"""check.check_new_side: what a diff without a cache reads of each revision's findings.

The new revision's findings must be exactly `check_model`'s (they are shown),
and the old side must tell the same broken references apart as the old
revision's full `check_model` findings (`impact._reference_changes`), on
every fixture pair and on edits that break or mend a reference.
"""

from __future__ import annotations

import sys
from pathlib import Path

from modeldiff import check, diff, impact, load

from scenariokit import ROOT, SMALL, scenario_pairs, synthetic_model_text  # noqa: F401

_pairs = scenario_pairs


def _load_pair(old_files, new_files, splice: bool):
    old_result = load.load_files(old_files)
    new_result = (load.splice_files(new_files, old_files, old_result) if splice
                  else load.load_files(new_files))
    return old_result, new_result


def _assert_same_as_full_check(old_result, new_result):
    old_part, new_found = check.check_new_side(old_result.model, old_result.findings,
                                               new_result.model, new_result.findings)
    old_full = check.check_model(old_result.model, old_result.findings, graph_rules=False)
    new_full = check.check_model(new_result.model, new_result.findings, graph_rules=False)
    assert new_found == new_full
    assert [f.pos for f in new_found] == [f.pos for f in new_full]
    assert impact._reference_changes(old_part, new_found) == impact._reference_changes(old_full, new_full)
    assert diff.warning_changes(old_part, new_found) == diff.warning_changes(old_full, new_full)
    return old_part, new_found


def test_equals_the_full_check_on_every_fixture_pair_both_ways():
    count = 0
    for old, new in _pairs():
        for a, b in ((old, new), (new, old)):
            for splice in (True, False):
                try:
                    old_result, new_result = _load_pair(load.path_files(a), load.path_files(b), splice)
                except Exception:  # noqa: BLE001 - a pair that does not load is another test's business
                    continue
                _assert_same_as_full_check(old_result, new_result)
                count += 1
    assert count >= 100


def _edited(old_text: str, new_text: str):
    return _load_pair([("a.model.yaml", old_text.encode())], [("b.model.yaml", new_text.encode())], True)


BREAKS = [
    ("    expr: sum(qty)", "    expr: sum(no_such_column)"),  # a base measure's column
    ("  p0:\n", "  p0:\n    role: no_such_role\n"),  # a report's role
    ("  r0:\n    filters:\n", "  r0:\n    filters:\n      no_such_table: x = 1\n"),  # a role's filter
    ("  l1:\n    from: fact_1.", "  l1:\n    from: no_such_table."),  # a link's table
]


def test_a_reference_broken_in_the_new_revision_only_is_reported_new():
    text = synthetic_model_text(**SMALL)
    for before, after in BREAKS:
        old_result, new_result = _edited(text, text.replace(before, after, 1))
        old_part, new_found = _assert_same_as_full_check(old_result, new_result)
        assert any(f.rule == "broken-reference" for f in new_found), after
        assert impact._reference_changes(old_part, new_found), after


def test_a_reference_broken_in_both_revisions_is_not_reported_new():
    text = synthetic_model_text(**SMALL)
    for before, after in BREAKS:
        broken = text.replace(before, after, 1)
        for new_text in (broken, broken.replace("  l0:\n", "  l0:\n    standby: true\n", 1)):
            old_result, new_result = _edited(broken, new_text)
            old_part, new_found = _assert_same_as_full_check(old_result, new_result)
            assert any(f.rule == "broken-reference" for f in new_found), after
            assert not impact._reference_changes(old_part, new_found), after


def test_nothing_is_read_of_the_old_side_when_nothing_breaks_and_no_warning_appears():
    text = synthetic_model_text(**SMALL)
    old_result, new_result = _edited(text, text.replace("    expr: sum(qty)", "    expr: SUM(qty)", 1))
    assert old_result.model != new_result.model
    old_part, new_found = _assert_same_as_full_check(old_result, new_result)
    assert not old_part and not new_found


def test_the_old_side_is_read_for_a_rule_that_warns_in_the_new_revision():
    # l0 made two-way stops role r2's filter (security-stops): the rule runs on the old side too, finds
    # nothing there, so the warning is new
    text = synthetic_model_text(**SMALL)
    old_result, new_result = _edited(text, synthetic_model_text(flip="l0", **SMALL))
    old_part, new_found = _assert_same_as_full_check(old_result, new_result)
    assert not old_part and {f.rule for f in new_found} == {"security-stops"}
    assert len(diff.warning_changes(old_part, new_found)) == len(new_found)
