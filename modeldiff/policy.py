"""The push policy (`.modeldiff.yaml` at the repository root) and acknowledgements of reviewed changes.

The policy is read from the pushed commit through git, never from the disk: what is checked is what
the remote will receive. All keys are optional; an absent file means `block: [breaking]`.

    block: [breaking]                 # severities that stop a push; [] never blocks
    accept:                           # change subjects accepted for good (fnmatch globs allowed)
      - links.trips_start_station
      - "paths.calendar->*"
    owners:                           # report (name or glob) -> team(s) to tell when it is impacted
      weekly_fares: finance
      "station_*": [operations, stock]

A key it does not know, or a value of the wrong shape, is a `PolicyError` naming file:line:col: a
broken policy must never let a push through silently, so the hook blocks with that reason.

Acknowledging one push: a commit message in the pushed range carries `Model-Reviewed: SUBJECT`
trailers (several trailers, or several subjects separated by commas or spaces). A trailer names
exact subjects; wildcards are refused there (see `reviewed_subjects`).

Acknowledging a link's change also acknowledges the derived changes (`path.*`, `ambiguity.*`) that
link changes alone cause: a derived change whose `details.links` (the links with a changed edge on
its added or removed paths) are all links changed in the same push, and all acknowledged, needs no
trailer of its own (`Item.causes`). A derived change with several causes needs every one of them; one
whose path listing stopped early (`complete: false`), or of a model added whole, is never covered
this way; `security.*` changes always need their own acknowledgement.
"""

from __future__ import annotations

from dataclasses import dataclass
from fnmatch import fnmatchcase
from typing import Any, Iterable, Sequence

from modeldiff.changes import SEVERITIES, rank
from modeldiff.errors import ModeldiffError

POLICY_FILE = ".modeldiff.yaml"
TRAILER = "Model-Reviewed"
KEYS = ("accept", "block", "owners")
_GLOB_CHARS = frozenset("*?[]")
WILDCARD_REFUSED = ("a wildcard acknowledges changes nobody has read, including ones added to the push after "
                    "the review; name each subject, or put a reviewed pattern under accept: in .modeldiff.yaml")


class PolicyError(ModeldiffError):
    """`.modeldiff.yaml` cannot be read or holds something the policy does not know."""


@dataclass(frozen=True)
class Policy:
    """The repository's pre-push policy: which severities block, what is accepted, who owns which reports."""

    block: tuple[str, ...] = ("breaking",)
    accept: tuple[str, ...] = ()
    owners: tuple[tuple[str, tuple[str, ...]], ...] = ()  # (report name or glob, teams), in file order
    source: str | None = None  # e.g. "1a2b3c4d5e6f:.modeldiff.yaml"; None: no file, the defaults

    def blocks(self, severity: str) -> bool:
        return severity in self.block

    def accepts(self, subject: str) -> bool:
        return any(fnmatchcase(subject, pattern) for pattern in self.accept)

    def teams_for(self, report: str) -> tuple[str, ...]:
        teams: list[str] = []
        for pattern, names in self.owners:
            if fnmatchcase(report, pattern):
                teams += [t for t in names if t not in teams]
        return tuple(teams)


DEFAULT = Policy()


# --- reading ----------------------------------------------------------------------------------


def _where(name: str, data: Any, key: Any, index: int | None = None) -> str:
    """`name:line:col` of a key's value (or of item `index` in it) when the reader recorded it."""
    at = getattr(data, "at", None) or {}
    if key in at:
        line, col = at[key][2], at[key][3]
        value = data[key]
        item_at = getattr(value, "at", None)
        if index is not None and isinstance(item_at, list) and index < len(item_at):
            line, col = item_at[index]
        return f"{name}:{line}:{col}"
    return name


def _key_where(name: str, data: Any, key: Any) -> str:
    at = getattr(data, "at", None) or {}
    return f"{name}:{at[key][0]}:{at[key][1]}" if key in at else name


def _string_list(name: str, data: Any, key: str, what: str, one: str) -> tuple[str, ...]:
    value = data[key]
    if value is None:
        return ()
    if not isinstance(value, list):
        raise PolicyError(f"{_where(name, data, key)}: '{key}' must be a list of {what}, "
                          f"for example {key}: [{'breaking' if key == 'block' else 'links.trips_bike'}]")
    out = []
    for index, item in enumerate(value):
        if not isinstance(item, str) or not item.strip():
            raise PolicyError(f"{_where(name, data, key, index)}: item {index + 1} of '{key}' must be {one}, "
                              f"not {item!r}")
        out.append(item.strip())
    return tuple(out)


def _block(name: str, data: Any) -> tuple[str, ...]:
    values = _string_list(name, data, "block", "severities", "a severity")
    for index, value in enumerate(values):
        if value not in SEVERITIES:
            raise PolicyError(f"{_where(name, data, 'block', index)}: unknown severity '{value}' under block; "
                              f"use {', '.join(SEVERITIES)}")
    return tuple(sorted(set(values), key=rank))


def _owners(name: str, data: Any) -> tuple[tuple[str, tuple[str, ...]], ...]:
    value = data["owners"]
    if value is None:
        return ()
    if not isinstance(value, dict):
        raise PolicyError(f"{_where(name, data, 'owners')}: 'owners' must map report names to teams, "
                          "for example owners: {weekly_fares: finance}")
    out = []
    for report, teams in value.items():
        where = _where(name, value, report)
        if not isinstance(report, str) or not report.strip():
            raise PolicyError(f"{_key_where(name, value, report)}: an owners key must be a report name or glob, "
                              f"not {report!r}")
        names = [teams] if isinstance(teams, str) else teams
        if not isinstance(names, list) or not names or not all(isinstance(t, str) and t.strip() for t in names):
            raise PolicyError(f"{where}: the owner of '{report}' must be a team name or a list of them, not {teams!r}")
        out.append((report.strip(), tuple(t.strip() for t in names)))
    return tuple(out)


def parse_policy(content: bytes | str, name: str = POLICY_FILE) -> Policy:
    """A Policy from the file's text; PolicyError (with file:line:col) for anything it does not know."""
    from modeldiff import load

    try:
        data = load.read_yaml(name, content)  # encoding, syntax and duplicate keys, with positions
    except PolicyError:
        raise
    except ModeldiffError as exc:
        raise PolicyError(str(exc)) from None
    if data is None or type(data) is object:  # an empty file (or only comments): the defaults
        return Policy(source=name)
    if not isinstance(data, dict):
        raise PolicyError(f"{name}: the policy must be a mapping with the keys {', '.join(KEYS)}, "
                          f"not a {type(data).__name__}")
    for key in data:
        if key not in KEYS:
            raise PolicyError(f"{_key_where(name, data, key)}: unknown key '{key}' in the policy; the known keys "
                              f"are {', '.join(KEYS)}; fix or remove it (a policy that cannot be read blocks every "
                              "push that changes a model)")
    return Policy(
        block=_block(name, data) if "block" in data else DEFAULT.block,
        accept=_string_list(name, data, "accept", "subjects or patterns", "a subject or pattern") if "accept" in data else (),
        owners=_owners(name, data) if "owners" in data else (),
        source=name,
    )


def read_policy(repo_dir, rev: str, label: str | None = None) -> Policy:
    """The policy at the repository root at `rev` (through git, not the disk); the defaults without one."""
    from modeldiff import git

    name = f"{label or rev}:{POLICY_FILE}"
    source = git.read_at(repo_dir, rev, POLICY_FILE)
    if source is None:
        return DEFAULT
    if len(source.files) != 1 or source.files[0][0] != f"{rev}:{POLICY_FILE}":
        raise PolicyError(f"{name} is a folder; the policy must be one YAML file")
    return parse_policy(source.files[0][1], name)


# --- what blocks, what is acknowledged -----------------------------------------------------------


@dataclass(frozen=True)
class Item:
    """One change (or error finding of the new revision) that can block a push."""

    model: str
    subject: str
    kind: str  # a change kind (link.flow_widened) or "error:<rule>" for a finding
    severity: str
    message: str
    causes: tuple[str, ...] = ()  # link subjects whose acknowledgement, all together, acknowledges this item too


DERIVED_FROM_LINKS = ("path.added", "path.removed", "ambiguity.introduced", "ambiguity.resolved")


def causes_of(change, changed: frozenset[str]) -> tuple[str, ...]:
    """The `links.L` subjects that alone cause a derived change, when all of them changed in the same diff."""
    details = getattr(change, "details", None)
    details = details if isinstance(details, dict) else {}
    links = details.get("links")
    if change.kind not in DERIVED_FROM_LINKS or not links or details.get("complete") is False:
        return ()
    causes = tuple(sorted(f"links.{name}" for name in links))
    return causes if all(c in changed for c in causes) else ()


def items_of(diffs: Sequence) -> list[Item]:
    """Every change of every ModelDiff, and every error of a new revision (a breaking item), sorted."""
    out = set()
    for md in diffs:
        result = md.result
        model = result.new.name or result.old.name
        changed = frozenset(c.subject for c in result.changes)
        for change in result.changes:
            out.add(Item(model, change.subject, change.kind, change.severity, change.message,
                         causes_of(change, changed)))
        for finding in result.new_errors:
            out.add(Item(model, finding.subject, f"error:{finding.rule}", "breaking", finding.message))
    return sorted(out, key=lambda i: (-rank(i.severity), i.model, i.subject, i.kind, i.message))


def blocking(items: Iterable[Item], policy: Policy) -> list[Item]:
    """Items whose severity the policy blocks and whose subject it does not accept."""
    return [i for i in items if policy.blocks(i.severity) and not policy.accepts(i.subject)]


def reviewed_subjects(values: Iterable[str]) -> tuple[frozenset[str], tuple[str, ...]]:
    """(subjects acknowledged, entries refused) from `Model-Reviewed` trailer values.

    A value names one or more subjects separated by commas or spaces. An entry with a wildcard
    (`*`, `?`, `[...]`) is refused: WILDCARD_REFUSED says why.
    """
    subjects, refused = set(), []
    for value in values:
        for entry in value.replace(",", " ").split():
            if _GLOB_CHARS & set(entry):
                refused.append(entry)
            else:
                subjects.add(entry)
    return frozenset(subjects), tuple(dict.fromkeys(refused))


def trailer_values(trailers: dict[str, list[str]]) -> list[str]:
    """The values of every `Model-Reviewed` trailer (the key compared without case, as git does)."""
    return [v for key, values in trailers.items() if key.strip().lower() == TRAILER.lower() for v in values]


def through_causes(item: Item, reviewed: frozenset[str]) -> bool:
    """True when `item` is acknowledged only because every link change causing it is."""
    return item.subject not in reviewed and bool(item.causes) and all(c in reviewed for c in item.causes)


def unacknowledged(items: Iterable[Item], reviewed: frozenset[str]) -> list[Item]:
    return [i for i in items if i.subject not in reviewed and not through_causes(i, reviewed)]


def covered(items: Iterable[Item], reviewed: frozenset[str]) -> list[tuple[tuple[str, ...], tuple[str, ...]]]:
    """(causes, subjects) of the items acknowledged through their causes alone, grouped by causes, sorted."""
    groups: dict[tuple[str, ...], set[str]] = {}
    for item in items:
        if through_causes(item, reviewed):
            groups.setdefault(item.causes, set()).add(item.subject)
    return [(causes, tuple(sorted(subjects))) for causes, subjects in sorted(groups.items())]


def covered_lines(items: Iterable[Item], reviewed: frozenset[str]) -> list[str]:
    """`covered by Model-Reviewed: links.L (what its change alone causes): paths.a->b, ...` per group."""
    from modeldiff.words import and_list

    return [f"covered by {TRAILER}: {and_list(causes)} (what {'its change' if len(causes) == 1 else 'their changes'} "
            f"alone {'causes' if len(causes) == 1 else 'cause'}): {', '.join(subjects)}"
            for causes, subjects in covered(items, reviewed)]


def trailer_subjects(items: Iterable[Item]) -> list[str]:
    """The fewest subjects whose trailers acknowledge `items`: a derived change's causes stand for it."""
    return sorted({s for i in items for s in (i.causes or (i.subject,))})


def trailer_lines(items: Iterable[Item]) -> list[str]:
    """The trailers that would acknowledge `items`, one per subject, sorted."""
    return [f"{TRAILER}: {s}" for s in trailer_subjects(items)]


# --- whom to tell --------------------------------------------------------------------------------


def owners_to_tell(diffs: Sequence, policy: Policy) -> list[tuple[str, tuple[tuple[str, str], ...]]]:
    """(team, ((report, severity), ...)) for every impacted report, sorted by team.

    The policy's `owners` decide; a report no pattern matches falls back to its own `owner` in the
    model (the new revision's, or the old one's for a removed report). With more than one model the
    report is named `model:report`.
    """
    several = len({md.result.new.name or md.result.old.name for md in diffs}) > 1
    by_team: dict[str, dict[str, str]] = {}
    for md in diffs:
        result = md.result
        model = result.new.name or result.old.name
        for impact in result.reports:
            teams = policy.teams_for(impact.name) or _model_owner(result, impact.name)
            shown = f"{model}:{impact.name}" if several else impact.name
            for team in teams:
                by_team.setdefault(team, {})[shown] = impact.severity
    return [(team, tuple(sorted(reports.items()))) for team, reports in sorted(by_team.items())]


def _model_owner(result, report: str) -> tuple[str, ...]:
    for model in (result.new, result.old):
        found = model.reports.get(report)
        if found is not None and found.owner:
            return (found.owner,)
    return ()


def tell_lines(diffs: Sequence, policy: Policy) -> list[str]:
    """`tell: finance: weekly_fares (breaking), ride_volume (numbers)` per team."""
    return [f"tell: {team}: " + ", ".join(f"{report} ({severity})" for report, severity in reports)
            for team, reports in owners_to_tell(diffs, policy)]
