"""Model files as text: reading files and folders within limits, and decoding them as plain UTF-8."""

from __future__ import annotations

import os
import re

from modeldiff.errors import ModeldiffError


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
