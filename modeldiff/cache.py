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

Safety (docs/security.md, "The cache"): the cache is data, never code, and
an entry nobody but this user's modeldiff wrote is never believed.

- The folder is created with mode 0700. An existing folder that another user
  owns, or that its group or others may write, is not used: one line on
  stderr says so and the run goes on without the cache.
- An entry is plain JSON of modeldiff's records (`Change`, `Impact`,
  `Reason`, `Finding`, `Pos`), typed containers and JSON scalars, decoded by
  a reader that builds nothing else and checks every field's type (a wrong
  shape is a miss, and the entry is removed). No pickle, no names resolved.
- Its header carries an HMAC-SHA-256 of the entry's kind, key, the tool's
  fingerprint and the payload, under a secret of this user: 32 random bytes
  in the folder's `key` file (mode 0600, owned by the user, refused and made
  afresh otherwise), or the SHA-256 of `$MODELDIFF_CACHE_KEY` when set (for
  CI, where a cache folder travels between jobs: give it a secret the jobs
  that run untrusted code do not get). An entry written by anyone without the
  secret, or copied from another key (a "no changes" comparison under a
  breaking one's name), fails the check and is a miss. So a forged entry can
  at worst cost a recomputation; changing a verdict takes the secret, that
  is, this user's account (or whoever wrote the folder it came from).
- Entries, and the key file, are read as regular files only (a FIFO or a
  device in their place is a miss, without waiting), at most MAX_ENTRY_BYTES.
- Entries are written to a temporary file in the same folder and moved into
  place with `os.replace`, so concurrent runs never see half an entry.
  Beyond `MAX_ENTRIES` entries or `MAX_BYTES` the least recently used are
  removed, and so are temporary files left by a writer that was stopped
  half-way. Off: `use_cache=False` in compare.py's functions, or
  `MODELDIFF_NO_CACHE=1`. Any error of the cache itself (a read-only folder,
  a full disk) only turns the cache off for that call.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Mapping
from typing import Any, Callable, Iterator, Sequence

FORMAT = 4
MAGIC = b"modeldiff-cache"
MAX_ENTRIES = 500
MAX_BYTES = 200 * 1024 * 1024
MAX_ENTRY_BYTES = 64 * 1024 * 1024  # one entry; a bigger file in the folder is not read
NO_CACHE_ENV = "MODELDIFF_NO_CACHE"
DIR_ENV = "MODELDIFF_CACHE_DIR"
KEY_ENV = "MODELDIFF_CACHE_KEY"
KEY_FILE = "key"
KEY_BYTES = 32
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


# --------------------------------------------------------------------------- the folder and its secret


_SECRETS: dict[str, bytes | None] = {}  # folder -> its secret, or None: not usable (said once)


def _say_refused(folder: str, why: str) -> None:
    sys.stderr.write(f"modeldiff: not using the cache folder {folder}: {why}; running without the cache "
                     f"(fix it with 'chmod 700' as its owner, or set {DIR_ENV} to a folder of your own)\n")


def _folder_problem(folder: str) -> str | None:
    """Why the existing folder may not hold entries (another user's, or others may write it), or None."""
    import stat

    info = os.stat(folder)
    if not stat.S_ISDIR(info.st_mode):
        return "it is not a folder"
    owner = getattr(os, "geteuid", lambda: None)()
    if owner is not None and info.st_uid != owner:
        return f"it is owned by another user (uid {info.st_uid})"
    if info.st_mode & 0o022:
        return f"its group or others may write it (mode {stat.S_IMODE(info.st_mode):o})"
    return None


def _usable_folder(folder: str, create: bool) -> bool:
    """Whether entries may live in `folder`: made with mode 0700 when `create`, checked when it exists."""
    try:
        if create and not os.path.isdir(folder):
            parent = os.path.dirname(os.path.abspath(folder))
            os.makedirs(parent, exist_ok=True)
            try:
                os.mkdir(folder, 0o700)
            except FileExistsError:
                pass
        problem = _folder_problem(folder)
    except OSError:
        return False  # absent, or cannot be made: no cache, nothing to say
    if problem is not None:
        _SECRETS[folder] = None
        _say_refused(folder, problem)
        return False
    return True


def _secret(folder: str, create: bool) -> bytes | None:
    """The key that signs this folder's entries, or None when the folder is not usable (see the docstring)."""
    if folder in _SECRETS:
        return _SECRETS[folder]
    if not _usable_folder(folder, create):
        return None
    given = os.environ.get(KEY_ENV, "")
    if given:
        import hashlib

        secret: bytes | None = hashlib.sha256(given.encode("utf-8", "surrogateescape")).digest()
    else:
        secret = _key_file(os.path.join(folder, KEY_FILE), create)
    if secret is not None:
        _SECRETS[folder] = secret
    return secret


def _read_key(path: str) -> bytes | None:
    """The key file's bytes when it is ours, a regular file, readable by us alone and whole; else None."""
    import stat

    from modeldiff.files import read_regular

    try:
        data = read_regular(path, KEY_BYTES, follow_links=False)
        info = os.stat(path, follow_symlinks=False)
    except OSError:
        return None
    owner = getattr(os, "geteuid", lambda: None)()
    if len(data) != KEY_BYTES or info.st_mode & 0o077 or (owner is not None and info.st_uid != owner):
        return None
    if not stat.S_ISREG(info.st_mode):
        return None
    return data


def _key_file(path: str, create: bool) -> bytes | None:
    """This folder's key: read, or made (32 random bytes, mode 0600) when absent or not fit to trust."""
    found = _read_key(path)
    if found is not None or not create:
        return found
    import secrets
    import tempfile

    try:
        handle, temporary = tempfile.mkstemp(prefix=".tmp-key-", dir=os.path.dirname(path))  # mode 0600
        try:
            with os.fdopen(handle, "wb") as out:
                out.write(secrets.token_bytes(KEY_BYTES))
            if os.path.lexists(path):
                os.replace(temporary, path)  # a key we cannot trust: a new one (every entry becomes a miss)
            else:
                try:
                    os.link(temporary, path)  # first writer wins; the others read its key
                except FileExistsError:
                    pass
        finally:
            _remove(temporary)
    except OSError:
        return None
    return _read_key(path)


# --------------------------------------------------------------------------- entries on disk
#
# The payload is JSON. A JSON object is a dict with text keys; every other container is a JSON array
# whose first item says what it is: "t" tuple, "l" list, "f" frozenset, "s" set, "d" a dict of other
# keys (key, value, key, value, ...), or the name of one of modeldiff's records followed by its fields
# in order. Scalars are JSON's own (text, whole and decimal numbers, true, false, null).


class _Unfit(ValueError):
    """The payload is not what an entry holds."""


def _records() -> dict[str, tuple[type, tuple[Callable[[Any], bool], ...]]]:
    from modeldiff.changes import SEVERITIES, Change
    from modeldiff.impact import Impact, Reason
    from modeldiff.model import Finding, Pos

    def text(v):
        return type(v) is str

    def whole(v):
        return type(v) is int

    def text_or_none(v):
        return v is None or type(v) is str

    def severity(v):
        return v in SEVERITIES

    def texts(v):
        return type(v) is tuple and all(type(x) is str for x in v)

    def paths(v):
        return type(v) is tuple and all(texts(x) for x in v)

    def anything(v):
        return True

    def mapping(v):
        return type(v) is dict

    def reasons(v):
        return type(v) is tuple and all(type(x) is Reason for x in v)

    def pos(v):
        return v is None or type(v) is Pos

    return {
        "Change": (Change, (text, text, severity, text, anything, anything, mapping, text)),
        "Impact": (Impact, (text, severity, reasons, texts, texts, texts, text_or_none, text_or_none, text_or_none)),
        "Reason": (Reason, (text, text, text_or_none, paths, paths, text_or_none, texts)),
        "Finding": (Finding, (text, text, text, text, paths, pos)),
        "Pos": (Pos, (text, whole, whole)),
    }


_RECORDS: dict[str, tuple[type, tuple[Callable[[Any], bool], ...]]] | None = None
_FIELDS: dict[type, tuple[str, tuple[str, ...]]] = {}


def _record_table():
    global _RECORDS
    if _RECORDS is None:
        import dataclasses

        _RECORDS = _records()
        for name, (record, checks) in _RECORDS.items():
            names = tuple(f.name for f in dataclasses.fields(record))
            assert len(names) == len(checks), name  # a record gained a field: teach the cache its type
            _FIELDS[record] = (name, names)
    return _RECORDS


def _encode(value: Any) -> Any:
    """`value` in the JSON shape above; TypeError for anything that is not data (it is then not stored)."""
    kind = type(value)
    if value is None or kind in (str, int, float, bool):
        return value
    if kind is tuple:
        return ["t", *map(_encode, value)]
    if kind is list:
        return ["l", *map(_encode, value)]
    if kind is dict:
        if all(type(k) is str for k in value):
            return {k: _encode(v) for k, v in value.items()}
        return ["d", *(x for k, v in value.items() for x in (_encode(k), _encode(v)))]
    if kind in (frozenset, set):
        return ["f" if kind is frozenset else "s", *map(_encode, sorted(value, key=repr))]
    if kind in _FIELDS:
        name, names = _FIELDS[kind]
        return [name, *(_encode(getattr(value, field)) for field in names)]
    if isinstance(value, Mapping):
        return _encode(dict(value))
    raise TypeError(f"{kind.__name__} is not stored in the cache")


def _decode(value: Any, depth: int = 0) -> Any:
    """The value `_encode` made; _Unfit for anything else (unknown tags, wrong field types, depth)."""
    kind = type(value)
    if kind is str or kind is int or kind is float or kind is bool or value is None:
        return value
    if depth > 200:
        raise _Unfit("nested too deep")
    if kind is dict:
        return {k: _decode(v, depth + 1) for k, v in value.items()}
    if kind is not list or not value or type(value[0]) is not str:
        raise _Unfit("not an entry's value")
    tag, items = value[0], [_decode(item, depth + 1) for item in value[1:]]
    if tag == "t":
        return tuple(items)
    if tag == "l":
        return items
    if tag == "d":
        if len(items) % 2:
            raise _Unfit("a dict without a value")
        try:
            return dict(zip(items[::2], items[1::2]))
        except TypeError:
            raise _Unfit("a key that is not a key") from None
    if tag in ("f", "s"):
        try:
            return frozenset(items) if tag == "f" else set(items)
        except TypeError:
            raise _Unfit("a member that is not hashable") from None
    found = _record_table().get(tag)
    if found is None:
        raise _Unfit(f"{tag!r} is not a record of modeldiff")
    record, checks = found
    if len(items) != len(checks) or not all(check(item) for check, item in zip(checks, items)):
        raise _Unfit(f"a {tag} with fields of the wrong kind")
    return record(*items)


def _path(folder: str, kind: str, key: str) -> str:
    return os.path.join(folder, f"{kind}-{key}{SUFFIX}")


def _mac(secret: bytes, kind: str, key: str, payload: bytes) -> bytes:
    import hashlib
    import hmac

    signed = hmac.new(secret, f"{MAGIC.decode()} {FORMAT} {kind} {key} {fingerprint()}\n".encode(), hashlib.sha256)
    signed.update(payload)
    return signed.hexdigest().encode()


def _header(secret: bytes, kind: str, key: str, payload: bytes) -> bytes:
    return b" ".join((MAGIC, str(FORMAT).encode(), _mac(secret, kind, key, payload))) + b"\n"


def read(folder: str, kind: str, key: str, fit: Callable[[Any], bool] | None = None) -> Any | None:
    """The value stored under (kind, key), or None; an entry that fails the checks (or `fit`) is removed."""
    import hmac

    from modeldiff.files import read_regular

    if not os.path.isdir(folder):
        return None
    secret = _secret(folder, create=False)
    if secret is None:
        return None
    path = _path(folder, kind, key)
    try:
        blob = read_regular(path, MAX_ENTRY_BYTES, follow_links=False)
    except FileNotFoundError:
        return None
    except OSError:  # not a regular file, too big, unreadable: never trusted
        _remove(path)
        return None
    header, newline, payload = blob.partition(b"\n")
    if not newline or not hmac.compare_digest(header + b"\n", _header(secret, kind, key, payload)):
        _remove(path)
        return None
    try:
        import json

        from modeldiff.util import paused_gc

        with paused_gc():
            value = _decode(json.loads(payload))
        if fit is not None and not fit(value):
            raise _Unfit("not the shape of this kind of entry")
    except (ValueError, TypeError, RecursionError):  # the MAC matched, yet it is not ours: rebuilt
        _remove(path)
        return None
    try:
        os.utime(path)  # recently used: evicted last
    except OSError:
        pass
    return value


def _payload(value: Any, limit: int) -> bytes | None:
    """`json.dumps(_encode(value))` (compact) as bytes, or None once it would pass `limit` bytes.

    A dict's sequences (a comparison's changes and impacted items) are encoded
    item by item, so a value too large to store is given up at the limit
    rather than built whole first: the comparison of a range of 300 commits
    (13,000 changes, impacted items with their reasons) would have been
    about 1 GB of JSON, and twice that in memory, only to be refused on read.
    """
    import json

    def dumps(item: Any) -> str:
        return json.dumps(item, separators=(",", ":"))

    if type(value) is not dict or not all(type(k) is str for k in value):
        text = dumps(_encode(value))
        return text.encode("utf-8", "surrogatepass") if len(text) <= limit else None
    def pieces():
        for index, (key, item) in enumerate(value.items()):
            yield ("," if index else "") + dumps(key) + ":"
            if type(item) in (tuple, list):
                yield '["t"' if type(item) is tuple else '["l"'
                for element in item:
                    yield "," + dumps(_encode(element))
                yield "]"
            else:
                yield dumps(_encode(item))
        yield "}"

    parts = ["{"]
    size = 1
    for piece in pieces():
        size += len(piece)
        if size > limit:
            return None
        parts.append(piece)
    return "".join(parts).encode("utf-8", "surrogatepass")


def write(folder: str, kind: str, key: str, value: Any) -> bool:
    """Store `value` under (kind, key) atomically; False when the cache folder cannot be written."""
    import json
    import tempfile

    try:
        _record_table()
        payload = _payload(value, MAX_ENTRY_BYTES - 1024)
    except (TypeError, ValueError, RecursionError):
        return False
    if payload is None:
        return False  # larger than an entry read back may be: not stored
    secret = _secret(folder, create=True)
    if secret is None:
        return False
    try:
        handle, temporary = tempfile.mkstemp(prefix=".tmp-", suffix=SUFFIX, dir=folder)
        try:
            with os.fdopen(handle, "wb") as out:
                out.write(_header(secret, kind, key, payload))
                out.write(payload)
            os.replace(temporary, _path(folder, kind, key))
        except BaseException:
            _remove(temporary)
            raise
    except OSError:
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


def deferred_model(name: str, fmt: int, files: Files):
    """A Model whose sections and positions are read from `files` on first use; name and format are known."""
    from modeldiff import model

    source = _Source(files)
    return model.deferred_model(name, fmt, lambda: source.result().model)


# --------------------------------------------------------------------------- the three kinds of entry


def _all(kind: type, value: Any) -> bool:
    return type(value) is tuple and all(type(item) is kind for item in value)


def _identity(value: Any) -> bool:
    """A model's (name, format) as stored."""
    return type(value) is tuple and len(value) == 2 and type(value[0]) is str and type(value[1]) is int


def load_revision(folder: str, key: str) -> tuple | None:
    """The record-rule findings of a revision seen before, or None."""
    from modeldiff.model import Finding

    return read(folder, "rev", key, lambda value: _all(Finding, value))


def store_revision(folder: str, key: str, checked: Sequence) -> bool:
    return write(folder, "rev", key, tuple(checked))


_PAIR_FIELDS = ("format", "old", "new", "changes", "measures", "roles", "reports", "new_errors")


def _fit_pair(value: Any) -> bool:
    from modeldiff.changes import Change
    from modeldiff.impact import Impact
    from modeldiff.model import Finding

    return (type(value) is dict and sorted(value) == sorted(_PAIR_FIELDS) and value["format"] == FORMAT
            and _identity(value["old"]) and _identity(value["new"]) and _all(Change, value["changes"])
            and all(_all(Impact, value[name]) for name in ("measures", "roles", "reports"))
            and _all(Finding, value["new_errors"]))


def load_pair(folder: str, key: str, old_files: Files | None, new_files: Files | None):
    """The DiffResult of a comparison seen before (models read from the files on first use), or None."""
    value = read(folder, "pair", key, _fit_pair)
    if value is None:
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
        "changes": tuple(result.changes), "measures": tuple(result.measures), "roles": tuple(result.roles),
        "reports": tuple(result.reports), "new_errors": tuple(result.new_errors),
    }
    return write(folder, "pair", key, value)


def load_check(folder: str, key: str, files: Files) -> tuple | None:
    """(Model read on first use, findings) of a revision checked before, or None."""
    from modeldiff.model import Finding

    def fit(value: Any) -> bool:
        return (type(value) is dict and sorted(value) == ["findings", "format", "model_format", "name"]
                and value["format"] == FORMAT and type(value["name"]) is str and type(value["model_format"]) is int
                and _all(Finding, value["findings"]))

    value = read(folder, "check", key, fit)
    if value is None:
        return None
    return deferred_model(value["name"], value["model_format"], files), list(value["findings"])


def store_check(folder: str, key: str, model, findings: Sequence) -> bool:
    value = {"format": FORMAT, "name": model.name, "model_format": model.format, "findings": tuple(findings)}
    return write(folder, "check", key, value)
