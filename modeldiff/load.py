"""YAML -> Model, with file:line:col for every problem.

Two kinds of bad input (model-format.md, semantics.md section 7):

* input that cannot be read at all (missing file, binary content, malformed
  YAML, tabs, duplicate keys, alias bombs, no `model`/`format`, ...) raises
  ModeldiffError with one line "FILE:LINE:COL: what is wrong; what to do";
* input that is readable YAML but does not follow the format still gives a
  Model, with the bad item dropped or defaulted, plus `invalid-model` findings
  (and a `deprecated-key` warning for a key written in its first spelling in
  format 1, `use` for `via`, which is read as the new key).

YAML is read event by event with an explicit stack (no recursion, no
`yaml.load`), so nesting depth, alias expansion and duplicate keys are checked
while reading, and every mapping entry keeps the position of its key and of
its value. Plain scalars follow the YAML 1.2 core schema: `on`, `yes`, `no` and
dates stay strings. A plain file that reads without a finding is read faster
by yaml_rs when it is installed, with the same result (see "The fast reader"
below and docs/performance.md); the event reader stays the reference.

Positions recorded in Model.positions: a named item ("tables.trips",
"tables.trips.columns.fare", "links.trips_bike", "variants.v.options.o", ...)
points at its name; a field ("links.trips_bike.from", "measures.m.expr") and
an entry of a table-keyed map ("roles.r.filters.trips", "reports.p.where.t",
"measures.m.flow.L") point at the value.
"""

from __future__ import annotations

import gc
import math
import os
import re
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Iterable, Iterator, Mapping, Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.model import (
    CARDINALITIES,
    COLUMN_TYPES,
    FLOW_OVERRIDES,
    FLOWS,
    NO_OVERRIDES,
    SECTIONS,
    TABLE_KINDS,
    Column,
    Finding,
    History,
    Link,
    Measure,
    Model,
    Overrides,
    Pos,
    Report,
    Role,
    Table,
    Variant,
    VariantOption,
)

MAX_DEPTH = 64  # nesting levels of mappings and lists
ALIAS_BUDGET = 100_000  # nodes that aliases may add by re-using anchored values
MAX_FILE_BYTES = 50 * 1024 * 1024
YAML_SUFFIXES = (".yaml", ".yml")
FOLDER_SUFFIX = ".model"
RULE = "invalid-model"
DEPRECATED_RULE = "deprecated-key"  # a warning: a key read under its first spelling in format 1
DEPRECATED_KEYS = {"use": "via"}  # old spelling -> the key it is read as
# Booleans of YAML 1.1 that YAML 1.2 (this format) reads as text: what the writer meant, for the message.
_YAML11_BOOLEANS = {word: meant for words, meant in ((("y", "yes", "on"), "true"), (("n", "no", "off"), "false"))
                    for spelled in words for word in (spelled, spelled.capitalize(), spelled.upper())}

_NAME_PATTERN = "[A-Za-z][A-Za-z0-9_]*"
_NAME = re.compile(_NAME_PATTERN + r"\Z")
_COLREF = re.compile(rf"({_NAME_PATTERN})\.({_NAME_PATTERN})\Z")


@dataclass(frozen=True)
class LoadResult:
    """A model as read, with the invalid-model findings met while reading it."""

    model: Model
    findings: tuple[Finding, ...]  # rule "invalid-model" (error), or "deprecated-key" (warning)


# --------------------------------------------------------------------------
# Public API


def load_path(path: str | os.PathLike) -> LoadResult:
    """Load a NAME.model.yaml file or a NAME.model/ folder of *.yaml/*.yml files."""
    return load_files(path_files(path))


def path_files(path: str | os.PathLike) -> list[tuple[str, bytes]]:
    """The (display name, content) pairs `load_path` reads: the file, or the folder's YAML files."""
    shown = os.fspath(path)
    if not os.path.exists(shown):
        raise ModeldiffError(
            f"{shown}: no such file or folder; give the path of a NAME.model.yaml file or a NAME.model/ folder"
        )
    _refuse_link_out_of_repository(shown, shown)
    if os.path.isdir(shown):
        return _folder_files(shown)
    return [(shown, _read_file(shown))]


def _refuse_link_out_of_repository(path: str, shown: str) -> None:
    """A model path inside a git work tree that links out of it (a committed link to /etc/passwd) is not read.

    Its content could otherwise end up quoted in an error message (a CI log). Naming the target itself
    reads it (the person running the command chose it).
    """
    from modeldiff.files import enclosing_work_tree, leaves

    root = enclosing_work_tree(path)
    if root is not None and leaves(root, path):
        target = os.readlink(path) if os.path.islink(path) else os.path.realpath(path)
        raise ModeldiffError(f"{shown}: is a symbolic link to {target!r}, outside the repository it is in "
                             f"({root}); a model is read from inside its repository only; to read that file, "
                             "give its own path")


def load_files(files: Sequence[tuple[str, bytes | str]], shared: Mapping[str, Measure] | None = None) -> LoadResult:
    """Load (display name, content) pairs: one file, or several merged as a folder.

    `shared`: the measures of a related revision (the other side of a diff). A
    measure read equal to the one of the same name there is that record, so the
    two models share it and comparing them is cheap.
    """
    if not files:
        raise ModeldiffError("no model files were given; give a NAME.model.yaml file or a NAME.model/ folder")
    for name, content in files:
        _refuse_lfs_pointer(name, content)
    with paused_gc():
        return _fast_load(files, shared) or _exact_load(files)


def _exact_load(files: Sequence[tuple[str, bytes | str]]) -> LoadResult:
    """The reference reader: parser events with positions, every problem reported where it was written."""
    docs = [_read_document(name, content) for name, content in files]
    name, fmt = _model_identity(docs)
    return _RecordBuilder().build(docs, name, fmt)


@contextmanager
def paused_gc() -> Iterator[None]:
    """Hold the cyclic garbage collector while a model's many small records are made.

    Building a model allocates hundreds of thousands of objects and no
    reference cycles; the collector would walk them again and again (a third
    of the loading time on a large model). Nested use is harmless. Afterwards
    the objects made are moved to the oldest generation without a walk (the
    first young collection would otherwise walk all of them: 0.03 s after a
    22,000-measure diff); a later full collection still examines them.
    """
    if not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        if gc.get_freeze_count() == 0:  # (a process that froze objects of its own keeps them frozen)
            # what was made meanwhile goes straight to the oldest generation, as if it had survived the
            # young collections, rather than being walked all at once by the next young collection
            gc.freeze()
            gc.unfreeze()
        gc.enable()


def schema_text() -> str:
    """The JSON Schema (draft-07) of model format 1, as shipped in modeldiff/schema.json."""
    from importlib import resources

    return resources.files("modeldiff").joinpath("schema.json").read_text(encoding="utf-8")


def read_yaml(name: str, content: bytes | str) -> Any:
    """Plain values (dict subclasses, list subclasses, scalars) of one YAML file.

    Applies every reading check (encoding, syntax, depth, aliases, duplicate
    keys) but none of the format's rules; used by tests to compare the loader
    with the JSON Schema.
    """
    return _parse(name, _decode(name, content))


# --------------------------------------------------------------------------
# Files and folders


def _fail(name: str, line: int | None, column: int | None, message: str) -> ModeldiffError:
    where = name if line is None else f"{name}:{line}:{column}"
    return ModeldiffError(f"{where}: {message}")


def read_file(path: str, display: str | None = None) -> bytes:
    """A model file's bytes: a regular file (links followed) of at most MAX_FILE_BYTES, else one clear error.

    Never reads more than the limit + 1 bytes, and never waits on a named pipe (files.read_regular).
    """
    from modeldiff.files import NotRegular, TooBig, read_regular

    shown = path if display is None else display
    try:
        return read_regular(path, MAX_FILE_BYTES)
    except NotRegular as exc:
        raise _fail(shown, None, None, f"is {exc.kind}, not a regular file; a model is read from regular files only "
                                       "(give the path of the model's file or folder)") from None
    except TooBig as exc:
        raise _too_big(shown, exc.size) from None
    except OSError as exc:
        raise ModeldiffError(f"{shown}: cannot be read ({exc.strerror or exc}); check the path and its permissions") from None


_read_file = read_file


# Git LFS's pointer format (its spec, docs/spec.md): the first line names the spec; early pointers named hawser's.
_LFS_POINTERS = ("version https://git-lfs.github.com/spec/", "version https://hawser.github.com/spec/")


def _refuse_lfs_pointer(name: str, content: bytes | str) -> None:
    """A Git LFS pointer (the few lines git keeps in place of a file stored with LFS) is not the model."""
    start = content[:48]
    text = start.decode("ascii", "replace") if isinstance(start, bytes) else start
    if text.startswith(_LFS_POINTERS):
        raise _fail(name, None, None, "this is a Git LFS pointer, not the model's text; run 'git lfs pull' "
                                      "(with Git LFS installed) to fetch the file, then run modeldiff again")


def _too_big(name: str, size: int) -> ModeldiffError:
    return _fail(
        name, None, None,
        f"file is {_size_text(size)}, over the {_size_text(MAX_FILE_BYTES)} limit for a model file; "
        "split it into a NAME.model/ folder",
    )  # fmt: skip


def _size_text(size: int) -> str:
    megabytes = size / (1024 * 1024)
    return f"{megabytes:.0f} MB" if megabytes >= 1 else f"{size} bytes"


def _folder_files(folder: str) -> list[tuple[str, bytes]]:
    """Every .yaml/.yml file below a NAME.model/ folder, sorted by path relative to it (as git.py does)."""
    base = os.path.basename(os.path.normpath(folder))
    if not (base.lower().endswith(FOLDER_SUFFIX) and len(base) > len(FOLDER_SUFFIX)):
        raise ModeldiffError(
            f"{folder}: is a folder but not a NAME.model/ folder; "
            "give a NAME.model.yaml file or a folder named NAME.model"
        )
    found = []
    for parent, subfolders, names in os.walk(folder):
        subfolders.sort()
        for entry in names:
            path = os.path.join(parent, entry)
            if entry.lower().endswith(YAML_SUFFIXES) and os.path.exists(path):  # special files are refused on reading
                _refuse_link_out_of_repository(path, path)
                found.append((os.path.relpath(path, folder).replace(os.sep, "/"), path))
    if not found:
        raise ModeldiffError(f"{folder}: holds no .yaml or .yml files; put the model's YAML files in it")
    return [(path, _read_file(path)) for _, path in sorted(found)]


_CONTROL = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f\ufffe\uffff]")


def _line_col(text: str | bytes, index: int) -> tuple[int, int]:
    newline = "\n" if isinstance(text, str) else b"\n"
    line = text.count(newline, 0, index) + 1
    start = text.rfind(newline, 0, index) + 1
    if isinstance(text, bytes):
        return line, len(text[start:index].decode("utf-8", "replace")) + 1
    return line, index - start + 1


# every ASCII byte `_CONTROL` allows: deleting them leaves nothing of a plain ASCII text
_ALLOWED_ASCII = bytes([0x09, 0x0A, 0x0D]) + bytes(range(0x20, 0x7F))


def _plain_ascii(text: str) -> bool:
    """Whether `text` is ASCII without a character `_CONTROL` refuses (a tenth of the regular expression's time)."""
    return text.isascii() and not text.encode("ascii").translate(None, _ALLOWED_ASCII)


_RECENTLY_DECODED: list[tuple[bytes | str, str, str]] = []  # (content, name, text) of the last two files decoded


def _decode(name: str, content: bytes | str) -> str:
    """UTF-8 text of one file, refusing binary and oversized content.

    The last two contents decoded are remembered by identity: a diff decodes
    each revision more than once (the fast read, then the splice).
    """
    for seen, seen_name, text in _RECENTLY_DECODED:
        if seen is content and seen_name == name:
            return text
    text = _decode_afresh(name, content)
    if content.__class__ is bytes or content.__class__ is str:  # immutable: the same object is the same text
        _RECENTLY_DECODED[:] = [(content, name, text), *_RECENTLY_DECODED[:1]]
    return text


def _decode_afresh(name: str, content: bytes | str) -> str:
    if len(content) > MAX_FILE_BYTES:
        raise _too_big(name, len(content))
    if isinstance(content, str):
        text = content
    else:
        nul = content.find(b"\0")
        if nul >= 0:
            line, col = _line_col(content, nul)
            raise _fail(name, line, col, "binary content (a NUL byte); a model file must be UTF-8 text")
        try:
            text = content.decode("utf-8")
        except UnicodeDecodeError as exc:
            line, col = _line_col(content, exc.start)
            raise _fail(name, line, col, "not valid UTF-8 text; save the file as UTF-8")
    if text.startswith("\ufeff"):
        text = text[1:]
    bad = None if _plain_ascii(text) else _CONTROL.search(text)
    if bad:
        line, col = _line_col(text, bad.start())
        char = bad.group()
        what = "binary content (a NUL character)" if char == "\0" else f"a control character (U+{ord(char):04X})"
        raise _fail(name, line, col, f"{what}; a model file must be plain UTF-8 text")
    return text


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


# --------------------------------------------------------------------------
# The fast reader: a compiled YAML 1.2 parser for the common case, positions on demand
#
# `yaml_rs` (docs/performance.md says why this one) builds plain values about
# six times as fast as the event loop above, but keeps no positions and differs
# from the YAML 1.2 core schema on a few plain scalars (`1_000`, `0b101`). So
# it is used only when a cheap scan of the text finds none of the constructs
# where the two readers could differ (tags, anchors, aliases, merge keys,
# directives, document markers, complex keys, escapes, tabs, carriage returns,
# a `format` or `type` that is not plain digits or letters, very deep nesting),
# and only when the records come out without a single finding. Anything else,
# including every error, goes to the event reader, which reports it exactly.
# Positions are then read from the parser's events the first time one is asked for.

FAST_READER_ENV = "MODELDIFF_FAST_YAML"  # "0": always use the event reader

_NODE_INDICATORS = "-?:,[{"  # after these (and spaces) a new node starts
_COMPACT_PAIR = re.compile(r"-[ ]+[-?][ ]")  # a compact collection right inside another (rare: checked further)
_COMPACT_RUN = re.compile(r"(?:[-?][ ]+){16}")  # many compact collections on one line
_COMPLEX_KEY = re.compile(r"^[ ]*\?(?:[ ]|$)", re.MULTILINE)
# Only `format` and a history's `type` accept a number; the readers differ on some
# spellings of numbers (`0b1`, `1_0`), so those two values must be plain digits.
_NUMBER_FIELDS = tuple(re.compile(key + r"['\"]?[ ]*:\s*([^\s,\[\]{}#'\"]*)") for key in ("format", "type"))


def _fast_unsure(text: str) -> bool:
    """Whether the text uses a construct on which the fast reader might differ from the event reader.

    Cheap and conservative: a false alarm only costs speed.
    """
    if "\t" in text or "\r" in text or "\\" in text or "<<" in text:  # tabs, escapes, merge keys
        return True
    if text.startswith(("%", "---", "...")) or any(mark in text and "\n" + mark in text for mark in ("%", "---", "...")):
        return True  # directives, document markers (each mark looked for alone first: it is rare, a newline is not)
    if "\n" + " " * 200 in text or (_COMPACT_PAIR.search(text) and _COMPACT_RUN.search(text)):
        return True  # nesting far deeper than a model's
    if "?" in text and _COMPLEX_KEY.search(text):
        return True
    if _node_mark(text):
        return True
    for pattern in _NUMBER_FIELDS:
        for match in pattern.finditer(text):
            value = match.group(1)
            if value and not (value.isdigit() or value.isalpha()):
                return True
    return False


def _node_mark(text: str) -> bool:
    """Whether an anchor, alias or tag mark (`&`, `*`, `!`) stands where a node starts.

    That is: after only spaces since the text's start, a line's start or one of
    `_NODE_INDICATORS`. Each mark is found with `str.find`; one right after any
    other character (the `*` of `count(*)`) is passed over at once.
    """
    for mark in "&*!":
        index = text.find(mark)
        while index >= 0:
            before = index - 1
            if before < 0 or text[before] in _MARK_NEIGHBOURS:
                while before >= 0 and text[before] == " ":
                    before -= 1
                if before < 0 or text[before] in _NODE_INDICATORS or text[before] == "\n":
                    return True
            index = text.find(mark, index + 1)
    return False


_MARK_NEIGHBOURS = " \n" + _NODE_INDICATORS  # the characters after which a mark may start a node


class _Fallback(Exception):
    """The fast reader met something that only the event reader reports exactly."""


def _fast_reader():
    """yaml_rs's `loads`, or None when it is not installed or switched off."""
    if os.environ.get(FAST_READER_ENV, "1") == "0":
        return None
    try:
        import yaml_rs
    except ImportError:
        return None
    policy = yaml_rs.DuplicateKeyPolicy.Error

    def loads(text: str) -> Any:
        return yaml_rs.loads(text, parse_datetime=False, duplicate_key_policy=policy)

    return loads


def _fast_values(loads, name: str, content: bytes | str) -> dict | None:
    """The top-level mapping of one file by the fast reader, or None when the event reader must decide."""
    try:
        text = _decode(name, content)
    except ModeldiffError:
        return None
    if _fast_unsure(text):
        return None
    try:
        top = loads(text)
    except Exception:  # noqa: BLE001 - any complaint of the fast reader: the event reader words it
        return None
    return top if type(top) is dict else None


def _fast_load(files: Sequence[tuple[str, bytes | str]], shared: Mapping[str, Measure] | None = None) -> LoadResult | None:
    """The model read by the fast reader, or None when the event reader must read it."""
    loads = _fast_reader()
    if loads is None:
        return None
    docs = []
    for name, content in files:
        top = _fast_values(loads, name, content)
        if top is None:
            return None
        docs.append(_Document(name, top))
    try:
        name, fmt = _model_identity(docs)
        return _FastBuilder(files, shared).build(docs, name, fmt)
    except (_Fallback, ModeldiffError, AttributeError):  # AttributeError: an error path asked for a position
        return None


class _LazyPositions(Mapping):
    """Model.positions of a fast-read model: the event reader reads them on first use."""

    __slots__ = ("_files", "_found")

    def __init__(self, files: Sequence[tuple[str, bytes | str]]) -> None:
        self._files = tuple(files)
        self._found: Mapping[str, Pos] | None = None

    def _positions(self) -> Mapping[str, Pos]:
        if self._found is None:
            with paused_gc():
                docs = [_Document(name, _key_maps(name, _decode(name, content))) for name, content in self._files]
                self._found = _Positions(_positions_of(docs))
            self._files = ()
        return self._found

    @property
    def computed(self) -> bool:
        return self._found is not None

    def __getitem__(self, subject: str) -> Pos:
        return self._positions()[subject]

    def __iter__(self) -> Iterator[str]:
        return iter(self._positions())

    def __len__(self) -> int:
        return len(self._positions())

    def __repr__(self) -> str:
        return "<positions, read on first use>" if self._found is None else repr(self._found)


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


def _positions_of(docs: list[_Document]) -> dict[str, _At]:
    """Model.positions of a model without findings, from the event reader's values alone.

    The same subjects `_RecordBuilder` records on such a model, without
    building records (tests hold the two to the same answer on every model
    file): a named item points at its name; a field and an entry of a
    table-keyed map at its value; a history's `type` is not recorded.
    """
    found: dict[str, _At] = {}
    first = next(doc for doc in docs if "model" in doc.top)
    found["model"] = _value_pos(first.top, "model")
    for section in SECTIONS:
        for doc in docs:
            items = doc.top.get(section, _NOTHING) if isinstance(doc.top, dict) else _NOTHING
            if items is _NOTHING:
                continue
            found[section] = _value_pos(doc.top, section)
            if not isinstance(items, YamlMap):
                continue
            for name, fields in items.items():
                subject = f"{section}.{name}"
                found[subject] = _key_pos(items, name)
                if isinstance(fields, YamlMap):
                    _field_positions(found, subject, fields, section)
    return found


# Fields whose value is a map of entries each recorded at its value (a table-keyed map, or link -> flow).
_ENTRY_MAPS = frozenset({"flow", "where", "filters", "variant"})


def _field_positions(found: dict[str, _At], subject: str, fields: YamlMap, section: str) -> None:
    for key, value in fields.items():
        here = f"{subject}.{key}"
        found[here] = _value_pos(fields, key)
        if not isinstance(value, YamlMap):
            continue
        if key in _ENTRY_MAPS:
            for entry in value:
                found[f"{here}.{entry}"] = _value_pos(value, entry)
        elif section == "tables" and key == "columns":
            for column, spec in value.items():
                found[f"{here}.{column}"] = _key_pos(value, column)
                if isinstance(spec, YamlMap):
                    for column_key in spec:
                        found[f"{here}.{column}.{column_key}"] = _value_pos(spec, column_key)
        elif section == "tables" and key == "history":
            for history_key, history_value in value.items():
                if history_key != "type":
                    found[f"{here}.{history_key}"] = _value_pos(value, history_key)
                if history_key == "previous" and isinstance(history_value, YamlMap) and "column" in history_value:
                    found[f"{here}.previous.column"] = _value_pos(history_value, "column")
        elif section == "variants" and key == "options":
            for option, option_fields in value.items():
                option_subject = f"{here}.{option}"
                found[option_subject] = _key_pos(value, option)
                if isinstance(option_fields, YamlMap):
                    _field_positions(found, option_subject, option_fields, "options")


def _key_pos(mapping: YamlMap, key: Any) -> _At:
    at = mapping.at[key]
    return (mapping.file, at[0], at[1])


def _value_pos(mapping: YamlMap, key: Any) -> _At:
    at = mapping.at[key]
    return (mapping.file, at[2], at[3])


# --------------------------------------------------------------------------
# Documents: the top level of each file


@dataclass(frozen=True)
class _Document:
    """One file's top-level mapping, with its display name."""

    file: str
    top: YamlMap


def _read_document(name: str, content: bytes | str) -> _Document:
    root = _parse(name, _decode(name, content))
    if root is _NOTHING or root is None:
        raise _fail(
            name, 1, 1, "the file is empty; a model file needs at least `model: NAME`, `format: 1` and `tables:`"
        )
    if not isinstance(root, YamlMap):
        line, col = (root.line, root.column) if isinstance(root, YamlList) else (1, 1)
        raise _fail(
            name, line, col,
            f"the top level is {_describe(root)}, not a mapping; "
            "a model file starts with `model:`, `format: 1` and `tables:`",
        )  # fmt: skip
    return _Document(name, root)


def _model_identity(docs: list[_Document]) -> tuple[str, int]:
    """`model` and `format`: required (in at least one file of a folder) and the same everywhere."""
    name = _agreed(docs, "model", "add `model: NAME` at the top of the file")
    fmt = _agreed(docs, "format", "add `format: 1` at the top of the file")
    name_value, name_doc = name
    fmt_value, fmt_doc = fmt
    if not isinstance(name_value, str) or not name_value.strip():
        line, col = _value_at(name_doc.top, "model")
        found = _describe(name_value)
        raise _fail(name_doc.file, line, col, f"`model` must be the model's name, found {found}; write `model: NAME`")
    if type(fmt_value) is not int or fmt_value != 1:
        line, col = _value_at(fmt_doc.top, "format")
        found = _describe(fmt_value)
        message = f"`format` is {found}, but this modeldiff reads format 1 only; write `format: 1`"
        raise _fail(fmt_doc.file, line, col, message)
    return name_value, fmt_value


def _agreed(docs: list[_Document], key: str, advice: str) -> tuple[Any, _Document]:
    """The value of a top-level key and the first file that sets it; all files must agree."""
    found = [(doc, doc.top[key]) for doc in docs if key in doc.top]
    if not found:
        where = docs[0].file if len(docs) == 1 else f"{docs[0].file} (and the other files of the folder)"
        raise ModeldiffError(f"{where}:1:1: `{key}` is missing; {advice}")
    first_doc, first = found[0]
    for doc, value in found[1:]:
        if type(value) is not type(first) or value != first:
            line, col = _value_at(doc.top, key)
            first_line = _value_at(first_doc.top, key)[0]
            raise _fail(
                doc.file, line, col,
                f"`{key}` is {_describe(value)} here but {_describe(first)} in {first_doc.file}:{first_line}; "
                "make the files of the folder agree",
            )  # fmt: skip
    return first, first_doc


def _value_at(mapping: YamlMap, key: Any) -> tuple[int, int]:
    at = mapping.at[key]
    return at[2], at[3]


def _describe(value: Any) -> str:
    """A short description of a found value for messages."""
    if value is None:
        return "nothing (null)"
    if value is True or value is False:
        return "true" if value else "false"
    if isinstance(value, str):
        shown = value if len(value) <= 40 else value[:37] + "..."
        return "''" if not value else f"'{shown}'"
    if isinstance(value, (int, float)):
        return f"the number {value}"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    return type(value).__name__


# --------------------------------------------------------------------------
# Values -> records, with invalid-model findings

_TOP_KEYS = ("model", "format") + SECTIONS
_TABLE_KEYS = ("kind", "key", "natural_key", "history", "columns", "source", "description")
_COLUMN_KEYS = ("type", "description", "unique")
_HISTORY_KEYS = ("type", "valid_from", "valid_to", "current", "previous")
_LINK_KEYS = ("from", "to", "cardinality", "flow", "security_flow", "standby", "description")
_MEASURE_KEYS = ("table", "expr", "where", "via", "flow", "description", "unit", "owner", "folder")
_VARIANT_KEYS = ("default", "options", "description")
_OPTION_KEYS = ("via", "flow", "where")
_ROLE_KEYS = ("filters", "description")
_REPORT_KEYS = ("measures", "by", "where", "variant", "role", "owner", "via", "flow", "description", "having")
_SINGULAR = {
    "tables": "table", "links": "link", "measures": "measure",
    "variants": "variant", "roles": "role", "reports": "report",
}  # fmt: skip
_COLUMN_TYPE_SET = frozenset(COLUMN_TYPES)
_MEASURE_TEXT_KEYS = frozenset(("table", "expr", "where", "description", "unit", "owner", "folder"))
_TABLE_PLAIN_KEYS = frozenset(("kind", "key", "columns", "source", "description"))
_LINK_PLAIN_KEYS = frozenset(_LINK_KEYS)


def _plain_names(value: Any) -> tuple[str, ...] | None:
    """A table's `key` as `_get_columns` reads it when it is well formed (absent: ()); else None."""
    if value is _NOTHING:
        return ()
    if value.__class__ is str:
        return (value,) if _NAME.match(value) else None
    if value.__class__ is list and value and all(v.__class__ is str and _NAME.match(v) for v in value):
        return tuple(value)
    return None


def _plain_columns(columns: dict, made: dict[tuple[str, str], Column]) -> dict[str, Column] | None:
    """Columns written as `name: type` only, as `_columns` reads them; else None.

    `made` holds the columns made so far by (name, type): a column is an
    immutable record, and most tables repeat a few (`id: integer`), so equal
    ones are made once and shared.
    """
    records = {}
    for name, value in columns.items():
        if value.__class__ is not str:
            return None
        found = made.get((name, value))
        if found is None:
            if not (name.__class__ is str and value in _COLUMN_TYPE_SET and _NAME.match(name)):
                return None
            found = made[(name, value)] = Column(name, value)
        records[name] = found
    return records
_BAD = object()  # a field that was present but wrong (a finding was recorded)


_At = tuple  # (file, line, column): a position before it becomes a Pos


class _Positions(Mapping):
    """Model.positions: Pos records made on first use from (file, line, column) tuples."""

    __slots__ = ("_raw", "_made")

    def __init__(self, raw: dict[str, _At]) -> None:
        self._raw = raw
        self._made: dict[str, Pos] = {}

    def __getitem__(self, subject: str) -> Pos:
        pos = self._made.get(subject)
        if pos is None:
            pos = self._made[subject] = Pos(*self._raw[subject])
        return pos

    def __iter__(self) -> Iterator[str]:
        return iter(self._raw)

    def __len__(self) -> int:
        return len(self._raw)

    def __repr__(self) -> str:
        return f"<{len(self._raw)} positions>"


class _RecordBuilder:
    """Turns the documents' plain values into Model records and invalid-model findings."""

    def __init__(self) -> None:
        self.findings: list[Finding] = []
        self.positions: dict[str, _At] = {}

    # ---- the whole model

    def build(self, docs: list[_Document], name: str, fmt: int) -> LoadResult:
        for doc in docs:
            self._check_keys(doc.top, _TOP_KEYS, "", "at the top level")
        first = next(doc for doc in docs if "model" in doc.top)
        self.positions["model"] = self._pos_value(first.top, "model")
        if not any("tables" in doc.top for doc in docs):
            self._bad("tables", (docs[0].file, 1, 1), "`tables` is missing; a model needs a `tables:` section")
        builders = {
            "tables": self._table, "links": self._link, "measures": self._measure,
            "variants": self._variant, "roles": self._role, "reports": self._report,
        }  # fmt: skip
        sections = {section: self._section(docs, section, builders[section]) for section in SECTIONS}
        model = Model(name=name, format=fmt, positions=self._model_positions(), **sections)
        findings = sorted(
            self.findings, key=lambda f: (f.pos.file, f.pos.line, f.pos.column, f.subject, f.message)
        )
        return LoadResult(model, tuple(findings))

    def _model_positions(self) -> Mapping[str, Pos]:
        return _Positions(self.positions)

    def _section(self, docs: list[_Document], section: str, build_item) -> dict[str, Any]:
        """One section merged over the files; a name in two files cannot be read."""
        records: dict[str, Any] = {}
        seen: dict[str, _At] = {}
        for doc in docs:
            items = self._get_map(doc.top, section, section)
            if items is None:
                continue
            for name, value in items.items():
                if not self._check_name(items, name, section):
                    continue
                subject = f"{section}.{name}"
                pos = self._pos_key(items, name)
                if name in seen:
                    raise self._defined_twice(section, name, seen[name], pos)
                seen[name] = pos
                self.positions[subject] = pos
                record = build_item(name, value, subject, items)
                if record is not None:
                    records[name] = record
        return records

    def _defined_twice(self, section: str, name: str, first: _At, pos: _At) -> ModeldiffError:
        return _fail(
            *pos,
            f"{_SINGULAR[section]} '{name}' is defined in both {first[0]}:{first[1]} and "
            f"{pos[0]}:{pos[1]}; keep one definition",
        )  # fmt: skip

    # ---- sections

    def _item_map(self, name: str, value: Any, subject: str, parent: YamlMap, keys: tuple[str, ...]) -> YamlMap | None:
        what = f"{subject.split('.')[0][:-1]} '{name}'"
        if not isinstance(value, dict):
            self._expected(subject, self._pos_value(parent, name), "a mapping of fields", value, f"{what} is ignored")
            return None
        self._check_keys(value, keys, subject, f"in {what}")
        return value

    def _table(self, name: str, value: Any, subject: str, parent: YamlMap) -> Table | None:
        fields = self._item_map(name, value, subject, parent, _TABLE_KEYS)
        if fields is None:
            return None
        kind = self._get_enum(fields, "kind", subject, TABLE_KINDS, "fact", required=True)
        columns = self._columns(fields, subject)
        return Table(
            name=name,
            kind=kind,
            key=self._get_columns(fields, "key", subject),
            columns=columns,
            natural_key=self._get_columns(fields, "natural_key", subject),
            history=self._history(fields, subject),
            source=self._get_str(fields, "source", subject),
            description=self._get_str(fields, "description", subject),
        )

    def _columns(self, fields: YamlMap, subject: str) -> dict[str, Column]:
        columns = self._get_map(fields, "columns", f"{subject}.columns", required=True)
        if columns is None:
            return {}
        records = {}
        prefix = f"{subject}.columns."
        at = getattr(columns, "at", None)  # None from the fast reader, which records no positions
        positions, file = self.positions, getattr(columns, "file", None)
        for name, value in columns.items():  # the model's most numerous item: keep it lean
            if not (name.__class__ is str and _NAME.match(name)):
                self._check_name(columns, name, f"{subject}.columns")
                continue
            if at is not None:
                entry = at[name]
                positions[prefix + name] = (file, entry[0], entry[1])
            if value.__class__ is str and value in _COLUMN_TYPE_SET:
                records[name] = Column(name, value)
            else:
                records[name] = self._column(name, value, prefix + name, columns)
        return records

    def _column(self, name: str, value: Any, subject: str, parent: YamlMap) -> Column:
        if isinstance(value, str):
            if value in COLUMN_TYPES:
                return Column(name, value)
            return self._bad_column_type(name, value, subject, self._pos_value(parent, name))
        if not isinstance(value, dict):
            expected = "a column type or a mapping {type, description, unique}"
            self._expected(subject, self._pos_value(parent, name), expected, value, "read as text")
            return Column(name, "text")
        self._check_keys(value, _COLUMN_KEYS, subject, f"in column '{name}'")
        if "type" not in value:
            self._bad(subject, self._pos_value(parent, name), f"{subject}: `type` is missing (read as text)")
            column_type = "text"
        else:
            column_type = self._get_enum(value, "type", subject, COLUMN_TYPES, "text")
        return Column(
            name,
            column_type,
            description=self._get_str(value, "description", subject),
            unique=self._get_bool(value, "unique", subject, False),
        )

    def _bad_column_type(self, name: str, value: str, subject: str, pos: _At) -> Column:
        self._expected(subject, pos, "one of " + ", ".join(COLUMN_TYPES), value, "read as text")
        return Column(name, "text")

    def _history(self, fields: YamlMap, subject: str) -> History | None:
        subject = f"{subject}.history"
        history = self._get_map(fields, "history", subject)
        if history is None:
            return None
        self._check_keys(history, _HISTORY_KEYS, subject, "in `history`")
        if "type" not in history:
            self._bad(subject, self._pos_value(fields, "history"), f"{subject}: `type` is missing; history is ignored")
            return None
        history_type = history["type"]
        if type(history_type) is not int or history_type not in (0, 1, 2, 3):
            where = self._pos_value(history, "type")
            self._expected(f"{subject}.type", where, "0, 1, 2 or 3", history_type, "history is ignored")
            return None
        return History(
            type=history_type,
            valid_from=self._get_name(history, "valid_from", subject),
            valid_to=self._get_name(history, "valid_to", subject),
            current=self._get_name(history, "current", subject),
            previous=self._previous(history, subject, history_type),
        )

    def _previous(self, history: YamlMap, subject: str, history_type: int) -> str | None:
        if "previous" not in history:
            return None
        subject = f"{subject}.previous"
        if history_type != 3:
            message = f"{subject}: `previous` applies only to history type 3; it is ignored"
            self._bad(subject, self._pos_key(history, "previous"), message)
            return None
        previous = self._get_map(history, "previous", subject)
        if previous is None:
            return None
        self._check_keys(previous, ("column",), subject, "in `previous`")
        if "column" not in previous:
            self._bad(subject, self._pos_value(history, "previous"), f"{subject}: `column` is missing")
            return None
        return self._get_name(previous, "column", subject)

    def _link(self, name: str, value: Any, subject: str, parent: YamlMap) -> Link | None:
        fields = self._item_map(name, value, subject, parent, _LINK_KEYS)
        if fields is None:
            return None
        ends = [self._link_end(fields, end, subject, name) for end in ("from", "to")]
        if _BAD in ends:
            return None
        (from_table, from_columns), (to_table, to_columns) = ends
        if len(from_columns) != len(to_columns):
            self._bad(
                subject,
                self._pos_value(fields, "to"),
                f"{subject}: `from` has {len(from_columns)} column(s) but `to` has {len(to_columns)}; "
                f"they must pair up one to one (link '{name}' is ignored)",
            )
            return None
        return Link(
            name=name,
            from_table=from_table,
            from_columns=from_columns,
            to_table=to_table,
            to_columns=to_columns,
            cardinality=self._get_enum(fields, "cardinality", subject, CARDINALITIES, "many-to-one"),
            flow=self._get_enum(fields, "flow", subject, FLOWS, "one-way"),
            security_flow=self._get_enum(fields, "security_flow", subject, FLOWS, "one-way"),
            standby=self._get_bool(fields, "standby", subject, False),
            description=self._get_str(fields, "description", subject),
        )

    def _link_end(self, fields: YamlMap, end: str, subject: str, name: str):
        """(table, columns) of a link's `from` or `to`, or _BAD."""
        field_subject = f"{subject}.{end}"
        if end not in fields:
            message = f"{field_subject}: `{end}` is missing (link '{name}' is ignored)"
            self._bad(field_subject, self.positions[subject], message)
            return _BAD
        value, pos = self._field(fields, end, subject)
        refs = list(value) if isinstance(value, list) else [value]
        expected = "\"table.column\" or a list of them, all of one table"
        parsed = [_COLREF.match(ref) if isinstance(ref, str) else None for ref in refs]
        if not refs or None in parsed:
            bad = next((ref for ref, match in zip(refs, parsed) if match is None), value)
            self._expected(field_subject, pos, expected, bad, f"link '{name}' is ignored")
            return _BAD
        tables = sorted({match.group(1) for match in parsed})
        if len(tables) > 1:
            self._bad(
                field_subject,
                pos,
                f"{field_subject}: expected columns of one table, found tables {', '.join(tables)} "
                f"(link '{name}' is ignored)",
            )
            return _BAD
        return tables[0], tuple(match.group(2) for match in parsed)

    def _measure(self, name: str, value: Any, subject: str, parent: YamlMap) -> Measure | None:
        fields = self._item_map(name, value, subject, parent, _MEASURE_KEYS)
        if fields is None:
            return None
        expr = self._get_str(fields, "expr", subject, sql=True)
        if expr is None:
            if "expr" not in fields:
                message = f"{subject}: `expr` is missing; measure '{name}' is ignored"
                self._bad(subject, self.positions[subject], message)
            return None
        return Measure(
            name=name,
            expr=expr,
            table=self._get_name(fields, "table", subject),
            where=self._get_str(fields, "where", subject, sql=True),
            overrides=self._overrides(fields, subject),
            description=self._get_str(fields, "description", subject),
            unit=self._get_str(fields, "unit", subject),
            owner=self._get_str(fields, "owner", subject),
            folder=self._get_str(fields, "folder", subject),
        )

    def _variant(self, name: str, value: Any, subject: str, parent: YamlMap) -> Variant | None:
        fields = self._item_map(name, value, subject, parent, _VARIANT_KEYS)
        if fields is None:
            return None
        default = self._get_name(fields, "default", subject)
        if default is None and "default" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `default` is missing; variant '{name}' is ignored")
        options = self._options(fields, subject)
        if default is None or not options:
            return None
        return Variant(name, default, options, description=self._get_str(fields, "description", subject))

    def _options(self, fields: YamlMap, subject: str) -> dict[str, VariantOption]:
        options = self._get_map(fields, "options", f"{subject}.options", required=True)
        if options is None:
            return {}
        if not options:
            message = f"{subject}.options: a variant needs at least one option"
            self._bad(f"{subject}.options", self._pos_value(fields, "options"), message)
        records = {}
        for name, value in options.items():
            if not self._check_name(options, name, f"{subject}.options"):
                continue
            option_subject = f"{subject}.options.{name}"
            self.positions[option_subject] = self._pos_key(options, name)
            if not isinstance(value, dict):
                pos = self._pos_value(options, name)
                self._expected(option_subject, pos, "a mapping (write {} for no changes)", value, "read as {}")
                records[name] = VariantOption(name)
                continue
            self._check_keys(value, _OPTION_KEYS, option_subject, f"in option '{name}'")
            where = self._get_predicates(value, "where", option_subject)
            records[name] = VariantOption(name, overrides=self._overrides(value, option_subject), where=where)
        return records

    def _role(self, name: str, value: Any, subject: str, parent: YamlMap) -> Role | None:
        fields = self._item_map(name, value, subject, parent, _ROLE_KEYS)
        if fields is None:
            return None
        if "filters" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `filters` is missing; role '{name}' is ignored")
            return None
        filters = self._get_predicates(fields, "filters", subject)
        return Role(name, filters, description=self._get_str(fields, "description", subject))

    def _report(self, name: str, value: Any, subject: str, parent: YamlMap) -> Report | None:
        fields = self._item_map(name, value, subject, parent, _REPORT_KEYS)
        if fields is None:
            return None
        if "measures" not in fields:
            self._bad(subject, self.positions[subject], f"{subject}: `measures` is missing; report '{name}' is ignored")
            return None
        measures = self._get_names(fields, "measures", subject, nonempty=True)
        return Report(
            name=name,
            measures=measures,
            by=self._get_colrefs(fields, "by", subject),
            where=self._get_predicates(fields, "where", subject),
            variant=self._get_name_map(fields, "variant", subject),
            role=self._get_name(fields, "role", subject),
            owner=self._get_str(fields, "owner", subject),
            overrides=self._overrides(fields, subject),
            description=self._get_str(fields, "description", subject),
            having=self._get_str(fields, "having", subject, sql=True),
        )

    def _overrides(self, fields: YamlMap, subject: str) -> Overrides:
        key = self._old_spelling(fields, "use", subject) if "use" in fields else "via"
        via = self._get_names(fields, key, subject)
        if key != "via" and f"{subject}.{key}" in self.positions:
            self.positions[f"{subject}.via"] = self.positions[f"{subject}.{key}"]  # where check rules point
        flow = self._get_flow(fields, subject)
        return Overrides(via, flow) if via or flow else NO_OVERRIDES

    def _old_spelling(self, fields: YamlMap, old: str, subject: str) -> str:
        """The key to read for `old`'s new spelling: `old` itself, with a deprecated-key warning, unless both are given."""
        new = DEPRECATED_KEYS[old]
        at = self._pos_key(fields, old)
        if new in fields:
            self._bad(f"{subject}.{old}", at, f"{subject}: both `{new}` and its old spelling `{old}` are given; "
                                              f"remove `{old}` (it is ignored)")
            return new
        self._warn(f"{subject}.{old}", at, f"{subject}: `{old}` (line {at[1]}) is the old spelling of `{new}`; "
                                           f"rename the key to `{new}` (read as `{new}` until then)")
        return old

    # ---- typed fields: each returns the value, or a default after recording a finding

    def _field(self, fields: YamlMap, key: str, subject: str) -> tuple[Any, _At | None]:
        if key not in fields:
            return _NOTHING, None
        pos = self._pos_value(fields, key)
        self.positions[f"{subject}.{key}"] = pos
        return fields[key], pos

    def _get_str(self, fields: YamlMap, key: str, subject: str, sql: bool = False) -> str | None:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None
        if isinstance(value, str) and (not sql or value.strip()):
            return value
        expected = "a non-empty SQL expression" if sql else "text"
        self._expected(f"{subject}.{key}", pos, expected, value, "it is ignored")
        return None

    def _get_name(self, fields: YamlMap, key: str, subject: str) -> str | None:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None
        if isinstance(value, str) and _NAME.match(value):
            return value
        self._expected(f"{subject}.{key}", pos, f"a name matching {_NAME_PATTERN}", value, "it is ignored")
        return None

    def _get_bool(self, fields: YamlMap, key: str, subject: str, default: bool) -> bool:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return default
        if value is True or value is False:
            return value
        meant = _YAML11_BOOLEANS.get(value) if isinstance(value, str) else None
        if meant is not None:  # YAML 1.1 spellings: YAML 1.2 reads them as text
            self._bad(f"{subject}.{key}", pos, f"{subject}.{key}: {value} is not a boolean in this format; write "
                                               f"{meant} (YAML 1.2 reads {value} as text, so it counts as "
                                               f"{str(default).lower()})")
            return default
        self._expected(f"{subject}.{key}", pos, "true or false", value, f"read as {str(default).lower()}")
        return default

    def _get_enum(self, fields: YamlMap, key: str, subject: str, choices, default: str, required: bool = False) -> str:
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            if required:
                message = f"{subject}: `{key}` is missing; expected one of {', '.join(choices)} (read as {default})"
                self._bad(f"{subject}.{key}", self.positions.get(subject) or self._pos_first(fields), message)
            return default
        if isinstance(value, str) and value in choices:
            return value
        self._expected(f"{subject}.{key}", pos, "one of " + ", ".join(choices), value, f"read as {default}")
        return default

    def _get_list(self, fields: YamlMap, key: str, subject: str, expected: str, nonempty: bool = False):
        """The items of a list field that pass, with a finding for the rest; None when absent."""
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return None, None
        if not isinstance(value, list) or (nonempty and not value):
            wanted = f"a non-empty list of {expected}" if nonempty else f"a list of {expected}"
            self._expected(f"{subject}.{key}", pos, wanted, value, "it is ignored")
            return None, None
        return value, pos

    def _get_names(self, fields: YamlMap, key: str, subject: str, nonempty: bool = False) -> tuple[str, ...]:
        items, _ = self._get_list(fields, key, subject, "names", nonempty)
        if items is None:
            return ()
        good = []
        for index, item in enumerate(items):
            if isinstance(item, str) and _NAME.match(item):
                good.append(item)
            else:
                item_pos = self._pos_item(items, index)
                self._expected(f"{subject}.{key}", item_pos, f"a name matching {_NAME_PATTERN}", item, "it is ignored")
        return tuple(good)

    def _get_colrefs(self, fields: YamlMap, key: str, subject: str) -> tuple[str, ...]:
        items, _ = self._get_list(fields, key, subject, '"table.column" entries')
        if items is None:
            return ()
        good = []
        for index, item in enumerate(items):
            if isinstance(item, str) and _COLREF.match(item):
                good.append(item)
            else:
                item_pos = self._pos_item(items, index)
                self._expected(f"{subject}.{key}", item_pos, '"table.column"', item, "it is ignored")
        return tuple(good)

    def _get_columns(self, fields: YamlMap, key: str, subject: str) -> tuple[str, ...]:
        """`key`/`natural_key`: one column name or a non-empty list of them."""
        value, pos = self._field(fields, key, subject)
        if value is _NOTHING:
            return ()
        if isinstance(value, str) and _NAME.match(value):
            return (value,)
        if isinstance(value, list) and value and all(isinstance(v, str) and _NAME.match(v) for v in value):
            return tuple(value)
        wanted = "a column name or a non-empty list of column names"
        self._expected(f"{subject}.{key}", pos, wanted, value, "it is ignored")
        return ()

    def _get_flow(self, fields: YamlMap, subject: str) -> dict[str, str]:
        flows = self._get_map(fields, "flow", f"{subject}.flow")
        if flows is None:
            return {}
        result = {}
        for link, value in flows.items():
            if not self._check_name(flows, link, f"{subject}.flow"):
                continue
            pos = self._pos_value(flows, link)
            self.positions[f"{subject}.flow.{link}"] = pos
            if isinstance(value, str) and value in FLOW_OVERRIDES:
                result[link] = value
            else:
                wanted = "one of " + ", ".join(FLOW_OVERRIDES)
                self._expected(f"{subject}.flow.{link}", pos, wanted, value, "it is ignored")
        return result

    def _get_predicates(self, fields: YamlMap, key: str, subject: str) -> dict[str, str]:
        """A map table -> SQL predicate (`where`, `filters`)."""
        return self._get_name_keyed(fields, key, subject, "a non-empty SQL predicate", _is_sql)

    def _get_name_map(self, fields: YamlMap, key: str, subject: str) -> dict[str, str]:
        """A map name -> name (a report's `variant`: variant -> option)."""
        return self._get_name_keyed(fields, key, subject, f"a name matching {_NAME_PATTERN}", _is_name)

    def _get_name_keyed(self, fields: YamlMap, key: str, subject: str, expected: str, accept) -> dict[str, str]:
        entries = self._get_map(fields, key, f"{subject}.{key}")
        if entries is None:
            return {}
        result = {}
        for name, value in entries.items():
            if not self._check_name(entries, name, f"{subject}.{key}"):
                continue
            pos = self._pos_value(entries, name)
            self.positions[f"{subject}.{key}.{name}"] = pos
            if accept(value):
                result[name] = value
            else:
                self._expected(f"{subject}.{key}.{name}", pos, expected, value, "it is ignored")
        return result

    def _get_map(self, fields: YamlMap, key: str, subject: str, required: bool = False) -> YamlMap | None:
        if key not in fields:
            if required:
                parent = subject.rsplit(".", 1)[0]
                where = self.positions.get(parent) or self._pos_first(fields)
                self._bad(subject, where, f"{parent}: `{key}` is missing; expected a mapping")
            return None
        value = fields[key]
        pos = self._pos_value(fields, key)
        self.positions[subject] = pos
        if isinstance(value, dict):
            return value
        self._expected(subject, pos, "a mapping", value, "it is ignored")
        return None

    # ---- names, keys, findings

    def _check_name(self, mapping: YamlMap, name: Any, section: str) -> bool:
        if isinstance(name, str) and _NAME.match(name):
            return True
        wanted = f"a name matching {_NAME_PATTERN}"
        self._expected(f"{section}.{name}", self._pos_key(mapping, name), wanted, name, "the entry is ignored")
        return False

    def _check_keys(self, mapping: YamlMap, allowed: tuple[str, ...], subject: str, where: str) -> None:
        for key in mapping:
            if key in allowed or DEPRECATED_KEYS.get(key) in allowed:
                continue
            hint = _close_match(key, allowed)
            suggestion = f"; did you mean `{hint}`?" if hint else f"; expected one of {', '.join(allowed)}"
            key_subject = f"{subject}.{key}" if subject else str(key)
            message = f"unknown key {_describe(key)} {where} (ignored){suggestion}"
            self._bad(key_subject, self._pos_key(mapping, key), message)

    def _expected(self, subject: str, pos: _At, expected: str, found: Any, consequence: str) -> None:
        self._bad(subject, pos, f"{subject}: expected {expected}, found {_describe(found)} ({consequence})")

    def _bad(self, subject: str, at: _At, message: str) -> None:
        pos = Pos(*at)
        self.findings.append(Finding(rule=RULE, severity="error", subject=subject, message=message, pos=pos))

    def _warn(self, subject: str, at: _At, message: str) -> None:
        pos = Pos(*at)
        self.findings.append(Finding(rule=DEPRECATED_RULE, severity="warning", subject=subject, message=message, pos=pos))

    @staticmethod
    def _pos_key(mapping: YamlMap, key: Any) -> _At:
        at = mapping.at[key]
        return (mapping.file, at[0], at[1])

    @staticmethod
    def _pos_value(mapping: YamlMap, key: Any) -> _At:
        at = mapping.at[key]
        return (mapping.file, at[2], at[3])

    @staticmethod
    def _pos_first(mapping: YamlMap) -> _At:
        return (mapping.file, mapping.line, mapping.column)

    @staticmethod
    def _pos_item(items: YamlList, index: int) -> _At:
        return (items.file, *items.at[index])


_IS_TEXT = str.__instancecheck__
_NAME_LINES = re.compile(rf"(?:{_NAME_PATTERN}\n)*{_NAME_PATTERN}")


def _plain_names_only(items: dict) -> bool:
    """Whether every key is text and a plain name (`_NAME`): one pattern over the keys, one per line."""
    if not items:
        return True
    if not all(map(_IS_TEXT, items)):
        return False
    lines = "\n".join(items)
    return lines.count("\n") == len(items) - 1 and _NAME_LINES.fullmatch(lines) is not None
_MEASURE_FIELDS = ("name", "expr", "table", "where", "overrides", "description", "unit", "owner", "folder")


def _measure_maker():
    """A maker of Measure records without overrides from a name and a dict of text fields (keys among
    `_MEASURE_TEXT_KEYS`), nearly twice as fast as the dataclass's own __init__.

    It gives the record a filled field dict directly, which is the same record
    only while Measure has exactly these fields and no __post_init__ or
    __slots__: otherwise (checked once, here) the class itself is called.
    """
    import dataclasses

    if tuple(f.name for f in dataclasses.fields(Measure)) != _MEASURE_FIELDS or hasattr(Measure, "__post_init__") \
            or hasattr(Measure, "__slots__"):
        return lambda name, fields: Measure(name=name, **fields)
    new, set_field = object.__new__, object.__setattr__
    blank = dict.fromkeys(_MEASURE_FIELDS)
    blank["overrides"] = NO_OVERRIDES

    def make(name: str, fields: dict[str, str]) -> Measure:
        own = blank.copy()  # every field in the class's order, then this measure's values
        own.update(fields)
        own["name"] = name
        record = new(Measure)
        set_field(record, "__dict__", own)  # (a frozen record refuses plain assignment)
        return record

    return make


_plain_measure = _measure_maker()


class _NoPositions(dict):
    """The fast builder's positions: none are kept, and every one asked for is unknown."""

    def __missing__(self, subject: str) -> None:
        return None


class _FastBuilder(_RecordBuilder):
    """The record builder over the fast reader's plain values: no positions, and no findings.

    Any finding, which would need a position, sends the whole model back to
    the event reader (`_Fallback`); so a model it builds is exactly the one the
    event reader would build, without findings.
    """

    def __init__(self, files: Sequence[tuple[str, bytes | str]], shared: Mapping[str, Measure] | None = None) -> None:
        super().__init__()
        self.files = files
        self.positions = _NoPositions()
        self.shared = shared or None  # see load_files
        self.good_tables: set[str] = set()  # tables of measures whose names were found well formed
        self.columns: dict[tuple[str, str], Column] = {}  # plain columns made so far (`_plain_columns`)

    def _good_table(self, table: str) -> bool:
        if _NAME.match(table):
            self.good_tables.add(table)
            return True
        return False

    def _model_positions(self) -> Mapping[str, Pos]:
        return _LazyPositions(self.files)

    def _section(self, docs: list[_Document], section: str, build_item) -> dict[str, Any]:
        records: dict[str, Any] = {}
        for doc in docs:
            items = self._get_map(doc.top, section, section)
            if items is None:
                continue
            if not _plain_names_only(items) or (records and not records.keys().isdisjoint(items)):
                raise _Fallback  # a bad name, or one defined in two files
            if build_item == self._measure:  # most of a large model: its own loop, without a call per item
                self._measures(items, records)
                continue
            prefix = section + "."
            for name, value in items.items():
                record = build_item(name, value, prefix + name, items)
                if record is not None:
                    records[name] = record
        return records

    def _measures(self, items: dict[str, Any], records: dict[str, Any]) -> None:
        """The common measure (text fields only) made directly, the same record the general path makes; others by it.

        With `shared`, a measure equal to the one of the same name there is that record.
        """
        good, shared, text_keys, is_text, make = self.good_tables, self.shared, _MEASURE_TEXT_KEYS, _IS_TEXT, _plain_measure
        for name, value in items.items():
            if value.__class__ is dict and "expr" in value and value.keys() <= text_keys \
                    and all(map(is_text, value.values())):  # (the fast reader makes no subclass of str)
                get = value.get
                table, where = get("table"), get("where")
                if value["expr"].strip() and (table is None or table in good or self._good_table(table)) \
                        and (where is None or where.strip()):
                    found = make(name, value)
                    if shared is not None:
                        twin = shared.get(name)
                        if twin is not None and twin == found:
                            found = twin
                    records[name] = found
                    continue
            record = self._measure(name, value, "measures." + name, items)
            if record is not None:
                records[name] = record

    def _table(self, name: str, value: Any, subject: str, parent: YamlMap) -> Table | None:
        """The common table (kind, key, plain column types, texts) without the general path's bookkeeping."""
        if value.__class__ is dict and value.keys() <= _TABLE_PLAIN_KEYS:
            kind, key, columns = value.get("kind"), value.get("key", _NOTHING), value.get("columns")
            if (kind.__class__ is str and kind in TABLE_KINDS and columns.__class__ is dict
                    and all(v.__class__ is str for k, v in value.items() if k in ("source", "description"))):
                keys = _plain_names(key)
                built = _plain_columns(columns, self.columns)
                if keys is not None and built is not None:
                    return Table(name, kind, keys, built, source=value.get("source"),
                                 description=value.get("description"))
        return super()._table(name, value, subject, parent)

    def _link(self, name: str, value: Any, subject: str, parent: YamlMap) -> Link | None:
        """The common link (one column each way, known words) without the general path's bookkeeping."""
        if value.__class__ is dict and value.keys() <= _LINK_PLAIN_KEYS:
            ends = value.get("from"), value.get("to")
            if ends[0].__class__ is str and ends[1].__class__ is str:
                start, end = _COLREF.match(ends[0]), _COLREF.match(ends[1])
                get = value.get
                cardinality, flow = get("cardinality", "many-to-one"), get("flow", "one-way")
                security, standby = get("security_flow", "one-way"), get("standby", False)
                description = get("description", "")  # present, it must be text (null is a finding)
                if (start and end and cardinality.__class__ is str and cardinality in CARDINALITIES
                        and flow.__class__ is str and flow in FLOWS and security.__class__ is str and security in FLOWS
                        and (standby is True or standby is False) and description.__class__ is str):
                    return Link(name, start.group(1), (start.group(2),), end.group(1), (end.group(2),), cardinality,
                                flow, security, standby, get("description"))
        return super()._link(name, value, subject, parent)

    def _field(self, fields: YamlMap, key: str, subject: str) -> tuple[Any, _At | None]:
        return fields.get(key, _NOTHING), None

    def _bad(self, subject: str, at: _At, message: str) -> None:
        raise _Fallback

    def _warn(self, subject: str, at: _At, message: str) -> None:
        raise _Fallback

    def _old_spelling(self, fields: YamlMap, old: str, subject: str) -> str:
        raise _Fallback  # a finding either way, which needs positions

    def _defined_twice(self, section: str, name: str, first: _At, pos: _At) -> ModeldiffError:
        raise _Fallback

    @staticmethod
    def _pos_key(mapping: YamlMap, key: Any) -> _At:
        return None

    @staticmethod
    def _pos_value(mapping: YamlMap, key: Any) -> _At:
        return None

    @staticmethod
    def _pos_first(mapping: YamlMap) -> _At:
        return None

    @staticmethod
    def _pos_item(items: YamlList, index: int) -> _At:
        return None


def _is_sql(value: Any) -> bool:
    return isinstance(value, str) and bool(value.strip())


def _is_name(value: Any) -> bool:
    return isinstance(value, str) and _NAME.match(value) is not None


def _close_match(key: Any, allowed: Iterable[str]) -> str | None:
    if not isinstance(key, str):
        return None
    import difflib

    matches = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.75)
    return matches[0] if matches else None


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


def splice_files(files: Sequence[tuple[str, bytes | str]], base_files: Sequence[tuple[str, bytes | str]],
                 base: LoadResult) -> LoadResult:
    """`load_files(files, base.model.measures)`, reusing the records of `base` (the LoadResult of `base_files`) where the text is the same.

    For a revision that differs from its base in a few items (the two sides of
    a diff): both texts are split into sections (`_split_sections`); a section
    written byte for byte as in the base keeps the base's records, and in the
    others an item written as in the base is the base's record; only the
    changed items are read, by the same fast reader and record builder as a
    full read. Used only when the base was read by the fast reader without
    findings, both are one file, their text outside the sections is the same,
    each changed section of the base holds the names of its records in their order, and
    the changed items read alone give exactly their own names; anything else
    is a full read, so the result is always that of `load_files(files, base.model.measures)`.
    """
    with paused_gc():
        spliced = _spliced(files, base_files, base)
        return spliced if spliced is not None else load_files(files, base.model.measures)


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
    except (_Fallback, ModeldiffError, AttributeError):
        return None
