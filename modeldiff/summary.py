"""Summaries by cause: each structural change of a diff with the derived changes and impacts that follow from it.

One grouping (`causes`) feeds every output that summarises a diff: the text
of `diff` and of the hook, the Markdown of `diff` and of the notes, and the
HTML report. It reads the records of a `DiffResult` and re-derives nothing:

- a *structural* change is one of the model's own items (a table, link,
  measure, role, report, variant); a *derived* change follows from the graph
  or the findings (`path.*`, `ambiguity.*`, `security.*`, `reference.*`).
- A derived path or ambiguity change goes under the change of one of the
  links its `details.links` names (the most severe such change, then the
  first by id); a security change under a change of its role, else of a link
  on its restriction's paths; a `reference.*` change under a change of the
  same subject. One that none explains goes under a group of its own
  (`Cause.change` None: "other derived changes").
- An impacted measure, role or report goes under every cause its reasons
  name (a reason naming a derived change counts for that change's cause), so
  a measure moved by two changes is counted under both.
- Causes are ordered most severe first (the worst of the change, its derived
  changes and its impacts), then by how much follows from them, then by id.
  Counts per table are the impacted measures per home table (a derived
  measure, without a table, counts under "derived measures"); counts per owner
  are the impacted measures and reports per `owner` (unowned ones are not
  counted).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Sequence

from modeldiff.changes import Change, id_order, rank, worst

DERIVED_PREFIXES = ("path.", "ambiguity.", "security.", "reference.")
DERIVED_MEASURES = "derived measures"  # the bucket of impacted measures without a home table
# how a derived change kind is counted in a headline: (singular, plural)
_COUNT_WORDS = {
    "path.added": ("new path", "new paths"),
    "path.removed": ("path gone", "paths gone"),
    "ambiguity.introduced": ("ambiguity", "ambiguities"),
    "ambiguity.resolved": ("ambiguity resolved", "ambiguities resolved"),
    "security.exposed": ("exposure", "exposures"),
    "security.tightened": ("tightened restriction", "tightened restrictions"),
    "security.rerouted": ("rerouted restriction", "rerouted restrictions"),
}
TITLE_LIMIT = 160  # characters of a change's message used as a cause's title


@dataclass(frozen=True)
class Cause:
    """A structural change (None: derived changes nothing in the diff explains) and what follows from it."""

    change: Change | None
    derived: tuple[Change, ...]
    measures: tuple  # impact.Impact records
    roles: tuple
    reports: tuple
    severity: str
    tables: tuple[tuple[str, int], ...]  # (home table, impacted measures), most first
    owners: tuple[tuple[str, int], ...]  # (owner, impacted measures and reports), most first

    @property
    def id(self) -> str:
        return self.change.id if self.change is not None else ""

    @property
    def size(self) -> int:
        return len(self.derived) + len(self.measures) + len(self.roles) + len(self.reports)


def is_derived(change: Change) -> bool:
    return change.kind.startswith(DERIVED_PREFIXES)


def _link_of(change: Change) -> str | None:
    section, _, rest = change.subject.partition(".")
    return rest.split(".")[0] if section == "links" and rest else None


def _best(candidates: Iterable[Change]) -> Change | None:
    """The most severe change, then the first by id."""
    return min(candidates, key=lambda c: (-rank(c.severity), id_order(c.id)), default=None)


def _flat_names(value) -> set[str]:
    """Every string inside a JSON-ready value (lists of paths of link names)."""
    if isinstance(value, str):
        return {value}
    if isinstance(value, (list, tuple)):
        return {name for item in value for name in _flat_names(item)}
    return set()


def _root_of(change: Change, by_link: dict[str, list[Change]], by_subject: dict[str, list[Change]]) -> Change | None:
    """The structural change a derived change is grouped under (see the module docstring), or None."""
    kind = change.kind
    if kind.startswith(("path.", "ambiguity.")):
        links = change.details.get("links") or ()
        return _best(c for link in sorted(links) for c in by_link.get(link, ()))
    if kind.startswith("security."):
        parts = change.subject.split(".")
        role = by_subject.get(f"roles.{parts[1]}", ()) if len(parts) > 1 else ()
        if role:
            return _best(role)
        links = _flat_names(change.before) | _flat_names(change.after)
        return _best(c for link in sorted(links) for c in by_link.get(link, ()))
    return _best(by_subject.get(change.subject, ()))


def _counted(names: Iterable[str]) -> tuple[tuple[str, int], ...]:
    counts: dict[str, int] = {}
    for name in names:
        counts[name] = counts.get(name, 0) + 1
    return tuple(sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])))


def lookup(result, section: str, name: str):
    """An item of the new revision, else of the old (an impacted item may be gone), else None."""
    for model in (result.new, result.old):
        found = getattr(model, section, {}).get(name)
        if found is not None:
            return found
    return None


def causes(result) -> tuple[Cause, ...]:
    """The changes of a `DiffResult` grouped by cause, most severe first (see the module docstring)."""
    changes = tuple(result.changes)
    roots = [c for c in changes if not is_derived(c)]
    by_link: dict[str, list[Change]] = {}
    by_subject: dict[str, list[Change]] = {}
    for c in roots:
        by_subject.setdefault(c.subject, []).append(c)
        link = _link_of(c)
        if link is not None:
            by_link.setdefault(link, []).append(c)
    root_of: dict[str, str] = {c.id: c.id for c in roots}  # change id -> id of its cause ("" for none)
    derived: dict[str, list[Change]] = {c.id: [] for c in roots}
    derived[""] = []
    for c in changes:
        if is_derived(c):
            root = _root_of(c, by_link, by_subject)
            key = root.id if root is not None else ""
            root_of[c.id] = key
            derived[key].append(c)
    impacts: dict[str, tuple[list, list, list]] = {key: ([], [], []) for key in derived}
    for index, items in enumerate((result.measures, result.roles, result.reports)):
        for item in items:
            keys = {root_of.get(getattr(r, "change", ""), "") for r in getattr(item, "reasons", ())}
            for key in sorted(keys):
                impacts.setdefault(key, ([], [], []))[index].append(item)
    by_id = {c.id: c for c in roots}
    out = []
    for key, (measures, roles, reports) in impacts.items():
        change = by_id.get(key)
        if change is None and not derived[key] and not (measures or roles or reports):
            continue
        severity = worst([c.severity for c in derived[key]] + [i.severity for i in measures + roles + reports]
                         + ([change.severity] if change is not None else []))
        homes = []
        owners = []
        for m in measures:
            if m.home is not None:  # recorded by the analysis: the model need not be read again
                home, owner = m.home, m.owner
            else:
                record = lookup(result, "measures", m.name)
                home = record.table if record is not None else None
                owner = record.owner if record is not None else None
            homes.append(home or DERIVED_MEASURES)
            if owner:
                owners.append(owner)
        for rep in reports:
            if rep.home is None:
                record = lookup(result, "reports", rep.name)
                owner = record.owner if record is not None else None
            else:
                owner = rep.owner
            if owner:
                owners.append(owner)
        out.append(Cause(change, tuple(derived[key]), tuple(measures), tuple(roles), tuple(reports), severity,
                         _counted(homes), _counted(owners)))
    return tuple(sorted(out, key=lambda c: (-rank(c.severity), -c.size, c.change is None, id_order(c.id))))


# --- words ------------------------------------------------------------------------------------------


def _plural(n: int, words: tuple[str, str]) -> str:
    return f"{n} {words[0] if n == 1 else words[1]}"


def title(cause: Cause) -> str:
    """What the cause is, in a few words: the change's id, kind and subject, and its message's first sentence."""
    if cause.change is None:
        return "other derived changes (no structural change of this diff explains them)"
    c = cause.change
    sentence = c.message.split(". ")[0].rstrip(".")
    if len(sentence) > TITLE_LIMIT:
        sentence = sentence[:TITLE_LIMIT - 1].rstrip() + "…"
    return f"{c.id} {c.kind} {c.subject}: {sentence}"


def consequences(cause: Cause, result=None) -> str:
    """What follows, counted: '17 new paths, 3 ambiguities, 212 measures in 4 tables (2 fact), 1 role, 3 reports'."""
    parts = []
    kinds: dict[str, int] = {}
    for c in cause.derived:
        if c.kind == "path.added" and isinstance(c.after, (list, tuple)):
            kinds[c.kind] = kinds.get(c.kind, 0) + len(c.after)
        elif c.kind == "path.removed" and isinstance(c.before, (list, tuple)):
            kinds[c.kind] = kinds.get(c.kind, 0) + len(c.before)
        else:
            kinds[c.kind] = kinds.get(c.kind, 0) + 1
    for kind in sorted(kinds, key=lambda k: (list(_COUNT_WORDS).index(k) if k in _COUNT_WORDS else 99, k)):
        parts.append(_plural(kinds[kind], _COUNT_WORDS.get(kind, (kind, kind))))
    if cause.measures:
        tables = [t for t, _ in cause.tables if t != DERIVED_MEASURES]
        text = _plural(len(cause.measures), ("measure", "measures"))
        if tables:
            text += f" in {_plural(len(tables), ('table', 'tables'))}" + _kinds_of(tables, result, cause.measures)
        parts.append(text)
    if cause.roles:
        parts.append(_plural(len(cause.roles), ("role", "roles")))
    if cause.reports:
        parts.append(_plural(len(cause.reports), ("report", "reports")))
    return ", ".join(parts) if parts else "nothing else follows"


def _kinds_of(tables: Sequence[str], result, measures: Sequence = ()) -> str:
    """' (3 fact, 1 dimension)' from what the analysis recorded on the measures, else from the models, or ''."""
    if result is None:
        return ""
    recorded = {m.home: m.home_kind for m in measures if m.home}
    kinds: dict[str, int] = {}
    for table in tables:
        if table in recorded:
            kind = recorded[table]
        else:
            record = lookup(result, "tables", table)
            kind = getattr(record, "kind", None) if record is not None else None
        if kind:
            kinds[kind] = kinds.get(kind, 0) + 1
    return f" ({', '.join(f'{n} {k}' for k, n in sorted(kinds.items(), key=lambda kv: (-kv[1], kv[0])))})" if kinds else ""


def headline(cause: Cause, result=None) -> str:
    """One line: the cause's title, then what follows from it."""
    return f"{title(cause)} — {consequences(cause, result)}"


def top_counts(counts: Sequence[tuple[str, int]], limit: int = 5) -> str:
    """'fact_1 12, fact_7 9, … (4 more)': the largest counts first."""
    shown = ", ".join(f"{name} {n}" for name, n in counts[:limit])
    rest = len(counts) - limit
    return shown + (f", … ({rest} more)" if rest > 0 else "")


def detail_lines(cause: Cause) -> list[str]:
    """The counts per table and per owner of a cause, a line each when there are any."""
    lines = []
    if cause.tables:
        lines.append(f"measures per table: {top_counts(cause.tables)}")
    if cause.owners:
        lines.append(f"per owner: {top_counts(cause.owners)}")
    return lines


def check_grouping(result) -> list[str]:
    """What is wrong with `causes(result)` (for tests and campaigns): empty when every rule of the module holds."""
    found = causes(result)
    problems = []
    derived = [c.id for cause in found for c in cause.derived]
    expected = sorted(c.id for c in result.changes if is_derived(c))
    if sorted(derived) != expected:
        problems.append(f"derived changes grouped {sorted(derived)}, expected each of {expected} once")
    roots = [cause.change.id for cause in found if cause.change is not None]
    if sorted(roots) != sorted(c.id for c in result.changes if not is_derived(c)):
        problems.append("not every structural change is a cause of its own")
    ranks = [rank(cause.severity) for cause in found]
    if ranks != sorted(ranks, reverse=True):
        problems.append("causes are not ordered most severe first")
    for cause in found:
        own = [c.severity for c in cause.derived] + ([cause.change.severity] if cause.change is not None else [])
        if rank(cause.severity) < max((rank(s) for s in own), default=0):
            problems.append(f"cause {cause.id} is less severe than what it holds")
    for index, section in enumerate(("measures", "roles", "reports")):
        for item in getattr(result, section):
            under = sum(item in getattr(cause, section) for cause in found)
            names = {getattr(r, "change", "") for r in item.reasons}
            if not under or under > len(names):
                problems.append(f"{section[:-1]} {item.name} is under {under} causes for {len(names)} reasons")
    return problems
