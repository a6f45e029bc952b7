"""The allow-list of model SQL (modeldiff.sqlguard), the engine's rendering, and one reader deciding.

The fast reader of sql.py may answer for a text only where sqlglot's reading
gives the same facts, and never "clean" where the sqlglot path refuses or
cannot read it: a differential test over a seeded generated corpus (every
Unicode line break and comment form, quotes, dollar quoting, nested comments,
escapes, hostile tails; tests/sqlcorpus.py). The campaign
benchmarks/campaigns/sql_fuzz.py runs the same corpus at 100,000+ texts end to
end, outside `make test`.
"""

from __future__ import annotations

import duckdb
import pytest
import sqlglot
from sqlglot import exp

from modeldiff import sql, sqlguard
from modeldiff.sql import SqlError

import sqlcorpus

COLUMNS = ["fare", "status", "rider", "trip_key"]

# ---------------------------------------------------------------- the lists themselves


def test_every_allowed_function_is_a_duckdb_scalar_or_aggregate_function():
    # Checked against DuckDB itself: duckdb_functions() of the installed duckdb.
    connection = duckdb.connect()
    kinds: dict[str, set[str]] = {}
    for name, kind in connection.execute("SELECT function_name, function_type FROM duckdb_functions()").fetchall():
        kinds.setdefault(name.lower(), set()).add(kind)
    connection.close()
    sqlglot_only = {"coalesce", "ifnull"}  # SQL syntax in DuckDB, not catalog functions
    for name in sorted(sqlguard.FUNCTIONS - sqlglot_only):
        assert name in kinds, f"{name} is not a DuckDB function"
        # (a few names, such as repeat, are also table functions: those are reachable only from a FROM
        # clause, which a model's SQL cannot hold)
        assert kinds[name] & {"scalar", "aggregate", "macro"}, name
    for name in sqlguard.AGGREGATES:
        assert name in kinds and "aggregate" in kinds[name], name


def test_the_node_list_is_what_sqlglot_builds_for_the_allowed_functions():
    # Both directions: each allowed function parses to an allowed node (or an allowed anonymous call),
    # and each node in FUNCTION_NODES exists in sqlglot.
    for name in sorted(sqlguard.FUNCTIONS):
        reached = False
        for args in ("", "a", "a, b", "a, b, c"):
            try:
                tree = sqlglot.parse_one(f"{name}({args})", read="duckdb")
            except sqlglot.errors.ParseError:
                continue
            reached = True
            assert sqlguard.refusals(tree) == (), (name, args, repr(tree))
        assert reached, name
    for node in sqlguard.FUNCTION_NODES | sqlguard.OPERATOR_NODES:
        assert isinstance(getattr(exp, node, None), type), node


@pytest.mark.parametrize("text, construct", [
    ("count(COLUMNS(*))", "COLUMNS(...)"),
    ("sum(x) + #1", "a positional reference (#n)"),
    ("max(read_text('/etc/hostname'))", "the function read_text()"),
    ("sum(x) over ()", "a window function (OVER)"),
    ("count(t.*)", "a star outside count(*)"),
    ("sum(*)", "a star outside count(*)"),
    ("max(current_setting('threads'))", "the function current_setting()"),
    ("sum(nextval('s'))", "the function nextval()"),
    ("count(*) + write_log('x')", "the function write_log()"),
    ("sum(my_udf(x))", "the function my_udf()"),
    ("max(cast(x as my_type))", "a cast to the type my_type, which is not a built-in type"),
    ("x -> 'a' = 1", "the function json_extract()"),
    ("x ->> 'a' = 1", "the function json_extract_scalar()"),
    ("{'a': 1} is null", "the function struct()"),
    ("max(unnest([1]))", "the function explode()"),
    ("x in (select 1 from read_text('a'))", None),  # a subquery: reported by the facts, not here
])
def test_refused_constructs_are_named(text, construct):
    refused = sqlguard.refusals(sql.parse(text))
    if construct is None:
        assert refused == () and sql.facts(text).subquery
    else:
        assert construct in refused


@pytest.mark.parametrize("text", [
    "count(*)", "sum(fare)", "count(distinct rider)", "sum(case when status = 'completed' then fare end)",
    "avg(fare) filter (where fare > 1)", "string_agg(rider, ',' order by rider)", "median(fare)",
    "status in ('a', 'b')", "fare between 1 and 2", "rider like '%x%'", "rider is not null",
    "coalesce(fare, 0) > nullif(1, 0)", "cast(fare as decimal(10, 2)) > 1", "date_trunc('month', date '2024-01-02')",
    "extract(year from date '2024-01-01') = 2024", "rider = :user", "lower(rider) = lower(:user)",
    "list_transform([1, 2], x -> x + 1) = [2, 3]", "fare::double > 1", "trim(both 'x' from rider) = 'y'",
])
def test_allowed_constructs_are_not_refused(text):
    assert sqlguard.refusals(sql.parse(text)) == ()
    assert sql.facts(text).refused == ()


# ---------------------------------------------------------------- the engine's text


def test_the_engine_text_has_no_comment_and_binds_user_as_a_duckdb_parameter():
    text = "rider = :user -- only mine\r+ (select 1)"
    with pytest.raises(SqlError, match="subquery"):
        sql.engine_text(text, COLUMNS, "trips")
    assert sql.engine_text("rider = :user -- only mine", COLUMNS, "trips") == "rider = $user"
    assert sql.engine_text("status /* */ = 'a' -- x\x0b or 1 = 1", COLUMNS, "trips") == "status = 'a'"


def test_the_engine_refuses_columns_of_other_tables_and_unknown_columns():
    for text in ("sum(other.fare)", "sum(nope)", "sum(a.trips.fare)", "sum(_row)"):
        with pytest.raises(SqlError, match="which it may not read"):
            sql.engine_text(text, COLUMNS, "trips")
    assert sql.engine_text("sum(TRIPS.Fare)", COLUMNS, "trips") == "SUM(TRIPS.Fare)"


def test_the_engine_text_is_a_fixed_point_of_parsing_and_rendering():
    for text in ["sum(fare) + 1", "status = 'it''s'", "rider like $$a'b$$", "cast(fare as double) / 2",
                 "case when fare > 1 then 'x' else 'y' end = 'x'", '"fare" > 1', "fare is distinct from 2"]:
        rendered = sql.engine_text(text, COLUMNS, "trips")
        assert sql.engine_text(rendered, COLUMNS, "trips") == rendered


# ---------------------------------------------------------------- one reader decides


def _sqlglot_facts(text: str):
    """The sqlglot path's answer, never the fast reader's: Facts, or None when it cannot read the text."""
    try:
        return sql.tree._tree_facts(sql.parse(text))
    except SqlError:
        return None


def _clean(found) -> bool:
    return found is not None and not found.refused and not found.subquery


CORPUS = sqlcorpus.texts(seed=16, count=4000)


def test_the_corpus_holds_every_line_break_and_comment_form():
    # Guards the differential test below: a corpus without these would prove little.
    joined = "".join(CORPUS)
    for brk in sqlcorpus.BREAKS:
        assert "--c" + brk in joined, repr(brk)
    for piece in ("/* a /* nested */ still */", "$$", "$t$", "e'", "''", "#1", "COLUMNS(*)", "read_text", "COPY"):
        assert piece in joined, piece
    answered = sum(1 for text in CORPUS if sql.shapes._fast_facts(text) is not None)
    assert answered > 400, "the fast reader answered too few texts for the comparison to mean anything"


def test_the_fast_reader_never_disagrees_with_sqlglot_on_the_corpus():
    for text in CORPUS:
        quick = sql.shapes._fast_facts(text)
        if quick is None:
            continue
        expected = _sqlglot_facts(text)
        assert expected is not None, f"the fast reader read {text!r}, which sqlglot cannot"
        assert quick == expected, text
        assert _clean(expected), f"the fast reader called {text!r} clean; the sqlglot path refuses it"


def test_the_facts_and_the_engine_agree_on_the_corpus():
    # What check calls clean (facts) the engine accepts, and what the engine accepts renders safely.
    for text in CORPUS:
        try:
            found = sql.facts(text)
        except SqlError:
            found = None
        try:
            rendered = sql.engine_text(text)
        except SqlError:
            rendered = None
        if _clean(found) and not found.parameters - {"user"}:
            assert rendered is not None, text
        if rendered is not None:
            assert _clean(found), text
            tokens = sqlglot.tokenize(rendered, read="duckdb")
            assert not any(token.comments for token in tokens), rendered
            assert not any(token.token_type.name == "SEMICOLON" for token in tokens), rendered
