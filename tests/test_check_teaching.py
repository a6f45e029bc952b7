"""Issue 12, "check": warnings that teach. Root cause first; ambiguity only where it is read, placed at
the item whose setting causes it, with the fix that applies there; two-way links into a bridge or access
table that drop unmatched rows from grouped reports. Each "detects" test has an "absent" twin.

The models are our own clinic-appointments scenario, written for these tests.
"""

from __future__ import annotations

from modeldiff.check import check_model
from modeldiff.load import load_files

NAME = "clinic.model.yaml"

CLINIC = """\
model: clinic
format: 1
tables:
  days: {kind: dimension, key: day_key, columns: {day_key: integer, year: integer}}
  clinics: {kind: dimension, key: clinic_key, columns: {clinic_key: integer, city: text}}
  appointments:
    kind: fact
    key: appointment_key
    columns: {appointment_key: integer, day_key: integer, end_day_key: integer, clinic_key: integer, minutes: integer}
links:
  appointments_day: {from: appointments.day_key, to: days.day_key}
  appointments_end_day: {from: appointments.end_day_key, to: days.day_key, standby: true}
  appointments_clinic: {from: appointments.clinic_key, to: clinics.clinic_key}
measures:
  appointment_count: {table: appointments, expr: count(*)}
  ended_count: {table: appointments, expr: count(*), use: [appointments_end_day]}
reports:
  visits_by_city: {measures: [appointment_count, ended_count], by: [clinics.city]}
"""


def findings(text: str):
    result = load_files([(NAME, text.encode())])
    return check_model(result.model, result.findings)


def rules(text: str) -> list[tuple[str, str]]:
    return [(f.rule, f.subject) for f in findings(text)]


def test_the_clinic_model_checks_clean():
    assert rules(CLINIC) == []


# --- root cause first ---------------------------------------------------------------------------------

STANDBY_YES = CLINIC.replace("to: days.day_key, standby: true}", "to: days.day_key, standby: yes}")


def test_a_yaml_1_1_boolean_says_it_is_not_one_and_what_to_write():
    (first, *rest) = findings(STANDBY_YES)
    assert (first.rule, first.subject) == ("invalid-model", "links.appointments_end_day.standby")
    assert "yes is not a boolean in this format; write true" in first.message
    assert "reads yes as text, so it counts as false" in first.message


def test_no_and_off_say_write_false():
    for word in ("no", "Off", "N"):
        text = CLINIC.replace("standby: true}", f"standby: {word}}}")
        reading = [f for f in findings(text) if f.rule == "invalid-model"]
        assert len(reading) == 1 and f"{word} is not a boolean in this format; write false" in reading[0].message


def test_a_real_boolean_or_another_word_gets_no_such_message():
    assert rules(CLINIC) == []  # standby: true
    (reading,) = [f for f in findings(CLINIC.replace("standby: true}", "standby: maybe}")) if f.rule == "invalid-model"]
    assert "expected true or false" in reading.message and "not a boolean in this format" not in reading.message


def test_the_reading_problem_comes_before_the_duplicate_link_it_causes():
    # standby: yes counts as false, so the two day links are both live: a duplicate-live-link error follows
    found = rules(STANDBY_YES)
    assert found[0] == ("invalid-model", "links.appointments_end_day.standby")
    assert found.index(("invalid-model", "links.appointments_end_day.standby")) < \
        [r for r, _ in found].index(next(r for r, _ in found if r.startswith("duplicate-")))


def test_without_a_reading_problem_the_duplicate_link_comes_first():
    found = rules(CLINIC.replace("to: days.day_key, standby: true}", "to: days.day_key}"))
    assert found[0][0].startswith("duplicate-") and "invalid-model" not in [r for r, _ in found]


def test_a_broken_reference_comes_before_other_errors_and_after_reading_problems():
    text = STANDBY_YES.replace("by: [clinics.city]", "by: [clinics.town]")
    found = [r for r, _ in rules(text)]
    assert found[:2] == ["invalid-model", "broken-reference"]
    assert any(r.startswith("duplicate-") for r in found[2:])
