"""Documents: the top-level mapping of each file of a model, and the `model` and `format` all of them agree on."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from modeldiff.errors import ModeldiffError
from modeldiff.load.text import _decode, _fail
from modeldiff.load.events import YamlList, YamlMap, _NOTHING, _parse


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


def _model_identity(docs: list[_Document], value_at=None) -> tuple[str, int]:
    """`model` and `format`: required (in at least one file of a folder) and the same everywhere.

    `value_at(mapping, key)`: where a value is written, for the message of a problem (default: the event
    reader's positions; the fast reader, which keeps none, passes one that gives up instead).
    """
    value_at = value_at or _value_at
    name = _agreed(docs, "model", "add `model: NAME` at the top of the file", value_at)
    fmt = _agreed(docs, "format", "add `format: 1` at the top of the file", value_at)
    name_value, name_doc = name
    fmt_value, fmt_doc = fmt
    if not isinstance(name_value, str) or not name_value.strip():
        line, col = value_at(name_doc.top, "model")
        found = _describe(name_value)
        raise _fail(name_doc.file, line, col, f"`model` must be the model's name, found {found}; write `model: NAME`")
    if type(fmt_value) is not int or fmt_value != 1:
        line, col = value_at(fmt_doc.top, "format")
        found = _describe(fmt_value)
        message = f"`format` is {found}, but this modeldiff reads format 1 only; write `format: 1`"
        raise _fail(fmt_doc.file, line, col, message)
    return name_value, fmt_value


def _agreed(docs: list[_Document], key: str, advice: str, value_at) -> tuple[Any, _Document]:
    """The value of a top-level key and the first file that sets it; all files must agree."""
    found = [(doc, doc.top[key]) for doc in docs if key in doc.top]
    if not found:
        where = docs[0].file if len(docs) == 1 else f"{docs[0].file} (and the other files of the folder)"
        raise ModeldiffError(f"{where}:1:1: `{key}` is missing; {advice}")
    first_doc, first = found[0]
    for doc, value in found[1:]:
        if type(value) is not type(first) or value != first:
            line, col = value_at(doc.top, key)
            first_line = value_at(first_doc.top, key)[0]
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
