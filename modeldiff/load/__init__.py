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

import os
from typing import Any, Mapping, Sequence

from modeldiff.errors import ModeldiffError
from modeldiff.model import Measure
from modeldiff.util import paused_gc
from modeldiff.load.text import (  # noqa: F401 - the limits and reading of files, as callers name them here
    DEPRECATED_KEYS,
    DEPRECATED_RULE,
    FOLDER_SUFFIX,
    MAX_FILE_BYTES,
    RULE,
    YAML_SUFFIXES,
    _decode,
    _folder_files,
    _read_file,
    _refuse_lfs_pointer,
    _refuse_link_out_of_repository,
    read_file,
)
from modeldiff.load.events import YamlList, YamlMap, _parse  # noqa: F401
from modeldiff.load.documents import _model_identity, _read_document
from modeldiff.load.records import LoadResult, _RecordBuilder
from modeldiff.load.fast import FAST_READER_ENV, _fast_load  # noqa: F401
from modeldiff.load.splice import _spliced

# The package's modules, in the order a model is read (each imports only those above it):
#   text       files and folders within limits, decoded as plain UTF-8
#   events     YAML text -> plain values with positions (the reference event reader, and the
#              positions-only pass over a fast-read file)
#   documents  each file's top-level mapping; `model` and `format`
#   positions  Model.positions (made on first use for a fast-read model)
#   records    plain values -> Model records and invalid-model findings (the reference builder)
#   fast       yaml_rs values -> the same records, without positions or findings
#   splice     a revision read as its base plus the items that changed
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
