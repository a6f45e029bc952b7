"""modeldiff.sql: parsing, normal form, references, aggregates and the expression checks.

Sources: DuckDB treats names as case-insensitive, quoted or not (DuckDB
documentation, "Keywords and Identifiers", from memory); string literals keep
their case (SQL standard, from memory). AND and OR being associative under
SQL's three-valued logic is the SQL standard's truth tables (from memory).
The rest is common practice for SQL comparison tools.
"""

from __future__ import annotations

import logging
import random
import subprocess
import sys

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from modeldiff import sql
from modeldiff.sql import SqlError

# ---------------------------------------------------------------- normal form

SPELLING_ONLY = [
    ("sum(fare)", "SUM( fare )"),
    ("sum(fare)", "Sum(\n  fare\n)"),
    ("sum(fare)", "sum(fare) -- completed trips only"),
    ("sum(fare)", "/* revenue */ sum(/* all */ fare)"),
    ("sum(fare)", 'sum("fare")'),
    ("sum(fare)", 'sum("FARE")'),
    ("sum(fare)", "sum((fare))"),
    ("status = 'completed'", "(status = 'completed')"),
    ("status = 'completed'", "((STATUS)) = 'completed'"),
    ("a + b * c", "a + (b * c)"),
    ("(a + b) * c", "((a + b)) * (c)"),
    ("fare_revenue / nullif(trip_count, 0)", "FARE_REVENUE / NULLIF(Trip_Count, 0)"),
    ("x is not null", "X IS NOT NULL"),
    ("a <> b", "a != b"),
    ("cast(fare as integer)", "fare::INTEGER"),
    ("a and (b and c)", "(a and b) and c"),
    ("a or (b or c)", "(a or b) or c"),
    ("count(distinct rider_key)", "COUNT(DISTINCT rider_key)"),
    ("sum(fare) over (partition by district)", "SUM(fare) OVER (PARTITION BY district)"),
    ("mean(fare)", "MEAN(fare)"),  # a DuckDB function sqlglot does not know
    ("my_udf(fare)", "MY_UDF(fare)"),
    ("fare > 1e3", "fare > 1E3"),
    ("staff_email = :user", "staff_email = :USER"),
    ("staff_email = :user", "staff_email = ((:user))"),
    ("interval 1 day", "INTERVAL 1 DAY"),
    ("x in (select 1)", "x in ((select 1))"),
    # A date part given as a string is a keyword, not data (DuckDB date part specifiers, from memory).
    ("datediff('day', started_at, ended_at)", "datediff('DAY', started_at, ended_at)"),
]

REAL_CHANGES = [
    ("(a + b) * c", "a + b * c"),
    ("a - (b - c)", "a - b - c"),
    ("a or (b and c)", "(a or b) and c"),
    ("sum(fare)", "avg(fare)"),
    ("sum(fare)", "sum(tip)"),
    ("count(*)", "count(fare)"),
    ("count(rider_key)", "count(distinct rider_key)"),
    ("year > 2025", "year >= 2025"),
    ("region = 'East'", "region = 'east'"),
    ("region = 'East'", "region = \"East\""),  # a string became a column name
    ("a and b", "a or b"),
    ("x is null", "x is not null"),
    ("fare * 1", "fare * 1.0"),  # different literal text: reported, never hidden
    ("sum(trips.fare)", "sum(fare)"),  # without the measure's table, a qualifier counts
]


@pytest.mark.parametrize(("a", "b"), SPELLING_ONLY)
def test_spelling_differences_have_the_same_normal_form(a, b):
    assert sql.normal_form(a) == sql.normal_form(b)
    assert sql.same_logic(a, b)


@pytest.mark.parametrize(("a", "b"), REAL_CHANGES)
def test_logic_changes_have_different_normal_forms(a, b):
    assert sql.normal_form(a) != sql.normal_form(b)
    assert not sql.same_logic(a, b)


def test_measure_table_qualifier_is_spelling_only_for_that_table():
    assert sql.same_logic("sum(trips.fare)", "sum(fare)", table="trips")
    assert sql.same_logic("sum(TRIPS.fare)", "sum(fare)", table="trips")
    assert not sql.same_logic("sum(bikes.fare)", "sum(fare)", table="trips")


def test_same_logic_handles_missing_texts():
    assert sql.same_logic(None, None)
    assert not sql.same_logic(None, "status = 'completed'")
    assert not sql.same_logic("status = 'completed'", None)


def test_same_logic_does_not_parse_identical_text():
    # Unchanged text is unchanged logic, even when it cannot be read (check reports that).
    assert sql.same_logic("sum(", "sum(")
    with pytest.raises(SqlError):
        sql.same_logic("sum(", "sum( ")


def test_normal_form_does_not_overflow_on_long_chains():
    chain = " or ".join(f"district = {i}" for i in range(3000))
    regrouped = "(" + " or ".join(f"district = {i}" for i in range(1500)) + ") or " + " or ".join(
        f"district = {i}" for i in range(1500, 3000)
    )
    assert sql.normal_form(chain) == sql.normal_form(regrouped)
    assert sql.normal_form(chain) != sql.normal_form(chain.replace("= 2999", "= 3000"))


# Realistic expressions of the bike-share model, and a few exotic ones.
CORPUS = [
    "sum(fare)",
    "count(*)",
    "count(distinct rider_key)",
    "sum(fare) filter (where status = 'completed')",
    "fare_revenue / nullif(trip_count, 0)",
    "status = 'completed' and not is_refund",
    "region = 'East'",
    "staff_email = :user",
    "year >= 2025",
    "case when duration_min > 30 then 'Long' else 'short' end = 'Long'",
    "sum(x) over (partition by y order by z desc nulls last)",
    "extract(year from started_at) = 2024",
    "cast(fare as decimal(10, 2)) > 1.5e3",
    "x::int between 1 and 10",
    "name ilike '%Bike%'",
    "coalesce(a, b, 0) in (1, 2, 3)",
    "trim(both 'x' from name) = 'Y'",
    "string_agg(name, ', ' order by name)",
    "list_transform(parts, p -> p + 1) = [2]",
    "median(duration_min)",
    "quantile_cont(fare, 0.9)",
    "a is distinct from b",
    "datediff('day', started_at, ended_at) > 1",
    "date_trunc('month', started_at) = '2024-01-01'",
    '"Fare" * 2 > 1',
    "trips.fare > 0",
    "not (a or b) and c",
    "a + b * c / d - e % f",
    "count(*) filter (where x) / count(*)",
    "a || b = 'xy'",
]


def _respell(text: str, rnd: random.Random) -> str:
    """Change only spelling: the case of every token but strings, spaces, comments, outer parentheses."""
    from sqlglot.dialects.duckdb import DuckDB

    out, previous = "", None
    for token in DuckDB().tokenize(text):
        raw = text[token.start : token.end + 1]
        if "STRING" not in token.token_type.name:
            raw = "".join(c.upper() if rnd.random() < 0.5 else c.lower() for c in raw)
        if previous is not None:
            touching = token.start == previous.end + 1
            out += "" if touching else rnd.choice([" ", "\n  ", " /* note */ ", " -- note\n"])
        out += raw
        previous = token
    return f"({out})" if rnd.random() < 0.5 else out


@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.sampled_from(CORPUS), st.integers(0, 2**32))
def test_respelling_never_changes_the_normal_form(text, seed):
    respelled = _respell(text, random.Random(seed))
    assert sql.normal_form(respelled) == sql.normal_form(text), respelled


@pytest.mark.parametrize(
    "text",
    [
        "region = 'East'",
        "case when duration_min > 30 then 'Long' else 'short' end = 'Long'",
        "name ilike '%Bike%'",
        "trim(both 'x' from name) = 'Y'",
        "staff_email = ':user'",
    ],
)
def test_changing_the_case_inside_a_string_changes_the_normal_form(text):
    head, literal, tail = text.split("'", 2)
    changed = f"{head}'{literal.swapcase()}'{tail}"
    assert sql.normal_form(changed) != sql.normal_form(text)


# ---------------------------------------------------------------- :user


def test_user_parameter_parses():
    assert sql.column_refs("staff_email = :user") == {(None, "staff_email")}
    assert sql.uses_user_parameter("staff_email = :user")
    assert sql.uses_user_parameter("lower(staff_email) = lower(:user) or :user in ('a', 'b')")
    assert sql.uses_user_parameter("staff_email = $user")  # DuckDB's spelling of the same parameter


@pytest.mark.parametrize(
    "text",
    [
        "staff_email = (:user)",
        "(- :user) = depot_key",  # sqlglot alone reads `(- :user)` as an alias
        "(case :user when 'a' then 1 end) = 1",  # and refuses this one
        "staff_email in (:user, 'x') or :user is null",
        "lower(staff_email)=:user",
        "staff_email = :User",
    ],
)
def test_user_parameter_is_read_in_every_position(text):
    assert sql.uses_user_parameter(text)
    assert all("modeldiff" not in name for name in sql.names(text))


def test_user_parameter_spelling_does_not_change_the_logic():
    assert sql.same_logic("staff_email = :user", "staff_email = :USER")
    assert not sql.same_logic("staff_email = :user", "staff_email = ':user'")
    assert not sql.same_logic("staff_email = :user", "staff_email = :region")


@pytest.mark.parametrize(
    "text",
    [
        "staff_email = ':user'",
        "staff_email = 'a' -- :user",
        "staff_email = 'a' /* :user */",
        '"staff:user" = 1',
        "staff_email::user = 'a'",  # a cast to a type called user
        "staff_email = $$ :user $$",
        "staff_email = e'\\' :user'",  # a backslash escape inside an e-string
    ],
)
def test_user_parameter_is_not_found_where_it_is_not_a_parameter(text):
    assert not sql.uses_user_parameter(text)


def test_errors_quote_parameters_as_written():
    with pytest.raises(SqlError) as caught:
        sql.parse(":user +")
    assert ":user" in str(caught.value) and "modeldiff" not in str(caught.value)


def test_no_user_parameter_when_absent():
    assert not sql.uses_user_parameter("staff_email = 'someone'")
    assert not sql.uses_user_parameter("staff_email = ':user'")  # a string, not the parameter
    assert not sql.uses_user_parameter("user = 'x'")  # a column named user
    assert not sql.uses_user_parameter("region = :region")


# ---------------------------------------------------------------- column_refs, names, aggregates


@pytest.mark.parametrize(
    ("text", "refs"),
    [
        ("sum(fare)", {(None, "fare")}),
        ("count(*)", set()),
        ("sum(trips.fare) + max(\"Tip\")", {("trips", "fare"), (None, "Tip")}),
        ("status = 'fare'", {(None, "status")}),  # a string holding a name reads no column
        ("nullif(trip_count, 0) -- reads fare\n", {(None, "trip_count")}),
        ("round(fare, 2)", {(None, "fare")}),  # round is a function, not a column
        ("list_transform(parts, p -> p * 2) = [2]", {(None, "parts")}),  # p is the lambda's variable
        ("list_transform(parts, p -> P * 2) = [2]", {(None, "parts")}),  # in any case
        ("region = 'East' and depot.region = 'West'", {(None, "region"), ("depot", "region")}),
        ("shop.trips.fare > 0", {("shop.trips", "fare")}),
    ],
)
def test_column_refs(text, refs):
    assert sql.column_refs(text) == refs


def test_names_are_the_bare_and_qualified_column_names():
    assert sql.names("fare_revenue / nullif(trip_count, 0)") == {"fare_revenue", "trip_count"}
    assert sql.names("t.fare_revenue + 1") == {"fare_revenue"}
    assert sql.names("coalesce(1, 2)") == frozenset()


@pytest.mark.parametrize(
    "text",
    [
        "sum(fare)",
        "count(*)",
        "count(distinct rider_key)",
        "avg(fare) + 1",
        "min(fare)",
        "max(fare)",
        "median(duration_min)",
        "stddev(fare)",
        "mean(fare)",  # DuckDB aggregate that sqlglot parses as an unknown function
        "case when count(*) > 0 then sum(fare) else 0 end",
        "coalesce(sum(fare), 0)",
        "sum(fare) filter (where status = 'completed')",
        "list(fare)",
    ],
)
def test_has_aggregate_detects_aggregates(text):
    assert sql.has_aggregate(text)


@pytest.mark.parametrize(
    "text",
    ["fare * 2", "coalesce(fare, 0)", "my_udf(fare)", "'sum(fare)' = label", "status = 'completed'", "sum_fare > 1"],
)
def test_has_aggregate_does_not_report_plain_expressions(text):
    assert not sql.has_aggregate(text)


# ---------------------------------------------------------------- measure references

MEASURES = {"fare_revenue", "trip_count", "revenue_per_trip", "round"}


def test_measure_refs_finds_the_measures_named():
    assert sql.measure_refs("fare_revenue / nullif(trip_count, 0)", MEASURES) == {"fare_revenue", "trip_count"}
    assert sql.measure_refs("FARE_REVENUE * 2", MEASURES) == {"fare_revenue"}  # case is ignored
    assert sql.measure_refs('"Trip_Count" + 1', MEASURES) == {"trip_count"}


def test_measure_refs_does_not_count_functions_strings_or_comments():
    # `round(` is a function even though a measure is called round.
    text = "round(fare_revenue, 2) + 0 -- trip_count\n + length('revenue_per_trip')"
    assert sql.measure_refs(text, MEASURES) == {"fare_revenue"}
    assert sql.measure_refs("round + 1", MEASURES) == {"round"}


def test_measure_refs_prefers_the_exact_spelling():
    assert sql.measure_refs("Revenue + 1", ["revenue", "Revenue"]) == {"Revenue"}
    assert sql.measure_refs("REVENUE + 1", ["revenue", "Revenue"]) == {"revenue", "Revenue"}


TRICKY_DERIVED = [
    "fare_revenue / nullif(trip_count, 0)",
    "'fare_revenue' || trip_count",
    "'it''s fare_revenue' = trip_count",
    '"fare_revenue" + "Trip_Count"',
    '"fare revenue" + trip_count',
    "fare_revenue -- trip_count\n + 1",
    "fare_revenue /* trip_count */ + 1",
    "fare_revenue /* a /* nested trip_count */ comment */ + 1",
    "round(fare_revenue, 2)",
    "round (fare_revenue) + round",
    "trip_count(fare_revenue)",
    "trips.fare_revenue + trip_count",
    '"trips"."fare_revenue"',
    "case when trip_count > 0 then fare_revenue end",
    "end + 1",
    "fare_revenue in (trip_count, 1)",
    "fare_revenue between 1 and trip_count",
    "fare_revenue is not null and trip_count like 'x%'",
    "date_part('year', fare_revenue)",
    "cast(fare_revenue as double)",
    "fare_revenue::double",
    "fare_revenue -> 'x'",
    "e'trip_count' = fare_revenue",
    "interval 1 day + fare_revenue",
    "list_transform(fare_revenue, trip_count -> trip_count + 1)",
    "fare_revenue[1]",
    "fare_revenue.trip_count(1)",
    "fare_revenue = :user",
    "$$trip_count$$ = fare_revenue",
    "1.5e3 * fare_revenue",
    ".5 * fare_revenue",
    "user + trip_count",
    "current_date - fare_revenue",
    "- -fare_revenue",
    "fare_revenue--trip_count",
    "fare_revenue/*trip_count*/",
]
TRICKY_MEASURES = frozenset({"fare_revenue", "trip_count", "round", "end", "user", "day", "In"})


@pytest.mark.parametrize("text", TRICKY_DERIVED)
def test_derived_refs_fast_equals_measure_refs_on_tricky_cases(text):
    assert sql.derived_refs_fast(text, TRICKY_MEASURES) == sql.measure_refs(text, TRICKY_MEASURES)


def test_derived_refs_fast_scans_common_shapes_without_parsing():
    # Guards the fast path itself: the equality tests above would also pass if it always fell back.
    for text in ["fare_revenue / nullif(trip_count, 0)", "round(fare_revenue, 2) * 100", "a + b -- c\n"]:
        assert sql.scan._fast_names(text) is not None, text
    assert sql.scan._fast_names("fare_revenue::double") is None


_WORDS = ["fare_revenue", "trip_count", "Fare_Revenue", "round", "end", "user", "day", "In", "x", "date", "null",
          "and", "or", "not", "case", "when", "then", "else", "is", "in", "like", "between", "true", "filter"]  # fmt: skip
_SEPARATORS = ["", " ", "\n", " /* trip_count */ ", " -- fare_revenue\n"]


@st.composite
def _atoms(draw):
    word = draw(st.sampled_from(_WORDS))
    return draw(
        st.sampled_from(
            [word, word.upper(), f'"{word}"', f"t.{word}", f"'{word}'", "'it''s'", "1", "2.5", ":user", "*"]
        )
    )


def _compose(children):
    functions = ["nullif", "coalesce", "round", "greatest", "my_udf", "fare_revenue", "sum", "date_part", "cast", "if"]
    operators = ["+", "-", "*", "/", "=", "<>", ">=", " and ", " or ", " is ", " in ", " like ", "::", "||", "->"]
    return st.one_of(
        st.builds(lambda a, o, b, s: f"{a}{s}{o}{s}{b}", children, st.sampled_from(operators), children, st.sampled_from(_SEPARATORS)),
        st.builds(lambda a: f"({a})", children),
        st.builds(lambda a: f"not {a}", children),
        st.builds(lambda f, args: f"{f}({', '.join(args)})", st.sampled_from(functions), st.lists(children, max_size=3)),
        st.builds(lambda a, b, c: f"case when {a} then {b} else {c} end", children, children, children),
        st.builds(lambda a, b, c: f"{a} between {b} and {c}", children, children, children),
    )  # fmt: skip


_EXPRESSIONS = st.one_of(
    st.recursive(_atoms(), _compose, max_leaves=10),
    st.lists(st.one_of(_atoms(), st.sampled_from(["(", ")", ",", "+", ".", "--", "/*", "*/", "'", '"'])), max_size=10).map(
        " ".join
    ),
)


@settings(max_examples=800, deadline=None, suppress_health_check=list(HealthCheck))
@given(_EXPRESSIONS)
def test_derived_refs_fast_equals_measure_refs_on_generated_text(text):
    try:
        expected = sql.measure_refs(text, TRICKY_MEASURES)
    except SqlError:
        try:  # on unreadable text the fast path may answer or raise SqlError, nothing else
            sql.derived_refs_fast(text, TRICKY_MEASURES)
        except SqlError:
            pass
        return
    assert sql.derived_refs_fast(text, TRICKY_MEASURES) == expected


# ---------------------------------------------------------------- fast facts


def test_common_shapes_are_read_without_sqlglot():
    # Guards the fast reader itself: the equality tests below would also pass if it never answered.
    for text in ["sum(amount)", "count(*)", "count(distinct rider_key)", "region = 'East'",
                 "staff_email = :user", "m1 / nullif(m2, 0)", "status = 'completed' and tip > 0"]:  # fmt: skip
        assert sql.shapes._fast_facts(text) is not None, text
    assert sql.shapes._fast_facts("sum(fare) over ()") is None
    assert sql.shapes._fast_facts("sum(") is None  # unreadable text is left to sqlglot, which explains it
    assert sql.shapes._fast_facts("1e3+1") is None  # sqlglot 30 reads this as one number; leave it to sqlglot


_FACT_WORDS = ["fare", "Fare", "tip", "status", "end", "user", "date", "key", "x", "sum", "mean", "region", "round"]
_FACT_FUNCTIONS = ["sum", "SUM", "count", "avg", "min", "max", "nullif", "coalesce", "round", "abs", "lower",
                   "mean", "fsum", "my_udf", "date_part", "if", "left", "list", "median", "trim"]  # fmt: skip


@st.composite
def _fact_atoms(draw):
    word = draw(st.sampled_from(_FACT_WORDS))
    return draw(
        st.sampled_from([word, word.upper(), f'"{word}"', f"t.{word}", f"a.t.{word}", f"'{word}'", "'it''s'",
                         "1", "2.5", "1e3", "1.", "007", ":user", ":region", "*", "null", "true", "-1"])  # fmt: skip
    )


def _fact_compose(children):
    operators = ["+", "-", "*", "/", "%", "=", "<>", "<", ">=", " and ", " or ", " like ", " is ", " in "]
    return st.one_of(
        st.builds(lambda a, o, b, s: f"{a}{s}{o}{s}{b}", children, st.sampled_from(operators), children, st.sampled_from(_SEPARATORS)),
        st.builds(lambda a: f"({a})", children),
        st.builds(lambda a: f"not {a}", children),
        st.builds(lambda a: f"- {a}", children),
        st.builds(lambda a, n: f"{a} is {n}", children, st.sampled_from(["null", "not null", "true", "x"])),
        st.builds(lambda f, args: f"{f}({', '.join(args)})", st.sampled_from(_FACT_FUNCTIONS), st.lists(children, max_size=3)),
        st.builds(lambda f, a: f"{f}(distinct {a})", st.sampled_from(["count", "sum"]), children),
        st.builds(lambda a, b, c: f"case when {a} then {b} else {c} end", children, children, children),
        st.builds(lambda o, a, b: f"case {o} when {a} then {b} end", children, children, children),
        st.builds(lambda a, b, c, n: f"{a}{n} between {b} and {c}", children, children, children, st.sampled_from(["", " not"])),
        st.builds(lambda a, items, n: f"{a}{n} in ({', '.join(items)})", children, st.lists(children, max_size=3), st.sampled_from(["", " not"])),
    )  # fmt: skip


@settings(max_examples=800, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.recursive(_fact_atoms(), _fact_compose, max_leaves=8))
def test_fast_facts_equal_sqlglot_facts(text):
    quick = sql.shapes._fast_facts(text)
    try:
        expected = sql.tree._tree_facts(sql.parse(text))
    except SqlError:
        assert quick is None, "the fast reader accepted text that sqlglot refuses"
        return
    if quick is not None:
        assert quick == expected


# ---------------------------------------------------------------- base measures
# The rules are check.py's (`modeldiff check`): each case is a one-table model run through check_model, and the
# problems listed are the messages of the findings about the measure or role under test.

TRIPS = ["trip_key", "fare", "tip", "status", "bike_key", "started_at"]


def _checked(subject: str, tables: dict[str, list[str]], measures: dict | None = None, roles: dict | None = None,
             reports: dict | None = None) -> list[str]:
    """The messages of `modeldiff check`'s errors about `subject` in a model of `tables` (name -> columns).

    Errors only: a role on a lone table also draws the warning that it restricts no fact table.
    """
    import json

    from modeldiff.check import check_model
    from modeldiff.load import load_files

    model = {"model": "sql_rules", "format": 1,
             "tables": {name: {"kind": "dimension", "key": columns[0], "columns": {c: "text" for c in columns}}
                        for name, columns in tables.items()},
             "measures": measures or {}, "roles": roles or {}, "reports": reports or {}}
    result = load_files([("sql_rules.model.yaml", json.dumps(model))])  # JSON is YAML
    return sorted(f.message for f in check_model(result.model, result.findings)
                  if f.subject == subject and f.severity == "error")


def base_measure_problems(name: str, expr: str, where: str | None, table: str, columns: list[str] | None) -> list[str]:
    """A base measure's problems; `columns` None: its table is not in the model."""
    measure = {"table": table, "expr": expr} | ({"where": where} if where is not None else {})
    tables = {table: columns} if columns is not None else {"other": ["other_key"]}
    return _checked(f"measures.{name}", tables, {name: measure})


def derived_measure_problems(name: str, expr: str, measure_names) -> list[str]:
    measures = {other: {"table": "trips", "expr": "count(*)"} for other in measure_names if other != name}
    return _checked(f"measures.{name}", {"trips": TRIPS}, measures | {name: {"expr": expr}})


def predicate_problems(text: str, table: str, columns: list[str]) -> list[str]:
    """The problems of a role's row filter on `table` (where `:user`, the person viewing, is allowed)."""
    return _checked("roles.r", {table: columns}, roles={"r": {"filters": {table: text}}})


def report_where_problems(text: str, table: str, columns: list[str]) -> list[str]:
    """The problems of a report's `where` on `table` (where `:user` is refused)."""
    return _checked("reports.p", {table: columns}, {"m": {"table": table, "expr": "count(*)"}},
                    reports={"p": {"measures": ["m"], "where": {table: text}}})


def test_base_measure_without_aggregate_is_reported():
    problems = base_measure_problems("fare_revenue", "fare * 2", None, "trips", TRIPS)
    assert len(problems) == 1 and "no aggregate function" in problems[0] and "fare_revenue" in problems[0]


def test_base_measure_with_aggregate_is_not_reported():
    assert base_measure_problems("fare_revenue", "sum(fare) * 2", None, "trips", TRIPS) == []
    assert base_measure_problems("trip_count", "count(*)", None, "trips", TRIPS) == []
    assert base_measure_problems("long_fares", "sum(case when fare > 10 then fare end)", None, "trips", TRIPS) == []


def test_base_measure_reading_another_table_is_reported():
    problems = base_measure_problems("fare_revenue", "sum(bikes.fare)", None, "trips", TRIPS)
    assert len(problems) == 1 and "reads bikes.fare, but may read only columns of trips" in problems[0]


def test_base_measure_qualified_with_its_own_table_is_not_reported():
    assert base_measure_problems("fare_revenue", "sum(trips.fare)", "TRIPS.status = 'completed'", "trips", TRIPS) == []


def test_base_measure_reading_an_unknown_column_is_reported():
    problems = base_measure_problems("fare_revenue", "sum(fares)", None, "trips", TRIPS)
    assert len(problems) == 1 and "reads column 'fares', which trips does not have" in problems[0]


def test_base_measure_column_names_ignore_case():
    assert base_measure_problems("fare_revenue", 'sum("FARE")', None, "trips", TRIPS) == []


def test_base_measure_of_an_unknown_table_is_one_problem():
    problems = base_measure_problems("m", "sum(bikes.anything)", None, "trips", None)
    assert len(problems) == 1 and "its table 'trips' does not exist" in problems[0]


def test_base_measure_column_outside_aggregate_is_reported():
    problems = base_measure_problems("m", "sum(fare) + tip", None, "trips", TRIPS)
    assert len(problems) == 1 and "reads tip outside any aggregate" in problems[0]


def test_base_measure_aggregating_where_is_reported():
    problems = base_measure_problems("m", "sum(fare)", "count(*) > 1", "trips", TRIPS)
    assert len(problems) == 1 and "`where` is a row condition and may not aggregate" in problems[0]


def test_base_measure_row_where_is_not_reported():
    assert base_measure_problems("m", "sum(fare)", "status = 'completed' and tip > 0", "trips", TRIPS) == []


def test_base_measure_where_reading_another_table_is_reported():
    problems = base_measure_problems("m", "sum(fare)", "bikes.model = 'x'", "trips", TRIPS)
    assert len(problems) == 1 and "`where` reads bikes.model, but may read only columns of trips" in problems[0]


def test_base_measure_depending_on_the_viewer_is_reported():
    problems = base_measure_problems("m", "sum(fare)", "status = :user", "trips", TRIPS)
    assert len(problems) == 1 and "only a role's filters may depend on the person viewing" in problems[0]


def test_base_measure_unreadable_sql_is_one_problem_a_field():
    problems = base_measure_problems("m", "sum(fare", "status = 'x", "trips", TRIPS)
    assert len(problems) == 2
    assert all(p.startswith("Measure m: `") and "is not valid SQL: the SQL `" in p for p in problems)


# ---------------------------------------------------------------- derived measures


def test_derived_measure_naming_a_non_measure_is_reported():
    problems = derived_measure_problems("revenue_per_trip", "fare_revenue / nullif(trips, 0)", MEASURES)
    assert len(problems) == 1 and "names 'trips', which is not a measure" in problems[0]


def test_derived_measure_naming_measures_is_not_reported():
    text = "round(fare_revenue / nullif(trip_count, 0), 2) -- not_a_measure\n + length('not_a_measure')"
    assert derived_measure_problems("revenue_per_trip", text, MEASURES) == []
    assert derived_measure_problems("revenue_per_trip", "FARE_REVENUE / Trip_Count", MEASURES) == []


def test_derived_measure_that_aggregates_is_reported():
    problems = derived_measure_problems("total", "sum(fare_revenue)", MEASURES)
    assert len(problems) == 1 and "uses the aggregate sum" in problems[0]


def test_derived_measure_with_qualified_name_is_reported():
    problems = derived_measure_problems("total", "trips.fare_revenue + 1", MEASURES)
    assert len(problems) == 1 and "names 'trips.fare_revenue', which is not a measure" in problems[0]


def test_derived_measure_unreadable_sql_is_one_problem():
    problems = derived_measure_problems("total", "fare_revenue +", MEASURES)
    assert len(problems) == 1 and "cannot be read" in problems[0]


# ---------------------------------------------------------------- predicates

DEPOT_ACCESS = ["staff_email", "depot_key"]
DEPOTS = ["depot_key", "region", "name"]


def test_predicate_on_its_own_table_is_not_reported():
    assert predicate_problems("staff_email = :user", "depot_access", DEPOT_ACCESS) == []
    assert predicate_problems("region = 'East' or depots.name like 'North%'", "depots", DEPOTS) == []


def test_predicate_reading_another_table_is_reported():
    problems = predicate_problems("stations.region = 'East'", "depots", DEPOTS)
    assert len(problems) == 1 and "reads stations.region, but may read only columns of depots" in problems[0]


def test_predicate_reading_an_unknown_column_is_reported():
    problems = predicate_problems("district = 'East'", "depots", DEPOTS)
    assert len(problems) == 1 and "reads column 'district', which depots does not have" in problems[0]


def test_predicate_that_aggregates_is_reported():
    problems = predicate_problems("count(depot_key) > 1", "depots", DEPOTS)
    assert len(problems) == 1 and "uses the aggregate count" in problems[0]


def test_predicate_with_subquery_is_reported():
    problems = predicate_problems("depot_key in (select depot_key from depot_access)", "depots", DEPOTS)
    assert any("subquery" in p for p in problems)
    assert not any("subquery" in p for p in predicate_problems("depot_key in (1, 2)", "depots", DEPOTS))


def test_predicate_user_parameter_is_refused_outside_role_filters():
    problems = report_where_problems("staff_email = :user", "depot_access", DEPOT_ACCESS)
    assert len(problems) == 1 and "parameter :user" in problems[0]
    assert report_where_problems("staff_email = 'x'", "depot_access", DEPOT_ACCESS) == []


def test_predicate_with_unknown_parameter_is_reported():
    problems = predicate_problems("region = :region", "depots", DEPOTS)
    assert len(problems) == 1 and "parameter :region" in problems[0]


def test_predicate_that_is_a_value_is_reported():
    problems = predicate_problems("depot_key + 1", "depots", DEPOTS)
    assert len(problems) == 1 and "not a condition" in problems[0]


def test_unreadable_predicate_is_one_problem():
    problems = predicate_problems("region = 'East", "depots", DEPOTS)
    assert problems == ["roles.r: the filter on depots is not valid SQL: "
                        "the SQL `region = 'East` cannot be read: a string is not closed"]


# ---------------------------------------------------------------- errors

BAD_SQL = [
    ("", "is empty"),
    ("   ", "is empty"),
    ("sum(", "something is missing after `sum(`"),
    ("fare +", "something is missing after `fare +`"),
    ("(fare", "a closing `)` is missing"),
    ("fare)", "unexpected `)`"),
    ("status = 'completed", "a string is not closed"),
    ('status = "completed', "a quoted name is not closed"),
    ("fare /* note", "a comment is not closed"),
    ("select fare from trips", "unexpected `select`"),
    ("sum(fare) as total", "unexpected `as`"),
    ("fare; tip", "several statements"),
    ("fare; drop table trips", "unexpected `drop`"),
    ("If = 1", "cannot be read as an expression"),
    ("else", "is not an expression"),
    ("(" * 2000 + "fare" + ")" * 2000, "nested too deeply"),
]


@pytest.mark.parametrize(("text", "wanted"), BAD_SQL)
def test_bad_sql_raises_one_readable_sentence(text, wanted):
    with pytest.raises(SqlError) as caught:
        sql.parse(text)
    message = str(caught.value)
    assert wanted in message
    assert message.startswith("the SQL `")
    assert "\n" not in message and "\x1b" not in message
    assert "sqlglot" not in message and "<class" not in message and "Traceback" not in message
    assert isinstance(caught.value, ValueError)


def test_bad_sql_gives_the_column():
    with pytest.raises(SqlError, match=r"\(column 9\)"):
        sql.parse("fare +  )")


def test_good_sql_does_not_raise():
    for text in CORPUS:
        sql.parse(text)


def test_text_that_is_not_a_string_is_an_sql_error():
    with pytest.raises(SqlError, match="expected SQL text, got int"):
        sql.parse(5)


def test_every_public_function_raises_sql_error_for_bad_text():
    for call in (sql.normal_form, sql.column_refs, sql.has_aggregate, sql.names, sql.uses_user_parameter):
        with pytest.raises(SqlError):
            call("sum(")
    with pytest.raises(SqlError):
        sql.measure_refs("sum(", MEASURES)


def test_sqlglot_fallback_logs_nothing(caplog):
    with caplog.at_level(logging.DEBUG):
        with pytest.raises(SqlError):
            sql.parse("If = 2")
    assert not [r for r in caplog.records if r.name.startswith("sqlglot")]


# ---------------------------------------------------------------- memoising and import cost


def test_parse_is_memoised_by_text():
    assert sql.parse("sum(fare) + 1") is sql.parse("sum(fare) + 1")
    assert sql.parse("sum(fare) + 1") is not sql.parse("sum(fare) + 2")


def _sqlglot_loaded_after(code: str) -> bool:
    probe = f"import sys\n{code}\nprint('sqlglot' in sys.modules)"
    result = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True)
    return result.stdout.strip() == "True"


def test_importing_the_module_does_not_import_sqlglot():
    assert not _sqlglot_loaded_after("import modeldiff.sql")
    assert not _sqlglot_loaded_after("import modeldiff.sql as s; s.same_logic('a', 'a')")
    assert _sqlglot_loaded_after("import modeldiff.sql as s; s.parse('a')")


def test_derived_measure_refs_of_a_model_are_computed_once_per_mapping():
    from modeldiff.model import Measure

    measures = {"a": Measure("a", "sum(x)", "t"), "b": Measure("b", "a * 2"), "c": Measure("c", "B + a"),
                "d": Measure("d", "a +")}
    refs = sql.derived_measure_refs(measures)
    assert refs == {"b": frozenset({"a"}), "c": frozenset({"a", "b"}), "d": frozenset()}  # case ignored; unreadable: none
    assert sql.derived_measure_refs(measures) is refs  # the check and the impact analysis share it


def test_derived_measure_refs_of_another_mapping_are_its_own():
    # The twin of the test above: an equal-looking but different mapping is read for itself.
    from modeldiff.model import Measure

    first = {"a": Measure("a", "sum(x)", "t"), "b": Measure("b", "a * 2")}
    second = {"a": Measure("a", "sum(x)", "t"), "b": Measure("b", "a * 3 + e"), "e": Measure("e", "count(*)", "t")}
    assert sql.derived_measure_refs(first) == {"b": frozenset({"a"})}
    assert sql.derived_measure_refs(second) == {"b": frozenset({"a", "e"})}
