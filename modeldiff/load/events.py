"""YAML text -> plain values with the position of every key and value, read event by event (the reference reader)."""

from __future__ import annotations

import math
import re
from typing import Any

from modeldiff.errors import ModeldiffError
from modeldiff.load.text import ALIAS_BUDGET, MAX_DEPTH, _fail


# --------------------------------------------------------------------------
# YAML events -> plain values with positions


class YamlMap(dict):
    """A YAML mapping; `at[key]` = (key line, key column, value line, value column), 1-based."""

    __slots__ = ("at", "file", "line", "column")


class YamlList(list):
    """A YAML sequence; `at[i]` = (line, column) of item i, 1-based."""

    __slots__ = ("at", "file", "line", "column")


class _Frame:
    __slots__ = ("container", "is_map", "key", "key_line", "key_col", "size", "anchor", "merges")

    def __init__(self, container, is_map, anchor):
        self.container = container
        self.is_map = is_map
        self.key = _NO_KEY
        self.key_line = self.key_col = 0
        self.size = 0
        self.anchor = anchor
        self.merges = None


_NO_KEY = object()
_MERGE = object()
_NOTHING = object()
_INF = float("inf")
_PLAIN_SPECIAL = {
    "": None, "~": None, "null": None, "Null": None, "NULL": None,
    "true": True, "True": True, "TRUE": True,
    "false": False, "False": False, "FALSE": False,
    ".inf": _INF, ".Inf": _INF, ".INF": _INF,
    "+.inf": _INF, "+.Inf": _INF, "+.INF": _INF,
    "-.inf": -_INF, "-.Inf": -_INF, "-.INF": -_INF,
    ".nan": math.nan, ".NaN": math.nan, ".NAN": math.nan,
}  # fmt: skip
_NUMBER_START = frozenset("0123456789+-.")
_INT = re.compile(r"[-+]?[0-9]+\Z")
_FLOAT = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?\Z")
_OCT = re.compile(r"0o[0-7]+\Z")
_HEX = re.compile(r"0x[0-9a-fA-F]+\Z")
_CORE = "tag:yaml.org,2002:"


def _resolve_plain(value: str) -> Any:
    """A plain scalar by the YAML 1.2 core schema."""
    special = _PLAIN_SPECIAL.get(value, _NOTHING)
    if special is not _NOTHING:
        return special
    if value[0] in _NUMBER_START:
        if _INT.match(value):
            return int(value)
        if _FLOAT.match(value):
            return float(value)
        if _OCT.match(value):
            return int(value[2:], 8)
        if _HEX.match(value):
            return int(value[2:], 16)
    return value


def _shown_tag(tag: str) -> str:
    return "!!" + tag[len(_CORE):] if tag.startswith(_CORE) else tag


def _unsupported_tag(tag: str) -> str:
    return f"unsupported YAML tag '{_shown_tag(tag)}'; remove the tag, a model file uses plain values"


def _tagged_scalar(name: str, event) -> Any:
    tag = event.tag
    if tag == "!" or tag == _CORE + "str":
        return event.value
    kinds = {"null": type(None), "bool": bool, "int": int, "float": float}
    wanted = kinds.get(tag[len(_CORE):]) if tag.startswith(_CORE) else None
    line, col = event.start_mark.line + 1, event.start_mark.column + 1
    if wanted is None:
        raise _fail(name, line, col, _unsupported_tag(tag))
    value = _resolve_plain(event.value)
    if wanted is float and type(value) is int:
        value = float(value)
    if type(value) is not wanted:
        message = f"'{event.value}' is not a valid {_shown_tag(tag)}; fix the value or remove the tag"
        raise _fail(name, line, col, message)
    return value


def _parse(name: str, text: str) -> Any:
    """The one document of a YAML text as plain values, or _NOTHING when there is none."""
    import yaml

    loader_class = getattr(yaml, "CSafeLoader", None) or yaml.SafeLoader
    loader = loader_class(text)
    try:
        return _build(name, loader, yaml)
    except yaml.MarkedYAMLError as exc:
        raise _syntax_error(name, text, exc) from None
    except yaml.YAMLError as exc:
        raise _fail(name, None, None, f"malformed YAML ({_one_line(str(exc))}); fix the YAML syntax") from None
    finally:
        loader.dispose()


def _one_line(text: str) -> str:
    return " ".join(text.split())


def _syntax_error(name: str, text: str, exc) -> ModeldiffError:
    mark = exc.problem_mark or exc.context_mark
    if mark is None:
        return _fail(name, None, None, f"malformed YAML ({_one_line(str(exc))}); fix the YAML syntax")
    line, col = mark.line + 1, mark.column + 1
    lines = text.split("\n")
    source = lines[mark.line] if mark.line < len(lines) else ""
    indent = source[: len(source) - len(source.lstrip(" \t"))]
    if "\t" in indent:
        return _fail(
            name, line, indent.index("\t") + 1, "a tab is used for indentation; YAML indentation must use spaces"
        )
    problem = _one_line(exc.problem or "syntax error")
    if "nesting depth" in problem:  # libyaml's own limit, met while scanning ahead
        return _fail(name, line, col, f"nesting is deeper than {MAX_DEPTH} levels; a model needs only a few levels")
    context = ""
    if exc.context and exc.context_mark is not None and exc.context_mark is not mark:
        context = f" ({_one_line(exc.context)} at line {exc.context_mark.line + 1})"
    return _fail(name, line, col, f"malformed YAML: {problem}{context}; fix the YAML syntax")


def _build(name: str, loader, yaml) -> Any:
    """Values of the document, built from parser events with an explicit stack.

    One loop on purpose: it runs once per YAML node, so the common cases stay
    inline and only the rare ones (tags, aliases, merges, errors) call out.
    Each finished node is added to the collection on top of the stack; a
    mapping alternates between waiting for a key and waiting for its value.
    """
    scalar_event, alias_event = yaml.ScalarEvent, yaml.AliasEvent
    mapping_start, sequence_start = yaml.MappingStartEvent, yaml.SequenceStartEvent
    mapping_end, sequence_end = yaml.MappingEndEvent, yaml.SequenceEndEvent
    document_start, stream_end = yaml.DocumentStartEvent, yaml.StreamEndEvent
    get_event = loader.get_event
    stack: list[_Frame] = []
    anchors: dict[str, tuple[Any, int]] = {}
    opening: set[str] = set()  # anchors of collections still being read
    expanded = 0
    documents = 0
    root = _NOTHING
    while True:
        event = get_event()
        kind = event.__class__
        if kind is scalar_event:
            mark = event.start_mark
            if event.tag is not None:
                value = _tagged_scalar(name, event)
            elif event.style:
                value = event.value
            else:
                value = _resolve_plain(event.value)
            size = 1
            if event.anchor is not None:
                anchors[event.anchor] = (value, 1)
        elif kind is mapping_start or kind is sequence_start:
            mark = event.start_mark
            if len(stack) >= MAX_DEPTH:
                raise _fail(
                    name, mark.line + 1, mark.column + 1,
                    f"nesting is deeper than {MAX_DEPTH} levels; a model needs only a few levels",
                )  # fmt: skip
            _check_collection_tag(name, event, mark)
            container = YamlMap() if kind is mapping_start else YamlList()
            container.at = {} if kind is mapping_start else []
            container.file = name
            container.line = mark.line + 1
            container.column = mark.column + 1
            if event.anchor is not None:
                opening.add(event.anchor)
            stack.append(_Frame(container, kind is mapping_start, event.anchor))
            continue
        elif kind is mapping_end or kind is sequence_end:
            frame = stack.pop()
            value = frame.container
            if frame.merges:
                _apply_merges(value, frame.merges)
            size = frame.size + 1
            mark = None
            if frame.anchor is not None:
                opening.discard(frame.anchor)
                anchors[frame.anchor] = (value, size)
        elif kind is alias_event:
            mark = event.start_mark
            value, size = _alias_target(name, event, mark, anchors, opening)
            expanded += size
            if expanded > ALIAS_BUDGET:
                raise _fail(
                    name, mark.line + 1, mark.column + 1,
                    f"aliases expand to more than {ALIAS_BUDGET} values (an alias bomb?); "
                    "write the values out or use fewer nested aliases",
                )  # fmt: skip
        elif kind is document_start:
            documents += 1
            if documents > 1:
                mark = event.start_mark
                raise _fail(
                    name, mark.line + 1, mark.column + 1,
                    "a second YAML document starts here; a model file holds one document",
                )  # fmt: skip
            continue
        elif kind is stream_end:
            return root
        else:
            continue
        if not stack:
            root = value
            continue
        frame = stack[-1]
        frame.size += size
        if mark is None:
            line, col = value.line, value.column
        else:
            line, col = mark.line + 1, mark.column + 1
        container = frame.container
        if not frame.is_map:
            container.append(value)
            container.at.append((line, col))
        elif frame.key is _NO_KEY:
            if value.__class__ is YamlMap or value.__class__ is YamlList:
                raise _fail(name, line, col, "a mapping key is a list or mapping; keys must be plain names")
            if value == "<<" and type(value) is str:
                frame.key = _MERGE
            elif value in container:
                first = container.at[value]
                raise _fail(
                    name, line, col,
                    f"duplicate key '{value}' (first at line {first[0]}, again at line {line}); "
                    "remove or rename one of them",
                )  # fmt: skip
            else:
                frame.key = value
            frame.key_line, frame.key_col = line, col
        else:
            if frame.key is _MERGE:
                _add_merge(name, frame, value, line, col)
            else:
                container[frame.key] = value
                container.at[frame.key] = (frame.key_line, frame.key_col, line, col)
            frame.key = _NO_KEY


def _check_collection_tag(name: str, event, mark) -> None:
    tag = event.tag
    if tag is not None and tag not in ("!", _CORE + "map", _CORE + "seq"):
        raise _fail(name, mark.line + 1, mark.column + 1, _unsupported_tag(tag))


def _alias_target(name: str, event, mark, anchors, opening) -> tuple[Any, int]:
    target = anchors.get(event.anchor)
    if target is not None:
        return target
    if event.anchor in opening:
        problem = f"alias '*{event.anchor}' refers to the collection it is in; write the values out instead"
    else:
        problem = f"alias '*{event.anchor}' has no matching anchor before it; define '&{event.anchor}' first"
    raise _fail(name, mark.line + 1, mark.column + 1, problem)


def _add_merge(name: str, frame: _Frame, value: Any, line: int, col: int) -> None:
    """Record a `<<` merge key's value: a mapping or a list of mappings."""
    sources = value if isinstance(value, YamlList) else [value]
    if not all(isinstance(source, YamlMap) for source in sources):
        raise _fail(name, line, col, "a '<<' merge key needs a mapping or a list of mappings; fix or remove it")
    if frame.merges is None:
        frame.merges = []
    frame.merges.extend(sources)


def _apply_merges(container: YamlMap, sources: list[YamlMap]) -> None:
    """YAML merge keys: explicit keys win, then earlier sources over later ones."""
    for source in sources:
        for key, value in source.items():
            if key not in container:
                container[key] = value
                container.at[key] = source.at[key]


def _key_maps(name: str, text: str) -> YamlMap:
    """The mappings of a file the fast reader read, with where each key and value starts, and no values.

    For `_positions_of`: the event reader's marks at about half its cost. A
    mapping's entry is the nested YamlMap, or None for anything else; lists
    are passed over. Only files the fast reader took come here, so every key
    is a plain name and the text holds no alias, tag or merge key.
    """
    import yaml

    loader = (getattr(yaml, "CSafeLoader", None) or yaml.SafeLoader)(text)
    scalar_event, mapping_start, sequence_start = yaml.ScalarEvent, yaml.MappingStartEvent, yaml.SequenceStartEvent
    mapping_end, sequence_end, stream_end = yaml.MappingEndEvent, yaml.SequenceEndEvent, yaml.StreamEndEvent
    get_event = loader.get_event
    stack: list[list] = []  # [mapping, or None in a list; key or _NO_KEY; key line; key column; start line; start column]
    root = None
    try:
        while True:
            event = get_event()
            kind = event.__class__
            if kind is scalar_event:
                mark = event.start_mark
                value, line, col = event.value, mark.line + 1, mark.column + 1
            elif kind is mapping_start or kind is sequence_start:
                mark = event.start_mark
                container = None
                if kind is mapping_start:
                    container = YamlMap()
                    container.at, container.file = {}, name
                    container.line, container.column = mark.line + 1, mark.column + 1
                stack.append([container, _NO_KEY, 0, 0, mark.line + 1, mark.column + 1])
                continue
            elif kind is mapping_end or kind is sequence_end:
                frame = stack.pop()
                value, line, col = frame[0], frame[4], frame[5]
            elif kind is stream_end:
                return root
            else:
                continue
            if not stack:
                root = value
                continue
            frame = stack[-1]
            container = frame[0]
            if container is None:
                continue
            if frame[1] is _NO_KEY:
                frame[1], frame[2], frame[3] = value, line, col
            else:
                key = frame[1]
                container[key] = value if value.__class__ is YamlMap else None
                container.at[key] = (frame[2], frame[3], line, col)
                frame[1] = _NO_KEY
    except yaml.MarkedYAMLError as exc:  # not expected: the fast reader took the file
        raise _syntax_error(name, text, exc) from None
    finally:
        loader.dispose()
