"""sql.shapes._fast_facts reads texts of one shape once (`a / nullif(b, 0)`, `c / nullif(d, 0)`) and puts the names back.

Held to reading the text's own tokens (sql.shapes._read_tokens), which the tests in
test_sql.py hold to sqlglot.
"""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from modeldiff import sql

_WORDS = ["fare", "Fare", "FARE", "tip", "end", "user", "date", "key", "x", "sum", "count", "distinct", "nullif",
          "null", "case", "in", "round", "m1", "m_2"]


def _direct(text):
    scan = sql.scan._scan(text)
    if scan.unsure or not scan.tokens:
        return None
    return sql.shapes._read_tokens(scan.tokens)


@st.composite
def _atoms(draw):
    word = draw(st.sampled_from(_WORDS))
    return draw(st.sampled_from([word, f'"{word}"', f"t.{word}", "1", "'a'", ":user", "*", "null"]))


def _compose(children):
    return st.one_of(
        st.builds(lambda a, o, b: f"{a} {o} {b}", children, st.sampled_from(["+", "/", "=", "and", "or", "is"]), children),
        st.builds(lambda a: f"({a})", children),
        st.builds(lambda f, args: f"{f}({', '.join(args)})", st.sampled_from(["sum", "count", "nullif", "round", "x", "fare"]),
                  st.lists(children, max_size=3)),
        st.builds(lambda a: f"count(distinct {a})", children),
        st.builds(lambda a, b: f"case when {a} then {b} end", children, children),
    )


@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.recursive(_atoms(), _compose, max_leaves=6))
def test_facts_by_shape_equal_facts_of_the_text_itself(text):
    assert sql.shapes._fast_facts(text) == _direct(text)


def test_texts_of_one_shape_keep_their_own_names():
    first, second = sql.shapes._fast_facts("m1 / nullif(m2, 0)"), sql.shapes._fast_facts("m7 / nullif(m7, 0)")
    assert first.columns == {(None, "m1"), (None, "m2")}
    assert second.columns == {(None, "m7")}  # one name twice: one stand-in
    assert sql.shapes._fast_facts("sum(Fare) + fare").columns == {(None, "Fare"), (None, "fare")}  # names as written


def test_a_shape_is_read_once():
    sql.shapes._shape_facts.cache_clear()
    for i in range(20):
        sql.shapes._fast_facts(f"q{i} / nullif(r{i}, 0)")
    info = sql.shapes._shape_facts.cache_info()
    assert info.misses == 1 and info.hits == 19


def test_keywords_functions_and_qualified_names_are_not_stand_ins():
    shape, names = sql.shapes._shape(sql.scan._scan("count(distinct x) + nullif(y, 0) + null").tokens)
    assert names == ["x", "y"]
    assert ("word", "count") in shape and ("word", "distinct") in shape and ("word", "null") in shape
    assert sql.shapes._shape(sql.scan._scan("t.x + 1").tokens)[1] is None  # a qualified name: read as written
    assert sql.shapes._shape(sql.scan._scan('"x" + 1').tokens)[1] is None  # a quoted name: read as written
