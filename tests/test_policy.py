"""modeldiff.policy: `.modeldiff.yaml` read strictly, and what blocks, what is acknowledged, whom to tell."""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import pytest

from modeldiff import policy as pol
from modeldiff.model import Finding, Report
from modeldiff.policy import Item, Policy, PolicyError


def one_line_error(text: str) -> str:
    with pytest.raises(PolicyError) as exc:
        pol.parse_policy(text, "abc:.modeldiff.yaml")
    message = str(exc.value)
    assert "\n" not in message
    return message


# --- reading --------------------------------------------------------------------------------------


def test_an_empty_policy_is_the_default_one():
    for text in ("", "# nothing yet\n"):
        parsed = pol.parse_policy(text, "x")
        assert (parsed.block, parsed.accept, parsed.owners) == (("breaking",), (), ())


def test_every_key_is_read():
    parsed = pol.parse_policy(
        "block: [breaking, numbers]\naccept:\n  - links.trips_bike\n  - 'paths.calendar->*'\n"
        "owners:\n  weekly_fares: finance\n  'station_*': [operations, stock]\n", "p")
    assert parsed.block == ("numbers", "breaking")
    assert parsed.accept == ("links.trips_bike", "paths.calendar->*")
    assert parsed.owners == (("weekly_fares", ("finance",)), ("station_*", ("operations", "stock")))
    assert parsed.source == "p"


def test_block_empty_never_blocks():
    assert not pol.parse_policy("block: []\n").blocks("breaking")
    assert pol.parse_policy("accept: []\n").blocks("breaking")


def test_an_unknown_key_is_an_error_with_its_position_and_the_known_keys():
    message = one_line_error("block: [breaking]\nblok: [numbers]\n")
    assert message.startswith("abc:.modeldiff.yaml:2:1: unknown key 'blok'")
    assert "accept, block, owners" in message


def test_known_keys_alone_are_no_error():
    pol.parse_policy("block: [breaking]\naccept: []\nowners: {}\n")


@pytest.mark.parametrize("text, expected", [
    ("block: [breaking, fatal]\n", "1:19: unknown severity 'fatal'"),
    ("block: breaking\n", "1:8: 'block' must be a list"),
    ("accept: [links.trips_bike, 3]\n", "1:28: item 2 of 'accept'"),
    ("owners: [finance]\n", "1:9: 'owners' must map report names"),
    ("owners: {weekly_fares: [finance, 2]}\n", "the owner of 'weekly_fares' must be a team name"),
    ("- block\n", "must be a mapping"),
    ("block: [breaking\n", "abc:.modeldiff.yaml:"),  # a YAML syntax error, from the model reader
    ("block: []\nblock: [numbers]\n", "duplicate key 'block'"),
])
def test_a_value_of_the_wrong_shape_is_an_error_naming_where(text, expected):
    assert expected in one_line_error(text)


def test_accept_matches_globs_and_only_them():
    policy = Policy(accept=("links.trips_bike", "paths.calendar->*"))
    assert policy.accepts("links.trips_bike") and policy.accepts("paths.calendar->stock_levels")
    assert not policy.accepts("links.trips_rider") and not policy.accepts("paths.bikes->stations")


def test_teams_for_collects_every_matching_pattern_once():
    policy = Policy(owners=(("station_*", ("operations",)), ("*", ("operations", "analytics"))))
    assert policy.teams_for("station_stock") == ("operations", "analytics")
    assert Policy(owners=(("station_*", ("operations",)),)).teams_for("weekly_fares") == ()


# --- what blocks ------------------------------------------------------------------------------------


def item(subject: str, severity: str = "breaking") -> Item:
    return Item("bikeshare", subject, "measure.removed", severity, "...")


def test_blocking_keeps_blocked_severities_not_accepted():
    items = [item("measures.fare_revenue"), item("reports.weekly_fares"), item("measures.trip_count", "numbers")]
    assert pol.blocking(items, Policy()) == items[:2]
    assert pol.blocking(items, Policy(accept=("reports.*",))) == items[:1]
    assert pol.blocking(items, Policy(block=("numbers", "breaking"), accept=("measures.*",))) == items[1:2]
    assert pol.blocking(items, Policy(block=())) == []


def test_items_of_takes_changes_and_errors_of_the_new_revision():
    change = SimpleNamespace(subject="measures.fare_revenue", kind="measure.removed", severity="breaking", message="m")
    finding = Finding("broken-reference", "error", "reports.weekly_fares", "f")
    result = SimpleNamespace(new=SimpleNamespace(name="bikeshare"), old=SimpleNamespace(name="bikeshare"),
                             changes=(change,), new_errors=(finding,))
    assert pol.items_of([SimpleNamespace(result=result)]) == [
        Item("bikeshare", "measures.fare_revenue", "measure.removed", "breaking", "m"),
        Item("bikeshare", "reports.weekly_fares", "error:broken-reference", "breaking", "f"),
    ]


def test_items_of_without_errors_has_only_the_changes():
    change = SimpleNamespace(subject="measures.trip_count", kind="measure.logic_changed", severity="numbers", message="m")
    result = SimpleNamespace(new=SimpleNamespace(name="b"), old=SimpleNamespace(name="b"), changes=(change,), new_errors=())
    assert [i.kind for i in pol.items_of([SimpleNamespace(result=result)])] == ["measure.logic_changed"]


# --- acknowledgements ----------------------------------------------------------------------------------


def test_trailer_values_name_subjects_separated_by_commas_or_spaces():
    subjects, refused = pol.reviewed_subjects(["measures.fare_revenue, reports.weekly_fares", "links.trips_bike"])
    assert subjects == {"measures.fare_revenue", "reports.weekly_fares", "links.trips_bike"} and refused == ()


@pytest.mark.parametrize("value", ["*", "measures.*", "links.trips_?", "links.[ab]"])
def test_a_wildcard_in_a_trailer_is_refused(value):
    subjects, refused = pol.reviewed_subjects([f"links.trips_bike {value}"])
    assert subjects == {"links.trips_bike"} and refused == (value,)


def test_only_model_reviewed_trailers_count_whatever_their_case():
    trailers = {"Model-Reviewed": ["links.trips_bike"], "model-reviewed": ["measures.trip_count"],
                "Reviewed-by": ["measures.fare_revenue"]}
    assert pol.trailer_values(trailers) == ["links.trips_bike", "measures.trip_count"]


def test_unacknowledged_leaves_what_no_trailer_names():
    items = [item("measures.fare_revenue"), item("reports.weekly_fares")]
    assert pol.unacknowledged(items, frozenset({"measures.fare_revenue"})) == items[1:]
    assert pol.unacknowledged(items, frozenset({"measures.trip_count"})) == items


def test_trailer_lines_name_each_subject_once():
    assert pol.trailer_lines([item("b.x"), item("a.y"), item("b.x", "numbers")]) == [
        "Model-Reviewed: a.y", "Model-Reviewed: b.x"]


# --- whom to tell ----------------------------------------------------------------------------------------


def diff_with_reports(model: str, impacted: dict[str, str], owners: dict[str, str | None]):
    reports = {name: Report(name, ("trip_count",), owner=owner) for name, owner in owners.items()}
    side = SimpleNamespace(name=model, reports=reports)
    impacts = tuple(SimpleNamespace(name=n, severity=s) for n, s in impacted.items())
    return SimpleNamespace(result=SimpleNamespace(new=side, old=side, reports=impacts))


def test_policy_owners_win_and_the_report_owner_is_the_fallback():
    diff = diff_with_reports("bikeshare", {"weekly_fares": "breaking", "ride_volume": "numbers", "daily": "numbers"},
                             {"weekly_fares": "finance", "ride_volume": "operations", "daily": None})
    policy = Policy(owners=(("weekly_fares", ("controlling",)),))
    assert pol.tell_lines([diff], policy) == ["tell: controlling: weekly_fares (breaking)",
                                              "tell: operations: ride_volume (numbers)"]


def test_nobody_is_told_when_no_report_is_impacted():
    diff = diff_with_reports("bikeshare", {}, {"weekly_fares": "finance"})
    assert pol.tell_lines([diff], Policy(owners=(("*", ("everyone",)),))) == []


def test_with_several_models_reports_are_named_with_their_model():
    one = diff_with_reports("bikeshare", {"weekly_fares": "numbers"}, {"weekly_fares": "finance"})
    two = diff_with_reports("workshop", {"weekly_fares": "breaking"}, {"weekly_fares": "finance"})
    assert pol.tell_lines([one, two], Policy()) == [
        "tell: finance: bikeshare:weekly_fares (numbers), workshop:weekly_fares (breaking)"]


# --- acknowledging a link acknowledges what its change alone causes ----------------------------------

CLINIC = (Path(__file__).parent / "fixtures" / "clinic.model.yaml").read_text()
PATIENT = "appointments_patient: {from: appointments.patient_key, to: patients.patient_key}"
DOCTORS = "doctors_clinic: {from: doctors.clinic_key, to: clinics.clinic_key, standby: true}"
PATIENT_TWO_WAY = CLINIC.replace(PATIENT, PATIENT[:-1] + ", flow: two-way}")
DOCTORS_LIVE = CLINIC.replace(DOCTORS, DOCTORS.replace(", standby: true", ""))
BOTH = PATIENT_TWO_WAY.replace(DOCTORS, DOCTORS.replace(", standby: true", ""))


def clinic_items(new_text: str) -> list[Item]:
    from modeldiff.impact import analyse
    from modeldiff.load import load_files

    old, new = (load_files([("clinic.model.yaml", t)]).model for t in (CLINIC, new_text))
    return pol.items_of([SimpleNamespace(result=analyse(old, new, (), ()))])


def test_a_link_acknowledged_covers_the_paths_and_ambiguities_its_change_alone_causes():
    items = clinic_items(DOCTORS_LIVE)  # doctors_clinic off standby: clinics now reach appointments twice
    blocking = pol.blocking(items, Policy())
    derived = {i.subject for i in blocking}
    assert derived == {"paths.clinic_access->appointment_diagnoses", "paths.clinic_access->appointments",
                       "paths.clinics->appointment_diagnoses", "paths.clinics->appointments"}
    assert {i.causes for i in blocking} == {("links.doctors_clinic",)}
    reviewed = frozenset({"links.doctors_clinic"})
    assert pol.unacknowledged(blocking, reviewed) == []
    assert pol.covered(blocking, reviewed) == [(("links.doctors_clinic",), tuple(sorted(derived)))]
    (line,) = pol.covered_lines(blocking, reviewed)
    assert line == ("covered by Model-Reviewed: links.doctors_clinic (what its change alone causes): "
                    + ", ".join(sorted(derived)))
    assert pol.trailer_lines(blocking) == ["Model-Reviewed: links.doctors_clinic"]


def test_another_link_acknowledged_covers_nothing():  # twin
    blocking = pol.blocking(clinic_items(DOCTORS_LIVE), Policy())
    reviewed = frozenset({"links.appointments_patient", "links.appointments_clinic"})
    assert pol.unacknowledged(blocking, reviewed) == blocking and pol.covered(blocking, reviewed) == []


def test_a_derived_change_with_two_causes_needs_both():
    blocking = pol.blocking(clinic_items(BOTH), Policy())
    two = [i for i in blocking if i.causes == ("links.appointments_patient", "links.doctors_clinic")]
    one = [i for i in blocking if i.causes == ("links.doctors_clinic",)]
    assert {i.subject for i in two} == {"paths.clinics->patients", "paths.clinic_access->patients",
                                        "paths.clinics->invoices", "paths.clinic_access->invoices"}
    left = pol.unacknowledged(blocking, frozenset({"links.doctors_clinic"}))
    # what doctors_clinic alone causes is covered; what appointments_patient causes, alone or with it, is not
    assert left == [i for i in blocking if "links.appointments_patient" in i.causes]
    assert set(two) <= set(left) and not set(one) & set(left)
    assert pol.unacknowledged(blocking, frozenset({"links.doctors_clinic", "links.appointments_patient"})) == []
    assert one and not pol.unacknowledged(one, frozenset({"links.doctors_clinic"}))


def test_security_and_incomplete_path_changes_are_never_covered_by_a_link():
    change = SimpleNamespace(subject="paths.a->b", kind="path.added", severity="numbers", message="m",
                             details={"links": ["l"], "complete": False})
    assert pol.causes_of(change, frozenset({"links.l"})) == ()
    complete = SimpleNamespace(**{**vars(change), "details": {"links": ["l"]}})
    assert pol.causes_of(complete, frozenset({"links.l"})) == ("links.l",)
    assert pol.causes_of(complete, frozenset()) == ()  # the link itself did not change in this push
    exposed = SimpleNamespace(subject="roles.r.tables.t", kind="security.exposed", severity="breaking", message="m",
                              details={"links": ["l"]})
    assert pol.causes_of(exposed, frozenset({"links.l"})) == ()
