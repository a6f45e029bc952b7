"""The data-aware check: `modeldiff check MODEL --db FILE.duckdb|postgresql://...` (or `--data DIR`).

Compares a model with the tables it describes, read-only (modeldiff.data's
`RawTables`: a DuckDB file opened read-only, or a data folder copied into
memory, behind a locked connection). Each problem is a finding with a rule of
its own, a count and a few examples (in the message, and as `count` and
`examples` in JSON), under `check`'s exit codes:

| rule                    | severity | what                                                          |
|-------------------------|----------|---------------------------------------------------------------|
| data-table-missing      | error    | a model table has no table (or file) in the data              |
| data-column-missing     | error    | a model column is not in the data's table                      |
| data-type-mismatch      | error    | a column holds values of another type than the model says     |
| data-key-null           | error    | rows with no value in the table's key                          |
| data-key-not-unique     | error    | a key (or a column declared unique) repeats in the data        |
| data-orphans            | warning  | a link's `from` values with no match in its `to` table         |
| data-history-overlap    | error    | a type-2 version starting before an earlier one of the same member ended |
| data-history-gap        | warning  | a type-2 version starting after the earlier ones ended: days covered by no version |
| data-current-flag       | warning  | the current flag disagrees with an open `valid_to`             |

Decisions where the spec is silent:

- Orphans are a warning: the numbers stay defined (the rows fall in
  `(no match)`, semantics.md section 5), but the link no longer reads like a
  foreign key. NULL `from` values are not orphans (they are counted apart in
  the message).
- Type-2 validity ranges: versions of one natural key are ordered by
  `valid_from`; each is compared with all earlier ones (the latest end so
  far), so a long version that covers later ones is one overlap, not a chain.
  `valid_to` is exclusive (the next version starts on it) unless the data
  mostly starts the next version the day after (`valid_to` inclusive, as
  Kimball's row expiration date is set to the day before the next effective
  date): the convention is read from the data, per table. An open version has
  a NULL `valid_to` or one in the year 9999 or later.
- The current flag must be true exactly on open versions.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

from modeldiff.engine import q
from modeldiff.model import Finding, Model, Table

ERROR, WARNING = "error", "warning"

RULES = {
    "data-table-missing": ERROR,
    "data-column-missing": ERROR,
    "data-type-mismatch": ERROR,
    "data-key-null": ERROR,
    "data-key-not-unique": ERROR,
    "data-orphans": WARNING,
    "data-history-overlap": ERROR,
    "data-history-gap": WARNING,
    "data-current-flag": WARNING,
}

EXAMPLES = 3  # examples shown in a finding's message


@dataclass(frozen=True)
class Problem:
    """One data problem: its rule, subject, how many rows or values, examples, and the message."""

    rule: str
    subject: str
    count: int
    examples: tuple[Any, ...]
    message: str


def check_data(model: Model, db_file: str | None = None, data_dir: str | None = None,
               schema: str | None = None) -> list[Finding]:
    """The data-aware findings of `model` against a DuckDB file or a data folder."""
    from modeldiff.backends import PostgresRawTables, is_url
    from modeldiff.data import RawTables

    if is_url(db_file):
        opened = PostgresRawTables.open(model, db_file, schema)
    else:
        opened = RawTables.open(model, db_file=db_file, data_dir=data_dir, schema=schema or "main")
    with opened as raw:
        return [as_finding(model, p) for p in problems(model, raw)]


@dataclass(frozen=True)
class DataFinding(Finding):
    """A finding about the data: a Finding with its count and examples (JSON gives both)."""

    count: int = 0
    examples: tuple[tuple[Any, ...], ...] = ()

    def json_extra(self) -> dict:
        return {"count": self.count, "examples": [[_plain(v) for v in e] for e in self.examples]}


def _plain(value: Any) -> Any:
    """A value as JSON holds it: numbers, text, booleans and null stay; dates and decimals become text."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def as_finding(model: Model, problem: Problem) -> Finding:
    examples = tuple(e if isinstance(e, tuple) else (e,) for e in problem.examples)
    return DataFinding(problem.rule, RULES[problem.rule], problem.subject, problem.message, (),
                       model.pos(problem.subject), problem.count, examples)


def problems(model: Model, raw, examples: int = EXAMPLES) -> list[Problem]:
    """Every data problem of `model` in `raw` (a data.RawTables), in the model's order of tables and links."""
    found: list[Problem] = []
    usable: dict[str, dict[str, str]] = {}  # table -> model column -> stored column, for tables whose columns fit
    for name in sorted(model.tables):
        table = model.tables[name]
        columns = _table_problems(table, raw, found, examples)
        if columns is not None:
            usable[name] = columns
            _key_problems(table, raw, columns, found, examples)
            if table.history is not None and table.history.type == 2:
                _history_problems(table, raw, columns, found, examples)
    for name in sorted(model.links):
        _orphans(model, model.links[name], raw, usable, found, examples)
    return found


def _shown(values: Sequence[Any]) -> str:
    return ", ".join(_value(v) for v in values)


def _value(value: Any) -> str:
    if isinstance(value, tuple):
        return "(" + ", ".join(_value(v) for v in value) + ")" if len(value) != 1 else _value(value[0])
    return "NULL" if value is None else repr(value) if isinstance(value, str) else str(value)


def _e_g(rows: Sequence[Any]) -> str:
    return f" (e.g. {_shown(rows)})" if rows else ""


def _table_problems(table: Table, raw, found: list[Problem], examples: int) -> dict[str, str] | None:
    """Missing table, missing or mistyped columns; the stored names of the columns that fit (None: none usable)."""
    from modeldiff.data import _a, type_fits

    stored = raw.columns(table.name)
    subject = f"tables.{table.name}"
    if stored is None:
        found.append(Problem("data-table-missing", subject, 1, (table.name,),
                             f"Table {table.name} is not in {raw.shown}; add it to the data or remove it from the model."))
        return None
    usable: dict[str, str] = {}
    for name, column in table.columns.items():
        hit = stored.get(name.lower())
        where = f"tables.{table.name}.columns.{name}"
        if hit is None:
            found.append(Problem("data-column-missing", where, 1, (name,),
                                 f"Column {table.name}.{name} is not in {raw.shown}; add it to the data, fix its "
                                 "name, or remove it from the model."))
            continue
        bad = raw.bad_values.get((table.name, column.name))
        if bad is not None:
            count, sample = bad
            found.append(Problem("data-type-mismatch", where, count, tuple(sample[:examples]),
                                 f"{count} value(s) of {table.name}.{name} are not {_a(column.type)}"
                                 f"{_e_g(sample[:examples])}; fix the data or the column's type."))
            continue
        if not type_fits(column.type, hit[1]):
            found.append(Problem("data-type-mismatch", where, 1, (hit[1],),
                                 f"Column {table.name}.{name} holds {hit[1]} values but the model says "
                                 f"{column.type}; fix the data or the column's type."))
            continue
        usable[name] = hit[0]
    return usable


def _key_problems(table: Table, raw, columns: dict[str, str], found: list[Problem], examples: int) -> None:
    relation = raw.relations[table.name]
    groups = [("key", table.key)] if table.key else []
    groups += [("unique", (name,)) for name, column in table.columns.items() if column.unique]
    for what, key in groups:
        if not all(c in columns for c in key):
            continue  # reported as missing or mistyped
        cols = ", ".join(q(columns[c]) for c in key)
        shown = key[0] if len(key) == 1 else "(" + ", ".join(key) + ")"
        subject = f"tables.{table.name}" + (".key" if what == "key" else f".columns.{key[0]}")
        if what == "key":
            nulls = raw.rows(f"SELECT count(*) FROM {relation} WHERE " + " OR ".join(f"{q(columns[c])} IS NULL" for c in key))[0][0]
            if nulls:
                found.append(Problem("data-key-null", subject, nulls, (),
                                     f"{nulls} row(s) of {table.name} have no value in {shown}, its key; fill the key "
                                     "or change the model's key."))
        not_null = " AND ".join(f"{q(columns[c])} IS NOT NULL" for c in key)
        duplicated = f"SELECT {cols}, count(*) AS _n FROM {relation} WHERE {not_null} GROUP BY {cols} HAVING count(*) > 1"
        count, rows = raw.rows(f"SELECT count(*), coalesce(sum(_n), 0) FROM ({duplicated})")[0]
        if count:
            sample = [tuple(r[:-1]) for r in raw.rows(f"{duplicated} ORDER BY _n DESC, {cols} LIMIT {int(examples)}")]
            role = "the key" if what == "key" else "declared unique"
            found.append(Problem("data-key-not-unique", subject, count, tuple(sample),
                                 f"{count} value(s) of {shown} appear on more than one row of {table.name} "
                                 f"({rows} rows){_e_g(sample)}, but {shown} is {role}; remove the duplicates or "
                                 "change the model."))


def _orphans(model: Model, link, raw, usable: dict, found: list[Problem], examples: int) -> None:
    source, target = usable.get(link.from_table), usable.get(link.to_table)
    if source is None or target is None or not all(c in source for c in link.from_columns) \
            or not all(c in target for c in link.to_columns):
        return  # a missing or mistyped table or column, reported as such (or a broken reference)
    if any(model.tables[link.from_table].columns[a].type != model.tables[link.to_table].columns[b].type
           for a, b in zip(link.from_columns, link.to_columns)):
        return  # reported by check's type-mismatch rule
    f_rel, t_rel = raw.relations[link.from_table], raw.relations[link.to_table]
    f_cols = [f"_f.{q(source[c])}" for c in link.from_columns]
    match = " AND ".join(f"_t.{q(target[b])} = {a}" for a, b in zip(f_cols, link.to_columns))
    not_null = " AND ".join(f"{c} IS NOT NULL" for c in f_cols)
    orphan = f"NOT EXISTS (SELECT 1 FROM {t_rel} AS _t WHERE {match})"
    total, nulls, orphans = raw.rows(
        f"SELECT count(*), count(*) FILTER (WHERE NOT ({not_null})), "
        f"count(*) FILTER (WHERE {not_null} AND {orphan}) FROM {f_rel} AS _f")[0]
    if not orphans:
        return
    listed = ", ".join(f_cols)
    sample = [tuple(r[:-1]) for r in raw.rows(
        f"SELECT {listed}, count(*) AS _n FROM {f_rel} AS _f WHERE {not_null} AND {orphan} "
        f"GROUP BY {listed} ORDER BY _n DESC, {listed} LIMIT {int(examples)}")]
    rate = 100.0 * orphans / total if total else 0.0
    also = f"; {nulls} more have no value there" if nulls else ""
    from_shown = ", ".join(f"{link.from_table}.{c}" for c in link.from_columns)
    found.append(Problem("data-orphans", f"links.{link.name}", orphans, tuple(sample),
                         f"{orphans} of {total} row(s) of {link.from_table} ({rate:.1f}%) have a {from_shown} with no "
                         f"match in {link.to_table}{_e_g(sample)}{also}; they fall in (no match) in every report "
                         f"through link {link.name}. Add the missing {link.to_table} rows or fix the references."))


def _history_problems(table: Table, raw, columns: dict[str, str], found: list[Problem], examples: int) -> None:
    history = table.history
    natural = table.natural_key
    needed = list(natural) + [history.valid_from, history.valid_to]
    if not natural or not history.valid_from or not history.valid_to or not all(c in columns for c in needed):
        return  # history-incomplete (check) or a missing column (above)
    relation = raw.relations[table.name]
    shown_key = table.key or natural + (history.valid_from,)
    ident = ", ".join(q(columns[c]) for c in shown_key if c in columns)
    nk = ", ".join(q(columns[c]) for c in natural)
    named = ", ".join(f"{q(columns[c])} AS _nk{i}" for i, c in enumerate(natural)) + ", " + ", ".join(
        f"{q(columns[c])} AS _id{i}" for i, c in enumerate(c for c in shown_key if c in columns))
    start, end = q(columns[history.valid_from]), q(columns[history.valid_to])
    is_date = table.columns[history.valid_from].type == "date" and table.columns[history.valid_to].type == "date"
    versions = (
        f"SELECT {named}, {start} AS _from, {end} AS _to, "
        f"bool_or({end} IS NULL) OVER _earlier AS _open_before, max({end}) OVER _earlier AS _end_before, "
        f"row_number() OVER (PARTITION BY {nk} ORDER BY {start}, {end} NULLS LAST) AS _nth "
        f"FROM {relation} WHERE {start} IS NOT NULL AND " + " AND ".join(f"{q(columns[c])} IS NOT NULL" for c in natural)
        + f" WINDOW _earlier AS (PARTITION BY {nk} ORDER BY {start}, {end} NULLS LAST "
        "ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)")
    later = f"FROM ({versions}) WHERE _nth > 1"
    inclusive = False
    if is_date:
        exclusive_n, inclusive_n = raw.rows(
            f"SELECT count(*) FILTER (WHERE _from = _end_before), count(*) FILTER (WHERE _from = _end_before + 1) {later}")[0]
        inclusive = inclusive_n > exclusive_n
    next_day = "_end_before + 1" if inclusive else "_end_before"
    overlap = f"(_open_before OR _from {'<=' if inclusive else '<'} _end_before)"
    gap = f"(NOT _open_before AND _from > {next_day})"
    convention = "inclusive" if inclusive else "exclusive"
    member = natural[0] if len(natural) == 1 else "(" + ", ".join(natural) + ")"
    for rule, condition, what, todo in (
            ("data-history-overlap", overlap, "start before an earlier version of the same member ends",
             "end the earlier version where the next one starts"),
            ("data-history-gap", gap, "start after every earlier version of the same member ended, leaving days "
             "no version covers", "extend the earlier version to the next one's start")):
        count = raw.rows(f"SELECT count(*) {later} AND {condition}")[0][0]
        if not count:
            continue
        n = len(natural)
        sample = [tuple(r) for r in raw.rows(
            f"SELECT * EXCLUDE (_to, _open_before, _end_before, _nth) {later} AND {condition} "
            f"ORDER BY {', '.join(f'_nk{i}' for i in range(n))}, _from LIMIT {int(examples)}")]
        shown = [f"{member} = {_value(tuple(r[:n]))}, version {_value(tuple(r[n:-1]))} from {r[-1]}" for r in sample]
        found.append(Problem(rule, f"tables.{table.name}.history", count, tuple(sample),
                             f"{count} version(s) of {table.name} {what} ({history.valid_to} read as {convention})"
                             f"{' (e.g. ' + '; '.join(shown) + ')' if shown else ''}; {todo}."))
    if history.current and history.current in columns:
        flag = q(columns[history.current])
        open_ = f"({end} IS NULL OR year({end}) >= 9999)"
        condition = f"coalesce({flag}, false) <> {open_}"
        count = raw.rows(f"SELECT count(*) FROM {relation} WHERE {condition}")[0][0]
        if count:
            sample = [tuple(r) for r in raw.rows(
                f"SELECT {ident}, {flag}, {end} FROM {relation} WHERE {condition} ORDER BY {ident} LIMIT {int(examples)}")]
            found.append(Problem("data-current-flag", f"tables.{table.name}.history", count, tuple(sample),
                                 f"{count} row(s) of {table.name} have {history.current} disagreeing with "
                                 f"{history.valid_to} (current exactly when {history.valid_to} is empty or in the "
                                 f"year 9999){_e_g(sample)}; set the flag on the open versions only."))


def with_data_findings(model: Model, findings: list[Finding], db_file: str | None, data_dir: str | None,
                       schema: str | None = None) -> list[Finding]:
    """`check`'s findings with the data-aware ones added, sorted as check sorts them."""
    from modeldiff.check import _sorted_unique

    if db_file is not None and data_dir is not None:
        from modeldiff.errors import UsageError

        raise UsageError("give --db FILE.duckdb or --data DIR, not both")
    return _sorted_unique(list(findings) + check_data(model, db_file=db_file, data_dir=data_dir, schema=schema))
