"""Issue 16, point 1 and the SQL items of point 8: SQL from a model never acts on the machine that checks it.

A model's SQL sits in five places (a measure's `expr` and `where`, a role's
filters, a report's `where`, a variant option's `where`). Each case below hides
hostile SQL behind a `--` comment ended by one of the line breaks Unicode
knows, in each place, and asserts the property that matters: either `check`
reports an error (and `eval` refuses the model), or the text runs as what the
check read, so the hostile part never reaches DuckDB as executable text (the
sentinel file outside the data folder is not read, nothing is written, no
second statement runs). The line breaks that do end a `--` comment in DuckDB
and sqlglot (`\\n`, `\\r`, `\\r\\n`; from running both, and the PostgreSQL
scanner DuckDB's is built from: `non_newline [^\\n\\r]`) must give a check
error.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from clikit import run as _run

from modeldiff import engine, load
from modeldiff.errors import ModeldiffError

SECRET = "sentinel-4f1c9e-never-printed"
BREAKS = ["\n", "\r", "\r\n", "\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x85", "\u2028", "\u2029"]
ENDING_BREAKS = {"\n", "\r", "\r\n"}  # a `--` comment ends there in DuckDB and sqlglot
HOSTILE_WORDS = ("read_text", "read_csv", "glob(", "copy", "attach", "install", "pragma", "pwned")

TRIPS = "trip_key,fare,status,rider\n1,2.50,completed,a@x\n2,1.25,cancelled,b@x\n3,4.00,completed,a@x\n"


def _payloads(secret: Path, out: Path) -> dict[str, str]:
    """Hostile SQL to follow the comment, as a value (for expr) and as a condition (for where)."""
    return {
        "read": f"(select max(content) from read_text('{secret}'))",
        "glob": "(select count(*) from glob('/etc/*'))",
        "second": f"1); COPY (select 1 as a) TO '{out}'; select (1",
        "attach": f"1); ATTACH '{out}' AS pwned; CREATE TABLE pwned.t AS SELECT 1; select (1",
        "install": "1); INSTALL httpfs; PRAGMA enable_profiling; select (1",
    }


def _model(place: str, text_of) -> dict:  # noqa: ANN001
    """A tiny model with the hostile text in one place (text_of(kind) gives the text for 'value' or 'condition')."""
    measures = {"trip_count": {"table": "trips", "expr": "count(*)"},
                "fare_revenue": {"table": "trips", "expr": "sum(fare)", "where": "status = 'completed'"}}
    model = {
        "model": "hostile", "format": 1,
        "tables": {"trips": {"kind": "fact", "key": "trip_key", "source": "data/trips.csv",
                             "columns": {"trip_key": "integer", "fare": "decimal", "status": "text", "rider": "text"}}},
        "measures": measures,
        "roles": {"riders": {"filters": {"trips": "rider = :user"}}},
        "variants": {"scope": {"default": "all", "options": {"all": {}, "done": {"where": {"trips": "status = 'completed'"}}}}},
        "reports": {"overview": {"measures": ["trip_count", "fare_revenue"], "by": ["trips.status"]}},
    }
    if place == "expr":
        measures["fare_revenue"]["expr"] = text_of("value")
    elif place == "where":
        measures["fare_revenue"]["where"] = text_of("condition")
    elif place == "role":
        model["roles"]["riders"]["filters"]["trips"] = text_of("condition")
        model["reports"]["overview"]["role"] = "riders"
    elif place == "report":
        model["reports"]["overview"]["where"] = {"trips": text_of("condition")}
    elif place == "variant":
        model["variants"]["scope"]["options"]["all"]["where"] = {"trips": text_of("condition")}
    return model


@pytest.fixture
def site(tmp_path: Path) -> dict[str, Path]:
    outside = tmp_path / "outside"
    outside.mkdir()
    secret = outside / "secret.txt"
    secret.write_text(SECRET + "\n")
    repo = tmp_path / "repo"
    (repo / "data").mkdir(parents=True)
    (repo / "data" / "trips.csv").write_text(TRIPS)
    return {"secret": secret, "out": outside / "written.csv", "repo": repo, "outside": outside}


PLACES = ["expr", "where", "role", "report", "variant"]


def _text(kind: str, brk: str, payload: str) -> str:
    if kind == "value":
        return f"sum(fare) --note{brk}+ {payload}"
    return f"status = 'completed' --note{brk}or {payload} = 1"


@pytest.mark.parametrize("brk", BREAKS, ids=[f"U+{ord(b[-1]):04X}" + ("x2" if len(b) > 1 else "") for b in BREAKS])
@pytest.mark.parametrize("place", PLACES)
def test_sql_behind_a_comment_never_runs(site, place, brk):
    for name, payload in _payloads(site["secret"], site["out"]).items():
        model = _model(place, lambda kind: _text(kind, brk, payload))
        path = site["repo"] / "hostile.model.yaml"
        path.write_text(json.dumps(model, ensure_ascii=True))
        checked, check_out, check_err = _run("check", path, "--format", "json")
        assert checked in (0, 1, 3) and "Traceback" not in check_err, (name, check_err)
        if brk in ENDING_BREAKS:
            assert checked == 3, f"{name}: hostile SQL after a comment ended by {brk!r} passed check"
        code, out, err = _run("eval", path, "--user", "a@x")
        assert code in (0, 2), (name, code, err)
        assert SECRET not in out + err, f"{name} in {place} read the sentinel file"
        assert not site["out"].exists(), f"{name} in {place} wrote a file"
        assert sorted(p.name for p in site["outside"].iterdir()) == ["secret.txt"]
        if checked == 3:
            assert code == 2 and out == "", "a model with errors must be refused by eval"
        assert len(err.strip().splitlines()) <= 1


@pytest.mark.parametrize("brk", BREAKS, ids=[f"U+{ord(b[-1]):04X}" + ("x2" if len(b) > 1 else "") for b in BREAKS])
@pytest.mark.parametrize("place", PLACES)
def test_the_engine_never_writes_hostile_sql_into_a_query(site, place, brk):
    # Past the check: the engine itself, given the model directly, refuses or drops the hostile part.
    for name, payload in _payloads(site["secret"], site["out"]).items():
        model = _model(place, lambda kind: _text(kind, brk, payload))
        path = site["repo"] / "hostile.model.yaml"
        path.write_text(json.dumps(model, ensure_ascii=True))
        parsed = load.load_path(path).model
        try:
            query = engine.report_query(parsed, "overview", user="a@x")
        except ModeldiffError as error:
            assert "\n" not in str(error)
            continue
        statements = [query.sql, *[s for s in query.steps if isinstance(s, str)], *query.cleanup]
        text = "\n".join(statements).lower()
        for word in HOSTILE_WORDS:
            assert word not in text, f"{name} in {place}: {word} reached the SQL"
        assert "--" not in text and "/*" not in text, "a comment of the model reached the SQL"


# ---------------------------------------------------------------- point 8: smaller SQL items


def _small_model(site, expr: str = "sum(fare)", where: str | None = "status = 'completed'") -> Path:
    model = _model("none", lambda kind: "")
    model["measures"]["fare_revenue"] = {"table": "trips", "expr": expr, **({"where": where} if where else {})}
    path = site["repo"] / "small.model.yaml"
    path.write_text(json.dumps(model))
    return path


def test_a_trailing_comment_in_a_where_works_in_eval_as_check_says(site):
    path = _small_model(site, where="status = 'completed' -- only paid trips")
    assert _run("check", path)[0] == 0
    code, out, err = _run("eval", path, "--format", "json")
    assert (code, err) == (0, "")
    rows = json.loads(out)["rows"]
    assert ["completed", 2, 6.5] in rows


def test_a_where_without_a_comment_gives_the_same_numbers(site):
    path = _small_model(site, where="status = 'completed'")
    code, out, _ = _run("eval", path, "--format", "json")
    assert code == 0 and ["completed", 2, 6.5] in json.loads(out)["rows"]


@pytest.mark.parametrize("expr", ["count(COLUMNS(*))", "sum(fare) + #1", "max(read_text('x'))", "sum(fare) over ()",
                                  "count(trips.*)", "sum(getvariable('x'))", "max(current_setting('threads'))",
                                  "sum(fare) + nextval('s')", "count(*) + write_log('x')"])
def test_constructs_outside_the_allow_list_fail_check_and_eval(site, expr):
    path = _small_model(site, expr=expr)
    code, out, _ = _run("check", path, "--format", "json")
    assert code == 3
    messages = [f["message"] for f in json.loads(out)["findings"] if f["severity"] == "error"]
    assert messages and any("fare_revenue" in m for m in messages), messages
    code, out, err = _run("eval", path)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("expr", ["count(*)", "sum(fare) + 1", "count(distinct rider)", "max(length(rider))",
                                  "sum(case when status = 'completed' then fare else 0 end)", "median(fare)",
                                  "string_agg(rider, ',' order by rider)", "round(avg(fare), 2)",
                                  "sum(coalesce(fare, 0)) / nullif(count(*), 0)", "max(cast(fare as double))"])
def test_constructs_inside_the_allow_list_pass_check_and_eval(site, expr):
    path = _small_model(site, expr=expr)
    assert _run("check", path)[0] == 0
    code, out, err = _run("eval", path)
    assert (code, err) == (0, "")


@pytest.mark.parametrize("place, text, construct", [
    ("expr", "count(COLUMNS(*))", "COLUMNS(...)"),
    ("expr", "sum(fare) + #1", "a positional reference (#n)"),
    ("where", "fare > (select 1)", "a subquery"),
    ("role", "rider = current_setting('home_directory')", "the function current_setting()"),
    ("report", "status in (select content from read_text('x'))", "a subquery"),
    ("variant", "glob('x') is not null", "the function glob()"),
])
def test_the_engine_refuses_before_any_query_naming_the_item_and_the_construct(site, place, text, construct):
    # The engine does not rely on check having run: given the model directly, it refuses with one line.
    model = _model(place, lambda kind: text)
    path = site["repo"] / "refused.model.yaml"
    path.write_text(json.dumps(model))
    parsed = load.load_path(path).model
    with pytest.raises(ModeldiffError) as raised:
        engine.report_query(parsed, "overview", user="a@x")
    message = str(raised.value)
    assert construct in message and "\n" not in message
    item = {"expr": "measure fare_revenue", "where": "measure fare_revenue's where", "role": "role riders",
            "report": "report overview", "variant": "option all of variant scope"}[place]
    assert message.startswith(item), message


def test_the_engine_accepts_the_same_model_without_the_construct(site):
    model = _model("expr", lambda kind: "sum(fare) + 1")
    path = site["repo"] / "accepted.model.yaml"
    path.write_text(json.dumps(model))
    query = engine.report_query(load.load_path(path).model, "overview", user="a@x")
    assert "SUM(fare) + 1" in query.sql
