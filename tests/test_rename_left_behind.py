"""Half-followed renames (issue 9, point 9): the rename is reported, and each reference left behind is a
`reference.broken` that says so ("renamed to X; report R still uses the old name"), never a removal plus an
addition. Each case has a twin where every reference follows: one safe rename, no reference.broken.
"""

from __future__ import annotations

import dataclasses

from modeldiff import impact
from modeldiff.check import check_model

from modelkit import bikeshare, edit, measure, ov, rename, report, role

BASE = bikeshare()


def analyse(old, new):
    return impact.analyse(old, new)


def kinds(result) -> list[tuple[str, str]]:
    return sorted((c.kind, c.subject) for c in result.changes)


def only(result, kind: str, subject: str):
    (found,) = [c for c in result.changes if (c.kind, c.subject) == (kind, subject)]
    return found


def _with_reports(m, old_name: str, new_name: str, *followers: str):
    """`m` with `old_name` replaced by `new_name` in the measures of the named reports."""
    return edit(m, *(dataclasses.replace(m.reports[r], measures=tuple(new_name if x == old_name else x
                                                                      for x in m.reports[r].measures))
                     for r in followers))


def _measure_half_renamed():
    """trip_count -> trips_made: weekly_fares and the derived measure follow, east_count does not."""
    old = edit(BASE, report("east_count", "trip_count", "districts.name"))
    new = rename(old, "measures", "trip_count", "trips_made")
    new = edit(new, measure("revenue_per_trip", "fare_revenue / nullif(trips_made, 0)"))
    return old, _with_reports(new, "trip_count", "trips_made", "weekly_fares")


def test_a_half_followed_measure_rename_is_a_rename_and_a_broken_reference_that_names_both():
    old, new = _measure_half_renamed()
    r = analyse(old, new)
    assert kinds(r) == [("measure.renamed", "measures.trips_made"), ("reference.broken", "reports.east_count")]
    renamed = only(r, "measure.renamed", "measures.trips_made")
    assert (renamed.before, renamed.after, renamed.severity) == ("trip_count", "trips_made", "breaking")
    assert renamed.details["left_behind"] == ["reports.east_count"]
    broken = only(r, "reference.broken", "reports.east_count")
    assert broken.severity == "breaking"
    assert "renamed to trips_made" in broken.message and "report east_count still uses the old name" in broken.message
    assert broken.details["renamed"] == "measures.trips_made"
    assert [i.name for i in r.reports] == ["east_count", "weekly_fares"]  # weekly_fares: it shows a renamed measure
    assert r.exit_code == 3


def test_a_fully_followed_measure_rename_has_no_broken_reference():
    old, new = _measure_half_renamed()
    new = _with_reports(new, "trip_count", "trips_made", "east_count")
    r = analyse(old, new)
    assert kinds(r) == [("measure.renamed", "measures.trips_made")]
    assert "left_behind" not in only(r, "measure.renamed", "measures.trips_made").details


def test_a_derived_measure_left_behind_is_a_broken_reference_and_not_a_logic_change():
    new = rename(BASE, "measures", "trip_count", "trips_made")
    new = _with_reports(new, "trip_count", "trips_made", "weekly_fares")  # revenue_per_trip still names trip_count
    r = analyse(BASE, new)
    assert kinds(r) == [("measure.renamed", "measures.trips_made"), ("reference.broken", "measures.revenue_per_trip")]
    assert "measure revenue_per_trip still uses the old name" in only(r, "reference.broken", "measures.revenue_per_trip").message


def test_a_derived_measure_that_follows_is_not_a_broken_reference():
    new = rename(BASE, "measures", "trip_count", "trips_made")
    new = _with_reports(new, "trip_count", "trips_made", "weekly_fares")
    new = edit(new, measure("revenue_per_trip", "fare_revenue / nullif(trips_made, 0)"))
    r = analyse(BASE, new)
    assert [k for k, _ in kinds(r)] == ["measure.renamed"]


def test_a_table_rename_left_behind_by_a_role_filter():
    old = edit(BASE, role("station_staff", {"stations": "name = 'Harbour'"}))
    new = rename(old, "tables", "stations", "docks")
    new = edit(new, dataclasses.replace(new.links["stations_district"], from_table="docks"),
               dataclasses.replace(new.links["trips_start_station"], to_table="docks"))
    r = analyse(old, new)
    structural = [(k, s) for k, s in kinds(r) if not k.startswith(("path.", "security.", "ambiguity."))]
    assert structural == [("reference.broken", "roles.station_staff"), ("table.renamed", "tables.docks")]
    assert "Table stations was renamed to docks; role station_staff still uses the old name" in \
        only(r, "reference.broken", "roles.station_staff").message
    assert not [c for c in r.changes if c.kind == "role.filter_changed"]


def test_a_table_rename_that_the_role_follows_has_no_broken_reference():
    old = edit(BASE, role("station_staff", {"stations": "name = 'Harbour'"}))
    new = rename(old, "tables", "stations", "docks")
    new = edit(new, dataclasses.replace(new.links["stations_district"], from_table="docks"),
               dataclasses.replace(new.links["trips_start_station"], to_table="docks"),
               role("station_staff", {"docks": "name = 'Harbour'"}))
    assert kinds(analyse(old, new)) == [("table.renamed", "tables.docks")]


def test_a_link_rename_left_behind_by_one_of_two_users():
    old = edit(BASE, report("returns_two_way", "trip_count", overrides=ov(trips_end_day="two-way")))
    new = rename(old, "links", "trips_end_day", "trips_return_day")
    new = edit(new, measure("trips_by_end_day", "count(*)", "trips", overrides=ov("trips_return_day")))
    r = analyse(old, new)
    structural = [(k, s) for k, s in kinds(r) if k.startswith(("link.", "reference.", "report.", "measure."))]
    assert structural == [("link.renamed", "links.trips_return_day"), ("reference.broken", "reports.returns_two_way")]
    assert only(r, "link.renamed", "links.trips_return_day").severity == "breaking"


def test_a_link_rename_both_users_follow_is_one_safe_change():
    old = edit(BASE, report("returns_two_way", "trip_count", overrides=ov(trips_end_day="two-way")))
    new = rename(old, "links", "trips_end_day", "trips_return_day")
    new = edit(new, measure("trips_by_end_day", "count(*)", "trips", overrides=ov("trips_return_day")),
               report("returns_two_way", "trip_count", overrides=ov(trips_return_day="two-way")))
    r = analyse(old, new)
    assert kinds(r) == [("link.renamed", "links.trips_return_day")]
    assert only(r, "link.renamed", "links.trips_return_day").severity == "safe"


def test_variant_and_role_renames_left_behind_by_a_report():
    old = edit(BASE, report("east_repairs", "repair_cost", "districts.name", variant={"attribution": "current"},
                            role="east_district_lead"))
    new = rename(rename(old, "variants", "attribution", "assignment"), "roles", "east_district_lead", "east_lead")
    new = edit(new, dataclasses.replace(new.reports["repair_costs_current"], variant={"assignment": "current"}),
               dataclasses.replace(new.reports["east_overview"], role="east_lead"))
    r = analyse(old, new)
    assert kinds(r) == [("reference.broken", "reports.east_repairs"), ("reference.broken", "reports.east_repairs"),
                        ("role.renamed", "roles.east_lead"), ("variant.renamed", "variants.assignment")]
    messages = sorted(c.message for c in r.changes if c.kind == "reference.broken")
    assert messages[0].startswith("Role east_district_lead was renamed to east_lead; report east_repairs")
    assert messages[1].startswith("Variant attribution was renamed to assignment; report east_repairs")


def test_variant_and_role_renames_followed_by_every_report():
    old = edit(BASE, report("east_repairs", "repair_cost", "districts.name", variant={"attribution": "current"},
                            role="east_district_lead"))
    new = rename(rename(old, "variants", "attribution", "assignment"), "roles", "east_district_lead", "east_lead")
    new = edit(new, dataclasses.replace(new.reports["repair_costs_current"], variant={"assignment": "current"}),
               dataclasses.replace(new.reports["east_overview"], role="east_lead"),
               dataclasses.replace(new.reports["east_repairs"], variant={"assignment": "current"}, role="east_lead"))
    assert kinds(analyse(old, new)) == [("role.renamed", "roles.east_lead"), ("variant.renamed", "variants.assignment")]


def test_another_broken_reference_of_a_left_behind_report_keeps_its_own_wording():
    old, new = _measure_half_renamed()
    new = edit(new, dataclasses.replace(new.reports["east_count"], by=("districts.nickname",)))
    r = analyse(old, new)
    messages = sorted(c.message for c in r.changes if c.kind == "reference.broken")
    assert len(messages) == 2
    assert any("districts.nickname" in m for m in messages)
    assert any("renamed to trips_made" in m for m in messages)


def test_the_check_of_the_new_revision_still_finds_the_left_behind_reference():
    # the diff rewords the reference; the new revision itself is still broken, and the verdict says so
    _, new = _measure_half_renamed()
    assert [f.subject for f in check_model(new, ()) if f.rule == "broken-reference"] == ["reports.east_count"]


# --- seeded property: whatever follows, the rename is one change and each item left behind one reference.broken


def _follow(m, section: str, old: str, new: str, subject: str):
    """`m` with item `subject` naming `new` where it named `old` (a report's measures/variant/role, or a
    derived measure's expression)."""
    kind, _, name = subject.partition(".")
    if kind == "reports":
        r = m.reports[name]
        if section == "measures":
            r = dataclasses.replace(r, measures=tuple(new if x == old else x for x in r.measures))
        elif section == "variants":
            r = dataclasses.replace(r, variant={(new if v == old else v): o for v, o in r.variant.items()})
        else:
            r = dataclasses.replace(r, role=new)
        return edit(m, r)
    import re

    d = m.measures[name]
    return edit(m, dataclasses.replace(d, expr=re.sub(rf"\b{old}\b", new, d.expr)))


def _richer_base():
    extra = [report(f"extra_{i}", ["fare_revenue", "trip_count", "repair_cost"][i % 3], "districts.name",
                    variant={"attribution": "current"} if i % 2 else {}, role="east_district_lead" if i % 3 else None)
             for i in range(5)]
    return edit(BASE, *extra, measure("trips_twice", "trip_count + trip_count"))


def test_renames_with_any_subset_of_references_left_behind_seeded():
    import random

    from modeldiff.references import References

    rng = random.Random(20261203)
    base = _richer_base()
    refs = References(base)
    cases = [("measures", n) for n in ("fare_revenue", "trip_count", "repair_cost")] + \
            [("variants", "attribution"), ("roles", "east_district_lead")]
    checked = 0
    for _ in range(60):
        section, old = rng.choice(cases)
        new_name = f"{old}_v2"
        users = list(refs.referrers(section, old))
        if section == "measures":
            users = [u for u in users if u.startswith(("reports.", "measures."))]
        left = sorted(u for u in users if rng.random() < 0.4)
        changed = rename(base, section, old, new_name)
        for user in users:
            if user not in left:
                changed = _follow(changed, section, old, new_name, user)
        r = analyse(base, changed)
        noun = section[:-1]
        structural = [(c.kind, c.subject) for c in r.changes if not c.kind.startswith(("path.", "security.",
                                                                                       "ambiguity.", "warning."))]
        renamed = only(r, f"{noun}.renamed", f"{section}.{new_name}")
        broken = sorted(c.subject for c in r.changes if c.kind == "reference.broken")
        assert broken == left, (section, old, left, broken)
        assert sorted(structural) == sorted([(f"{noun}.renamed", f"{section}.{new_name}")]
                                            + [("reference.broken", s) for s in left]), structural
        if left:
            assert renamed.severity == "breaking"
        elif section != "measures":  # (a measure a report shows is breaking when renamed: changes.md, Severity)
            assert renamed.severity == "safe"
        assert renamed.details.get("left_behind", []) == left
        checked += 1
    assert checked == 60
