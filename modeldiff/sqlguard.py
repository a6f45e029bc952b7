"""The SQL a model may hold, and the only way a model's SQL reaches the engine.

A model's SQL is untrusted input (a pull request's model runs in CI and in
every developer's pre-push hook). It reaches DuckDB only as a sqlglot tree
that passed the allow-list below, re-rendered by sqlglot from that tree
without comments; the text the person wrote is never pasted into a query.

The allow-list, by construction:

- column references (the right table's: the caller checks names), literals
  (numbers, strings, NULL, TRUE/FALSE, typed literals such as DATE '...'),
  the `:user` parameter;
- arithmetic, comparison, boolean logic, `||`, bitwise operators, CASE, IF,
  CAST and TRY_CAST to a built-in type, COALESCE, NULLIF, IN (a list),
  BETWEEN, LIKE / ILIKE / SIMILAR TO / GLOB patterns, IS [NOT] NULL / DISTINCT
  FROM, INTERVAL, COLLATE, EXTRACT, TRIM, list literals and subscripts, and
  lambdas inside the list functions below;
- the aggregate functions in AGGREGATES (with DISTINCT, FILTER (WHERE ...)
  and ORDER BY inside the call) and the scalar functions in SCALARS: DuckDB
  functions that compute on their arguments and read no data, no file, no
  setting and no sequence, and write nothing.

Everything else is refused: subqueries, table functions (read_text,
read_csv, glob, ...), `COLUMNS(...)`, positional references (`#1`), a star
anywhere but `count(*)`, window functions, parameters other than `:user`,
unknown functions, functions that read state (current_setting, getvariable,
nextval, ...) or write (write_log, setseed, ...), and anything sqlglot
reads as a command.

`refusals(tree)` names what is refused (check turns each into an
`invalid-model` finding); `render(tree)` is the text the engine uses, and it
checks itself: the rendered text is parsed again and must pass the same
allow-list and render to itself, so what DuckDB runs is what was checked.
sqlglot is imported by the callers (this module is imported only with it).
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    from sqlglot import exp

DIALECT = "duckdb"

# DuckDB aggregate functions (duckdb 2.0.1, `duckdb_functions()`, function_type = 'aggregate')
# that compute on their arguments only.
AGGREGATES = frozenset("""
any_value approx_count_distinct approx_quantile arbitrary arg_max arg_max_null arg_max_nulls_last arg_min
arg_min_null arg_min_nulls_last argmax argmin array_agg avg bit_and bit_or bit_xor bool_and bool_or corr count
count_if count_star countif covar_pop covar_samp entropy favg first fsum group_concat kahan_sum kurtosis
kurtosis_pop last list listagg mad max max_by mean median min min_by mode product quantile quantile_cont
quantile_disc regr_avgx regr_avgy regr_count regr_intercept regr_r2 regr_slope regr_sxx regr_sxy regr_syy
reservoir_quantile sem skewness stddev stddev_pop stddev_samp string_agg sum sum_no_overflow sumkahan var_pop
var_samp variance
""".split())

# DuckDB scalar functions (duckdb 2.0.1, function_type = 'scalar') that compute on their arguments only:
# mathematics, text, dates and times, conditionals, lists.
SCALARS = frozenset("""
abs acos acosh asin asinh atan atan2 atanh bit_count cbrt ceil ceiling cos cosh cot degrees even exp
factorial floor fmod gamma gcd greatest isfinite isinf isnan lcm least lgamma ln log log10 log2 mod pi pow power
radians round round_even roundbankers sign signbit sin sinh sqrt tan tanh trunc xor
ascii bit_length char_length character_length chr concat concat_ws contains damerau_levenshtein editdist3
ends_with format hamming instr jaccard jaro_similarity jaro_winkler_similarity lcase left len length levenshtein
lower lpad ltrim md5 mismatches nfc_normalize octet_length ord position prefix printf regexp_extract
regexp_full_match regexp_matches regexp_replace repeat replace reverse right rpad rtrim sha1 sha256 split_part
starts_with strip_accents strlen strpos substr substring suffix to_base64 base64 from_base64 to_hex hex
translate trim ucase unicode upper url_decode url_encode
age century current_date date_diff date_part date_sub date_trunc datediff datepart datesub datetrunc day
dayname dayofmonth dayofweek dayofyear decade epoch epoch_ms epoch_ns epoch_us era hour isodow isoyear julian
last_day make_date make_time make_timestamp microsecond millennium millisecond minute month monthname now
nanosecond quarter second strftime strptime time_bucket to_days to_hours to_minutes to_months to_seconds
to_timestamp to_weeks to_years today try_strptime week weekday weekofyear year yearweek
coalesce ifnull nullif if
array_concat array_contains array_extract array_filter array_has array_length array_slice array_transform
array_value list_concat list_contains list_distinct list_extract list_filter list_has list_has_all list_has_any
list_position list_slice list_sort list_transform list_value cardinality
""".split())

FUNCTIONS = AGGREGATES | SCALARS

# The nodes sqlglot 30 builds for the functions above (a test holds the two lists to each other).
FUNCTION_NODES = frozenset("""
Abs Acos Acosh ApproxDistinct ApproxQuantile AnyValue ArgMax ArgMin Array ArrayAgg ArrayConcat ArrayContains
ArrayDistinct ArrayFilter ArrayOverlaps ArraySize ArraySlice ArraySort Ascii Asin Asinh Atan Atan2 Atanh Avg
BitLength BitwiseAndAgg BitwiseOrAgg BitwiseXorAgg Cbrt Ceil Chr Coalesce Concat ConcatWs Contains Corr Cos
Cosh Cot Count CountIf CovarPop CovarSamp CurrentDate CurrentTimestamp DateBin DateDiff DateTrunc DateFromParts Day DayOfMonth DayOfWeek
DayOfWeekIso DayOfYear Dayname Degrees EndsWith Exp Factorial First Floor Format FromBase64 Greatest
GroupConcat Hex Hour If IsInf IsNan JarowinklerSimilarity Kurtosis Last LastDay Least Left Length Levenshtein
Ln Log LogicalAnd LogicalOr Lower MD5 Max Median Min Minute Mode Month Monthname Nullif Pad PercentileCont
PercentileDisc Pi Pow Quantile Quarter Radians RegexpExtract RegexpFullMatch RegexpLike RegexpReplace RegrAvgx
RegrAvgy RegrCount RegrIntercept RegrR2 RegrSlope RegrSxx RegrSxy RegrSyy Repeat Replace Reverse Right Round
SHA SHA2 Second Sign Sin Sinh Skewness SplitPart Sqrt StartsWith Stddev StddevPop StddevSamp StrPosition
StrToTime Substring Sum Tan Tanh TimeFromParts TimeToStr TimeToUnix TimestampFromParts TimestampTrunc
ToBase64 ToDays Transform Translate Trim Trunc Unicode UnixToTime Upper Variance VariancePop Week WeekOfYear
Year
Case Cast TryCast Extract
""".split())

# Nodes that are not function calls: operators, literals, names and the parts of the constructs above.
OPERATOR_NODES = frozenset("""
Column Identifier Literal Null Boolean Placeholder Paren Neg Not And Or Xor
Add Sub Mul Div Mod IntDiv Pow DPipe BitwiseAnd BitwiseOr BitwiseXor BitwiseNot BitwiseLeftShift
BitwiseRightShift EQ NEQ GT GTE LT LTE NullSafeEQ NullSafeNEQ Is In Between Like ILike SimilarTo Glob Escape
If Case Cast TryCast DataType DataTypeParam Interval Var Collate RawString
Distinct Filter Where Order Ordered IgnoreNulls RespectNulls Star
Array Bracket Slice Lambda
""".split())

_WORD = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_SUBQUERY_NODES = ("Query", "Subquery", "Exists")  # reported as "holds a subquery" by the facts


def refusals(tree: "exp.Expression") -> tuple[str, ...]:
    """What `tree` holds outside the allow-list, each as a short phrase, in reading order, without repeats.

    Subqueries and parameters are not among them (the facts report those with
    their own wording); a refused node's inside is not looked at.
    """
    from sqlglot import exp

    found: list[str] = []
    stack: list[exp.Expression] = [tree]
    while stack:
        node = stack.pop()
        problem = _problem(node, exp)
        if problem is _SKIP:
            continue
        if problem is not None:
            if problem not in found:
                found.append(problem)
            continue
        stack.extend(reversed(list(node.iter_expressions())))
    return tuple(found)


_SKIP = "skip"


def _problem(node: "exp.Expression", exp) -> str | None:  # noqa: ANN001, C901 - one flat table of cases
    """Why one node is outside the allow-list (None: it is inside; _SKIP: reported elsewhere)."""
    if isinstance(node, (exp.Query, exp.Subquery, exp.Exists)):
        return _SKIP
    name = type(node).__name__
    if isinstance(node, exp.Anonymous):
        function = node.name.lower() if isinstance(node.this, str) else ""
        if function in FUNCTIONS:
            return None
        if not _WORD.match(function or "-"):
            return "a function call that is not a plain function name"
        return f"the function {function}()"
    if isinstance(node, exp.Func) and name in FUNCTION_NODES:
        return _function_detail(node, exp)
    if name in OPERATOR_NODES:
        return _operator_detail(node, exp)
    if isinstance(node, exp.Columns):
        return "COLUMNS(...)"
    if isinstance(node, exp.PositionalColumn):
        return "a positional reference (#n)"
    if isinstance(node, exp.Window):
        return "a window function (OVER)"
    if isinstance(node, exp.Func):
        shown = node.sql_name().lower() if hasattr(node, "sql_name") else name.lower()
        return f"the function {shown}()"
    if isinstance(node, exp.Parameter):
        return "a parameter other than :user"
    if isinstance(node, exp.Command):
        return "a command"
    return f"the construct {_spoken(name)}"


def _function_detail(node: "exp.Expression", exp) -> str | None:  # noqa: ANN001
    if isinstance(node, (exp.Cast, exp.TryCast)):
        return _type_problem(node.args.get("to"), exp)
    return None


def _operator_detail(node: "exp.Expression", exp) -> str | None:  # noqa: ANN001
    if isinstance(node, exp.Column):
        if not isinstance(node.this, exp.Identifier):
            return "a star outside count(*)" if isinstance(node.this, exp.Star) else "a column that is not a plain name"
        return None
    if isinstance(node, exp.Star):
        parent = node.parent
        if isinstance(parent, exp.Count) and node.arg_key == "this" and not any(node.args.values()):
            return None
        return "a star outside count(*)"
    if isinstance(node, exp.Placeholder):
        return None if isinstance(node.this, str) else _SKIP  # `?` is reported as a parameter
    if isinstance(node, exp.In):
        if any(node.args.get(key) for key in ("unnest", "field")):
            return "IN over something other than a list of values"
        return None
    if isinstance(node, exp.Var):
        return None if _WORD.match(str(node.this)) else "a keyword that is not a plain word"
    if isinstance(node, exp.DataType):
        return _type_problem(node, exp)
    return None


def _type_problem(to: "exp.Expression | None", exp) -> str | None:  # noqa: ANN001
    if to is None:
        return None
    for data_type in [to, *to.find_all(exp.DataType)]:
        if isinstance(data_type, exp.DataType) and data_type.this == exp.DataType.Type.USERDEFINED:
            return f"a cast to the type {data_type.sql(DIALECT)}, which is not a built-in type"
    return None


def _spoken(class_name: str) -> str:
    """`JSONExtract` -> `json extract` (for messages)."""
    words = re.findall(r"[A-Z]+(?![a-z])|[A-Z][a-z0-9]*|[a-z0-9]+", class_name)
    return " ".join(word.lower() for word in words) or class_name


# ---------------------------------------------------------------- rendering for the engine


class RenderError(ValueError):
    """sqlglot's rendering of an allowed tree did not read back as the same allowed tree."""


def render(tree: "exp.Expression") -> str:
    """The DuckDB text of an allowed tree, without comments; raises RenderError when it does not check itself.

    The text is parsed again: it must be one expression, pass the allow-list
    and render to the same text, so what runs is exactly what was checked.
    """
    import sqlglot
    from sqlglot import exp

    text = tree.sql(dialect=DIALECT, comments=False)
    try:
        again = sqlglot.parse_one(text, read=DIALECT, into=exp.Condition)
    except Exception as error:  # noqa: BLE001 - any failure means the text is not what was checked
        raise RenderError(f"its rendering `{text}` does not read back ({type(error).__name__})") from None
    if again is None or refusals(again) or again.find(exp.Query, exp.Subquery, exp.Exists) is not None:
        raise RenderError(f"its rendering `{text}` does not read back as the same expression")
    if again.sql(dialect=DIALECT, comments=False) != text:
        raise RenderError(f"its rendering `{text}` is not stable")
    return text
