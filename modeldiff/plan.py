"""Migration plan between two revisions of a model: ordered steps, each with preconditions, checks and a rollback.

`modeldiff plan OLD NEW` reads the same records as `modeldiff diff` (the
`Change` list and the impacted measures, roles and reports of
`impact.analyse`) and turns them into steps; nothing is re-derived.

Rules (from the issue; "common practice" where no published source is named):
- before a link becomes many-to-one or one-to-one (changed, added, or pointed
  at other columns) its target columns must be unique (a one-to-one link: its
  source columns too);
- before a link switches keys, every row on its `from` side must carry the new
  key: no NULL, every value present on the `to` side; a switch from a type-2
  dimension's natural key to its surrogate key also needs valid history (no
  overlapping validity ranges and one current row per natural key; Kimball's
  type-2 technique, semantics.md section 6);
- a table's new key, or a column newly declared unique, must hold unique values;
- reports and derived measures are updated before a measure they use is
  removed or renamed (a rename becomes: add the new name, move the users, remove
  the old name);
- the owners of impacted reports are told (the report's `owner` field) before
  the steps that move their numbers;
- tables and columns are added before the links, measures and reports that use
  them; links, measures and reports are removed before the tables and columns
  they use (who uses what comes from `references.References` of each revision);
- a security exposure needs the organisation's security review to sign off
  before the steps that cause it.

Order: dependencies first (a topological order), ties broken by step kind
(`KINDS`) and then subject, so the same input always gives the same plan.
Every change id of the diff is covered by at least one step.
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass, field
from typing import Iterable, Sequence, TextIO

from modeldiff.changes import id_order
from modeldiff.words import agree, and_list

FORMATS = ("text", "markdown", "json")

# Step kinds in tie-break order: reviews and data checks first, additions, changes, then removals.
KINDS = (
    "sign-off", "tell-owners", "check-data",
    "add-table", "add-column", "change-table", "change-column",
    "add-link", "change-link",
    "add-measure", "change-measure",
    "add-variant", "change-variant",
    "add-role", "change-role",
    "add-report", "update-report", "fix-reference", "review",
    "remove-report", "remove-role", "remove-variant", "remove-measure", "remove-link", "remove-column", "remove-table",
)
_RANK = {kind: rank for rank, kind in enumerate(KINDS)}
# Steps that edit the model (as opposed to reviewing, telling or checking data).
_GUARD_KINDS = frozenset({"sign-off", "tell-owners", "check-data"})
_NOUN_SECTION = {"table": "tables", "link": "links", "measure": "measures", "variant": "variants", "role": "roles",
                 "report": "reports"}
_FAR_FUTURE = "date '9999-12-31'"


@dataclass(frozen=True)
class Check:
    """How to tell a step worked: a sentence, and a read-only SQL query with its expected result where it is about data."""

    what: str
    sql: str | None = None
    expect: str | None = None


@dataclass(frozen=True)
class Step:
    """One step of a migration plan, with what it waits for, how to check it and how to undo it."""

    id: str
    kind: str
    subject: str
    title: str
    changes: tuple[str, ...]
    after: tuple[str, ...]
    preconditions: tuple[str, ...]
    checks: tuple[Check, ...]
    rollback: str


@dataclass(frozen=True)
class Plan:
    """A migration plan from one revision to the next: ordered steps and what blocks them."""

    model: str
    old: object  # compare.Side
    new: object
    steps: tuple[Step, ...]
    blockers: tuple[str, ...] = ()  # error findings of the new revision: fix before any step
    security: bool = False  # a security exposure is part of the change
    proposals: tuple = ()  # modeldiff.proposal.Proposal: instead of a link made two-way, report conditions


# --- SQL for the data checks ----------------------------------------------------------------


def _cols(columns: Sequence[str]) -> str:
    return ", ".join(columns)


def sql_duplicates(table: str, columns: Sequence[str]) -> str:
    """Values of `columns` held by more than one row of `table` (expect no rows)."""
    groups = ", ".join(str(i) for i in range(1, len(columns) + 1))
    return f"select {_cols(columns)}, count(*) from {table} group by {groups} having count(*) > 1"


def sql_nulls(table: str, columns: Sequence[str]) -> str:
    """Rows of `table` with a NULL in any of `columns` (expect 0)."""
    return f"select count(*) from {table} where " + " or ".join(f"{c} is null" for c in columns)


def sql_orphans(table: str, columns: Sequence[str], target: str, target_columns: Sequence[str]) -> str:
    """Rows of `table` whose (non-NULL) key has no row in `target` (expect 0)."""
    present = " and ".join(f"f.{c} is not null" for c in columns)
    match = " and ".join(f"d.{t} = f.{c}" for c, t in zip(columns, target_columns))
    return (f"select count(*) from {table} f where {present} "
            f"and not exists (select 1 from {target} d where {match})")


def sql_overlapping_versions(table: str, natural_key: Sequence[str], key: Sequence[str], valid_from: str,
                             valid_to: str) -> str:
    """Pairs of versions of one member whose validity ranges overlap (expect no rows).

    Ranges are read as [valid_from, valid_to), an open end (NULL valid_to) as the far future (common practice).
    """
    same = " and ".join(f"a.{c} = b.{c}" for c in natural_key)
    if len(key) == 1:
        other = f"a.{key[0]} < b.{key[0]}"
    else:
        other = "(" + " or ".join(f"a.{c} <> b.{c}" for c in key) + ")"
    return (f"select {', '.join(f'a.{c}' for c in natural_key)}, {', '.join(f'a.{c}' for c in key)}, "
            f"{', '.join(f'b.{c}' for c in key)} from {table} a join {table} b on {same} and {other} "
            f"and a.{valid_from} < coalesce(b.{valid_to}, {_FAR_FUTURE}) "
            f"and b.{valid_from} < coalesce(a.{valid_to}, {_FAR_FUTURE})")


def sql_current_rows(table: str, natural_key: Sequence[str], current: str | None, valid_to: str) -> str:
    """Members without exactly one current version (expect no rows)."""
    flag = current if current is not None else f"{valid_to} is null"
    count = f"sum(case when {flag} then 1 else 0 end)"
    groups = ", ".join(str(i) for i in range(1, len(natural_key) + 1))
    return f"select {_cols(natural_key)}, {count} as current_rows from {table} group by {groups} having {count} <> 1"


def uniqueness_checks(table: str, columns: Sequence[str]) -> list[Check]:
    return [Check(f"{table}.{'/'.join(columns)} holds no value twice", sql_duplicates(table, columns), "no rows")]


def carry_checks(link) -> list[Check]:
    """Every `from` row carries the link's key, and every value is present on the `to` side."""
    src, cols, dst, dcols = link.from_table, link.from_columns, link.to_table, link.to_columns
    return [Check(f"no {src} row lacks {'/'.join(cols)}", sql_nulls(src, cols), "0"),
            Check(f"every {src}.{'/'.join(cols)} value is present in {dst}.{'/'.join(dcols)}",
                  sql_orphans(src, cols, dst, dcols), "0")]


def history_checks(table) -> list[Check]:
    """Type-2 validity of `table`: no overlapping versions, one current version per member."""
    h = table.history
    nk, key = table.natural_key, table.key
    if h is None or not nk or not key or h.valid_from is None or h.valid_to is None:
        return [Check(f"{table.name} declares the natural key and validity columns of its history (modeldiff check)")]
    return [Check(f"no two versions of one {table.name} member are valid at the same time",
                  sql_overlapping_versions(table.name, nk, key, h.valid_from, h.valid_to), "no rows"),
            Check(f"every {table.name} member has exactly one current version (a member retired on purpose has none: "
                  f"check those by hand)", sql_current_rows(table.name, nk, h.current, h.valid_to), "no rows")]


# --- building the plan ------------------------------------------------------------------------


@dataclass
class _Draft:
    """A step being assembled, before steps are ordered and numbered."""

    kind: str
    subject: str
    title: str
    changes: set[str] = field(default_factory=set)
    preconditions: list[str] = field(default_factory=list)
    checks: list[Check] = field(default_factory=list)
    rollback: str = ""

    @property
    def key(self) -> tuple[str, str]:
        return (self.kind, self.subject)


def _name(subject: str) -> str:
    return subject.split(".", 1)[1] if "." in subject else subject


def _display(subject: str) -> str:
    """`tables.trips.columns.fare` -> `trips.fare`; `links.trips_bike` -> `trips_bike`."""
    return _name(subject).replace(".columns.", ".")


def _item_subject(change) -> str:
    """The item a structural change is about: `variants.V.options.O` -> `variants.V`."""
    parts = change.subject.split(".")
    if parts[0] == "tables" and len(parts) >= 4:
        return ".".join(parts[:4])
    return ".".join(parts[:2])


def _action(change) -> str:
    noun, _, what = change.kind.partition(".")
    if what in ("added", "removed"):
        return f"{'add' if what == 'added' else 'remove'}-{noun}"
    return "update-report" if noun == "report" else f"change-{noun}"


_LINK_FIELDS = {"link.cardinality_changed": "cardinality", "link.flow_widened": "flow", "link.flow_narrowed": "flow",
                "link.security_flow_changed": "security_flow", "link.standby_set": "standby",
                "link.standby_cleared": "standby", "link.metadata_changed": "description", "link.renamed": "name"}


def _value(v) -> str:
    if isinstance(v, list):
        return ", ".join(str(x) for x in v)
    if isinstance(v, bool):
        return "true" if v else "false"
    return str(v)


class _Planner:
    def __init__(self, md):
        from modeldiff.references import References
        from modeldiff.impact import Renames

        self.md = md
        self.result = md.result
        self.old, self.new = md.result.old, md.result.new
        self.changes = {c.id: c for c in md.result.changes}
        self.refs_old, self.refs_new = References(self.old), References(self.new)
        self.renames = Renames.of(md.result.changes)
        self.steps: dict[tuple[str, str], _Draft] = {}
        self.edges: set[tuple[tuple[str, str], tuple[str, str]]] = set()
        self.old_label = _side(md.old)

    # drafts and edges

    def step(self, kind: str, subject: str, title: str, rollback: str) -> _Draft:
        draft = self.steps.get((kind, subject))
        if draft is None:
            draft = self.steps[(kind, subject)] = _Draft(kind, subject, title, rollback=rollback)
        return draft

    def before(self, first: _Draft | tuple[str, str], then: _Draft | tuple[str, str]) -> None:
        a = first.key if isinstance(first, _Draft) else first
        b = then.key if isinstance(then, _Draft) else then
        if a != b:
            self.edges.add((a, b))

    def edits_of(self, subject: str) -> list[_Draft]:
        """The steps that edit `subject` (not reviews, messages or data checks)."""
        return [d for d in self.steps.values() if d.subject == subject and d.kind not in _GUARD_KINDS]

    def covering(self, change_ids: Iterable[str]) -> list[_Draft]:
        ids = set(change_ids)
        return [d for d in self.steps.values() if d.kind not in _GUARD_KINDS and d.changes & ids]

    def new_subject(self, subject: str) -> str:
        """An old revision's subject in the new revision's names."""
        section, _, name = subject.partition(".")
        mapping = {"tables": self.renames.tables, "links": self.renames.links, "measures": self.renames.measures,
                   "roles": self.renames.roles, "reports": self.renames.reports,
                   "variants": self.renames.variants}.get(section, {})
        return f"{section}.{mapping.get(name, name)}"

    # the passes

    def build(self) -> Plan:
        for change in self.result.changes:
            if "." in change.kind and change.kind.split(".")[0] in (*_NOUN_SECTION, "column"):
                self.structural(change)
        for change in self.result.changes:
            if change.kind.split(".")[0] in ("path", "ambiguity", "security", "reference", "warning"):
                self.derived(change)
        for change in self.result.changes:
            self.data_checks(change)
        self.uses()
        self.owners()
        return self.finish()

    def structural(self, change) -> None:
        if change.kind == "measure.renamed" and self.refs_new.referrers("measures", change.after):
            self.measure_rename(change)
            return
        subject = _item_subject(change)
        draft = self.step(_action(change), subject, "", "")  # title and rollback once all its changes are known
        draft.changes.add(change.id)
        if draft.kind.startswith("remove-"):
            draft.preconditions.append(f"nothing in the model still uses {_display(subject)} (modeldiff check shows "
                                       f"no broken reference to it)")

    def measure_rename(self, change) -> None:
        """Add the new name, move every user to it, then remove the old name."""
        old, new = change.before, change.after
        add = self.step("add-measure", f"measures.{new}", f"Add measure {new} with the definition of {old}",
                        f"Remove measure {new} again; {old} still serves every user.")
        remove = self.step("remove-measure", f"measures.{old}", f"Remove the old name {old}",
                           f"Restore measure {old} as it is in {self.old_label}.")
        remove.preconditions.append(f"nothing in the model still uses {old}")
        for draft in (add, remove):
            draft.changes.add(change.id)
        self.before(add, remove)
        for user in self.refs_new.referrers("measures", new):
            kind = "update-report" if user.startswith("reports.") else "change-measure"
            noun = "report" if kind == "update-report" else "measure"
            draft = self.step(kind, user, f"Point {noun} {_name(user)} at {new} instead of {old}",
                              f"Point {noun} {_name(user)} back at {old}.")
            draft.changes.add(change.id)
            self.before(add, draft)
            self.before(draft, remove)

    def title(self, d: _Draft) -> str:
        verb, _, noun = d.kind.partition("-")
        name = _display(d.subject)
        changes = [self.changes[cid] for cid in sorted(d.changes, key=id_order)]
        if d.kind == "add-table" and name in self.new.tables:
            return f"Add table {name} (a {self.new.tables[name].kind})"
        if d.kind == "add-column":
            table, _, column = name.partition(".")
            c = self.new.tables[table].columns.get(column) if table in self.new.tables else None
            return f"Add column {name}" + (f" ({c.type})" if c else "")
        if d.kind == "add-link" and name in self.new.links:
            link = self.new.links[name]
            return (f"Add link {name} ({link.from_table}.{'/'.join(link.from_columns)} -> "
                    f"{link.to_table}.{'/'.join(link.to_columns)}, {link.cardinality})")
        fields = self.link_fields(changes, after=True) if noun == "link" else []
        renamed = next((c for c in changes if c.kind.endswith(".renamed")), None)
        head = f"{'Update' if verb == 'update' else verb.capitalize()} {noun} {name}"
        if renamed is not None:
            head = f"Rename {noun} {_value(renamed.before)} to {_value(renamed.after)}"
        return head + (": " + "; ".join(fields) if fields else "")

    @staticmethod
    def link_fields(changes, after: bool) -> list[str]:
        """`cardinality many-to-many -> many-to-one` (after) or `cardinality back to many-to-many` (not after)."""
        out = []
        for c in changes:
            label = f"`{c.details.get('side', 'to')}`" if c.kind == "link.key_switched" else _LINK_FIELDS.get(c.kind)
            if label is None or c.kind in ("link.metadata_changed", "link.renamed"):
                continue
            out.append(f"{label} {_value(c.before)} -> {_value(c.after)}" if after else f"{label} back to {_value(c.before)}")
        return out

    def rollback(self, d: _Draft) -> str:
        verb, _, noun = d.kind.partition("-")
        name = _display(d.subject)
        changes = [self.changes[cid] for cid in sorted(d.changes, key=id_order)]
        if verb == "add":
            return f"Remove {noun} {name} again; nothing used it before this plan."
        if verb == "remove":
            return f"Restore {noun} {name} as it is in {self.old_label}."
        if noun == "link":
            back = self.link_fields(changes, after=False)
            others = [c for c in changes if c.kind in ("link.metadata_changed", "link.renamed", "link.added",
                                                        "link.removed")]
            if back and not others:
                return f"Set link {name}'s " + "; ".join(back) + f" (as in {self.old_label})."
        if [c.kind for c in changes] == [f"{noun}.renamed"]:
            return f"Rename {noun} {_value(changes[0].after)} back to {_value(changes[0].before)}."
        return f"Restore {noun} {name} as it is in {self.old_label}."

    def derived(self, change) -> None:
        kind = change.kind
        if kind == "security.exposed":
            self.exposure(change)
            return
        if kind == "reference.broken":
            draft = self.step("fix-reference", change.subject, f"Fix the reference in {_name(change.subject)}",
                              "Nothing to undo: the fix only makes the new revision valid again.")
            draft.changes.add(change.id)
            draft.preconditions.append(f"the new revision must not be released with this broken reference: "
                                       f"{change.message}")
            return
        targets: list[_Draft] = []
        if kind.startswith("security."):
            targets = self.security_causes(change)
        elif kind == "warning.added":  # the step editing the item it is about, else a review of the warning
            targets = self.edits_of(_item_subject(change)) or [self.step(
                "review", change.subject, f"Review the new {change.details.get('rule', 'check')} warning on "
                f"{_display(change.subject)}: fix what it says, or accept it as intended",
                "Nothing to undo: this step only reviews what the other steps do.")]
        else:
            targets = self.link_steps(change.details.get("links", ()))
        if not targets:
            targets = [self.step("review", change.subject, f"Review {change.subject}",
                                 "Nothing to undo: this step only reviews what the other steps do.")]
        for draft in targets:
            draft.changes.add(change.id)
            if kind == "ambiguity.introduced":
                draft.preconditions.append(f"decide which route must carry the filter: {change.message}")

    def link_steps(self, links: Iterable[str]) -> list[_Draft]:
        return [d for link in sorted(set(links)) for d in self.edits_of(f"links.{link}")]

    def security_causes(self, change) -> list[_Draft]:
        """The edits that cause a `security.*` change: a change of the role's filter, and the links that moved
        an edge of the security graph on a path that appeared or disappeared (a link merely lying on such a
        path, or changed only in its description, is not a cause)."""
        from modeldiff.impact import EDGE_KINDS

        moving = (*EDGE_KINDS, "link.security_flow_changed")
        role = ".".join(change.subject.split(".")[:2])
        causes = [d for d in self.edits_of(role) if self._covers(d, ("role.filter_changed",))]
        causes += [d for d in self.link_steps(_changed_path_links(change)) if self._covers(d, moving)]
        return causes

    def _covers(self, d: _Draft, kinds: Iterable[str]) -> bool:
        kinds = tuple(kinds)
        return any(self.changes[cid].kind in kinds for cid in d.changes)

    def exposure(self, change) -> None:
        role = ".".join(change.subject.split(".")[:2])

        draft = self.step("sign-off", role, f"Get the security review's sign-off for role {_name(role)}",
                          "Nothing to undo. If the review refuses, stop: apply none of the later steps.")
        draft.changes.add(change.id)
        if not draft.preconditions:
            draft.preconditions.append("the security review has this step's changes: which rows become visible to "
                                       "the role's members, and through which link")
        causes = self.security_causes(change)
        if not causes:  # cannot tell which edit exposes the rows: all of them wait for the review
            causes = [d for d in self.steps.values() if d.kind not in _GUARD_KINDS]
        for target in causes:
            self.before(draft, target)

    def data_checks(self, change) -> None:
        kind = change.kind
        if kind in ("link.cardinality_changed", "link.added", "link.key_switched"):
            link = self.new.links.get(_name(_item_subject(change)))
            if link is None:
                return
            guarded = self.edits_of(f"links.{link.name}")
            if kind == "link.key_switched":
                self.carry(change, link, guarded)
            to_side, from_side = unique_sides(change, link)
            if to_side:
                self.unique(change, link.to_table, link.to_columns, guarded, f"link {link.name} becomes {link.cardinality}")
            if from_side:
                self.unique(change, link.from_table, link.from_columns, guarded, f"link {link.name} becomes one-to-one")
        elif kind == "table.key_changed" and change.after:
            self.unique(change, _name(change.subject), tuple(change.after), self.edits_of(change.subject),
                        f"{_name(change.subject)} gets a new key")
        elif kind == "column.unique_changed" and change.after:
            table, column = _name(change.subject).split(".columns.")
            self.unique(change, table, (column,), self.edits_of(_item_subject(change)),
                        f"{table}.{column} is declared unique")
        elif kind == "table.history_changed" and (change.after or {}).get("type") == 2:
            table = self.new.tables.get(_name(change.subject))
            if table is not None:
                self.history(change, table, self.edits_of(change.subject))

    def unique(self, change, table: str, columns: Sequence[str], guarded: list[_Draft], why: str) -> None:
        draft = self.step("check-data", f"tables.{table}.unique.{'.'.join(columns)}",
                          f"Check that {table}.{'/'.join(columns)} is unique",
                          "Nothing to undo: this step only reads data.")
        draft.changes.add(change.id)
        draft.preconditions.append(f"before {why}, its target must hold each value once; "
                                   f"otherwise rows are counted more than once")
        if not draft.checks:
            draft.checks.extend(uniqueness_checks(table, columns))
        for g in guarded:
            self.before(draft, g)

    def carry(self, change, link, guarded: list[_Draft]) -> None:
        history = change.details.get("history")
        what = (f"the surrogate key {'/'.join(link.to_columns)} of {link.to_table}" if history == "natural->surrogate"
                else f"the key {'/'.join(link.from_columns)}")
        draft = self.step("check-data", f"links.{link.name}.carries",
                          f"Check that every {link.from_table} row carries {what}",
                          "Nothing to undo: this step only reads data.")
        draft.changes.add(change.id)
        draft.preconditions.append(f"before link {link.name} switches keys, every {link.from_table} row must carry "
                                   f"the new key (no NULL, every value present in {link.to_table}); otherwise those "
                                   f"rows fall out of every filter through the link")
        if not draft.checks:
            draft.checks.extend(carry_checks(link))
        for g in guarded:
            self.before(draft, g)
        target = self.new.tables.get(link.to_table)
        if history == "natural->surrogate" and target is not None:
            self.history(change, target, guarded)

    def history(self, change, table, guarded: list[_Draft]) -> None:
        draft = self.step("check-data", f"tables.{table.name}.history", f"Check the type-2 history of {table.name}",
                          "Nothing to undo: this step only reads data.")
        draft.changes.add(change.id)
        if not draft.preconditions:
            draft.preconditions.append(f"facts are attributed to the version of a {table.name} member valid when "
                                       f"they happened: versions must not overlap, and each member needs one "
                                       f"current version")
        if not draft.checks:
            draft.checks.extend(history_checks(table))
        for g in guarded:
            self.before(draft, g)

    def uses(self) -> None:
        """Additions before their users in the new revision; removals after their users in the old one."""
        for draft in list(self.steps.values()):
            verb, _, noun = draft.kind.partition("-")
            if verb not in ("add", "remove") or noun not in (*_NOUN_SECTION, "column"):
                continue
            refs = self.refs_new if verb == "add" else self.refs_old
            if noun == "column":
                table, column = _name(draft.subject).split(".columns.")
                users = refs.column_referrers(table, column)
            else:
                users = refs.referrers(_NOUN_SECTION[noun], _name(draft.subject))
            for user in users:
                user = user if verb == "add" else self.new_subject(user)
                for other in self.edits_of(user):
                    if verb == "add":
                        self.before(draft, other)
                    elif other.key != draft.key:
                        self.before(other, draft)
            if verb == "remove":
                for cid in draft.changes:
                    for user in self.changes[cid].details.get("referenced_by", ()):
                        for other in self.steps.values():
                            if other.subject == user and other.kind == "fix-reference":
                                self.before(other, draft)

    def owners(self) -> None:
        """One step per owner of reports whose numbers move or whose definition changes, before those edits."""
        by_owner: dict[str, dict[str, set[str]]] = {}
        for impact in self.result.reports:
            ids = {r.change for r in impact.reasons}
            by_owner.setdefault(self.owner(impact.name), {}).setdefault(impact.name, set()).update(ids)
        for draft in self.steps.values():
            if draft.subject.startswith("reports.") and draft.kind not in _GUARD_KINDS:
                name = _name(draft.subject)
                by_owner.setdefault(self.owner(name), {}).setdefault(name, set()).update(draft.changes)
        for owner, reports in sorted(by_owner.items()):
            names = sorted(reports)
            ids = set().union(*reports.values())
            what = f"report {names[0]}" if len(names) == 1 else f"reports {_list(names)}"
            who = f"{owner}, owner of {what}," if owner else f"the people who use {what} (no owner is recorded)"
            draft = self.step("tell-owners", f"owners.{owner or '(none)'}",
                              f"Tell {who} that {'its' if len(names) == 1 else 'their'} numbers or definition change",
                              f"Tell {owner or 'them'} the change was withdrawn.")
            draft.changes.update(ids)
            draft.checks.append(Check(f"{owner or 'each user'} acknowledged the change to {_list(names)} "
                                      f"(record who and when)"))
            if not owner:
                draft.preconditions.append(f"find who uses {_list(names)}: they have no `owner` field")
            for target in self.covering(ids):
                self.before(draft, target)

    def checks(self, d: _Draft) -> list[Check]:
        if d.kind == "sign-off":
            tables = sorted(self.changes[cid].subject.split(".")[-1] for cid in d.changes)
            return [Check(f"the organisation's security review approved, in writing, that members of "
                          f"{_name(d.subject)} may see the rows of {_list(tables)} that were hidden from them")]
        reports = self.report_checks(d)
        if d.kind == "update-report" and reports:
            return reports
        return [_default_check(d)] + reports

    def report_checks(self, d: _Draft) -> list[Check]:
        """For an edit: each impacted report whose numbers it moves, compared with the old revision."""
        if d.kind in _GUARD_KINDS:
            return []
        out = []
        for impact in self.result.reports:
            ids = sorted(d.changes & {r.change for r in impact.reasons}, key=id_order)
            if ids:
                out.append(Check(f"report {impact.name} compared with {self.old_label} on one period: its numbers "
                                 f"differ only where {and_list(ids)} {agree(len(ids), 'explains', 'explain')} it"))
        return out

    def owner(self, report: str) -> str:
        found = self.new.reports.get(report)
        if found is None:
            old_name = next((o for o, n in self.renames.reports.items() if n == report), report)
            found = self.old.reports.get(old_name)
        return (found.owner or "") if found is not None else ""

    # ordering and freezing

    def finish(self) -> Plan:
        order = _topological(self.steps, self.edges)
        ids = {key: f"s{i}" for i, key in enumerate(order, 1)}
        preds: dict[tuple[str, str], list[tuple[str, str]]] = {k: [] for k in self.steps}
        for a, b in self.edges:
            preds[b].append(a)
        steps = []
        for d in self.steps.values():
            d.title = d.title or self.title(d)
            d.rollback = d.rollback or self.rollback(d)
        for key in order:
            d = self.steps[key]
            after = sorted((ids[p] for p in preds[key]), key=id_order)
            pre = [f"{ids[p]} done ({self.steps[p].title})" for p in sorted(preds[key], key=lambda p: id_order(ids[p]))]
            checks = d.checks or self.checks(d)
            steps.append(Step(ids[key], d.kind, d.subject, d.title, tuple(sorted(d.changes, key=id_order)),
                              tuple(after), tuple(_unique(pre + d.preconditions)), tuple(checks), d.rollback))
        r = self.result
        blockers = tuple(f"{f.rule} {f.subject}: {f.message}" for f in r.new_errors)
        return Plan(r.new.name or r.old.name, self.md.old, self.md.new, tuple(steps), blockers,
                    any(c.kind == "security.exposed" for c in r.changes))


def unique_sides(change, link) -> tuple[bool, bool]:
    """Whether a link change newly needs its `to` columns and its `from` columns to be unique.

    A many-to-one or one-to-one link needs a unique target; one-to-one needs a
    unique source too. Only what the change newly requires is checked: a target
    that a many-to-one link already pointed at was already required unique.
    """
    strict = link.cardinality in ("many-to-one", "one-to-one")
    one_to_one = link.cardinality == "one-to-one"
    if change.kind == "link.added":
        return strict, one_to_one
    if change.kind == "link.cardinality_changed":
        return strict and change.before == "many-to-many", one_to_one
    side = change.details.get("side")  # link.key_switched
    return strict and side == "to", one_to_one and side == "from"


def _paths_of(value) -> set[tuple[str, ...]]:
    """The paths a security change's before/after holds: one path (a list of links) or a list of paths."""
    if not isinstance(value, list):
        return set()
    if value and all(isinstance(item, list) for item in value):
        return {tuple(item) for item in value}
    return {tuple(value)}


def _changed_path_links(change) -> set[str]:
    """Links on the paths of a security change that are in only one of its before and after values."""
    return {link for path in _paths_of(change.before) ^ _paths_of(change.after) for link in path}


def _default_check(d: _Draft) -> Check:
    verb, _, noun = d.kind.partition("-")
    name = _name(d.subject).replace(".columns.", ".")
    if d.kind == "update-report":
        return Check(f"report {name} shows the same numbers as before on one period, except where "
                     f"{and_list(sorted(d.changes, key=id_order))} {agree(len(d.changes), 'explains', 'explain')} the difference")
    if d.kind == "fix-reference":
        return Check(f"modeldiff check on the new revision reports no broken-reference for {name}")
    if d.kind == "review":
        return Check(f"the effect on {name} is understood and accepted by whoever reads the numbers it moves")
    if verb == "remove":
        return Check(f"modeldiff check reports no broken-reference to {name}")
    return Check(f"modeldiff check on the model after this step reports no error, and modeldiff diff lists "
                 f"{', '.join(sorted(d.changes, key=id_order))} for {name}")


def _topological(steps: dict, edges: set) -> list[tuple[str, str]]:
    """Dependencies first; among the steps ready at once, by kind (KINDS) then subject.

    A cycle (not expected from these rules) is broken at its first step in that order.
    """
    succ: dict = {k: set() for k in steps}
    indegree = {k: 0 for k in steps}
    for a, b in edges:
        if b not in succ[a]:
            succ[a].add(b)
            indegree[b] += 1

    def rank(key):
        return (_RANK[key[0]], key[1], key[0])

    ready = [rank(k) for k, n in indegree.items() if n == 0]
    heapq.heapify(ready)
    by_rank = {rank(k): k for k in steps}
    order, done = [], set()
    while len(order) < len(steps):
        if not ready:
            stuck = min(rank(k) for k in steps if k not in done)
            ready.append(stuck)
            indegree[by_rank[stuck]] = 0
        key = by_rank[heapq.heappop(ready)]
        if key in done:
            continue
        done.add(key)
        order.append(key)
        for nxt in sorted(succ[key], key=rank):
            indegree[nxt] -= 1
            if indegree[nxt] == 0 and nxt not in done:
                heapq.heappush(ready, rank(nxt))
    return order


def _unique(items: Iterable[str]) -> list[str]:
    seen, out = set(), []
    for item in items:
        if item not in seen:
            seen.add(item)
            out.append(item)
    return out


_list = and_list


def _side(side) -> str:
    return f"{side.rev}:{side.path}" if side.rev else side.path


def build_plan(md) -> Plan:
    """The plan for one `compare.ModelDiff`, with the proposals in place of links made two-way (modeldiff.proposal)."""
    from dataclasses import replace

    from modeldiff import proposal

    return replace(_Planner(md).build(), proposals=tuple(proposal.proposals(md)))


# --- rendering ------------------------------------------------------------------------------------


def plan_json(plan: Plan) -> dict:
    return {
        "format": 1,
        "model": plan.model,
        "old": {"rev": plan.old.rev, "path": plan.old.path},
        "new": {"rev": plan.new.rev, "path": plan.new.path},
        "blockers": list(plan.blockers),
        "security": plan.security,
        "security_caution": _caution() if plan.security else None,
        "steps": [{"id": s.id, "kind": s.kind, "subject": s.subject, "title": s.title, "changes": list(s.changes),
                   "after": list(s.after), "preconditions": list(s.preconditions),
                   "checks": [{"what": c.what, "sql": c.sql, "expect": c.expect} for c in s.checks],
                   "rollback": s.rollback} for s in plan.steps],
        "instead_of_two_way": [_proposal_json(p) for p in plan.proposals],
    }


def _proposal_json(p) -> dict:
    from modeldiff.render import proposal_out

    return proposal_out.json_of(p)


def _caution() -> str:
    from modeldiff.render.diff_out import SECURITY_CAUTION

    return SECURITY_CAUTION


def _caution_lines(plan: Plan) -> list[str]:
    return [f"SECURITY: {_caution()}"] if plan.security else []


def as_text(plan: Plan, changes: dict, stream: TextIO) -> None:
    lines = [f"Migration plan for {plan.model}: {_side(plan.old)} -> {_side(plan.new)}"]
    lines += [f"  {line}" for line in _caution_lines(plan)]
    for b in plan.blockers:
        lines.append(f"  BLOCKER (fix before any step): {b}")
    if not plan.steps:
        lines.append("  No changes: nothing to migrate.")
    for s in plan.steps:
        lines += ["", f"{s.id}  {s.kind}  {s.title}", f"    subject: {s.subject}",
                  f"    covers: {', '.join(s.changes) or 'nothing'}"]
        lines += [f"      {cid} {changes[cid].kind}: {changes[cid].message}" for cid in s.changes
                  if s.kind != "tell-owners" and cid in changes]
        if s.preconditions:
            lines.append("    preconditions:")
            lines += [f"      - {p}" for p in s.preconditions]
        lines.append("    check:")
        for c in s.checks:
            lines.append(f"      - {c.what}" + (f" (expect {c.expect})" if c.expect else ""))
            if c.sql:
                lines.append(f"          {c.sql}")
        lines.append(f"    rollback: {s.rollback}")
    if plan.proposals:
        from modeldiff.render import proposal_out

        lines += proposal_out.text_lines(plan.proposals)
    stream.write("\n".join(lines) + "\n")


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def as_markdown(plan: Plan, changes: dict, stream: TextIO) -> None:
    lines = [f"## Migration plan: `{plan.model}`", "", f"`{_side(plan.old)}` → `{_side(plan.new)}`"]
    lines += [f"\n> **SECURITY:** {_caution()}" for _ in _caution_lines(plan)]
    if plan.blockers:
        lines += ["", "**Fix before any step** (errors in the new revision):", ""] + [f"- {_md(b)}" for b in plan.blockers]
    if not plan.steps:
        lines += ["", "No changes: nothing to migrate."]
    for s in plan.steps:
        lines += ["", f"### {s.id}. {_md(s.title)}", "",
                  f"`{s.kind}` `{s.subject}`; covers {', '.join(s.changes) or 'nothing'}"
                  + (f"; after {', '.join(s.after)}" if s.after else "")]
        covered = [f"- {cid} `{changes[cid].kind}`: {_md(changes[cid].message)}" for cid in s.changes
                   if s.kind != "tell-owners" and cid in changes]
        lines += [""] + covered if covered else []
        if s.preconditions:
            lines += ["", "**Preconditions**", ""] + [f"- {_md(p)}" for p in s.preconditions]
        lines += ["", "**Check**", ""]
        for c in s.checks:
            lines.append(f"- {_md(c.what)}" + (f" (expect {c.expect})" if c.expect else ""))
            if c.sql:
                lines += ["", "  ```sql", f"  {c.sql}", "  ```"]
        lines += ["", f"**Rollback:** {_md(s.rollback)}"]
    if plan.proposals:
        from modeldiff.render import proposal_out

        lines += proposal_out.markdown_lines(plan.proposals)
    stream.write("\n".join(lines) + "\n")
