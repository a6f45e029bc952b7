"""Change records: the one shape every output (text, JSON, Markdown, hook, notes) is fed from."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping

# Ordered: the verdict of a whole diff is the maximum.
SEVERITIES = ("safe", "numbers", "breaking")
_RANK = {name: rank for rank, name in enumerate(SEVERITIES)}
EXIT_CODES = {"safe": 0, "numbers": 1, "breaking": 3}


# Every kind of change and its default severity (changes.md; `warning.added` is ours, docs/change-kinds.md).
# A comparator may raise or lower a change from its default where the rules of changes.md say so (a removal
# something still uses is breaking); a Change of a kind not listed here, or of an unknown severity, is refused
# where it is made. Structural kinds come from diff.py, derived ones from impact.py.
KINDS: dict[str, str] = {
    "table.added": "safe", "table.removed": "numbers", "table.renamed": "safe", "table.kind_changed": "numbers",
    "table.key_changed": "numbers", "table.natural_key_changed": "numbers", "table.history_changed": "numbers",
    "table.metadata_changed": "safe",
    "column.added": "safe", "column.removed": "numbers", "column.renamed": "safe", "column.type_changed": "numbers",
    "column.unique_changed": "numbers", "column.metadata_changed": "safe",
    "link.added": "numbers", "link.removed": "numbers", "link.renamed": "safe", "link.flow_widened": "numbers",
    "link.flow_narrowed": "numbers", "link.security_flow_changed": "numbers", "link.cardinality_changed": "numbers",
    "link.key_switched": "numbers", "link.standby_set": "numbers", "link.standby_cleared": "numbers",
    "link.metadata_changed": "safe",
    "measure.added": "safe", "measure.removed": "numbers", "measure.renamed": "safe", "measure.logic_changed": "numbers",
    "measure.cosmetic_changed": "safe", "measure.overrides_changed": "numbers", "measure.metadata_changed": "safe",
    "variant.added": "safe", "variant.removed": "numbers", "variant.renamed": "safe", "variant.changed": "numbers",
    "variant.cosmetic_changed": "safe", "variant.metadata_changed": "safe",
    "role.added": "safe", "role.removed": "numbers", "role.renamed": "safe", "role.filter_changed": "numbers",
    "role.cosmetic_changed": "safe", "role.metadata_changed": "safe",
    "report.added": "safe", "report.removed": "numbers", "report.renamed": "safe", "report.changed": "safe",
    "report.cosmetic_changed": "safe", "report.metadata_changed": "safe", "report.condition_changed": "numbers",
    # derived
    "path.added": "numbers", "path.removed": "numbers",
    "ambiguity.introduced": "breaking", "ambiguity.resolved": "numbers",
    "security.exposed": "breaking", "security.tightened": "numbers", "security.rerouted": "numbers",
    "reference.broken": "breaking",
    "warning.added": "safe",
}
STRUCTURAL_KINDS = tuple(kind for kind in KINDS if not kind.startswith(("path.", "ambiguity.", "security.",
                                                                      "reference.", "warning.")))


def rank(severity: str) -> int:
    return _RANK[severity]


def worst(severities: Iterable[str], default: str = "safe") -> str:
    """The most severe of `severities` (`default` when there are none)."""
    return max(severities, key=rank, default=default)


def id_order(change_id: str) -> tuple[int, str]:
    """Sort key of an id made of a letter and a number (`c2` before `c10`, `s2` before `s10`); others first."""
    digits = change_id[1:]
    return (int(digits), change_id) if digits.isdigit() else (0, change_id)


@dataclass(frozen=True)
class Change:
    """One classified difference between two revisions.

    `kind` is a code of changes.md (`link.flow_widened`), `subject` a dotted
    path (`links.trips_bike`), `before`/`after` JSON-ready values, `message`
    one readable sentence. `details` holds extra JSON-ready facts (witness
    paths, the history effect of a key switch, ...). `id` is given once the
    whole list is sorted (c1, c2, ...).
    """

    kind: str
    subject: str
    severity: str
    message: str
    before: Any = None
    after: Any = None
    details: Mapping[str, Any] = field(default_factory=dict)
    id: str = ""

    def __post_init__(self) -> None:
        if self.kind not in KINDS or self.severity not in _RANK:
            raise ValueError(f"a change of kind {self.kind!r} and severity {self.severity!r}: "
                             "the kind must be one of changes.KINDS and the severity one of SEVERITIES")

    def sort_key(self) -> tuple:
        return (self.subject, self.kind, repr(self.before), repr(self.after))


def subject_item(subject: str) -> str:
    """The item a subject names: `T` of `tables.T`, `tables.T.columns.C`; `R` of `roles.R.tables.T`."""
    return subject.split(".")[1]


def subject_member(subject: str) -> str:
    """The member a four-part subject names inside its item: the column `C` of `tables.T.columns.C`, the table
    `T` of a role's restriction `roles.R.tables.T` (security changes), the option `O` of `variants.V.options.O`."""
    return subject.split(".")[3]
