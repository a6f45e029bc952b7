"""The reserved words and known functions of the dialect, from the snapshot in modeldiff/_sqlwords.py or sqlglot itself."""

from __future__ import annotations

import functools
import re


_SIMPLE_KEYWORDS = frozenset(
    {"and", "or", "not", "case", "when", "then", "else", "end", "is", "null", "true", "false",
     "in", "between", "like", "ilike"}
)  # fmt: skip


@functools.lru_cache(maxsize=1)
def _reserved_words() -> frozenset[str]:
    """Every word that sqlglot's DuckDB tokenizer or parser treats specially, lower case."""
    snapshot = _word_snapshot()
    return snapshot[0] if snapshot is not None else _live_reserved_words()


@functools.lru_cache(maxsize=1)
def _known_functions() -> frozenset[str]:
    """Function names the DuckDB parser builds special nodes for (upper case)."""
    snapshot = _word_snapshot()
    return snapshot[1] if snapshot is not None else _live_known_functions()


def _live_reserved_words() -> frozenset[str]:
    from sqlglot.dialects.duckdb import DuckDB

    words: set[str] = set()
    keys = list(DuckDB.tokenizer_class.KEYWORDS) + list(DuckDB.parser_class.NO_PAREN_FUNCTION_PARSERS)
    for key in keys:
        words.update(part.lower() for part in re.findall(r"[A-Za-z_][A-Za-z0-9_]*", key))
    return frozenset(words - _SIMPLE_KEYWORDS)


def _live_known_functions() -> frozenset[str]:
    from sqlglot.dialects.duckdb import DuckDB

    parser = DuckDB.parser_class
    return frozenset(parser.FUNCTIONS) | frozenset(parser.FUNCTION_PARSERS)


# The two word lists above, as sqlglot of one version gives them (modeldiff/_sqlwords.py), so
# that reading the common shapes of SQL does not import sqlglot (a fifth of a second): used
# only when the installed sqlglot is that version, which is found without importing it.
_VERSION_LINE = re.compile(r"""^__version__\s*=\s*(?:version\s*=\s*)?['"]([^'"]+)['"]""", re.MULTILINE)


def installed_sqlglot_version() -> str | None:
    """The installed sqlglot's version, read from its `_version.py` without importing it."""
    import importlib.util
    import os

    try:
        spec = importlib.util.find_spec("sqlglot")
    except (ImportError, ValueError):
        return None
    folders = list(spec.submodule_search_locations or ()) if spec is not None else []
    for folder in folders:
        try:
            with open(os.path.join(folder, "_version.py"), encoding="utf-8") as handle:
                found = _VERSION_LINE.search(handle.read())
        except OSError:
            continue
        if found:
            return found.group(1)
    return None


@functools.lru_cache(maxsize=1)
def _word_snapshot() -> tuple[frozenset[str], frozenset[str]] | None:
    from modeldiff import _sqlwords

    if installed_sqlglot_version() != _sqlwords.SQLGLOT_VERSION:
        return None
    return _sqlwords.RESERVED, _sqlwords.FUNCTIONS


def word_snapshot_text() -> str:
    """The text of modeldiff/_sqlwords.py for the installed sqlglot (imports it)."""
    import sqlglot

    def words(values: frozenset[str]) -> str:
        ordered = sorted(values)
        lines = [" ".join(ordered[i : i + 8]) for i in range(0, len(ordered), 8)]
        return "frozenset(\"\"\"\n" + "\n".join(lines) + "\n\"\"\".split())"

    return (
        '"""sqlglot\'s DuckDB word lists for sql.py\'s fast reader, written by `sql.word_snapshot_text()`.\n\n'
        "Used only when the installed sqlglot is SQLGLOT_VERSION; otherwise sql.py asks sqlglot itself.\n"
        'Regenerate after changing the sqlglot version: see docs/performance.md.\n"""\n\n'
        f'SQLGLOT_VERSION = "{sqlglot.__version__}"\n\n'
        f"RESERVED = {words(_live_reserved_words())}\n\n"
        f"FUNCTIONS = {words(_live_known_functions())}\n"
    )
