"""Splicing: a revision read as its base revision plus the items that changed."""

from __future__ import annotations

import re
from typing import Any, Mapping

from modeldiff.errors import ModeldiffError
from modeldiff.model import SECTIONS, Measure, Model
from modeldiff.load.text import _NAME_PATTERN, _decode
from modeldiff.load.documents import _Document
from modeldiff.load.positions import _LazyPositions
from modeldiff.load.records import LoadResult, _TOP_KEYS
from modeldiff.load.fast import _Fallback, _FastBuilder, _fast_reader, _fast_unsure


# --------------------------------------------------------------------------
# Splicing: a revision read as its base revision plus the items that changed

# patterns over "\n" + text (a leading newline is faster to find than a line start)
_ITEM_START = re.compile(r"\n  (" + _NAME_PATTERN + r"):(?=[ \n])")  # an item of a section
# `top`: a line at column 0, not a comment; `odd`: a line at one column, or at two that is neither an item's
# first line nor a comment
_LAYOUT_LINE = re.compile(r"\n(?:(?P<top>[^ \n#][^\n]*)|(?P<odd> [^ \n#]|  (?!" + _NAME_PATTERN + r":[ \n])[^ \n#]))")
_TOP_LINE = re.compile(r"(" + _NAME_PATTERN + r"):(?: |\Z)")

SPLICE_MAX_CHANGED = 2000  # beyond this many changed items a full read is as cheap


def _split_sections(text: str) -> tuple[list[str], dict[str, str]] | None:
    """A file's top-level layout: (the text outside sections, {section: its text, heading included}).

    None when the layout is not the plain one the splice can vouch for: a
    section written other than as a bare `SECTION:` line, then only comments
    or blank lines, then items `  NAME:` at two spaces; a section twice or
    without items; a line at one column's indentation, or at two that is
    neither an item's first line nor a comment; a top-level key other than
    the format's, or an item under one. Comment lines go with the item (or
    heading) above them; every other line that starts deeper than two spaces
    continues the item above. Pieces start with the newline before them.
    """
    text = "\n" + text + "\n"  # positions below are those of the newline before each line
    tops = []
    for match in _LAYOUT_LINE.finditer(text):  # one pass finds both kinds of line
        if match.lastgroup == "odd":
            return None
        tops.append((match.start(), match.group()[1:]))
    frame = [text[:tops[0][0]] if tops else text]
    sections: dict[str, str] = {}
    bounds = [start for start, _ in tops[1:]] + [len(text) - 1]
    for (start, line), end in zip(tops, bounds):
        piece = text[start:end]
        heading = line.rstrip(" ")
        if heading[:-1] in SECTIONS and heading[-1:] == ":":
            section = heading[:-1]
            first = _ITEM_START.search(piece)
            if section in sections or first is None:
                return None  # a section twice, or without items
            if any(rest.strip() and not rest.lstrip().startswith("#") for rest in piece[:first.start()].split("\n")[2:]):
                return None  # something other than comments between the heading and the first item
            sections[section] = piece
            frame.append(f"\n{section}:")
        else:
            top = _TOP_LINE.match(line)
            if top is None or top.group(1) not in _TOP_KEYS or top.group(1) in SECTIONS or _ITEM_START.search(piece):
                return None
            frame.append(piece)
    return frame, sections


_LAST_LAYOUT: dict[str, Any] = {}  # the text split last: its layout, and the items of its sections split so far


def _layout(text: str):
    """(`_split_sections(text)`, {section: `_section_items` of it}) of `text`, remembered for the text split last.

    A walk over commits splices each revision from the one before, whose text
    the previous splice split already (as its new side): that work is not done
    twice. One text is remembered, never more.
    """
    if _LAST_LAYOUT.get("text") == text:
        return _LAST_LAYOUT["split"], _LAST_LAYOUT["items"]
    split = _split_sections(text)
    _LAST_LAYOUT.clear()
    _LAST_LAYOUT.update(text=text, split=split, items={})
    return split, _LAST_LAYOUT["items"]


def _section_items(piece: str) -> list[tuple[str, str]]:
    """(name, text) of each item of a section's text from `_split_sections`; texts start with their newline."""
    starts = [(match.start(), match.group(1)) for match in _ITEM_START.finditer(piece)]
    ends = [start for start, _ in starts[1:]] + [len(piece)]
    return [(name, piece[start:end]) for (start, name), end in zip(starts, ends)]


def _spliced(files, base_files, base: LoadResult) -> LoadResult | None:
    if len(files) != 1 or len(base_files) != 1 or base.findings or not isinstance(base.model.positions, _LazyPositions):
        return None
    loads = _fast_reader()
    if loads is None:
        return None
    try:
        old_text, text = _decode(*base_files[0]), _decode(*files[0])
    except ModeldiffError:
        return None
    (old_split, old_known_items), (new_split, new_items) = _layout(old_text), _layout(text)
    if old_split is None or new_split is None or old_split[0] != new_split[0]:
        return None
    old_model = base.model
    kept: dict[str, dict[str, Any]] = {}  # section -> the records of a section written as in the base
    reused: dict[str, dict[str, Any]] = {}  # section -> item text -> the base's record
    changed: dict[str, list[tuple[str, str]]] = {}
    order: dict[str, list[tuple[str, str]]] = {}
    for section, piece in new_split[1].items():
        old_piece = old_split[1].get(section)
        if piece == old_piece:
            kept[section] = getattr(old_model, section)
            continue
        items = new_items[section] = _section_items(piece)
        if len({name for name, _ in items}) != len(items):
            return None  # a name written twice: the full read words it
        records = getattr(old_model, section)
        old_items = (old_known_items.get(section) or _section_items(old_piece)) if old_piece else []
        if [name for name, _ in old_items] != list(records):
            return None  # the split does not see what the reader saw
        known = {item_text: records[name] for name, item_text in old_items}
        reused[section], order[section] = known, items
        fresh = [(name, item_text) for name, item_text in items if item_text not in known]
        if fresh:
            changed[section] = fresh
    if sum(len(items) for items in changed.values()) > SPLICE_MAX_CHANGED:
        return None
    built = _changed_records(loads, files, changed, old_model.measures)
    if built is None:
        return None
    sections = {}
    for section in SECTIONS:
        if section in kept:
            sections[section] = dict(kept[section])
        elif section in order:
            fresh, known = built.get(section, {}), reused[section]
            sections[section] = {name: fresh[name] if name in fresh else known[item_text]
                                 for name, item_text in order[section]}
        else:
            sections[section] = {}
    model = Model(name=old_model.name, format=old_model.format, positions=_LazyPositions(files), **sections)
    return LoadResult(model, ())


def _changed_records(loads, files, changed: dict[str, list[tuple[str, str]]], shared: Mapping[str, Measure]):
    """{section: {name: record}} of the changed items, read on their own; None when only a full read can tell."""
    if not changed:
        return {}
    parts = []
    for section, items in changed.items():
        parts.append(f"\n{section}:")
        parts += [item_text for _, item_text in items]  # each starts with the newline before it
    text = "".join(parts)[1:] + "\n"
    if _fast_unsure(text):
        return None
    try:
        top = loads(text)
    except Exception:  # noqa: BLE001 - the full read words any complaint
        return None
    if type(top) is not dict or list(top) != list(changed):
        return None
    for section, items in changed.items():
        values = top[section]
        if type(values) is not dict or list(values) != [name for name, _ in items]:
            return None  # an item that does not end where the split says
    builder = _FastBuilder(files, shared)
    builders = {
        "tables": builder._table, "links": builder._link, "measures": builder._measure,
        "variants": builder._variant, "roles": builder._role, "reports": builder._report,
    }  # fmt: skip
    doc = [_Document(files[0][0], top)]
    try:
        return {section: builder._section(doc, section, builders[section]) for section in changed}
    except (_Fallback, ModeldiffError):
        return None
