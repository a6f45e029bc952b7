"""Instead of two-way: when a diff widens a link F -> T to two-way, propose keeping it one-way with report conditions.

A link is often made two-way for one narrow purpose: so that a list of T's
members (a report's rows) shows only the members that have facts in F, for
example only the stations where a trip started. The flip does that, and also
moves every number a filter now reaches through F (docs/meaning.md section 8).
The trade's usual advice is to keep the link one-way and keep only the groups
where a measure over F is not empty: a report condition (`having`).

For each `link.flow_widened` change of a diff (link L, `from` table F, `to`
table T), `proposals(md)` names the reports the diff lists as impacted that
group by T or by a table T's links lead to (its roll-ups: stations -> districts),
and proposes for each `having: <count over F> > 0` (joined with AND to a
condition it has), L staying one-way. The measure over F is a base measure of
F counting its rows (`count(*)`, no `where`, no overrides), the first by name;
when F has none, the proposal adds `<F>_rows`. A report that sets L's flow
itself is left out.

`proposed_model(new, p)` is the new revision with the proposal applied (the
records `verify` evaluates), and `p.patch` the same as a unified diff of the new
revision's model file(s), ready for `git apply` / `patch -p1`. Nothing here
reads data; `verify` (modeldiff.verify.check_proposals) shows the proposal on it.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass, replace
from typing import Mapping, Sequence

from modeldiff.model import Measure, Model, Report

COUNT_WORDS = "count(*)"


@dataclass(frozen=True)
class ReportProposal:
    """One report of a proposal: the condition it gets, and the grouping columns it has on T or T's roll-ups."""

    report: str
    having: str  # the report's whole condition once the proposal is applied
    groups_by: tuple[str, ...]


@dataclass(frozen=True)
class Proposal:
    """Keep link `link` (from_table -> to_table) one-way; give `reports` a condition on `measure` over from_table."""

    change: str  # id of the link.flow_widened change
    link: str
    from_table: str
    to_table: str
    measure: str
    added_measure: bool  # the proposal adds `measure` (from_table had no plain row count)
    reports: tuple[ReportProposal, ...]
    patch: str = ""  # unified diff of the new revision's file(s); "" when the files could not be read or edited
    patch_note: str = ""  # why there is no patch

    @property
    def sentence(self) -> str:
        names = ", ".join(r.report for r in self.reports)
        return (f"Instead of making {self.link} ({self.from_table} -> {self.to_table}) two-way, keep it one-way and "
                f"keep only the groups where {self.measure} > 0 in {names}: they list only groups that have "
                f"{self.from_table}, as the flip would, and with the links as they were no other number moves.")


def rollups(model: Model, table: str) -> set[str]:
    """`table` and the tables its live links lead to, `from` -> `to`, transitively (stations -> districts)."""
    seen, todo = {table}, [table]
    while todo:
        current = todo.pop()
        for link in model.links.values():
            if link.from_table == current and not link.standby and link.to_table not in seen:
                seen.add(link.to_table)
                todo.append(link.to_table)
    return seen


def row_count_measure(model: Model, table: str) -> str | None:
    """A base measure counting every row of `table` (count(*), no where, no overrides), the first by name."""
    from modeldiff import sql

    for name in sorted(model.measures):
        m = model.measures[name]
        if m.table != table or m.where is not None or m.overrides:
            continue
        try:
            if sql.same_logic(m.expr, COUNT_WORDS, table):
                return name
        except sql.SqlError:
            continue  # not SQL: check reports it; it counts nothing here
    return None


def _new_measure_name(model: Model, table: str) -> str:
    name = f"{table}_rows"
    while name in model.measures:
        name += "_"
    return name


def proposals(md, read_files: bool = True) -> list[Proposal]:
    """The proposals for the widened links of one `compare.ModelDiff` (none when no link became two-way)."""
    result = md.result
    new, old = result.new, result.old
    impacted = {i.name for i in result.reports}
    out = []
    for change in result.changes:
        if change.kind != "link.flow_widened":
            continue
        name = change.subject.split(".", 1)[1]
        link = new.links.get(name)
        if link is None or link.flow != "two-way":
            continue
        ups = rollups(old if name in old.links else new, link.to_table)
        measure = row_count_measure(new, link.from_table)
        added = measure is None
        if added:
            measure = _new_measure_name(new, link.from_table)
        reports = []
        for report_name in sorted(impacted):
            report = new.reports.get(report_name)
            if report is None or name in report.overrides.flow:
                continue
            by = tuple(b for b in report.by if b.partition(".")[0] in ups)
            if not by or _all_on(new, report.measures, link.from_table):
                continue  # not grouped there, or every group already has rows of F (a measure of F sees them)
            test = f"{measure} > 0"
            having = test if report.having is None else f"({report.having}) AND {test}"
            reports.append(ReportProposal(report_name, having, by))
        if not reports:
            continue
        p = Proposal(change.id, name, link.from_table, link.to_table, measure, added, tuple(reports))
        if read_files:
            p = _with_patch(md, p)
        out.append(p)
    return out


def _all_on(model: Model, names: Sequence[str], table: str) -> bool:
    """Whether every base measure the named measures reach is on `table`."""
    from modeldiff.check import _bases

    return all(model.measures[b].table == table for name in names for b in _bases(model, name))


def proposed_model(new: Model, p: Proposal) -> Model:
    """The new revision with the proposal applied: the link one-way again, the conditions, the measure if added."""
    links = dict(new.links)
    links[p.link] = replace(links[p.link], flow="one-way")
    reports = dict(new.reports)
    for r in p.reports:
        reports[r.report] = replace(reports[r.report], having=r.having)
    measures = dict(new.measures)
    if p.added_measure:
        measures[p.measure] = Measure(p.measure, COUNT_WORDS, p.from_table,
                                      description=f"Rows of {p.from_table}: keeps the groups that have them.")
    return replace(new, links=links, reports=reports, measures=measures)


# --- the patch ------------------------------------------------------------------------------------------


def _with_patch(md, p: Proposal) -> Proposal:
    from modeldiff import compare
    from modeldiff.errors import ModeldiffError

    spec = f"{md.new.rev}:{md.new.path}" if md.new.rev else md.new.path
    try:
        files = compare._spec_files(spec)
    except (ModeldiffError, OSError):
        return replace(p, patch_note=f"the files of {spec} could not be read again")
    texts = {}
    for name, content in files:
        try:
            texts[name] = content.decode("utf-8") if isinstance(content, bytes) else content
        except UnicodeDecodeError:
            return replace(p, patch_note=f"{name} is not UTF-8 text")
    try:
        patch = make_patch(md.result.new, texts, p)
    except _CannotEdit as why:
        return replace(p, patch_note=str(why))
    return replace(p, patch=patch)


class _CannotEdit(Exception):
    """The file is written in a way the patch writer does not edit (said in the proposal instead)."""


def make_patch(model: Model, texts: Mapping[str, str], p: Proposal) -> str:
    """A unified diff turning `texts` (file name -> text of `model`) into the proposed revision."""
    lines = {name: text.splitlines(keepends=True) for name, text in texts.items()}
    edits: dict[str, list[tuple[int, str, str]]] = {}  # file -> (0-based line, "replace"|"insert", text)

    only = next(iter(lines)) if len(lines) == 1 else None  # one file, perhaps read under another name

    def at(subject: str):
        pos = model.positions.get(subject) if hasattr(model.positions, "get") else None
        if pos is not None and pos.file not in lines and only is not None:
            pos = replace(pos, file=only)
        if pos is None or pos.file not in lines:
            raise _CannotEdit(f"where {subject} is written is not known")
        return pos

    flow = at(f"links.{p.link}.flow")
    line = lines[flow.file][flow.line - 1]
    start = flow.column - 1
    found = re.compile(r"""(["']?)two-way\1""").match(line, start)
    if found is None:
        raise _CannotEdit(f"links.{p.link}.flow is not written as two-way where it is read")
    edits.setdefault(flow.file, []).append((flow.line - 1, "replace", line[:start] + "one-way" + line[found.end():]))
    for r in p.reports:
        edits_for = edits.setdefault(at(f"reports.{r.report}").file, [])
        edits_for.append(_condition_edit(model, lines, r, at))
    if p.added_measure:
        first = next(iter(model.measures), None)
        if first is None:
            raise _CannotEdit("the model has no `measures:` section to add the measure to")
        pos = at(f"measures.{first}")
        text = (" " * (pos.column - 1) + f"{p.measure}: {{table: {p.from_table}, expr: \"{COUNT_WORDS}\"}}"
                f"  # rows of {p.from_table}, for report conditions\n")
        edits.setdefault(pos.file, []).append((pos.line - 1, "insert", text))
    out = []
    for name in sorted(edits):
        new_lines = list(lines[name])
        for index, how, text in sorted(edits[name], key=lambda e: (-e[0], e[1] == "replace")):
            if how == "replace":
                new_lines[index] = text
            else:
                new_lines.insert(index, text)
        shown = name.replace("\\", "/").lstrip("/")
        out += difflib.unified_diff(lines[name], new_lines, f"a/{shown}", f"b/{shown}")
    return "".join(line if line.endswith("\n") else line + "\n" for line in out)


def _quoted(text: str) -> str:
    return '"' + " ".join(text.split()).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _condition_edit(model: Model, lines: Mapping[str, Sequence[str]], r: ReportProposal, at) -> tuple[int, str, str]:
    """The edit giving report `r.report` its condition: a new `having:` line or key, or the old value replaced."""
    item = at(f"reports.{r.report}")
    text = lines[item.file]
    report: Report = model.reports[r.report]
    if report.having is not None:
        pos = at(f"reports.{r.report}.having")
        line = text[pos.line - 1]
        start = pos.column - 1
        end = _scalar_end(line, start)
        return (pos.line - 1, "replace", line[:start] + _quoted(r.having) + line[end:])
    key_line = text[item.line - 1]
    after_key = key_line[item.column - 1:].split(":", 1)
    rest = after_key[1] if len(after_key) == 2 else ""
    if rest.strip().startswith("{"):
        brace = key_line.index("{", item.column - 1)
        return (item.line - 1, "replace",
                key_line[:brace + 1] + f"having: {_quoted(r.having)}, " + key_line[brace + 1:].lstrip(" "))
    for index in range(item.line, len(text)):
        stripped = text[index].strip()
        if stripped and not stripped.startswith("#"):
            indent = len(text[index]) - len(text[index].lstrip(" "))
            if indent <= item.column - 1:
                break
            return (index, "insert", " " * indent + f"having: {_quoted(r.having)}\n")
    raise _CannotEdit(f"report {r.report} is not written as a mapping the patch writer can edit")


def _scalar_end(line: str, start: int) -> int:
    """Where the YAML scalar starting at `start` ends: its closing quote, else a comment, `,`/`}` or the line's end."""
    if line[start:start + 1] in ("'", '"'):
        quote, i = line[start], start + 1
        while i < len(line):
            if line[i] == "\\" and quote == '"':
                i += 2
                continue
            if line[i] == quote:
                if quote == "'" and line[i + 1:i + 2] == "'":
                    i += 2
                    continue
                return i + 1
            i += 1
        raise _CannotEdit("a quoted condition runs over several lines")
    end = len(line.rstrip("\n"))
    block = line[:start].strip() == "having:"  # in a flow mapping, `,` and `}` end a plain scalar too
    for mark in (" #",) if block else (" #", ",", "}"):
        found = line.find(mark, start)
        if found != -1:
            end = min(end, found)
    return len(line[:end].rstrip()) if line[:end].strip() else end


# --- on data (`verify`) ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class ReportSideBySide:
    """A proposed report's rows under the proposal and under the two-way revision: which groups each lists."""

    report: str
    groups_two_way: int  # groups, the (no match) row not counted
    groups_proposed: int
    only_two_way: tuple[tuple, ...] = ()  # group values listed under two-way only
    only_proposed: tuple[tuple, ...] = ()
    no_match_two_way: bool = False  # a (no match) row is shown
    no_match_proposed: bool = False
    note: str = ""  # why it was not evaluated

    @property
    def same_groups(self) -> bool:
        return not self.note and not self.only_two_way and not self.only_proposed


@dataclass(frozen=True)
class MeasureSideBySide:
    """One measure of one report the diff lists: whether the flip moves it, and whether the proposal does."""

    report: str
    measure: str
    moved_by_flip: bool
    moved_by_proposal: bool  # groups the condition drops do not count: dropping them is the point


@dataclass(frozen=True)
class ProposalOnData:
    """A proposal evaluated on the data beside the two-way revision."""

    proposal: Proposal
    reports: tuple[ReportSideBySide, ...]
    measures: tuple[MeasureSideBySide, ...]
    notes: tuple[str, ...] = ()
    # measures verify saw move under the flip (in some grouping), and those of them the diff of the old revision
    # and the proposal lists as able to move (none, when the proposal only adds conditions)
    flip_moved_measures: tuple[str, ...] = ()
    proposal_moves_measures: tuple[str, ...] = ()

    @property
    def left_alone(self) -> tuple[MeasureSideBySide, ...]:
        """What the flip moves and the proposal does not."""
        return tuple(m for m in self.measures if m.moved_by_flip and not m.moved_by_proposal)


def on_data(md, data, proposal: Proposal, user: str | None = None, moved_measures=()) -> ProposalOnData:
    """Evaluate `proposal` on `data` (verify's old and new databases) beside the two-way revision.

    `moved_measures`: the measures verify saw move under the flip; the
    proposal's effect on them is read from the diff of the old revision and
    the proposal (impact by reach: a measure it does not list cannot move).
    """
    from modeldiff.data import NO_MATCH, evaluate_report
    from modeldiff.errors import ModeldiffError

    result = md.result
    proposed = proposed_model(result.new, proposal)
    notes: list[str] = []

    def rows(model, name, db):
        try:
            return evaluate_report(model, name, db, user)
        except ModeldiffError as error:
            notes.append(f"report {name} was not evaluated: {error}")
            return None

    def split(evaluated):
        groups = {tuple(r[:evaluated.groups]) for r in evaluated.rows}
        no_match = any(g and g[0] is NO_MATCH for g in groups)
        return {g for g in groups if not (g and g[0] is NO_MATCH)}, no_match

    side_by_side = []
    for r in proposal.reports:
        two_way, mine = rows(result.new, r.report, data.new), rows(proposed, r.report, data.new)
        if two_way is None or mine is None:
            side_by_side.append(ReportSideBySide(r.report, 0, 0, note="not evaluated"))
            continue
        (a, a_nm), (b, b_nm) = split(two_way), split(mine)
        side_by_side.append(ReportSideBySide(r.report, len(a), len(b), tuple(sorted(a - b, key=repr)),
                                             tuple(sorted(b - a, key=repr)), a_nm, b_nm))
    conditioned = {r.report for r in proposal.reports}
    measures = []
    for impact in result.reports:
        name = impact.name
        if name not in result.old.reports:
            continue  # renamed or new: verify's own comparison covers it
        before, flipped, mine = (rows(result.old, name, data.old), rows(result.new, name, data.new),
                                 rows(proposed, name, data.new))
        if before is None or flipped is None or mine is None:
            continue
        for measure in result.new.reports[name].measures:
            if measure not in result.old.reports[name].measures:
                continue
            moved_by_flip = _moves(before, flipped, measure, dropped_count=True)
            moved_by_proposal = _moves(before, mine, measure, dropped_count=name not in conditioned)
            measures.append(MeasureSideBySide(name, measure, moved_by_flip, moved_by_proposal))
    from modeldiff import impact

    moved = tuple(sorted(set(moved_measures)))
    can_move = {i.name for i in impact.analyse(result.old, proposed).measures}
    return ProposalOnData(proposal, tuple(side_by_side), tuple(measures), tuple(dict.fromkeys(notes)), moved,
                          tuple(m for m in moved if m in can_move))


def _moves(before, after, measure: str, dropped_count: bool) -> bool:
    """Whether `measure` differs between two evaluations of a report (a group dropped counts unless told not to)."""
    from modeldiff.util import same_value

    def keyed(evaluated):
        index = evaluated.columns.index(measure)
        return {tuple(r[:evaluated.groups]): r[index] for r in evaluated.rows}

    old, new = keyed(before), keyed(after)
    if any(g not in old for g in new):
        return True
    return any((g not in new and dropped_count) or (g in new and not same_value(v, new[g])) for g, v in old.items())
