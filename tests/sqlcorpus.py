"""Seeded SQL texts for the differential tests of the SQL readers and for benchmarks/campaigns/sql_fuzz.py.

`texts(seed, count)` mixes the expressions models hold (aggregates, filters,
CASE, casts, IN lists) with everything that has confused a reader of SQL:
every Unicode line break after a `--` comment, block comments (nested and
unclosed), quotes doubled and escaped, dollar-quoted strings, e-strings,
parameters, positional references, stars, `COLUMNS(*)`, table functions,
functions that read state, and hostile tails (a second statement, COPY,
ATTACH, INSTALL, PRAGMA). `SENTINEL` and `OUTSIDE` are placeholders the
campaign replaces with real paths.
"""

from __future__ import annotations

import random

SENTINEL = "@SENTINEL@"  # a file outside the data folder the campaign watches
OUTSIDE = "@OUTSIDE@"  # a folder outside the data folder, where nothing may be written

BREAKS = ["\n", "\r", "\r\n", "\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x85", "\u2028", "\u2029"]
SPACES = [" ", "  ", "\t", "\n", "\r", "\xa0", "\u3000", "\x1f", ""]

COLUMNS = ["fare", "status", "rider", "trip_key", "FARE", '"fare"', '"Fare"', "trips.fare", '"trips"."status"',
           "other.fare", "a.trips.fare", "x", "end", "user", "date", "key", "_row", '"a""b"', "café"]
LITERALS = ["1", "0", "2.5", "1e3", "1.", ".5", "007", "-1", "'completed'", "'it''s'", "''", "'a\\'", "e'a\\'b'",
            "$$x$$", "$t$x$t$", "$$a'b$$", "null", "true", "false", "date '2024-01-01'", "interval 1 day",
            "'--'", "'/*'", "'\n'", "x'ab'"]
PARAMETERS = [":user", ":x", "$user", "?", "$1", ":user.x", "#1", "#2"]
ALLOWED_FUNCTIONS = ["sum", "count", "avg", "min", "max", "median", "nullif", "coalesce", "round", "abs", "lower",
                     "upper", "length", "greatest", "least", "date_trunc", "date_part", "strftime", "mean", "fsum",
                     "list_transform", "if", "left", "trim", "concat", "regexp_matches", "quantile_cont"]
REFUSED_FUNCTIONS = ["read_text", "read_csv", "read_parquet", "glob", "read_blob", "query", "query_table",
                     "current_setting", "getvariable", "nextval", "setseed", "write_log", "my_udf", "columns",
                     "COLUMNS", "unnest", "generate_series", "range", "sql_auto_complete", "json_serialize_sql",
                     "duckdb_settings", "pragma_version", "sleep_ms", "to_json", "getenv", "error", "version"]
OPERATORS = ["+", "-", "*", "/", "%", "=", "<>", "!=", "<", ">=", "||", " and ", " or ", " like ", " ilike ",
             " is ", " is not ", "::", "->", "->>", " // ", "^", " glob ", " similar to ", " collate ", ";"]
HOSTILE = [
    f"(select max(content) from read_text('{SENTINEL}'))",
    f"(select count(*) from read_csv('{SENTINEL}'))",
    "(select count(*) from glob('/etc/*'))",
    f"1); COPY (select 1 as a) TO '{OUTSIDE}/copied.csv'; select (1",
    f"1); ATTACH '{OUTSIDE}/attached.db' AS pwned; CREATE TABLE pwned.t AS SELECT 1; select (1",
    "1); CREATE TABLE pwned AS SELECT 1; select (1",
    "1); INSTALL httpfs; select (1",
    "1); LOAD httpfs; select (1",
    f"1); PRAGMA enable_profiling; SET profiling_output = '{OUTSIDE}/profile.json'; select (1",
    f"1); SET enable_external_access = true; select (1",
    "1); DROP TABLE trips; select (1",
    "1) FROM trips; CREATE TABLE pwned AS SELECT 1; --",
    f"max(content) FROM read_text('{SENTINEL}') --",
    "* from trips --",
]


def _comment(rng: random.Random) -> str:
    kind = rng.randrange(6)
    if kind == 0:
        return "--c" + rng.choice(BREAKS)
    if kind == 1:
        return "--" + rng.choice(["", "c", "*/", "'", "/*"]) + rng.choice(BREAKS) * rng.randrange(1, 3)
    if kind == 2:
        return "/* c */"
    if kind == 3:
        return "/* a /* nested */ still */"
    if kind == 4:
        return "/* " + rng.choice(BREAKS) + " */"
    return "--"  # to the end of the text, or ended by what follows


def _gap(rng: random.Random) -> str:
    roll = rng.random()
    if roll < 0.6:
        return " "
    if roll < 0.8:
        return rng.choice(SPACES)
    return " " + _comment(rng) + rng.choice(SPACES)


def _atom(rng: random.Random) -> str:
    roll = rng.random()
    if roll < 0.45:
        return rng.choice(COLUMNS)
    if roll < 0.8:
        return rng.choice(LITERALS)
    if roll < 0.92:
        return rng.choice(PARAMETERS)
    return rng.choice(["*", "t.*", "COLUMNS(*)", "[1, 2]", "{'a': 1}", "(1, 2)", "x -> x + 1"])


def _expression(rng: random.Random, depth: int) -> str:
    if depth <= 0 or rng.random() < 0.3:
        return _atom(rng)
    kind = rng.randrange(9)
    sub = lambda: _expression(rng, depth - 1)  # noqa: E731
    if kind == 0:
        return f"{sub()}{_gap(rng)}{rng.choice(OPERATORS)}{_gap(rng)}{sub()}"
    if kind == 1:
        functions = ALLOWED_FUNCTIONS if rng.random() < 0.7 else REFUSED_FUNCTIONS
        args = ", ".join(sub() for _ in range(rng.randrange(0, 3)))
        if rng.random() < 0.1:
            args = "distinct " + (args or "x")
        return f"{rng.choice(functions)}({args})"
    if kind == 2:
        return f"({sub()})"
    if kind == 3:
        return f"case when {sub()} then {sub()} else {sub()} end"
    if kind == 4:
        return f"{sub()} {rng.choice(['', 'not '])}in ({', '.join(sub() for _ in range(rng.randrange(1, 4)))})"
    if kind == 5:
        return f"{sub()} between {sub()} and {sub()}"
    if kind == 6:
        return f"cast({sub()} as {rng.choice(['double', 'integer', 'varchar', 'my_type', 'decimal(10, 2)'])})"
    if kind == 7:
        return f"not {sub()}"
    return f"{sub()} is {rng.choice(['null', 'not null', 'true', 'distinct from x'])}"


def _common(rng: random.Random) -> str:
    return rng.choice(["sum(fare)", "count(*)", "count(distinct rider)", "status = 'completed'", "fare > 1",
                       "rider = :user", "avg(fare)", "max(fare) - min(fare)", "sum(fare) / nullif(count(*), 0)",
                       "status in ('completed', 'late')", "lower(rider) like '%x%'"])


def text(rng: random.Random) -> str:
    """One text: a common shape, a generated expression, or either with a comment and a hostile tail."""
    roll = rng.random()
    if roll < 0.25:
        body = _common(rng)
    elif roll < 0.7:
        body = _expression(rng, rng.randrange(1, 5))
    else:
        tokens = [_atom(rng) if rng.random() < 0.5 else rng.choice(OPERATORS + ["(", ")", ",", "'", '"', "$$",
                                                                               "/*", "*/", "--", ";"])
                  for _ in range(rng.randrange(1, 9))]
        body = _gap(rng).join(tokens)
    if rng.random() < 0.35:
        tail = rng.choice(HOSTILE) if rng.random() < 0.7 else _expression(rng, 2)
        joiner = rng.choice([" + ", " or ", " ", "; ", ") ", ""])
        body = f"{body} {_comment(rng)}{joiner}{tail}"
    if rng.random() < 0.1:
        body = body + _gap(rng) + _comment(rng).rstrip()
    return body


def texts(seed: int, count: int) -> list[str]:
    rng = random.Random(seed)
    return [text(rng) for _ in range(count)]
