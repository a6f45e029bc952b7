"""Release notes for a range of commits: what changed in each model, in plain words, grouped by severity.

`modeldiff notes A..B` (git's range notation; `A..` means `A..HEAD`, `A...B`
is accepted too) reads the commits of the range and compares the models they
touched with the same service as `modeldiff diff` (`compare.compare_revisions`);
every sentence comes from the `Change` records and impacts it returns.

- `--squash` (default): one section per model, comparing the merge base of A
  and B with B (as `git diff A...B` does), so changes made only on A's side
  never show up as their reverse.
- `--per-commit`: each commit (oldest first) with its short sha, subject line
  and the model changes it made against its first parent. A merge commit shows
  only the models it changed against every parent (a conflict resolved by
  hand); what it merged is listed under the merged commits. A commit without
  a parent compares its models with nothing (each is added whole).

Commits that changed no model are listed on one line at the end. A picture of
what changed (Mermaid, from `modeldiff.picture`) follows each model whose links
or filter paths changed. A security exposure is said plainly, with the caution
that the organisation's own review decides. The command exits 0: the notes
are a document; `modeldiff diff` and the hook are the gates.

Markdown notes fit a pull-request comment (65,536 characters) by default:
longer ones are shortened by `shortened` (breaking changes whole, the rest
folded and counted), with the writer `diff --format markdown` uses
(`render/md_budget.py`); `--budget N|none` sets another size.
"""

from __future__ import annotations

import gc
import json
import re
from dataclasses import dataclass
from typing import Sequence, TextIO

from modeldiff.errors import UsageError

FORMATS = ("markdown", "json")
SEVERITY_TITLES = {"breaking": "Breaking", "numbers": "Can move numbers", "safe": "Safe"}
SHORT = 7  # characters of a commit id shown
# Per commit, a full collection every few commits: comparing makes some reference cycles (parsed SQL),
# and the records made while the collector is paused (util.paused_gc) go straight to the oldest
# generation, which is collected rarely; without it a walk of 120 commits grew by 2.5 MB a commit.
COLLECT_EVERY = 4


@dataclass(frozen=True)
class Commit:
    """One commit of the range, with the model paths it changed."""

    sha: str
    subject: str
    parents: tuple[str, ...]
    paths: tuple[str, ...]  # model paths the commit changed (see the module docstring for merges)
    diffs: tuple = ()  # compare.ModelDiff records, per-commit mode only (released once rendered)
    changed: bool | None = None  # `changed_models`, kept when the diffs are released
    rendered: object = None  # what a renderer made of the diffs before they were released

    @property
    def short(self) -> str:
        return self.sha[:SHORT]

    @property
    def changed_models(self) -> bool:
        """True when a model's meaning changed (a file touched without any change does not count)."""
        if self.changed is not None:
            return self.changed
        if self.diffs:
            return any(d.result.changes or d.result.new_errors for d in self.diffs)
        return bool(self.paths)


@dataclass(frozen=True)
class Notes:
    """Release notes across a range of commits."""

    range: str
    mode: str  # squash | per-commit
    start: str  # what the squashed comparison starts from, as shown
    end: str
    commits: tuple[Commit, ...]
    models: tuple  # compare.ModelDiff records: the range as a whole


# --- reading the range -------------------------------------------------------------------------


def split_range(text: str) -> tuple[str, str, str]:
    """(left, operator, right) of `A..B` or `A...B`; an empty side is HEAD, as in git."""
    for operator in ("...", ".."):
        if operator in text:
            left, right = text.split(operator, 1)
            if operator in right:
                break
            return left or "HEAD", operator, right or "HEAD"
    raise UsageError(f"'{text}' is not a range; write A..B (for everything since a tag: TAG..HEAD)")


def _touched(root: str, sha: str, parents: tuple[str, ...]) -> tuple[str, ...]:
    from modeldiff import git

    if not parents:
        return tuple(git.list_models(root, sha))
    found = set(git.changed_models(root, parents[0], sha))
    for parent in parents[1:]:
        found &= set(git.changed_models(root, parent, sha))
    return tuple(sorted(found))


def _commit_diffs(root: str, commit: Commit, history=None) -> tuple:
    from modeldiff import compare

    if not commit.paths:
        return ()
    if not commit.parents:
        return tuple(compare.compare_with_nothing(root, commit.sha, commit.paths))
    return tuple(compare.compare_revisions(root, commit.parents[0], commit.sha, list(commit.paths),
                                           history=history))


def read_notes(root: str, range_text: str, mode: str = "squash", render=None) -> Notes:
    """Everything the notes say, read from the repository at `root`.

    Per commit, the commits are compared oldest first, each revision read
    once (`compare.History`: a commit's new side is the next one's old side,
    and comparisons seen before come from the cache). With `render` (a
    function of a `Commit`), each commit is rendered as soon as it is compared
    and kept as `Commit.rendered` without its diffs, so the models of a long
    range are released one commit after another and memory stays bounded.
    """
    from modeldiff import compare, git

    left, operator, right = split_range(range_text)
    shas = git.commits_in_range(root, f"{left}{operator}{right}")
    facts = git.commit_facts(root, shas)
    history = compare.History()
    commits = []
    for number, sha in enumerate(shas):
        if mode == "per-commit" and number % COLLECT_EVERY == COLLECT_EVERY - 1:
            gc.collect()  # see COLLECT_EVERY
        parents, subject = facts.get(sha, ((), ""))
        commit = Commit(sha, subject, parents, _touched(root, sha, parents))
        if mode == "per-commit":
            commit = Commit(sha, subject, parents, commit.paths, _commit_diffs(root, commit, history))
            if render is not None:
                commit = Commit(sha, subject, parents, commit.paths, (), commit.changed_models, render(commit))
        commits.append(commit)
    del history

    left_sha, right_sha = git.resolve_rev(root, left), git.resolve_rev(root, right)
    base = git.merge_base(root, left_sha, right_sha) or left_sha
    start = left if base == left_sha else base[:SHORT]
    paths = git.changed_models(root, base, right_sha)
    models = tuple(compare.compare_revisions(root, start if base == left_sha else base, right, paths)) if paths else ()
    return Notes(range_text, mode, start, right, tuple(commits), models)


# --- words --------------------------------------------------------------------------------------


def _picture(md):
    """The picture of what changed in one model (modeldiff.picture, cut to a readable size), or None."""
    from modeldiff.picture import diff_picture, readable

    pic = diff_picture(md.result, limit=0)
    return None if pic is None else readable(pic)


def _diagram(md) -> str | None:
    """Mermaid source of what changed in one model (modeldiff.picture), or None when no link or path changed."""
    from modeldiff.picture import mermaid_of

    pic = _picture(md)
    return None if pic is None else mermaid_of(pic).rstrip("\n")


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _names(impacts, owners: dict[str, str] | None = None) -> list[str]:
    parts = []
    for i in impacts:
        extra = [i.severity]
        if i.exposed:
            extra.append(f"now sees rows of {', '.join(i.exposed)} it did not")
        if owners is not None and owners.get(i.name):
            extra.append(f"owner {owners[i.name]}")
        parts.append(_md(f"{i.name} ({'; '.join(extra)})"))
    return parts


def _path_line(kind: str, group) -> tuple[str, str]:
    """The line of new or vanished filter paths, and its short form (count and ids only)."""
    pairs = [c.subject.split(".", 1)[1].replace("->", " → ") for c in group]
    ids = ", ".join(c.id for c in group)
    what = "New filter paths" if kind == "path.added" else "Filter paths that no longer exist"
    return f"- {what} ({len(group)}): {', '.join(pairs)} ({ids})", f"- {what} ({len(group)}) ({ids})"


def severity_items(result) -> dict[str, list[tuple[str, str]]]:
    """Per severity, breaking first, the lines of the changes: (the plain sentence, a short form by id, kind
    and subject); filter paths summed up on one line per severity; the new revision's errors under breaking."""
    items: dict[str, list[tuple[str, str]]] = {}
    for severity in ("breaking", "numbers", "safe"):
        group = [c for c in result.changes if c.severity == severity]
        errors = result.new_errors if severity == "breaking" else ()
        if not group and not errors:
            continue
        found = [(f"- {_md(c.message)} ({c.id})", f"- `{c.kind}` `{c.subject}` ({c.id}; message left out for length)")
                 for c in group if not c.kind.startswith("path.")]
        for kind in ("path.added", "path.removed"):
            paths = [c for c in group if c.kind == kind]
            if paths:
                found.append(_path_line(kind, paths))
        found += [(f"- The new revision has an error: {_md(f.message)} (`{f.rule}` on `{f.subject}`)",
                   f"- The new revision has an error (`{f.rule}` on `{f.subject}`; message left out for length)")
                  for f in errors]
        items[severity] = found
    return items


def severity_lines(result) -> list[str]:
    """The changes of one model, breaking first, one plain sentence each (filter paths summed up per severity)."""
    lines: list[str] = []
    for severity, found in severity_items(result).items():
        lines += ["", f"**{SEVERITY_TITLES[severity]}**", "", *(line for line, _ in found)]
    return lines


DIAGRAM_INTRO = "What changed (arrows point the way a filter travels; changed links in red):"


def model_parts(md) -> dict:
    """One model's part of the notes as named pieces (plain JSON values), for `section_lines` and `shortened`."""
    from modeldiff.render import causes_out
    from modeldiff.render.diff_out import SECURITY_CAUTION

    r = md.result
    name = r.new.name or r.old.name
    parts: dict = {"title": f"`{name}` (`{md.new.path}`): {r.verdict}", "security": [], "unchanged": False,
                   "causes": [], "changes": {}, "impacted": [], "diagram": [], "counts": {}}
    exposed = [c for c in r.changes if c.kind == "security.exposed"]
    if exposed:
        who = "; ".join(f"role {c.subject.split('.')[1]} can now see rows of {c.subject.split('.')[-1]} that were "
                        f"hidden from it" for c in exposed)
        parts["security"] = [f"> **SECURITY:** {_md(who)}. {SECURITY_CAUTION}"]
    if not r.changes and not r.new_errors:
        parts["unchanged"] = True
        return parts
    parts["causes"] = causes_out.markdown_lines(r)
    parts["changes"] = severity_items(r)
    owners = {name: (rep.owner or "") for name, rep in {**r.old.reports, **r.new.reports}.items()}
    parts["impacted"] = [(title, _names(items, own)) for title, items, own in
                         (("measures", r.measures, None), ("roles", r.roles, None), ("reports", r.reports, owners))
                         if items]
    pic = _picture(md)
    if pic is not None:
        from modeldiff.picture import mermaid_of

        parts["diagram"] = ([DIAGRAM_INTRO, "", "```mermaid", mermaid_of(pic).rstrip("\n"), "```"]
                            + (["", f"_{_md(pic.caption)}_"] if pic.caption else []))
    counts = r.counts()
    parts["counts"] = {"changes": len(r.changes), **{s: counts[s] for s in ("breaking", "numbers", "safe")},
                       "errors": len(r.new_errors), "measures": len(r.measures), "roles": len(r.roles),
                       "reports": len(r.reports)}
    return parts


def section_lines(parts: dict, level: int) -> list[str]:
    """One model's part of the notes (`model_parts`), its title at Markdown heading `level`."""
    lines = [f"{'#' * level} {parts['title']}"]
    if parts["security"]:
        lines += ["", *parts["security"]]
    if parts["unchanged"]:
        return lines + ["", "No change to what the model means (only layout or comments)."]
    if parts["causes"]:
        lines += ["", *parts["causes"]]
    for severity, found in parts["changes"].items():
        lines += ["", f"**{SEVERITY_TITLES[severity]}**", "", *(line for line, _ in found)]
    rows = [f"- Impacted {title} ({len(items)}): {', '.join(items)}" for title, items in parts["impacted"]]
    if rows:
        lines += ["", *rows]
    if parts["diagram"]:
        lines += ["", *parts["diagram"]]
    return lines


def model_section(md, level: int) -> list[str]:
    """One model's part of the notes, its title at Markdown heading `level`."""
    return section_lines(model_parts(md), level)


def _commit_line(c: Commit) -> str:
    return f"`{c.short}` {_md(c.subject)}"


def _quiet_line(quiet: Sequence[Commit]) -> list[str]:
    if not quiet:
        return []
    return ["", f"{len(quiet)} commit{'s' if len(quiet) != 1 else ''} changed no model: "
            + "; ".join(_commit_line(c) for c in quiet) + "."]


class Spool:
    """Rendered pieces of the notes kept aside (in memory up to `MEMORY`, then on disk) until the notes are written.

    Per-commit notes render each commit as soon as it is compared; its text
    waits here, not in the records, so a long range costs a few numbers per
    commit in memory, and nothing is written out before every commit is read.
    """

    MEMORY = 4 * 1024 * 1024

    def __init__(self) -> None:
        import tempfile

        self._file = tempfile.SpooledTemporaryFile(max_size=self.MEMORY)
        self._pieces: list[tuple[int, int]] = []

    def add(self, text: str) -> int:
        """Keep `text`; its number, for `text`."""
        data = text.encode("utf-8")
        self._file.seek(0, 2)
        self._pieces.append((self._file.tell(), len(data)))
        self._file.write(data)
        return len(self._pieces) - 1

    def text(self, number: int) -> str:
        offset, size = self._pieces[number]
        self._file.seek(offset)
        return self._file.read(size).decode("utf-8")

    def close(self) -> None:
        self._file.close()


def commit_parts(c: Commit) -> dict:
    """The per-commit part of the notes for one commit that changed a model, as plain JSON values."""
    return {"line": _commit_line(c), "models": [model_parts(md) for md in c.diffs]}


def commit_piece(c: Commit) -> str:
    """`commit_parts` as JSON text: what per-commit Markdown notes keep in the spool for each commit."""
    return json.dumps(commit_parts(c), separators=(",", ":"))


def _commit_text(parts: dict) -> str:
    lines = ["", f"## {parts['line']}"]
    for model in parts["models"]:
        lines += ["", *section_lines(model, 3)]
    return "\n".join(lines)


def commit_markdown(c: Commit) -> str:
    """The per-commit part of the notes for one commit that changed a model."""
    return _commit_text(commit_parts(c))


class _Count:
    """A stream that only counts the characters written to it."""

    def __init__(self) -> None:
        self.size = 0

    def write(self, text: str) -> int:
        self.size += len(text)
        return len(text)


def as_markdown(notes: Notes, stream: TextIO, spool: Spool | None = None, budget: int | None = None) -> None:
    """The notes as Markdown, within `budget` characters (None: everything; see `shortened`).

    Commits rendered ahead (`Commit.rendered`, the text of `commit_piece`) are read back from `spool`.
    """
    def pieces():
        for c in notes.commits:
            if c.changed_models:
                yield json.loads(spool.text(c.rendered)) if c.rendered is not None else commit_parts(c)

    squashed = [model_parts(md) for md in notes.models] if notes.mode == "squash" else []
    if budget is not None:
        count = _Count()
        _write_whole(notes, count, pieces(), squashed)
        if count.size > budget:
            stream.write(shortened(notes, pieces, squashed, budget))
            return
    _write_whole(notes, stream, pieces(), squashed)


def _head(notes: Notes) -> list[str]:
    from modeldiff.changes import worst

    changed = sum(c.changed_models for c in notes.commits)
    verdict = worst(d.result.verdict for d in notes.models)
    title = f"# Release notes: `{notes.range}`" + (", commit by commit" if notes.mode == "per-commit" else "")
    if not notes.commits:
        return [title, "", f"No commits in `{notes.range}`."]
    lines = [title, "", f"{len(notes.commits)} commit{'s' if len(notes.commits) != 1 else ''}, "
             f"{changed} changing a model. Overall: **{verdict}**."]
    if notes.mode == "squash" and not notes.models:
        lines += ["", "No model changed between the start and the end of the range."]
    return lines


def _commit_rows(notes: Notes) -> list[str]:
    """The squashed notes' list of the commits that changed a model."""
    return [f"- {_commit_line(c)}: {', '.join(c.paths)}" for c in notes.commits if c.changed_models]


def _write_whole(notes: Notes, stream, pieces, squashed: list[dict]) -> None:
    quiet = [c for c in notes.commits if not c.changed_models]
    lines = _head(notes)
    if notes.mode == "per-commit":
        stream.write("\n".join(lines))
        for parts in pieces:
            stream.write("\n" + _commit_text(parts))
        lines = [""]
    else:
        for parts in squashed:
            lines += ["", *section_lines(parts, 2)]
        rows = _commit_rows(notes)
        if rows:
            lines += ["", "## Commits", "", *rows]
    lines += _quiet_line(quiet)
    stream.write("\n".join(lines) + "\n")


# --- within a budget ----------------------------------------------------------------------------------


def _counted(counts: dict) -> str:
    """A model's title's tail in shortened notes: how many changes of each severity, how many impacted items."""
    if not counts:
        return ""
    severities = ", ".join(f"{counts[s]:,} {words}" for s, words in
                           (("breaking", "breaking"), ("numbers", "can move numbers"), ("safe", "safe")) if counts[s])
    impacted = ", ".join(f"{counts[k]:,} {k if counts[k] != 1 else k[:-1]}" for k in ("measures", "roles", "reports")
                         if counts[k])
    return (f" — {counts['changes']:,} change{'s' if counts['changes'] != 1 else ''}"
            + (f" ({severities})" if severities else "")
            + (f", {counts['errors']:,} error{'s' if counts['errors'] != 1 else ''}" if counts["errors"] else "")
            + (f"; impacted: {impacted}" if impacted else ""))


def _title_lines(model: dict, level: int) -> list[str]:
    lines = ["", f"{'#' * level} {model['title']}{_counted(model['counts'])}"]
    if model["security"]:
        lines += ["", *model["security"]]
    if model["unchanged"]:
        lines += ["", "No change to what the model means (only layout or comments)."]
    return lines


def _open_block(w, place: list, heading: list[str], models: list[dict], level: int) -> list | None:
    """Write a block's heading, its models' titles with their counts, and their breaking changes whole.

    What it writes was promised beforehand (`w.expect(_promised(...))`). Returns, per model, the slots kept
    for its summary by cause and for the rest (None for an unchanged model), or None when even the block's
    heading no longer fits (the block is then left out).
    """
    def give_up(rest: list[dict]) -> None:
        """Release what was promised to the breaking changes of models left out, and count them."""
        for model in rest:
            breaking = [] if model["unchanged"] else model["changes"].get("breaking", [])
            if breaking:
                w.pending -= sum(len(line) + 1 for line in _BREAKING_TITLE + [short for _, short in breaking])
                w.skip("breaking changes (beyond the budget)", len(breaking))

    if not w.must_lines(heading, place):
        for model in models:
            w.pending -= sum(len(line) + 1 for line in _title_lines(model, level))
        give_up(models)
        return None
    slots = []
    for model in models:
        if not w.must_lines(_title_lines(model, level), place):
            slots.append(None)
            give_up([model])
            continue
        if model["unchanged"]:
            slots.append(None)
            continue
        causes = w.slot(place)
        breaking = model["changes"].get("breaking", [])
        if breaking:
            w.must_lines(_BREAKING_TITLE, place)
            for line, short in breaking:
                w.must(line, short, place)
        slots.append((causes, w.slot(place)))
    return slots


_BREAKING_TITLE = ["", f"**{SEVERITY_TITLES['breaking']}**", ""]


def _promised(heading: list[str], models: list[dict], level: int) -> list[str]:
    """What `_open_block` writes of a block with a breaking change before anything optional: its headings, and
    the short forms of its breaking changes (the whole ones take the room they need if it is there)."""
    lines = list(heading)
    for model in models:
        lines += _title_lines(model, level)
        breaking = model["changes"].get("breaking", [])
        if breaking and not model["unchanged"]:
            lines += _BREAKING_TITLE + [short for _, short in breaking]
    return lines


def _folded_items(model: dict) -> list[tuple]:
    """What a model's part folds in shortened notes: (kind, summary, rows, weights, what) or a diagram."""
    from modeldiff.render.md_budget import cut

    items = []
    for severity, what in (("numbers", "changes that can move numbers"), ("safe", "safe changes")):
        found = model["changes"].get(severity)
        if found:
            rows = [cut(line) for line, _ in found]
            weights = [_weight(line) for line, _ in found]
            n = sum(weights)
            items.append(("rows", f"{SEVERITY_TITLES[severity]} ({n} change{'s' if n != 1 else ''})", rows, weights,
                          what))
    for title, names in model["impacted"]:
        items.append(("rows", f"Impacted {title} ({len(names)})", [cut(f"- {n}") for n in names], None,
                      f"impacted {title}"))
    if model["diagram"]:
        items.append(("diagram", "", model["diagram"], None, "diagrams"))
    return items


def _need(item: tuple) -> int:
    """Characters a folded item of `_folded_items` takes whole."""
    from modeldiff.render.md_budget import folded_size

    kind, summary, rows, _, _ = item
    return sum(len(row) + 1 for row in rows) + 1 if kind == "diagram" else folded_size(summary, (), rows)


_PATHS_COUNT = re.compile(r"^- (?:New filter paths|Filter paths that no longer exist) \((\d+)\): ")


def _weight(line: str) -> int:
    """How many changes a line of changes stands for (a line of filter paths sums up several)."""
    found = _PATHS_COUNT.match(line)
    return int(found.group(1)) if found else 1


def shortened(notes: Notes, pieces, squashed: list[dict], budget: int) -> str:
    """The notes within `budget` characters, written with `render.md_budget.Writer` (the budget of `diff`).

    Always, in the document's order: the title and the overall line, and
    every commit (or model, squashed) with a breaking change or a security
    line: its heading, its models' titles with their counts of changes and
    impacted items, the security line and every breaking change whole (by id,
    kind and subject only when even one line no longer fits). Then, while
    they fit: the headings of the other commits; each model's summary by
    cause (whole or not at all); then the changes that can move numbers, the
    safe ones and the impacted measures, roles and reports, each folded in a
    `<details>` block that says how many it holds and shows, and the diagram,
    each of these given an equal share of the room left. A last line counts
    what was left out and how to get all of it (`--format json`,
    `--budget none`). `pieces` is a function giving the commits' parts
    (`commit_parts`) anew for each pass, so they can come from the spool.
    """
    from modeldiff.render import md_budget

    def blocks():
        if notes.mode == "per-commit":
            for parts in pieces():
                yield ["", f"## {parts['line']}"], parts["models"], 3
        else:
            for parts in squashed:
                yield [], [parts], 2

    def urgent(models: list[dict]) -> bool:
        return any(m["changes"].get("breaking") or m["security"] for m in models)

    w = md_budget.Writer(budget)
    w.add(_head(notes))
    places: list[list] = []
    w.expect([line for heading, models, level in blocks() if urgent(models)
              for line in _promised(heading, models, level)])
    section = "commits' sections (with all they hold)" if notes.mode == "per-commit" else "models' sections"
    for heading, models, level in blocks():
        place = w.slot()
        opened = None
        if urgent(models):
            opened = _open_block(w, place, heading, models, level)
            if opened is None:
                w.skip(section)
        places.append([place, opened, urgent(models)])
    tail = w.slot()
    commit_list = w.slot(tail)
    quiet = [c for c in notes.commits if not c.changed_models]
    line = _quiet_line(quiet)
    if line and not w.fits(line):
        line = ["", f"{len(quiet)} commit{'s' if len(quiet) != 1 else ''} changed no model."]
        w.skip("commits that changed no model, named", len(quiet))
    w.add(line, tail)
    # the headings of the other blocks, in order
    for place, (heading, models, level) in zip(places, blocks()):
        if place[1] is None and not place[2]:
            lines = heading + [line for m in models for line in _title_lines(m, level)]
            if w.fits(lines):
                w.expect(lines)
                place[1] = _open_block(w, place[0], heading, models, level)
            else:
                w.skip(section)
    # each model's summary by cause
    for place, (_, models, _) in zip(places, blocks()):
        for slots, model in zip(place[1] or (), models):
            if slots is None or not model["causes"]:
                continue
            if w.fits(["", *model["causes"]]):
                w.add(["", *model["causes"]], slots[0])
            else:
                w.skip("summaries by cause")
    # the rest, folded: each block as much room as it needs while the others get as much (md_budget.fair_shares)
    commit_rows = _commit_rows(notes) if notes.mode == "squash" else []
    commits_title = f"Commits that changed a model ({len(commit_rows)})"

    def folded(model: dict) -> list[tuple]:
        return _folded_items(model) if model["changes"] and not model["unchanged"] else []

    items = [(_need(item), item[0] == "diagram") for place, (_, models, _) in zip(places, blocks()) if place[1]
             for m in models for item in folded(m)]
    items += [(md_budget.folded_size(commits_title, (), commit_rows), False)] if commit_rows else []
    shares = iter(md_budget.fair_shares([need for need, _ in items], w.room(), [whole for _, whole in items]))
    for place, (_, models, _) in zip(places, blocks()):
        for slots, model in zip(place[1] or (), models):
            for kind, summary, rows, weights, what in folded(model) if slots is not None else ():
                share = next(shares)
                if kind == "diagram":
                    if _need((kind, summary, rows, weights, what)) <= share:
                        w.add(["", *rows], slots[1])
                    else:
                        w.skip(what)
                    continue
                w.folded(summary, [], rows, what, limit=share, into=slots[1], weights=weights)
                w.skip("lines cut short", sum(row.endswith("…") for row in rows))
    if commit_rows:
        w.folded(commits_title, [], commit_rows, "commits in the list", limit=next(shares), into=commit_list)
    return w.text(md_budget.left_out_line(w.left_out, budget, "`--format json`"))


def _model_doc(md) -> dict:
    from modeldiff.render.diff_out import model_json

    return {**model_json(md), "diagram": _diagram(md)}


_PIECE = "\0piece {}\0"  # stands for a commit's models rendered ahead, in the document's skeleton
_PIECE_JSON = re.compile(r'"\\u0000piece (\d+)\\u0000"')
_COMMIT_INDENT = 6  # where a commit's "models" sits in notes_json's document at indent=2


def commit_models_json(c: Commit) -> str:
    """A per-commit `models` list as JSON text, indented to sit inside the notes' document."""
    return json.dumps([_model_doc(md) for md in c.diffs], indent=2).replace("\n", "\n" + " " * _COMMIT_INDENT)


def notes_json(notes: Notes) -> dict:
    """The notes as one JSON document (a commit rendered ahead stands as a placeholder: see `write_json`)."""
    from modeldiff.changes import worst

    commits = []
    for c in notes.commits:
        doc = {"sha": c.sha, "short": c.short, "subject": c.subject, "parents": list(c.parents),
               "paths": list(c.paths), "changed_models": c.changed_models}
        if notes.mode == "per-commit":
            doc["models"] = _PIECE.format(c.rendered) if c.rendered is not None else [_model_doc(md) for md in c.diffs]
        commits.append(doc)
    return {"format": 1, "range": notes.range, "mode": notes.mode, "start": notes.start, "end": notes.end,
            "commits": commits, "models": [_model_doc(md) for md in notes.models],
            "summary": {"commits": len(notes.commits), "changing_models": sum(c.changed_models for c in notes.commits),
                        "verdict": worst(d.result.verdict for d in notes.models)}}


def write_json(notes: Notes, stream: TextIO, spool: Spool | None = None) -> None:
    """`notes_json` written out, each commit rendered ahead read back from `spool` in its place."""
    parts = _PIECE_JSON.split(json.dumps(notes_json(notes), indent=2))
    for index, part in enumerate(parts):
        stream.write(spool.text(int(part)) if index % 2 else part)
    stream.write("\n")
