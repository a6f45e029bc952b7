"""Markdown within a budget of characters, so it fits where it is read: `diff --format markdown` (here) and
the notes (`notes.shortened`), both written with `Writer`.

A pull-request comment holds 65,536 characters (`COMMENT`, the default); a CI
job summary 1 MiB (`--budget 1048576`); `--budget none` writes everything.
When the whole Markdown (`diff_out.as_markdown`) fits, it is written as is.
Otherwise, in this order and always whole:

1. the table of models and verdicts;
2. per model: the security caution, the summary by cause (unless the
   breaking changes need its room), every breaking change whole (id, kind,
   subject, message) and the new revision's errors;

then, while they fit, each in a folded `<details>` block that says how many it
holds: the diagram (already cut to a readable size; whole or not at all), the
changes that can move numbers and the safe ones, then the impacted roles,
reports and measures, one row at a time. Each block gets as much room as it
needs while the others get as much (`fair_shares`, max-min fairness). Whatever did not fit is counted on a last line, which says how
to get all of it (`--format json`, `--format html`, `--budget none`).

Should the breaking changes alone not fit, each is written whole while the
short forms of those after it still fit, else by id, kind and subject only
(the line says so), and those beyond even that are counted on the last line
(`Writer.must`): the budget always holds, since a comment over its limit is
not posted at all.
"""

from __future__ import annotations

import io
from typing import Sequence, TextIO

COMMENT = 65_536  # characters in a pull-request comment
JOB_SUMMARY = 1_048_576  # bytes in a CI job summary (1 MiB)
ROW_LIMIT = 400  # characters of an impacted item's line (its reasons cut short past it; all are in JSON and HTML)
_RESERVE = 1_200  # kept free for the closing lines and the note of what was left out


def parse_budget(text: str) -> int | None:
    """`none` -> None; a whole number of characters (at least 2,000), optionally with a k/K or M/Mi suffix."""
    from modeldiff.errors import UsageError

    word = text.strip().lower()
    if word == "none":
        return None
    scale = 1
    for suffix, factor in (("mib", 1 << 20), ("mi", 1 << 20), ("m", 1 << 20), ("kib", 1 << 10), ("k", 1 << 10)):
        if word.endswith(suffix):
            word, scale = word[: -len(suffix)], factor
            break
    if not word.isdigit() or int(word) * scale < 2_000:
        raise UsageError(f"--budget {text!r}: give a number of characters of at least 2000 (e.g. 65536 or 1MiB), "
                         "or none")
    return int(word) * scale


_CLOSING = ["", "</details>"]


def folded_size(summary: str, header: Sequence[str], rows: Sequence[str]) -> int:
    """Characters a `Writer.folded` block of every one of `rows` takes (with 40 to spare for its summary's tail)."""
    return (sum(len(line) + 1 for line in ["", f"<details><summary>{summary}</summary>", "", *header, *_CLOSING])
            + 40 + sum(len(row) + 1 for row in rows))


def fair_shares(needs: Sequence[int], room: int, whole: Sequence[bool] | None = None) -> list[int]:
    """Room for each of several blocks that need `needs` characters, sharing `room`: whatever a block does not
    need goes to the others (max-min fairness), so a small block is whole and the large ones share the rest.

    A block marked in `whole` (a diagram) is shown whole or not at all: when its share falls short of its
    need it gets nothing, and the room it would have had goes to the others.
    """
    needs = list(needs)
    while True:
        shares = [0] * len(needs)
        left = max(0, room)
        order = sorted(range(len(needs)), key=needs.__getitem__)
        for done, index in enumerate(order):
            shares[index] = min(needs[index], left // (len(needs) - done))
            left -= shares[index]
        short = [i for i in range(len(needs)) if whole and whole[i] and 0 < shares[i] < needs[i]]
        if not short:
            return shares
        for index in short:
            needs[index] = 0


class Writer:
    """Lines kept while they fit in the budget; what did not fit is counted by what it was.

    Lines go to the end of the document, or into a *slot*: a place kept in the
    document where it was made (`slot()`), filled later (`add(..., into=slot)`).
    A layout can so write what must be there first (the breaking changes) and
    fill the places before it afterwards, while the room lasts, without
    reordering the document. Slots nest (`slot(into=other)`). Used by this
    module's layout of `diff` and by the notes' (`notes.shortened`).
    """

    def __init__(self, budget: int) -> None:
        self.budget = budget
        self._root: list = []  # lines and slots (lists of the same), in document order
        self.size = 0
        self.left_out: dict[str, int] = {}
        self.pending = 0  # characters promised to lines `must` and `must_lines` will write later (`expect`)

    def room(self) -> int:
        """Characters left for what is optional: the budget, less what is written, the closing lines and what
        is promised to the lines that must come."""
        return self._free() - self.pending

    def _free(self) -> int:
        return self.budget - _RESERVE - self.size

    def expect(self, lines: Sequence[str]) -> None:
        """Promise room to lines written later by `must` (their short forms) or `must_lines`."""
        self.pending += sum(len(line) + 1 for line in lines)

    def must_lines(self, lines: Sequence[str], into: list | None = None) -> bool:
        """Lines promised by `expect` (a heading the breaking changes need): written when they fit at all."""
        size = sum(len(line) + 1 for line in lines)
        self.pending -= size
        if size > self._free():
            return False
        self.add(lines, into)
        return True

    def must(self, whole: str, short: str, into: list | None = None) -> None:
        """A line that should be there whole (a breaking change), its short form promised by `expect`.

        Whole while that leaves the room promised to the lines still to come;
        else its short form (id, kind and subject), while it fits at all; else
        counted as left out. The budget always holds: a comment longer than
        its limit is not posted at all.
        """
        self.pending -= len(short) + 1
        if len(whole) + 1 <= self.room():
            self.add([whole], into)
        elif len(short) + 1 <= self._free():
            self.add([short], into)
            self.skip("messages of breaking changes")
        else:
            self.skip("breaking changes (beyond the budget)")

    def fits(self, lines: Sequence[str]) -> bool:
        return sum(len(line) + 1 for line in lines) <= self.room()

    def add(self, lines: Sequence[str], into: list | None = None) -> None:
        (self._root if into is None else into).extend(lines)
        self.size += sum(len(line) + 1 for line in lines)

    def slot(self, into: list | None = None) -> list:
        """A place at the end of the document (or of `into`), to be filled later."""
        place: list = []
        (self._root if into is None else into).append(place)
        return place

    def skip(self, what: str, n: int = 1) -> None:
        if n:
            self.left_out[what] = self.left_out.get(what, 0) + n

    def folded(self, summary: str, header: Sequence[str], rows: Sequence[str], what: str, limit: int | None = None,
               into: list | None = None, weights: Sequence[int] | None = None) -> None:
        """A <details> block of as many `rows` as fit in `limit` characters (or the room left); its summary says
        how many it holds and shows. The rows left out are counted as `what`, each as 1 or as its weight (a row
        standing for several items)."""
        opening = ["", f"<details><summary>{summary}</summary>", "", *header]
        room = self.room() if limit is None else min(limit, self.room())
        used = folded_size(summary, header, ())
        kept: list[str] = []
        for row in rows:
            if used + len(row) + 1 > room:
                break
            kept.append(row)
            used += len(row) + 1
        if kept:
            shown = summary if len(kept) == len(rows) else f"{summary}: the first {len(kept)} shown"
            opening[1] = f"<details><summary>{shown}</summary>"
            self.add(opening + kept + _CLOSING, into)
        self.skip(what, len(rows) - len(kept) if weights is None else sum(weights[len(kept):]))

    def text(self, closing: str) -> str:
        """The document: what was kept, then (when something was left out) a rule and `closing`'s line."""
        lines: list[str] = []

        def flatten(items: list) -> None:
            for item in items:
                if isinstance(item, list):
                    flatten(item)
                else:
                    lines.append(item)

        flatten(self._root)
        if self.left_out:
            lines += ["", "---", "", closing]
        return "\n".join(lines) + "\n"


def _full(diffs) -> str:
    from modeldiff.render import diff_out

    out = io.StringIO()
    diff_out.as_markdown(diffs, out)
    return out.getvalue()


def as_markdown(diffs: Sequence, stream: TextIO, budget: int | None = COMMENT) -> None:
    """The Markdown of `diffs` within `budget` characters (None: everything, `diff_out.as_markdown`)."""
    whole = _full(diffs)
    if budget is None or len(whole) <= budget:
        stream.write(whole)
        return
    del whole
    stream.write(shortened(diffs, budget))


EVERYTHING_IN_DIFF = "`--format json` and `--format html`"


def left_out_line(left_out: dict[str, int], budget: int, everything_in: str = EVERYTHING_IN_DIFF) -> str:
    """The last line of a shortened document: what was left out, and how to get all of it."""
    counted = ", ".join(f"{n:,} {what}" for what, n in left_out.items())
    return (f"_Shortened to fit {budget:,} characters; left out: {counted}. Everything is in {everything_in}, "
            "or here with `--budget none` (a CI job summary takes `--budget 1MiB`)._")


def cut(row: str) -> str:
    """`row` cut at `ROW_LIMIT` characters (ending in `…` when cut)."""
    return row if len(row) <= ROW_LIMIT else row[:ROW_LIMIT - 1] + "…"


def _impact_row(i, kinds: dict[str, str]) -> str:
    from modeldiff.render.diff_out import _md, _md_reason, _role_extras

    why = "; ".join(_md_reason(x, kinds) for x in i.reasons)
    extra = _role_extras(i)
    row = f"- **{i.name}** ({i.severity})" + (f" — **{_md(extra)}**" if extra else "") + f": {_md(why)}"
    return cut(row)


def _add_proposals(w: "Writer", md) -> None:
    """The proposals in place of links made two-way (modeldiff.proposal): whole when the patch takes at most a
    quarter of the room left, else without the patch, else left out (said in the last line)."""
    from modeldiff import proposal
    from modeldiff.render import proposal_out

    found = proposal.proposals(md)
    if not found:
        return
    for patch in (True, False):
        lines = proposal_out.markdown_lines(found, patch=patch, level="####")
        if patch and len("\n".join(lines)) > w.room() // 4:
            continue  # the patch would crowd out the impacted items: it is in the full output
        if w.fits(lines):
            w.add(lines)
            if not patch:
                w.skip("patches of proposals", len(found))
            return
    w.skip("proposals instead of two-way", len(found))


def shortened(diffs: Sequence, budget: int) -> str:
    """The budgeted layout (see the module docstring)."""
    from modeldiff.render import causes_out
    from modeldiff.render.diff_out import SECURITY_CAUTION, _md, _side

    w = Writer(budget)
    w.add(["## modeldiff", "", "| model | verdict | breaking | can move numbers | safe | impacted measures | roles | "
           "reports |", "|---|---|---|---|---|---|---|---|"])
    for md in diffs:
        r, c = md.result, md.result.counts()
        w.add([f"| `{r.new.name or r.old.name}` | **{r.verdict}** | {c['breaking']} | {c['numbers']} | {c['safe']} | "
               f"{len(r.measures)} | {len(r.roles)} | {len(r.reports)} |"])
    header = ["| id | kind | subject | what it means |", "|---|---|---|---|"]

    def breaking_rows(result) -> list[tuple[str, str]]:
        return [(f"| {c.id} | `{c.kind}` | `{c.subject}` | {_md(c.message)} |",
                 f"| {c.id} | `{c.kind}` | `{c.subject}` | (message left out for length) |")
                for c in result.changes if c.severity == "breaking"]

    w.expect([short for md in diffs for _, short in breaking_rows(md.result)])
    # first pass: what is always written, for every model
    for md in diffs:
        r = md.result
        w.add(["", f"### `{r.new.name or r.old.name}`: `{_side(md.old)}` → `{_side(md.new)}`", ""])
        if any(c.kind == "security.exposed" for c in r.changes):
            w.add([f"> **SECURITY:** {SECURITY_CAUTION}", ""])
        if not r.changes and not r.new_errors:
            w.add(["No changes."])
            continue
        by_cause = causes_out.markdown_lines(r)
        if by_cause and w.fits(by_cause + [""]):
            w.add(by_cause + [""])
        elif by_cause:
            w.skip("summaries by cause")
        breaking = breaking_rows(r)
        if breaking:
            w.add([f"#### Breaking changes ({len(breaking)})", "", *header])
            for whole, short in breaking:
                w.must(whole, short)
        if r.new_errors:
            w.add(["", "**Errors in the new revision:**", ""]
                  + [f"- `{f.rule}` `{f.subject}`: {_md(f.message)}" for f in r.new_errors])
    # second pass: the rest, folded, each block as much room as it needs while the others get as much
    from modeldiff.render.diff_out import _md_diagrams

    blocks = []  # (model diff, diagram lines or None, sections)
    for md in diffs:
        r = md.result
        _add_proposals(w, md)  # (before the folded blocks, which share the room left)
        kinds = {c.id: c.kind for c in r.changes}
        sections = []
        for title, impacts in (("roles", r.roles), ("reports", r.reports)):
            sections.append((f"impacted {title}", [], [_impact_row(i, kinds) for i in impacts]))
        for severity, title in (("numbers", "changes that can move numbers"), ("safe", "safe changes")):
            rows = [f"| {c.id} | `{c.kind}` | `{c.subject}` | {_md(c.message)} |" for c in r.changes
                    if c.severity == severity]
            sections.append((title, header, rows))
        sections.insert(3, ("impacted measures", [], [_impact_row(i, kinds) for i in r.measures]))
        sections = [s for s in sections if s[2]]
        w.skip("reasons of impacted items (lines cut short)",
               sum(row.endswith("…") for _, _, rows in sections if rows[:1] and rows[0].startswith("- ") for row in rows))
        blocks.append((md, _md_diagrams([md]) or None, sections))
    needs, whole = [], []
    for md, diagram, sections in blocks:
        name = md.result.new.name or md.result.old.name
        if diagram:
            needs.append(sum(len(line) + 1 for line in diagram))
            whole.append(True)
        needs += [folded_size(f"{len(rows)} {title} in `{name}`", head, rows) for title, head, rows in sections]
        whole += [False] * len(sections)
    shares = iter(fair_shares(needs, w.room(), whole))
    for md, diagram, sections in blocks:
        name = md.result.new.name or md.result.old.name
        if diagram:
            if sum(len(line) + 1 for line in diagram) <= next(shares):
                w.add(diagram)
            else:
                w.skip("diagrams")
        for title, head, rows in sections:
            w.folded(f"{len(rows)} {title} in `{name}`", head, rows, title, limit=next(shares))
    return w.text(left_out_line(w.left_out, budget))
