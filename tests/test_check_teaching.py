"""Issue 12, "check": warnings that teach. Root cause first; ambiguity only where it is read, placed at
the item whose setting causes it, with the fix that applies there; two-way links into a bridge or access
table that drop unmatched rows from grouped reports. Each "detects" test has an "absent" twin.

The models are our own clinic-appointments scenario, written for these tests.
"""

from __future__ import annotations

from modeldiff.check import check_model
from modeldiff.load import load_files

NAME = "clinic.model.yaml"


def _follow_key() -> str:
    """The key that makes a standby link carry filters: `via` where the format reads it (its first spelling
    `use` is then a deprecated alias that warns), else `use`."""
    probe = ("model: p\nformat: 1\ntables: {t: {kind: fact, key: k, columns: {k: integer}}}\n"
             "measures: {m: {table: t, expr: count(*), via: []}}\n")
    return "via" if not load_files([("p.model.yaml", probe.encode())]).findings else "use"


VIA = _follow_key()

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
  ended_count: {table: appointments, expr: count(*), VIA: [appointments_end_day]}
reports:
  visits_by_city: {measures: [appointment_count, ended_count], by: [clinics.city]}
""".replace("VIA:", f"{VIA}:")


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


# --- ambiguity: who reads it, at the item that causes it, with the fix that applies there -----------

# Shifts are staffed at a clinic: a filter on clinics reaches shifts directly and through staff. No measure
# reads shifts (none has it as home, and shifts reaches no measure's home).
SHIFTS = CLINIC.replace("links:\n", """\
  staff: {kind: dimension, key: staff_key, columns: {staff_key: integer, clinic_key: integer}}
  shifts: {kind: fact, key: shift_key, columns: {shift_key: integer, staff_key: integer, clinic_key: integer}}
links:
  staff_clinic: {from: staff.clinic_key, to: clinics.clinic_key}
  shifts_staff: {from: shifts.staff_key, to: staff.staff_key}
  shifts_clinic: {from: shifts.clinic_key, to: clinics.clinic_key}
""")
SHIFT_COUNT = "  shift_count: {table: shifts, expr: count(*)}\n"


def ambiguities(text: str):
    return [f for f in findings(text) if f.rule == "ambiguous-paths"]


def test_an_ambiguous_pair_no_measure_reads_is_reported_and_says_so():
    # The contract (docs/meaning.md, check rules) reports every ambiguous pair of every setting; the message
    # tells the reviewer that no number depends on it yet, rather than hiding it.
    (found,) = ambiguities(SHIFTS)
    assert found.subject == "paths.clinics->shifts"
    assert "no measure computed in this setting reads it yet" in found.message and "reads it." not in found.message


def test_an_ambiguous_pair_a_measure_reads_is_reported_at_a_link_of_its_routes():
    text = SHIFTS.replace("measures:\n", "measures:\n" + SHIFT_COUNT)
    (found,) = ambiguities(text)
    model = load_files([(NAME, text.encode())]).model
    assert found.subject == "paths.clinics->shifts"
    link = next(x for x in ("shifts_clinic", "shifts_staff", "staff_clinic") if f"Put link {x} on standby" in found.message)
    assert found.pos == model.pos(f"links.{link}") and found.pos != model.pos("tables.shifts")
    assert "measure shift_count reads it" in found.message


# A measure on clinics that follows the staff link and lets appointments filter clinics and staff:
# days then reach clinics along two routes, in that measure's setting only.
STAFFED = CLINIC.replace("links:\n", """\
  staff: {kind: dimension, key: staff_key, columns: {staff_key: integer, clinic_key: integer}}
links:
  staff_clinic: {from: staff.clinic_key, to: clinics.clinic_key, standby: true}
""").replace("  appointments:\n    kind: fact", "  appointments:\n    kind: fact").replace(
    "clinic_key: integer, minutes: integer}", "clinic_key: integer, staff_key: integer, minutes: integer}").replace(
    "  appointments_clinic:", "  appointments_staff: {from: appointments.staff_key, to: staff.staff_key}\n"
                              "  appointments_clinic:")
OVERRIDES = f"{VIA}: [staff_clinic], flow: {{appointments_clinic: two-way, appointments_staff: two-way}}"


def test_an_ambiguity_of_a_measure_s_setting_is_placed_at_that_measure_with_its_fix():
    text = STAFFED.replace("measures:\n", f"measures:\n  clinics_seen: {{table: clinics, expr: count(*), {OVERRIDES}}}\n")
    found = ambiguities(text)
    model = load_files([(NAME, text.encode())]).model
    assert found and "paths.days->staff" in [f.subject for f in found]
    for f in found:
        assert "in measure clinics_seen's setting" in f.message and "measure clinics_seen reads it" in f.message
        assert "on measure clinics_seen" in f.message and "`flow: {" in f.message and ": off}`" in f.message
        assert f.pos == model.pos("measures.clinics_seen")


def test_the_same_setting_on_a_measure_that_does_not_read_the_target_says_no_measure_reads_it():
    text = STAFFED.replace("measures:\n", f"measures:\n  days_seen: {{table: days, expr: count(*), {OVERRIDES}}}\n")
    found = ambiguities(text)
    assert found and all("no measure computed in this setting reads it yet" in f.message for f in found)
    assert not any("measure days_seen reads it" in f.message for f in found)
    assert {r for r, _ in rules(text)} == {"ambiguous-paths"}  # and nothing else


# --- two-way out of a bridge or an access table -------------------------------------------------------

# Appointments have zero, one or several diagnoses through a bridge. The bridge's link to appointments made
# two-way lets a filter on diagnoses reach appointments, so grouping by diagnosis keeps only appointments
# that have one; and since clinics reach appointments, then the bridge, and come back, grouping by clinic
# drops the appointments without a diagnosis as well (semantics.md section 5; issue 9, routes that return).
DIAGNOSED = CLINIC.replace("links:\n", """\
  diagnoses: {kind: dimension, key: diagnosis_key, columns: {diagnosis_key: integer, name: text}}
  appointment_diagnoses:
    kind: bridge
    key: [appointment_key, diagnosis_key]
    columns: {appointment_key: integer, diagnosis_key: integer}
links:
  appointment_diagnoses_appointment: {from: appointment_diagnoses.appointment_key, to: appointments.appointment_key, flow: two-way}
  appointment_diagnoses_diagnosis: {from: appointment_diagnoses.diagnosis_key, to: diagnoses.diagnosis_key}
""").replace("reports:\n", """\
reports:
  visits_by_diagnosis: {measures: [appointment_count], by: [diagnoses.name]}
  visits_in_total: {measures: [appointment_count]}
""")


def drops(text: str):
    return [f for f in findings(text) if f.rule == "two-way-drops-unmatched"]


def test_a_two_way_link_out_of_a_bridge_names_the_reports_and_measures_that_lose_rows():
    (found,) = drops(DIAGNOSED)
    model = load_files([(NAME, DIAGNOSED.encode())]).model
    assert (found.subject, found.severity) == ("links.appointment_diagnoses_appointment", "warning")
    assert found.pos == model.pos("links.appointment_diagnoses_appointment")
    assert "report visits_by_diagnosis (appointment_count)" in found.message
    assert "report visits_by_city (appointment_count, ended_count)" in found.message  # the route that comes back
    assert "visits_in_total" not in found.message  # no group, no condition: nothing drops
    assert "`(no match)`" in found.message
    assert "Keep appointment_diagnoses_appointment one-way" in found.message
    assert "`flow: {appointment_diagnoses_appointment: one-way}` on the reports" in found.message


def test_a_one_way_link_out_of_a_bridge_drops_nothing():
    assert drops(DIAGNOSED.replace("appointments.appointment_key, flow: two-way}", "appointments.appointment_key}")) == []


def test_a_report_that_turns_the_link_one_way_is_not_named():
    text = DIAGNOSED.replace("by: [diagnoses.name]}",
                             "by: [diagnoses.name], flow: {appointment_diagnoses_appointment: one-way}}")
    (found,) = drops(text)
    assert "visits_by_diagnosis" not in found.message and "visits_by_city" in found.message


def test_the_same_two_way_link_between_a_fact_and_a_dimension_is_not_this_warning():
    text = DIAGNOSED.replace("    kind: bridge\n", "    kind: fact\n")
    assert drops(text) == []


def test_a_two_way_link_out_of_an_access_table_is_said_too():
    text = CLINIC.replace("links:\n", """\
  clinic_access:
    kind: access
    key: [staff_email, clinic_key]
    columns: {staff_email: text, clinic_key: integer}
links:
  clinic_access_clinic: {from: clinic_access.clinic_key, to: clinics.clinic_key, flow: two-way}
""").replace("reports:\n", "reports:\n  visits_by_staff: {measures: [appointment_count], by: [clinic_access.staff_email]}\n")
    (found,) = drops(text)
    assert "access table clinic_access" in found.message and "report visits_by_staff (appointment_count)" in found.message
    # the row-security pattern (the flow both ways so that security crosses it too) is left out
    secured = text.replace("to: clinics.clinic_key, flow: two-way}", "to: clinics.clinic_key, flow: two-way, "
                                                                       "security_flow: two-way}")
    assert drops(secured) == []


def test_a_model_without_reports_is_quiet_about_it():
    text = DIAGNOSED[:DIAGNOSED.index("reports:\n")]
    assert drops(text) == []
