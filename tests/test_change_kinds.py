"""changes.KINDS: the one registry of change kinds with their default severity, checked where a Change is made."""
import pytest

from modeldiff import changes, diff
from modeldiff.changes import KINDS, SEVERITIES, Change, subject_item, subject_member


def test_every_registered_kind_is_made_at_every_severity():
    for kind in KINDS:
        for severity in SEVERITIES:
            assert Change(kind, "tables.t", severity, "m").kind == kind


@pytest.mark.parametrize("kind, severity", [("table.vanished", "safe"), ("table.added", "minor"), ("", "safe")])
def test_an_unknown_kind_or_severity_is_refused_where_the_change_is_made(kind, severity):
    with pytest.raises(ValueError, match="changes.KINDS"):
        Change(kind, "tables.t", severity, "m")


def test_every_default_severity_is_a_severity():
    assert set(KINDS.values()) <= set(SEVERITIES)


def test_the_structural_kinds_are_diffs_and_the_rest_derived():
    assert diff.KINDS == changes.STRUCTURAL_KINDS
    derived = set(KINDS) - set(changes.STRUCTURAL_KINDS)
    assert derived == {"path.added", "path.removed", "ambiguity.introduced", "ambiguity.resolved", "security.exposed",
                       "security.tightened", "security.rerouted", "reference.broken", "warning.added"}


def test_a_subject_names_its_item_and_member():
    assert (subject_item("tables.trips.columns.fare"), subject_member("tables.trips.columns.fare")) == ("trips", "fare")
    assert (subject_item("roles.east.tables.depots"), subject_member("roles.east.tables.depots")) == ("east", "depots")
    assert subject_item("links.trips_bike") == "trips_bike"
