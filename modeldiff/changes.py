"""Change records: the one shape every output (text, JSON, Markdown, hook, notes) is fed from."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping

# Ordered: the verdict of a whole diff is the maximum.
SEVERITIES = ("safe", "numbers", "breaking")
_RANK = {name: rank for rank, name in enumerate(SEVERITIES)}
EXIT_CODES = {"safe": 0, "numbers": 1, "breaking": 3}


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

    def sort_key(self) -> tuple:
        return (self.subject, self.kind, repr(self.before), repr(self.after))
