"""Draft a model file from a database's catalog: `modeldiff draft --db FILE.duckdb | --ddl FILE.sql | --data DIR`.

What the catalog says is written as it is; what is guessed carries a YAML
comment starting `guess:` for the user to review:

- tables, columns and types (modeldiff.catalog.model_type); a column of a type
  the format has no word for is left out, with a note;
- `key` from the primary key; `natural_key` from the first unique constraint
  other than the key; a single-column unique constraint also marks its column
  `unique: true`;
- a link per foreign key, named `<table>_<column(s)>`: many-to-one onto a
  primary key or unique column, one-to-one when the referencing columns are
  themselves the table's key or unique;
- kind (guess): a table whose primary key is made of exactly two foreign keys
  is a bridge; else a table some foreign key points at is a dimension (an
  outrigger of a snowflake too); else a fact;
- several foreign keys joining the same two tables (role-playing dates): the
  first by column order is live, the others `standby: true` (guess);
- type-2 history (guess) where a table has a pair of validity-date columns
  (`valid_from`/`valid_to`, `effective_*`, `rec_start_date`/`rec_end_date`,
  ...) and a business key (`*_id`, `*_code`, `*_number`, ...) that is neither
  its key, nor unique, nor a foreign key; a boolean `*current*` column becomes
  its current flag.

Tables are written dimensions first, then bridges, then facts, each group by
name; links by their `from` table's name and column order. Tables with no
foreign key from or to them are not drafted (nothing says
what they are): they are listed, commented out, at the end; tables with no
primary key are drafted without `key` and listed in the header. The draft has
no measures, roles or reports. It passes `modeldiff check` with no error.

A data folder (`--data DIR`: `<table>.parquet` / `<table>.csv`, as `eval`
reads it) declares no keys: every table is drafted with its columns and
types, `kind: fact` marked as the user's to set, and nothing else; the header
lists the tables needing a key and links (`_unconstrained`).

The file is written whole or not at all (a temporary file renamed into
place), and an existing file only with --force.
"""

from __future__ import annotations

import os
import re
import tempfile
from dataclasses import dataclass, field, replace

from modeldiff.catalog import (Catalog, CatalogTable, DdlCatalog, DuckDBCatalog, FolderCatalog, model_type,
                               resolve_references)
from modeldiff.errors import ModeldiffError, UsageError

NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
# YAML 1.2 core-schema words that a plain scalar would read as something else than text
_YAML_WORDS = frozenset({"true", "True", "TRUE", "false", "False", "FALSE", "null", "Null", "NULL"})

# validity-date column pairs of a type-2 dimension: (from words, to words), matched on the name's last words
_VALIDITY_PAIRS = (
    ("valid_from", "valid_to"), ("valid_from_date", "valid_to_date"), ("effective_from", "effective_to"),
    ("effective_date", "expiry_date"), ("effective_date", "expiration_date"), ("effective_date", "end_date"),
    ("eff_from", "eff_to"), ("start_date", "end_date"), ("rec_start_date", "rec_end_date"),
    ("row_start", "row_end"), ("from_date", "to_date"), ("date_from", "date_to"), ("valid_start", "valid_end"),
)
_BUSINESS_KEY_ENDINGS = ("_id", "_code", "_number", "_no", "_num", "_nk", "_bk")
# the draft lists dimensions, then bridges, then facts, each by name: the same order whatever the source's
_KIND_ORDER = {"dimension": 0, "bridge": 1, "fact": 2}


@dataclass
class DraftTable:
    """One table of the draft, with the reasons of its guesses."""

    name: str
    columns: list[tuple[str, str]]  # (name, model type)
    key: tuple[str, ...] = ()
    natural_key: tuple[str, ...] = ()
    unique: set[str] = field(default_factory=set)
    kind: str = "fact"
    kind_reason: str = ""
    kind_comment: str = "guess"  # what the comment beside `kind` starts with
    history: dict | None = None  # valid_from, valid_to, current (may be None)
    history_reason: str = ""
    notes: list[str] = field(default_factory=list)


@dataclass
class DraftLink:
    """One link of the draft (a foreign key), with the reasons of its cardinality and standby."""

    name: str
    from_table: str
    from_columns: tuple[str, ...]
    to_table: str
    to_columns: tuple[str, ...]
    cardinality: str = "many-to-one"
    cardinality_reason: str = ""
    standby: bool = False
    standby_reason: str = ""


@dataclass
class Draft:
    """A drafted model: its tables and links, the tables left out (with their columns) and the notes."""

    name: str
    source: str
    tables: list[DraftTable]
    links: list[DraftLink]
    left_out: list[tuple[str, str, list[tuple[str, str]]]]  # (table, why, columns)
    notes: list[str]
    constraints: bool = True  # False: drafted from a source that declares no keys (a data folder)
    inferred: tuple[str, ...] = ()  # tables whose column types were inferred from values


def draft(catalog: Catalog, name: str) -> Draft:
    """The draft model of a catalog: see the module's docstring for what is read and what is guessed."""
    catalog = resolve_references(catalog)
    catalog = replace(catalog, tables=tuple(sorted(catalog.tables, key=lambda t: (t.name.lower(), t.name))),
                      views=tuple(sorted(catalog.views)))  # the same draft whatever order the source lists them in
    notes: list[str] = list(catalog.notes)
    left_out: list[tuple[str, str, list[tuple[str, str]]]] = []
    kept: dict[str, tuple[CatalogTable, DraftTable]] = {}  # lower-case name -> (catalog table, draft table)
    for table in catalog.tables:
        if not NAME.match(table.name):
            notes.append(f"table {table.name!r} left out: its name is not a model name (letters, digits, _)")
            continue
        if table.name.lower() in kept:
            notes.append(f"table {table.name!r} left out: its name differs from another table's only in case")
            continue
        kept[table.name.lower()] = (table, _table(table))
    links = _links(kept, notes)
    if not catalog.constraints:
        return _unconstrained(catalog, name, kept, notes)
    linked = {t for link in links for t in (link.from_table.lower(), link.to_table.lower())}
    for lower, (source, table) in list(kept.items()):
        if lower not in linked:
            left_out.append((table.name, "no foreign key from or to it, so nothing says what it is", table.columns))
            del kept[lower]
    for view in catalog.views:
        notes.append(f"view {view} not drafted: a view has no keys in the catalog")
    referenced = {link.to_table.lower() for link in links if link.to_table != link.from_table}
    for lower, (source, table) in kept.items():
        _guess_kind(table, source, lower in referenced)
        if table.kind != "bridge":
            _guess_history(table, source)
    _standby_and_names(links, kept)
    tables = sorted((table for _, table in kept.values()), key=lambda t: (_KIND_ORDER[t.kind], t.name.lower()))
    return Draft(name, catalog.source, tables, links, sorted(left_out, key=lambda t: t[0].lower()), notes)


def _unconstrained(catalog: Catalog, name: str, kept: dict[str, tuple[CatalogTable, DraftTable]],
                   notes: list[str]) -> Draft:
    """The draft of a source that declares no keys (a data folder): every table with its columns, nothing guessed.

    Each table is written `kind: fact` with a comment saying that the kind is
    the user's to set; no key, natural key, link or history is guessed (a
    pair of validity-date columns is pointed out in a note).
    """
    tables = []
    for source, table in kept.values():
        table.kind_comment = "to set"
        table.kind_reason = ("the files declare no kinds; fact until you choose dimension, bridge or access "
                             "(and add its key)")
        pair = _validity_pair(table)
        if pair is not None:
            table.notes.append(f"{pair[0]} and {pair[1]} look like validity dates: if this is a type-2 dimension, "
                               "add `history` and its `natural_key`")
        tables.append(table)
    tables.sort(key=lambda t: t.name.lower())
    return Draft(name, catalog.source, tables, [], [], notes, constraints=False, inferred=catalog.inferred)


def _column_names(table: CatalogTable, draft_table: DraftTable, columns: tuple[str, ...]) -> tuple[str, ...] | None:
    """The kept columns' names for a constraint's columns (matched case-insensitively); None if one was left out."""
    by_lower = {name.lower(): name for name, _ in draft_table.columns}
    found = tuple(by_lower.get(c.lower()) for c in columns)
    return found if columns and None not in found else None


def _table(table: CatalogTable) -> DraftTable:
    columns, notes, seen = [], [], set()
    for name, database_type in table.columns:
        mapped = model_type(database_type)
        if not NAME.match(name):
            notes.append(f"column {name!r} left out: its name is not a model name")
        elif name.lower() in seen:
            notes.append(f"column {name!r} left out: its name differs from another column's only in case")
        elif mapped is None:
            notes.append(f"column {name} ({database_type or 'no type'}) left out: the format has no such type")
        else:
            columns.append((name, mapped))
            seen.add(name.lower())
    out = DraftTable(table.name, columns, notes=notes)
    if table.primary_key:
        key = _column_names(table, out, table.primary_key)
        if key is None:
            out.notes.append("primary key left out: one of its columns was left out")
        else:
            out.key = key
    for unique in table.uniques:
        columns_ = _column_names(table, out, unique)
        if columns_ is None or {c.lower() for c in columns_} == {c.lower() for c in out.key}:
            continue
        if len(columns_) == 1:
            out.unique.add(columns_[0])
        if not out.natural_key:
            out.natural_key = columns_
    return out


def _unique_sets(table: DraftTable) -> list[frozenset[str]]:
    sets = [frozenset(c.lower() for c in table.key)] if table.key else []
    sets += [frozenset({c.lower()}) for c in table.unique]
    if table.natural_key:
        sets.append(frozenset(c.lower() for c in table.natural_key))
    return sets


def _links(kept: dict[str, tuple[CatalogTable, DraftTable]], notes: list[str]) -> list[DraftLink]:
    links = []
    for source, table in kept.values():
        for fk in source.foreign_keys:
            shown = f"foreign key {table.name}({', '.join(fk.columns)}) -> {fk.ref_table}({', '.join(fk.ref_columns)})"
            target = kept.get(fk.ref_table.lower())
            if target is None:
                notes.append(f"{shown} left out: {fk.ref_table} is not among the drafted tables")
                continue
            from_columns = _column_names(source, table, fk.columns)
            to_columns = _column_names(target[0], target[1], fk.ref_columns)
            if from_columns is None or to_columns is None or len(from_columns) != len(to_columns):
                notes.append(f"{shown} left out: a column of it was left out or the column lists differ in length")
                continue
            from_types = dict(table.columns)
            to_types = dict(target[1].columns)
            if any(from_types[a] != to_types[b] for a, b in zip(from_columns, to_columns)):
                notes.append(f"{shown} left out: its columns are of different model types")
                continue
            link = DraftLink("", table.name, from_columns, target[1].name, to_columns)
            wanted = frozenset(c.lower() for c in to_columns)
            target_table = target[1]
            if wanted == frozenset(c.lower() for c in target_table.key) or (len(to_columns) == 1 and to_columns[0] in target_table.unique):
                if frozenset(c.lower() for c in from_columns) in _unique_sets(table):
                    link.cardinality = "one-to-one"
                    link.cardinality_reason = (f"{', '.join(from_columns)} is unique in {table.name} too, "
                                               f"so each row matches at most one {target_table.name} row and back")
                else:
                    link.cardinality_reason = "from the foreign key onto the " + (
                        "primary key" if wanted == frozenset(c.lower() for c in target_table.key) else "unique column"
                    ) + f" of {target_table.name}"
            else:
                notes.append(f"{shown} left out: it points at columns that are neither the key of {target_table.name} "
                             "nor a single unique column, which the format cannot declare")
                continue
            links.append(link)
    return links


def _guess_kind(table: DraftTable, source: CatalogTable, referenced: bool) -> None:
    fk_sets = [frozenset(c.lower() for c in fk.columns) for fk in source.foreign_keys]
    key = frozenset(c.lower() for c in table.key)
    pairs = [(a, b) for i, a in enumerate(fk_sets) for b in fk_sets[i + 1:] if a | b == key and not a & b]
    if pairs:
        table.kind, table.kind_reason = "bridge", "its primary key is made of its two foreign keys"
    elif referenced:
        table.kind, table.kind_reason = "dimension", "other tables' foreign keys point at it"
    else:
        table.kind, table.kind_reason = "fact", "its foreign keys point at other tables and none points at it"


def _last_words(name: str, words: str) -> bool:
    lower = name.lower()
    return lower == words or lower.endswith("_" + words)


def _validity_pair(table: DraftTable) -> tuple[str, str] | None:
    """The first pair of date columns named like validity dates with the same prefix (`valid_from`/`valid_to`)."""
    dated = [name for name, type_ in table.columns if type_ in ("date", "timestamp")]
    return next(((a, b) for start, end in _VALIDITY_PAIRS
                 for a in dated if _last_words(a, start)
                 for b in dated if _last_words(b, end) and a[: len(a) - len(start)] == b[: len(b) - len(end)]), None)


def _guess_history(table: DraftTable, source: CatalogTable) -> None:
    pair = _validity_pair(table)
    if pair is None:
        return
    fk_columns = {c.lower() for fk in source.foreign_keys for c in fk.columns}
    unique = set().union(*_unique_sets(table)) if _unique_sets(table) else set()
    business = next((name for name, type_ in table.columns
                     if name.lower().endswith(_BUSINESS_KEY_ENDINGS) and type_ in ("text", "integer")
                     and name.lower() not in fk_columns and name.lower() not in unique
                     and frozenset({name.lower()}) not in _unique_sets(table)), None)
    if business is None:
        table.notes.append(f"{pair[0]} and {pair[1]} look like validity dates, but no business key (a *_id or *_code "
                           "column that is not unique) was found: if this is a type-2 dimension, add `history` by hand")
        return
    current = next((name for name, type_ in table.columns if type_ == "boolean" and "current" in name.lower()), None)
    table.natural_key = (business,)
    table.history = {"valid_from": pair[0], "valid_to": pair[1], "current": current}
    table.history_reason = (f"validity dates {pair[0]}/{pair[1]} and a business key {business} that is not unique: "
                            "one row per version of a member")


def _standby_and_names(links: list[DraftLink], kept: dict[str, tuple[CatalogTable, DraftTable]]) -> None:
    """Names `<table>_<columns>`; of several links joining the same two tables, all but the first on standby."""
    def position(link: DraftLink) -> tuple:
        columns = [name.lower() for name, _ in kept[link.from_table.lower()][1].columns]
        return (link.from_table.lower(), columns.index(link.from_columns[0].lower()), link.from_columns)

    links.sort(key=position)
    by_pair: dict[frozenset[str], list[DraftLink]] = {}
    for link in links:
        by_pair.setdefault(frozenset((link.from_table.lower(), link.to_table.lower())), []).append(link)
    for group in by_pair.values():
        if len(group) < 2:
            continue
        live = group[0]
        for link in group[1:]:
            link.standby = True
            link.standby_reason = (f"role-playing: {len(group)} links join {live.from_table} and {live.to_table}; "
                                   f"the first ({'_'.join(live.from_columns)}) is live, this one carries filters "
                                   "only where a measure, variant option or report names it in `via`")
    taken: set[str] = set()
    for link in links:
        base = f"{link.from_table}_{'_'.join(link.from_columns)}"
        name, n = base, 2
        while name.lower() in taken:
            name, n = f"{base}_{n}", n + 1
        taken.add(name.lower())
        link.name = name


# --- writing the YAML ---------------------------------------------------------------------


def _one_line(text: str) -> str:
    """Text that stays inside one YAML comment: every kind of line break and space run one space, other
    characters YAML does not allow (controls) as `?`."""
    return "".join(c if c.isprintable() else "?" for c in " ".join(text.split()))


def _wrapped(first: str, text: str, width: int = 110) -> list[str]:
    """`first` + `text` as YAML comment lines of about `width` characters (the later ones start `#   `)."""
    import textwrap

    return textwrap.wrap(text, width, initial_indent=first, subsequent_indent="#   ", break_long_words=False,
                         break_on_hyphens=False)


def _name(text: str) -> str:
    return f'"{text}"' if text in _YAML_WORDS else text


def _columns_value(table: str, columns: tuple[str, ...]) -> str:
    if len(columns) == 1:
        return f"{table}.{columns[0]}"
    return "[" + ", ".join(f"{table}.{c}" for c in columns) + "]"


def _names_value(columns: tuple[str, ...]) -> str:
    return _name(columns[0]) if len(columns) == 1 else "[" + ", ".join(_name(c) for c in columns) + "]"


def render(result: Draft) -> str:
    """The draft as YAML text: header notes, tables, links, and the tables left out, commented out."""
    lines = [
        f"# Drafted by `modeldiff draft` from {_one_line(result.source)}.",
        "# Review every comment starting `guess:`; the rest is what the catalog says." if result.constraints else
        "# Nothing is guessed: the tables, columns and types are what the files say.",
        "# Measures, roles and reports are yours to add.",
    ]
    no_key = sorted(t.name for t in result.tables if not t.key)
    if not result.constraints:
        lines += ["# Parquet and CSV files declare no keys and no foreign keys, so none is guessed. Still yours "
                  "to add:",
                  "# each table's `kind` (each is written `fact`), its `key` (and `natural_key`), and the `links:`",
                  "# between the tables (one per foreign key, `from` the referencing column `to` the key).",
                  *_wrapped("# Needing a key and links: ", f"{', '.join(_one_line(t) for t in no_key) or 'none'}.")]
        if result.inferred:
            lines += _wrapped("# Column types inferred from the values by DuckDB's CSV reader (check them): ",
                              f"{', '.join(_one_line(t) for t in result.inferred)}.")
    elif no_key:
        lines.append(f"# No primary key (no `key` written): {', '.join(no_key)}.")
    if result.left_out:
        lines.append(f"# Not drafted, listed commented out at the end: {', '.join(t for t, _, _ in result.left_out)}.")
    if not result.tables and not result.left_out:
        lines.append("# No tables found: check --schema (and, for a DDL script, that it creates tables).")
    for note in result.notes:
        lines.append(f"# Note: {_one_line(note)}.")
    lines += ["", f"model: {_name(result.name)}", "format: 1", "", "tables:"]
    if not result.tables:
        lines[-1] = "tables: {}"
    for table in result.tables:
        lines += ["", f"  {_name(table.name)}:", f"    kind: {table.kind}  # {table.kind_comment}: {table.kind_reason}"]
        if table.key:
            lines.append(f"    key: {_names_value(table.key)}")
        if table.natural_key:
            why = "  # guess: the business key of the versions" if table.history else "  # from a unique constraint"
            lines.append(f"    natural_key: {_names_value(table.natural_key)}{why}")
        if table.history:
            lines += [f"    history:  # guess: {table.history_reason}", "      type: 2",
                      f"      valid_from: {_name(table.history['valid_from'])}",
                      f"      valid_to: {_name(table.history['valid_to'])}"]
            if table.history["current"]:
                lines.append(f"      current: {_name(table.history['current'])}")
        for note in table.notes:
            lines.append(f"    # note: {_one_line(note)}")
        lines.append("    columns:" if table.columns else "    columns: {}")
        for name, type_ in table.columns:
            value = f"{{type: {type_}, unique: true}}" if name in table.unique else type_
            lines.append(f"      {_name(name)}: {value}")
    if result.links:
        lines += ["", "links:"]
    for link in result.links:
        lines += ["", f"  {link.name}:", f"    from: {_columns_value(link.from_table, link.from_columns)}",
                  f"    to: {_columns_value(link.to_table, link.to_columns)}"]
        lines.append(f"    cardinality: {link.cardinality}  # {link.cardinality_reason}")
        if link.standby:
            lines.append(f"    standby: true  # guess: {link.standby_reason}")
    if result.left_out:
        lines += ["", "# --- not drafted: choose a kind (and a key), then move under tables: ---"]
        for name, why, columns in result.left_out:
            lines += ["#", f"#  {_name(name)}:  # {why}", "#    kind: ?", "#    columns:"]
            lines += [f"#      {_name(c)}: {t}" for c, t in columns]
    return "\n".join(lines) + "\n"


def write_atomically(path: str, text: str, force: bool = False) -> None:
    """Write `text` to `path` whole or not at all; refuse an existing file unless `force`."""
    if os.path.lexists(path) and not force:
        raise ModeldiffError(f"{path} already exists; give --force to replace it, or another -o")
    if os.path.isdir(path):
        raise ModeldiffError(f"{path} is a folder; give a file name to -o")
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise ModeldiffError(f"{folder}: no such folder; create it or give another -o")
    try:
        handle, temporary = tempfile.mkstemp(prefix=".modeldiff-draft-", suffix=".tmp", dir=folder)
    except OSError as error:
        raise ModeldiffError(f"cannot write in {folder} ({error.strerror}); give -o a writable place") from None
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
        os.replace(temporary, path)
    except BaseException as error:
        try:
            os.unlink(temporary)
        except OSError:
            pass
        if isinstance(error, OSError):
            raise ModeldiffError(f"cannot write {path} ({error.strerror or error}); nothing was written") from None
        raise


# --- command --------------------------------------------------------------------------------


def model_name_of(path: str) -> str:
    """A model name from a file or folder name, or a database URL: `shop.duckdb` -> shop, `2024 sales.sql` -> m2024_sales."""
    if "://" in path:  # a database URL: its database's name
        import urllib.parse

        path = urllib.parse.urlsplit(path).path.strip("/") or "model"
    stem = os.path.basename(os.path.normpath(path)).split(".")[0]
    name = re.sub(r"[^A-Za-z0-9_]+", "_", stem).strip("_") or "model"
    return name if name[0].isalpha() else "m" + name


def reader_of(db: str | None, ddl: str | None, schema: str | None, dialect: str | None = None,
              data_dir: str | None = None):
    """The catalog reader for the command's options: a DuckDB file, a DDL script or a data folder."""
    if sum(x is not None for x in (db, ddl, data_dir)) != 1:
        raise UsageError("give one of --db FILE.duckdb, --ddl FILE.sql or --data DIR")
    if data_dir is not None:
        if schema is not None:
            raise UsageError("--schema goes with --db or --ddl (a data folder has no schemas)")
        return FolderCatalog(data_dir)
    if db is not None:
        from modeldiff.backends import is_url

        if is_url(db):
            from modeldiff.catalog import PostgresCatalog

            return PostgresCatalog(db, schema)
        if "://" in db:
            raise ModeldiffError(f"{db.split('://')[0]}:// URLs are not read; give a DuckDB file, a postgresql:// "
                                 "URL, or the DDL with --ddl")
        return DuckDBCatalog(db, schema)
    return DdlCatalog(ddl, schema, dialect)
