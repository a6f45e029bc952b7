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


def _diagram(md) -> str | None:
    """Mermaid source of what changed in one model (modeldiff.picture), or None when no link or path changed."""
    from modeldiff.picture import diff_picture, mermaid_of, readable

    pic = diff_picture(md.result, limit=0)
    return None if pic is None else mermaid_of(readable(pic)).rstrip("\n")


def _md(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _names(impacts, owners: dict[str, str] | None = None) -> str:
    parts = []
    for i in impacts:
        extra = [i.severity]
        if i.exposed:
            extra.append(f"now sees rows of {', '.join(i.exposed)} it did not")
        if owners is not None and owners.get(i.name):
            extra.append(f"owner {owners[i.name]}")
        parts.append(f"{i.name} ({'; '.join(extra)})")
    return ", ".join(parts)


def _path_line(kind: str, group) -> str:
    pairs = [c.subject.split(".", 1)[1].replace("->", " → ") for c in group]
    ids = ", ".join(c.id for c in group)
    what = "New filter paths" if kind == "path.added" else "Filter paths that no longer exist"
    return f"- {what} ({len(group)}): {', '.join(pairs)} ({ids})"


def severity_lines(result) -> list[str]:
    """The changes of one model, breaking first, one plain sentence each (filter paths summed up per severity)."""
    lines: list[str] = []
    for severity in ("breaking", "numbers", "safe"):
        group = [c for c in result.changes if c.severity == severity]
        errors = result.new_errors if severity == "breaking" else ()
        if not group and not errors:
            continue
        lines += ["", f"**{SEVERITY_TITLES[severity]}**", ""]
        lines += [f"- {_md(c.message)} ({c.id})" for c in group if not c.kind.startswith("path.")]
        for kind in ("path.added", "path.removed"):
            paths = [c for c in group if c.kind == kind]
            if paths:
                lines.append(_path_line(kind, paths))
        lines += [f"- The new revision has an error: {_md(f.message)} (`{f.rule}` on `{f.subject}`)" for f in errors]
    return lines


def model_section(md, level: int) -> list[str]:
    """One model's part of the notes, its title at Markdown heading `level`."""
    from modeldiff.render import causes_out
    from modeldiff.render.diff_out import SECURITY_CAUTION

    r = md.result
    name = r.new.name or r.old.name
    lines = [f"{'#' * level} `{name}` (`{md.new.path}`): {r.verdict}"]
    exposed = [c for c in r.changes if c.kind == "security.exposed"]
    if exposed:
        who = "; ".join(f"role {c.subject.split('.')[1]} can now see rows of {c.subject.split('.')[-1]} that were "
                        f"hidden from it" for c in exposed)
        lines += ["", f"> **SECURITY:** {_md(who)}. {SECURITY_CAUTION}"]
    if not r.changes and not r.new_errors:
        return lines + ["", "No change to what the model means (only layout or comments)."]
    by_cause = causes_out.markdown_lines(r)
    lines += [""] + by_cause if by_cause else []
    lines += severity_lines(r)
    owners = {name: (rep.owner or "") for name, rep in {**r.old.reports, **r.new.reports}.items()}
    impacted = [("measures", r.measures, None), ("roles", r.roles, None), ("reports", r.reports, owners)]
    rows = [f"- Impacted {title} ({len(items)}): {_md(_names(items, own))}" for title, items, own in impacted if items]
    if rows:
        lines += ["", *rows]
    diagram = _diagram(md)
    if diagram is not None:
        lines += ["", "What changed (arrows point the way a filter travels; changed links in red):", "",
                  "```mermaid", diagram, "```"]
    return lines


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


def commit_markdown(c: Commit) -> str:
    """The per-commit part of the notes for one commit that changed a model."""
    lines = ["", f"## {_commit_line(c)}"]
    for md in c.diffs:
        lines += ["", *model_section(md, 3)]
    return "\n".join(lines)


def as_markdown(notes: Notes, stream: TextIO, spool: Spool | None = None) -> None:
    """The notes as Markdown; commits rendered ahead (`Commit.rendered`) are read back from `spool`."""
    from modeldiff.changes import worst

    changed = [c for c in notes.commits if c.changed_models]
    quiet = [c for c in notes.commits if not c.changed_models]
    verdict = worst(d.result.verdict for d in notes.models)
    title = f"# Release notes: `{notes.range}`" + (", commit by commit" if notes.mode == "per-commit" else "")
    lines = [title, "", f"{len(notes.commits)} commit{'s' if len(notes.commits) != 1 else ''}, "
             f"{len(changed)} changing a model. Overall: **{verdict}**."]
    if not notes.commits:
        lines = [title, "", f"No commits in `{notes.range}`."]
    if notes.mode == "per-commit":
        stream.write("\n".join(lines))
        for c in changed:
            stream.write("\n" + (spool.text(c.rendered) if c.rendered is not None else commit_markdown(c)))
        lines = [""]
    else:
        if notes.commits and not notes.models:
            lines += ["", "No model changed between the start and the end of the range."]
        for md in notes.models:
            lines += ["", *model_section(md, 2)]
        if changed:
            lines += ["", "## Commits", ""]
            lines += [f"- {_commit_line(c)}: {', '.join(c.paths)}" for c in changed]
    lines += _quiet_line(quiet)
    stream.write("\n".join(lines) + "\n")


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


# --- the command ----------------------------------------------------------------------------------


def configure(parser) -> None:
    parser.add_argument("range", metavar="REV_RANGE", help="A..B or A...B, git's notation (A.. means A..HEAD)")
    parser.add_argument("--format", choices=FORMATS, default="markdown")
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--per-commit", dest="mode", action="store_const", const="per-commit",
                      help="one section per commit, with its subject line")
    mode.add_argument("--squash", dest="mode", action="store_const", const="squash",
                      help="one section per model, the range as a whole (the default)")
    parser.set_defaults(mode="squash")
    parser.add_argument("--repo", metavar="DIR", default=".", help="the repository (default: the current folder)")


def run(args, stdout: TextIO) -> int:
    from modeldiff import git

    split_range(args.range)  # a bad range is a usage error before git is touched
    root = git.repo_root(args.repo)
    spool = Spool()
    try:
        piece = commit_models_json if args.format == "json" else commit_markdown
        render = (lambda c: spool.add(piece(c)) if c.changed_models or args.format == "json" else None)
        with git.session(root):  # one open repository for the whole walk
            notes = read_notes(root, args.range, args.mode, render)
        if args.format == "json":
            write_json(notes, stdout, spool)
        else:
            as_markdown(notes, stdout, spool)
    finally:
        spool.close()
    return 0

