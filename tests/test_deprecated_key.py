"""`use`, the first spelling of `via` in format 1: read as `via`, with a `deprecated-key` warning.

model-format.md (Measures): `use` is read as a deprecated alias, with a warning
that names the new key and the line. Writing both in one item is an error.
"""

from __future__ import annotations

import json

import pytest

from modeldiff import impact
from modeldiff.check import check_model
from modeldiff.cli import main
from modeldiff.load import load_files
from tests.test_check import BASE, edited

NAME = "bikes.model.yaml"

# Each holder of a `via` (measure, variant option, report), written with `via` and with `use`.
HOLDERS = {
    "measure": ("trips_by_end_day: {table: trips, expr: count(*), via: [trips_end_day]}",
                "trips_by_end_day: {table: trips, expr: count(*), use: [trips_end_day]}",
                "measures.trips_by_end_day"),
    "variant-option": ("current: {via: [repairs_current_mechanic]}",
                       "current: {use: [repairs_current_mechanic]}",
                       "variants.attribution.options.current"),
    "report": ("    role: east_lead\n", "    role: east_lead\n    use: [repairs_current_mechanic]\n",
               "reports.repair_costs"),
}


def load(text: str):
    return load_files([(NAME, text)])


def line_of(text: str, needle: str) -> int:
    [index] = [i for i, line in enumerate(text.splitlines(), 1) if needle in line]
    return index


@pytest.mark.parametrize("holder", sorted(HOLDERS))
def test_use_is_read_as_via_with_a_warning_naming_the_new_key_and_the_line(holder):
    new, old, subject = HOLDERS[holder]
    text = edited((new, old))
    result = load(text)
    [finding] = result.findings
    line = line_of(text, "use: [")
    assert (finding.rule, finding.severity, finding.subject) == ("deprecated-key", "warning", f"{subject}.use")
    assert finding.pos.line == line
    assert "`via`" in finding.message and f"line {line}" in finding.message
    # read exactly as `via`: the same overrides as the item written with `via`
    written_via = BASE if holder != "report" else edited((new, "    role: east_lead\n    via: [repairs_current_mechanic]\n"))
    assert _overrides(result.model, subject) == _overrides(load(written_via).model, subject)
    assert _overrides(result.model, subject).via != ()


def _overrides(model, subject):
    section, name, *rest = subject.split(".")
    item = getattr(model, section)[name]
    if rest:  # variants.V.options.O
        item = item.options[rest[1]]
    return item.overrides


@pytest.mark.parametrize("holder", sorted(HOLDERS))
def test_via_gives_no_deprecated_key_warning(holder):
    new, _, _ = HOLDERS[holder]
    text = BASE if holder != "report" else edited((new, "    role: east_lead\n    via: [repairs_current_mechanic]\n"))
    assert [f for f in load(text).findings if f.rule == "deprecated-key"] == []
    assert load(text).findings == ()


def test_use_reads_the_same_model_as_via():
    old = edited(*[(new, use) for new, use, _ in list(HOLDERS.values())[:2]])
    assert old != BASE
    assert load(old).model.measures == load(BASE).model.measures
    assert load(old).model.variants == load(BASE).model.variants


def test_a_diff_from_use_to_via_changes_nothing():
    old = edited(*[(new, use) for new, use, _ in list(HOLDERS.values())[:2]])
    a, b = load(old), load(BASE)
    result = impact.analyse(a.model, b.model, a.findings, b.findings)
    assert (result.changes, result.measures, result.roles, result.reports) == ((), (), (), ())


def test_a_diff_from_via_to_via_on_another_link_is_still_seen():  # twin: the alias hides no real change
    old = edited(("current: {via: [repairs_current_mechanic]}", "current: {use: [repairs_current_mechanic]}"))
    new = edited(("current: {via: [repairs_current_mechanic]}", "current: {via: [repairs_mechanic]}"))
    a, b = load(old), load(new)
    result = impact.analyse(a.model, b.model, a.findings, b.findings)
    # new warnings come beside the real change (the standby link now unused, a live link named in `via`)
    changes = [(c.kind, c.subject) for c in result.changes if c.kind != "warning.added"]
    assert changes == [("variant.changed", "variants.attribution.options.current")]
    assert ("warning.added", "links.repairs_current_mechanic") in [(c.kind, c.subject) for c in result.changes]


@pytest.mark.parametrize("holder", sorted(HOLDERS))
def test_via_and_use_in_one_item_is_an_error(holder):
    new, old, subject = HOLDERS[holder]
    if holder == "report":
        text = edited((new, "    role: east_lead\n    via: [repairs_current_mechanic]\n    use: [repairs_current_mechanic]\n"))
    else:
        text = edited((new, new.replace("via: [", "use: [trips_bike], via: [")))
    [finding] = load(text).findings
    assert (finding.rule, finding.severity, finding.subject) == ("invalid-model", "error", f"{subject}.use")
    assert "`via`" in finding.message and "`use`" in finding.message


def test_check_points_via_rules_at_the_use_key():
    # via-not-standby on an item written with `use`: the finding still has the position of that list
    text = edited(("trips_by_end_day: {table: trips, expr: count(*), via: [trips_end_day]}",
                   "trips_by_end_day: {table: trips, expr: count(*), use: [trips_bike]}"))
    result = load(text)
    findings = {f.rule: f for f in check_model(result.model, result.findings)}
    assert findings["via-not-standby"].pos is not None
    assert findings["via-not-standby"].pos.line == line_of(text, "use: [trips_bike]")
    assert findings["deprecated-key"].severity == "warning"


def test_check_command_shows_the_warning_and_exits_1_only_with_strict(tmp_path, capsys):
    path = tmp_path / NAME
    path.write_text(edited(HOLDERS["measure"][:2]))
    assert main(["check", str(path), "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert [(f["rule"], f["severity"]) for f in out["findings"]] == [("deprecated-key", "warning")]
    assert main(["check", str(path), "--strict"]) == 1
    assert "deprecated-key" in capsys.readouterr().out
    path.write_text(BASE)
    assert main(["check", str(path), "--strict"]) == 0
