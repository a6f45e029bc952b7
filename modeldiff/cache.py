"""A cache of analysed revisions and comparisons, so that a repeated diff costs little more than reading the files.

Three kinds of entry, all content-addressed:

- a revision entry, keyed by the revision's files (display names and bytes):
  the findings of the record rules that `impact.analyse` runs on it, so a
  revision seen before is not checked again;
- a pair entry, keyed by both revisions' keys: the whole comparison (changes,
  impacted measures, roles and reports, the new revision's errors). A hit
  needs no YAML at all: the two models come back as `Model` records whose
  sections are read from the files on first use (most renderers only need
  the model's name);
- a check entry, keyed by the revision: every finding of `check.check_model`
  (`compare.check_spec`), so a model checked before is not read again.

A key is the SHA-256 of the tool's fingerprint (its version, the text of its
modules, the installed YAML and SQL libraries) and of the content, so it
plays the part of git's blob ids (and covers files on disk as well): any
change of content or of the tool makes a new key, and stale entries are
never looked up again.

Where: `$MODELDIFF_CACHE_DIR` when set; else `.git/modeldiff-cache/` of the
repository the files come from (found by walking up from the working
folder, without running git); else the user's cache folder
(`$XDG_CACHE_HOME/modeldiff`, `~/.cache/modeldiff`).

Safety: an entry is a header line (magic word, cache format, tool
fingerprint, SHA-256 of the payload) and a pickled payload of modeldiff's
own records, written to a temporary file in the same folder and moved into
place with `os.replace`, so concurrent runs never see half an entry. An
entry whose header or checksum does not match is removed and rebuilt, never
trusted; payloads are read by an unpickler that builds only modeldiff's
records and plain containers. Beyond `MAX_ENTRIES` entries or `MAX_BYTES`
the least recently used are removed, and so are temporary files left by a
writer that was stopped half-way. Off: `use_cache=False` in compare.py's
functions, or `MODELDIFF_NO_CACHE=1`. Any error of the cache itself (a
read-only folder, a full disk) only turns the cache off for that call.
"""

from __future__ import annotations

import io
import os
from collections.abc import Mapping
from typing import Any, Iterator, Sequence

FORMAT = 1
MAGIC = b"modeldiff-cache"
MAX_ENTRIES = 500
MAX_BYTES = 200 * 1024 * 1024
NO_CACHE_ENV = "MODELDIFF_NO_CACHE"
DIR_ENV = "MODELDIFF_CACHE_DIR"
SUFFIX = ".entry"
STALE_SECONDS = 3600  # a temporary file this old belongs to a writer that was stopped

Files = Sequence[tuple[str, "bytes | str"]]


# --------------------------------------------------------------------------- switches and places


def enabled(use_cache: bool = True) -> bool:
    """Whether to use the cache: asked for, and not switched off by MODELDIFF_NO_CACHE."""
    return use_cache and os.environ.get(NO_CACHE_ENV, "").strip().lower() in ("", "0", "false", "no")


def git_dir(start: str | os.PathLike[str] = ".") -> str | None:
    """The git folder of the repository holding `start` (a `.git` folder, or the one a `.git` file names)."""
    here = os.path.abspath(os.fspath(start))
    while True:
        candidate = os.path.join(here, ".git")
        if os.path.isdir(candidate):
            return candidate
        if os.path.isfile(candidate):  # a linked work tree or a submodule: "gitdir: PATH"
            try:
                with open(candidate, encoding="utf-8") as handle:
                    line = handle.readline().strip()
            except OSError:
                return None
            if line.startswith("gitdir:"):
                target = line[len("gitdir:"):].strip()
                return os.path.normpath(os.path.join(here, target))
            return None
        parent = os.path.dirname(here)
        if parent == here:
            return None
        here = parent


def directory(start: str | os.PathLike[str] | None = None) -> str:
    """Where entries live (see the module docstring)."""
    chosen = os.environ.get(DIR_ENV)
    if chosen:
        return chosen
    found = git_dir(start if start is not None else ".")
    if found is not None:
        return os.path.join(found, "modeldiff-cache")
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "modeldiff")


# --------------------------------------------------------------------------- keys


_FINGERPRINT: str | None = None


def fingerprint() -> str:
    """The tool's identity for cache keys: its version, its modules' text, and the libraries it reads with."""
    global _FINGERPRINT
    if _FINGERPRINT is None:
        import hashlib
        import importlib.util

        import modeldiff

        digest = hashlib.sha256(f"{FORMAT} {modeldiff.__version__}".encode())
        package = os.path.dirname(os.path.abspath(modeldiff.__file__))
        for folder, subfolders, names in os.walk(package):
            subfolders[:] = sorted(d for d in subfolders if d != "__pycache__")
            for name in sorted(names):
                if name.endswith((".py", ".json")):
                    path = os.path.join(folder, name)
                    digest.update(os.path.relpath(path, package).encode() + b"\0")
                    with open(path, "rb") as handle:
                        digest.update(hashlib.sha256(handle.read()).digest())
        for library in ("yaml", "yaml_rs", "sqlglot", "sqlglotc"):
            spec = importlib.util.find_spec(library)
            origin = getattr(spec, "origin", None) if spec is not None else None
            if origin and os.path.exists(origin):
                stat = os.stat(origin)
                digest.update(f"{library} {origin} {stat.st_size} {stat.st_mtime_ns}".encode())
            else:
                digest.update(f"{library} absent".encode())
        _FINGERPRINT = digest.hexdigest()
    return _FINGERPRINT


def revision_key(files: Files) -> str:
    """The key of one revision: the fingerprint, then each file's display name and bytes."""
    import hashlib

    digest = hashlib.sha256(fingerprint().encode())
    for name, content in files:
        data = content.encode("utf-8") if isinstance(content, str) else bytes(content)
        digest.update(f"\0{len(name.encode())}:{name}\0{len(data)}\0".encode())
        digest.update(data)
    return digest.hexdigest()


def pair_key(old_key: str | None, new_key: str | None) -> str:
    """The key of one comparison (None: the model is absent on that side)."""
    import hashlib

    return hashlib.sha256(f"pair {old_key or '-'} {new_key or '-'}".encode()).hexdigest()


# --------------------------------------------------------------------------- entries on disk


def _unpickle(payload: bytes) -> Any:
    """The payload's value, built by an unpickler that makes only modeldiff's own records and plain containers."""
    import pickle

    allowed = frozenset({"frozenset", "set", "tuple", "list", "dict", "str", "bytes", "int", "float", "bool",
                         "complex", "NoneType"})

    class Unpickler(pickle.Unpickler):
        def find_class(self, module: str, name: str) -> Any:
            if module == "builtins" and name in allowed:
                return super().find_class(module, name)
            if module == "copyreg" and name in ("_reconstructor", "__newobj__"):
                return super().find_class(module, name)
            if module.startswith("modeldiff.") and not name.startswith("_") or (module, name) == ("modeldiff.load", "_Positions"):
                return super().find_class(module, name)
            raise pickle.UnpicklingError(f"{module}.{name} is not a record of modeldiff")

    return Unpickler(io.BytesIO(payload)).load()


def _path(folder: str, kind: str, key: str) -> str:
    return os.path.join(folder, f"{kind}-{key}{SUFFIX}")


def _header(payload: bytes) -> bytes:
    import hashlib

    return b" ".join((MAGIC, str(FORMAT).encode(), fingerprint().encode(),
                      hashlib.sha256(payload).hexdigest().encode())) + b"\n"


def read(folder: str, kind: str, key: str) -> Any | None:
    """The value stored under (kind, key), or None; a damaged or foreign entry is removed."""
    path = _path(folder, kind, key)
    try:
        with open(path, "rb") as handle:
            blob = handle.read()
    except OSError:
        return None
    header, newline, payload = blob.partition(b"\n")
    if not newline or header + b"\n" != _header(payload):
        _remove(path)
        return None
    try:
        from modeldiff.load import paused_gc

        with paused_gc():
            value = _unpickle(payload)
    except Exception:  # noqa: BLE001 - whatever is wrong with it, it is rebuilt
        _remove(path)
        return None
    try:
        os.utime(path)  # recently used: evicted last
    except OSError:
        pass
    return value


def write(folder: str, kind: str, key: str, value: Any) -> bool:
    """Store `value` under (kind, key) atomically; False when the cache folder cannot be written."""
    import pickle
    import tempfile

    try:
        payload = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        os.makedirs(folder, exist_ok=True)
        handle, temporary = tempfile.mkstemp(prefix=".tmp-", suffix=SUFFIX, dir=folder)
        try:
            with os.fdopen(handle, "wb") as out:
                out.write(_header(payload))
                out.write(payload)
            os.replace(temporary, _path(folder, kind, key))
        except BaseException:
            _remove(temporary)
            raise
    except (OSError, pickle.PicklingError, TypeError, AttributeError, RecursionError):
        return False
    evict(folder)
    return True


def _remove(path: str) -> None:
    try:
        os.remove(path)
    except OSError:
        pass


def entries(folder: str) -> list[tuple[float, int, str]]:
    """(last use, size, path) of every entry, oldest first."""
    found = []
    try:
        with os.scandir(folder) as listing:
            for item in listing:
                if item.name.endswith(SUFFIX) and not item.name.startswith(".tmp-"):
                    try:
                        stat = item.stat()
                    except OSError:
                        continue
                    found.append((stat.st_mtime, stat.st_size, item.path))
    except OSError:
        return []
    return sorted(found)


def _remove_abandoned(folder: str, now: float) -> None:
    """Temporary files of writers that were stopped half-way (older than STALE_SECONDS)."""
    try:
        with os.scandir(folder) as listing:
            for item in listing:
                if item.name.startswith(".tmp-") and item.name.endswith(SUFFIX):
                    try:
                        if now - item.stat().st_mtime > STALE_SECONDS:
                            _remove(item.path)
                    except OSError:
                        continue
    except OSError:
        pass


def evict(folder: str, max_entries: int = MAX_ENTRIES, max_bytes: int = MAX_BYTES) -> int:
    """Remove the least recently used entries beyond the limits; how many were removed."""
    import time

    _remove_abandoned(folder, time.time())
    found = entries(folder)
    total = sum(size for _, size, _ in found)
    removed = 0
    for _, size, path in found:
        if len(found) - removed <= max_entries and total <= max_bytes:
            break
        _remove(path)
        total -= size
        removed += 1
    return removed


# --------------------------------------------------------------------------- models read on first use


class _Source:
    """One revision's files, loaded once, the first time a record of it is asked for."""

    __slots__ = ("files", "_result")

    def __init__(self, files: Files) -> None:
        self.files = tuple(files)
        self._result = None

    def result(self):
        if self._result is None:
            from modeldiff import load

            self._result = load.load_files(self.files)
        return self._result


class _Section(Mapping):
    """A section (or the positions) of a model that is read from its files on first use."""

    __slots__ = ("_source", "_field", "_data")

    def __init__(self, source: _Source, field: str) -> None:
        self._source = source
        self._field = field
        self._data: Mapping | None = None

    def _items(self) -> Mapping:
        if self._data is None:
            self._data = getattr(self._source.result().model, self._field)
        return self._data

    def __getitem__(self, key: str) -> Any:
        return self._items()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._items())

    def __len__(self) -> int:
        return len(self._items())

    def __repr__(self) -> str:
        return f"<{self._field}, read on first use>" if self._data is None else repr(self._data)

    def __reduce__(self):
        return (dict, (dict(self._items()),))


def deferred_model(name: str, fmt: int, files: Files):
    """A Model whose sections and positions are read from `files` on first use; name and format are known."""
    from modeldiff.model import SECTIONS, Model

    source = _Source(files)
    sections = {section: _Section(source, section) for section in SECTIONS}
    return Model(name=name, format=fmt, positions=_Section(source, "positions"), **sections)


# --------------------------------------------------------------------------- the two kinds of entry


def load_revision(folder: str, key: str) -> tuple | None:
    """The record-rule findings of a revision seen before, or None."""
    value = read(folder, "rev", key)
    return value if isinstance(value, tuple) else None


def store_revision(folder: str, key: str, checked: Sequence) -> bool:
    return write(folder, "rev", key, tuple(checked))


def load_pair(folder: str, key: str, old_files: Files | None, new_files: Files | None):
    """The DiffResult of a comparison seen before (models read from the files on first use), or None."""
    value = read(folder, "pair", key)
    if not (isinstance(value, dict) and value.get("format") == FORMAT):
        return None
    from modeldiff.impact import DiffResult
    from modeldiff.model import Model

    def side(files, name_format):
        if files is None:
            return Model(name=name_format[0], tables={})
        return deferred_model(name_format[0], name_format[1], files)

    return DiffResult(side(old_files, value["old"]), side(new_files, value["new"]), value["changes"],
                      value["measures"], value["roles"], value["reports"], value["new_errors"])


def store_pair(folder: str, key: str, result) -> bool:
    value = {
        "format": FORMAT,
        "old": (result.old.name, result.old.format),
        "new": (result.new.name, result.new.format),
        "changes": result.changes, "measures": result.measures, "roles": result.roles, "reports": result.reports,
        "new_errors": result.new_errors,
    }
    return write(folder, "pair", key, value)


def load_check(folder: str, key: str, files: Files) -> tuple | None:
    """(Model read on first use, findings) of a revision checked before, or None."""
    value = read(folder, "check", key)
    if not (isinstance(value, dict) and value.get("format") == FORMAT):
        return None
    return deferred_model(value["name"], value["model_format"], files), list(value["findings"])


def store_check(folder: str, key: str, model, findings: Sequence) -> bool:
    value = {"format": FORMAT, "name": model.name, "model_format": model.format, "findings": tuple(findings)}
    return write(folder, "check", key, value)
