"""Campaign (not in `make test`): generated SQL in every place a model holds SQL never acts on the machine.

    .venv/bin/python benchmarks/campaigns/sql_fuzz.py [--count 100000] [--seed 16] [--every 1]

For each text of the seeded corpus (tests/sqlcorpus.py: every Unicode line
break after `--`, comments nested and unclosed, quotes, dollar quoting,
escapes, parameters, table functions, hostile tails writing files, attaching
databases, installing extensions, running a second statement), the text is
put in one of the five places of a tiny model (measure `expr`, measure
`where`, role filter, report `where`, variant option `where`) in a temporary
repository, then:

1. `check` runs in-process (load + check_model): any exception is a failure;
2. when the check finds no error, `modeldiff eval` runs end to end
   (cli.main, in-process), with every statement that reaches DuckDB recorded.

Failures: a traceback; an exit code outside 0-3; the sentinel file outside
the data folder read (its token in any output) or changed; any file written
outside the data folder; a statement that reached DuckDB holding a second
statement or a file, extension, attach or settings command (read from
sqlglot's tokens, not from strings); eval exiting 0 for a model that check
refused. Prints counts and the first failures; exit 1 when there is any.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import sys
import tempfile
import time
import traceback
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import sqlcorpus  # noqa: E402

from modeldiff import check, data, load  # noqa: E402
from modeldiff.cli import main  # noqa: E402

SECRET = "sentinel-campaign-7d2a-never-printed"
TRIPS = "trip_key,fare,status,rider\n1,2.50,completed,a@x\n2,1.25,cancelled,b@x\n3,4.00,completed,a@x\n"
PLACES = ("expr", "where", "role", "report", "variant")
FORBIDDEN_WORDS = {"COPY", "ATTACH", "DETACH", "INSTALL", "LOAD", "PRAGMA", "SET", "EXPORT", "IMPORT", "CALL"}
FORBIDDEN_FUNCTIONS = {"read_text", "read_csv", "read_csv_auto", "read_blob", "read_json", "glob", "query",
                       "query_table", "write_log", "current_setting", "getvariable", "setseed", "nextval"}


def model_with(place: str, text: str) -> dict:
    measures = {"trip_count": {"table": "trips", "expr": "count(*)"},
                "fare_revenue": {"table": "trips", "expr": "sum(fare)", "where": "status = 'completed'"}}
    model = {
        "model": "fuzz", "format": 1,
        "tables": {"trips": {"kind": "fact", "key": "trip_key", "source": "data/trips.parquet",
                             "columns": {"trip_key": "integer", "fare": "decimal", "status": "text",
                                         "rider": "text"}}},
        "measures": measures,
        "roles": {"riders": {"filters": {"trips": "rider = :user"}}},
        "variants": {"scope": {"default": "all", "options": {"all": {}, "done": {}}}},
        "reports": {"overview": {"measures": ["trip_count", "fare_revenue"], "by": ["trips.status"]}},
    }
    if place == "expr":
        measures["fare_revenue"]["expr"] = text
    elif place == "where":
        measures["fare_revenue"]["where"] = text
    elif place == "role":
        model["roles"]["riders"]["filters"]["trips"] = text
        model["reports"]["overview"]["role"] = "riders"
    elif place == "report":
        model["reports"]["overview"]["where"] = {"trips": text}
    else:
        model["variants"]["scope"]["options"]["all"]["where"] = {"trips": text}
    return model


class Recorder:
    """Every statement `data.Database` hands to DuckDB during one eval."""

    def __init__(self) -> None:
        self.statements: list[str] = []
        self.original = data.Database._execute

    def __enter__(self) -> "Recorder":
        recorder = self

        def execute(db, sql, params):  # noqa: ANN001
            recorder.statements.append(sql)
            return recorder.original(db, sql, params)

        data.Database._execute = execute
        return self

    def __exit__(self, *exc) -> None:
        data.Database._execute = self.original


def statement_problems(statements: list[str]) -> list[str]:
    import sqlglot
    from sqlglot.tokens import TokenType

    problems = []
    for statement in statements:
        try:
            tokens = sqlglot.tokenize(statement, read="duckdb")
        except Exception as error:  # noqa: BLE001
            problems.append(f"a statement sqlglot cannot tokenize ({type(error).__name__}): {statement[:120]!r}")
            continue
        for index, token in enumerate(tokens):
            if token.token_type == TokenType.SEMICOLON and index != len(tokens) - 1:
                problems.append(f"a second statement: {statement[:160]!r}")
            if token.comments:
                problems.append(f"a comment reached DuckDB: {statement[:160]!r}")
            word = token.text.upper()
            if token.token_type not in (TokenType.STRING, TokenType.IDENTIFIER) or not token.text:
                if word in FORBIDDEN_WORDS and index == 0:
                    problems.append(f"a {word} statement: {statement[:160]!r}")
            called = index + 1 < len(tokens) and tokens[index + 1].token_type == TokenType.L_PAREN
            if token.text.lower() in FORBIDDEN_FUNCTIONS and token.token_type != TokenType.STRING and called:
                problems.append(f"{token.text}() reached DuckDB: {statement[:160]!r}")  # (GLOB the operator is fine)
    return problems


def write_parquet(csv: Path, parquet: Path) -> None:
    import duckdb

    connection = duckdb.connect()
    connection.execute(f"COPY (SELECT * FROM read_csv('{csv}', header = true)) TO '{parquet}' (FORMAT parquet)")
    connection.close()


def engine_statements(model) -> list[str]:  # noqa: ANN001
    """The statements eval would hand to DuckDB for the model's report, built without running them."""
    from modeldiff import engine
    from modeldiff.errors import ModeldiffError

    try:
        query = engine.report_query(model, "overview", user="a@x")
    except ModeldiffError:
        return []
    return [query.sql, *[s for s in query.steps if isinstance(s, str)], *query.cleanup]


def snapshot(folder: Path) -> dict[str, tuple[int, int]]:
    return {str(p): (p.stat().st_size, p.stat().st_mtime_ns) for p in sorted(folder.rglob("*"))}


def run_eval(path: Path) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = main(["eval", str(path), "--user", "a@x", "--format", "json"], stdout=out, stderr=err)
    return code, out.getvalue(), err.getvalue()


def campaign(count: int, seed: int, every: int) -> int:
    started = time.perf_counter()
    counts = {"texts": 0, "check errors": 0, "check clean": 0, "evaluated": 0, "eval exit 0": 0, "eval exit 2": 0}
    failures: list[str] = []
    with tempfile.TemporaryDirectory(prefix="sql-fuzz-") as temp:
        base = Path(temp)
        outside = base / "outside"
        outside.mkdir()
        sentinel = outside / "secret.txt"
        sentinel.write_text(SECRET + "\n")
        repo = base / "repo"
        (repo / "data").mkdir(parents=True)
        (repo / ".git").mkdir()  # the model's repository: a data path may not leave it
        (repo / "data" / "trips.csv").write_text(TRIPS)
        write_parquet(repo / "data" / "trips.csv", repo / "data" / "trips.parquet")
        model_path = repo / "fuzz.model.yaml"
        before = snapshot(outside)
        for index, raw in enumerate(sqlcorpus.texts(seed, count)):
            text = raw.replace(sqlcorpus.SENTINEL, str(sentinel)).replace(sqlcorpus.OUTSIDE, str(outside))
            place = PLACES[index % len(PLACES)]
            counts["texts"] += 1
            if counts["texts"] % 10000 == 0:
                print(f"  {counts['texts']} texts, {len(failures)} failure(s), {time.perf_counter() - started:.0f} s",
                      flush=True)
            content = json.dumps(model_with(place, text))
            try:
                result = load.load_files([("fuzz.model.yaml", content)])
                findings = check.check_model(result.model, result.findings)
            except Exception:  # noqa: BLE001
                failures.append(f"check raised on {text!r} in {place}:\n{traceback.format_exc()}")
                continue
            errors = [f for f in findings if f.severity == "error"]
            counts["check errors" if errors else "check clean"] += 1
            if errors and index % (every * 20):
                continue  # a refused model is evaluated now and then, to see eval refuse it too
            if not errors and index % every:
                counts["built, not run"] = counts.get("built, not run", 0) + 1
                problems = statement_problems(engine_statements(result.model))
                if problems:
                    failures.append(f"{'; '.join(problems)}: {text!r} in {place} (query built, not run)")
                continue
            model_path.write_text(content)
            counts["evaluated"] += 1
            try:
                with Recorder() as recorder:
                    code, out, err = run_eval(model_path)
            except BaseException:  # noqa: BLE001
                failures.append(f"eval raised on {text!r} in {place}:\n{traceback.format_exc()}")
                continue
            counts[f"eval exit {code}"] = counts.get(f"eval exit {code}", 0) + 1
            problems = []
            if code not in (0, 1, 2, 3):
                problems.append(f"exit code {code}")
            if "Traceback" in err:
                problems.append("a traceback")
            if SECRET in out or SECRET in err:
                problems.append("the sentinel file was read")
            if errors and code == 0:
                problems.append("eval ran a model that check refused")
            if snapshot(outside) != before:
                problems.append(f"files changed outside the data folder: {sorted(set(snapshot(outside)) ^ set(before))}")
                for extra in outside.iterdir():
                    if extra != sentinel:
                        extra.unlink() if extra.is_file() else None
                sentinel.write_text(SECRET + "\n")
                before = snapshot(outside)
            problems += statement_problems(recorder.statements)
            if problems:
                failures.append(f"{'; '.join(problems)}: {text!r} in {place} (exit {code}, {err.strip()[:200]})")
    print(json.dumps(counts, indent=1))
    print(f"{len(failures)} failure(s) in {time.perf_counter() - started:.0f} s")
    for failure in failures[:20]:
        print("-", failure)
    return 1 if failures else 0


def main_(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=100_000)
    parser.add_argument("--seed", type=int, default=16)
    parser.add_argument("--every", type=int, default=5,
                        help="run eval on every Nth model that passes check (the others: the engine's statements "
                             "are built and read, not run)")
    args = parser.parse_args(argv)
    return campaign(args.count, args.seed, args.every)


if __name__ == "__main__":
    sys.exit(main_())
