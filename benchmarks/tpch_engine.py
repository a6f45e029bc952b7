"""Benchmark: the engine on TPC-H data, against hand-written DuckDB SQL for the same answer.

    python benchmarks/tpch_engine.py                  # scale factor 1 (about 6 million lineitem rows)
    python benchmarks/tpch_engine.py --sf 10 --memory # scale factor 10, and the peak memory of the process
    python benchmarks/tpch_engine.py --smoke          # scale factor 0.01, the committed test data, one repeat

The report: revenue, sum_qty and count_order (measures on lineitem in
tests/fixtures/tpch.model.yaml) grouped by customer.c_mktsegment, a column
two links away from lineitem (lineitem -> orders -> customer). In the model's
default setting customer reaches lineitem by that route only, so the answer
is the one of three plain joins. The engine's time is `report_query` plus
`Database.run`, best of `--repeat`; the hand-written SQL runs on the same
connection and the same loaded tables, best of `--repeat`, interleaved with
the engine's runs. Both answers must be equal row for row (exit 1 otherwise).
Goal (issue tracker): engine time <= 1.2x the hand-written SQL's at scale
factor 1; scale factor 10 read from Parquet stays well within the machine.

Data: scale factor 0.01 is read from tests/fixtures/tpch/. Any other scale
factor is read from `<cache>/tpch-sf<N>/` (default cache
~/.cache/modeldiff-bench), made when absent: a throw-away virtual environment
in the cache gets duckdb 1.5.5 and its tpch extension from the package
registry (the extension does not load into the DuckDB 2 the project runs on),
runs `CALL dbgen(sf=N)` (DuckDB's port of the TPC-H data generator) and
writes each table to Parquet (zstd), as tests/fixtures/tpch/make_tpch_data.py
did for the test data.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
FIXTURES = ROOT / "tests" / "fixtures"
MODEL = FIXTURES / "tpch.model.yaml"
FIXTURE_SF = 0.01
GOAL = 1.2
TABLES = ("region", "nation", "supplier", "customer", "part", "partsupp", "orders", "lineitem")
GENERATOR_DUCKDB = "1.5.5"  # the newest DuckDB the registry's tpch extension package loads into
GENERATOR_PACKAGES = (f"duckdb=={GENERATOR_DUCKDB}", f"duckdb-extension-tpch=={GENERATOR_DUCKDB}")

REPORT = "bench_revenue_by_segment"
MEASURES = ("revenue", "sum_qty", "count_order")
BY = ("customer.c_mktsegment",)

# The same answer by hand: TPC-H's foreign keys as inner joins (every lineitem row has its order and
# every order its customer, so no row falls in no group), the measures' expressions from the model.
HAND_SQL = """
SELECT c.c_mktsegment,
       sum(l.l_extendedprice * (1 - l.l_discount)) AS revenue,
       sum(l.l_quantity) AS sum_qty,
       count(*) AS count_order
FROM lineitem AS l
JOIN orders AS o ON l.l_orderkey = o.o_orderkey
JOIN customer AS c ON o.o_custkey = c.c_custkey
GROUP BY c.c_mktsegment
ORDER BY c.c_mktsegment
"""


def say(text: str) -> None:
    print(text, flush=True)


def sf_name(sf: float) -> str:
    return format(sf, "g")


# --------------------------------------------------------------------------- making the data


def data_dir(sf: float, cache: Path) -> Path:
    """The folder holding <table>.parquet at scale factor `sf`; generated when absent."""
    if sf == FIXTURE_SF:
        say(f"data: scale factor {sf_name(sf)}, the committed test data in {FIXTURES / 'tpch'}")
        return FIXTURES / "tpch"
    target = cache / f"tpch-sf{sf_name(sf)}"
    if all((target / f"{t}.parquet").is_file() for t in TABLES):
        say(f"data: scale factor {sf_name(sf)} from {target} (made earlier)")
        return target
    python = generator_python(cache)
    partial = cache / f"tpch-sf{sf_name(sf)}.partial"
    shutil.rmtree(partial, ignore_errors=True)
    partial.mkdir(parents=True)
    say(f"data: generating scale factor {sf_name(sf)} into {target} (dbgen in DuckDB {GENERATOR_DUCKDB}, then Parquet)")
    start = time.perf_counter()
    subprocess.run([str(python), str(Path(__file__).resolve()), "--generate-into", str(partial), "--sf", str(sf)],
                   check=True)
    shutil.rmtree(target, ignore_errors=True)
    os.replace(partial, target)
    say(f"data: generated in {time.perf_counter() - start:.0f} s")
    return target


def generator_python(cache: Path) -> Path:
    """The interpreter of the throw-away environment holding DuckDB 1.5.5 and its tpch extension."""
    venv = cache / f"venv-duckdb-{GENERATOR_DUCKDB}"
    python = venv / "bin" / "python"
    probe = [str(python), "-c", "import duckdb, duckdb_extension_tpch"]
    if python.exists() and subprocess.run(probe, capture_output=True).returncode == 0:
        return python
    say(f"data: creating a throw-away environment {venv} with {' and '.join(GENERATOR_PACKAGES)}")
    start = time.perf_counter()
    shutil.rmtree(venv, ignore_errors=True)
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
    subprocess.run([str(python), "-m", "pip", "install", "--quiet", "--disable-pip-version-check",
                    *GENERATOR_PACKAGES], check=True)
    say(f"data: environment ready in {time.perf_counter() - start:.0f} s")
    return python


def generate_into(folder: Path, sf: float) -> int:
    """Run inside the throw-away environment: dbgen(sf) into a database file, then each table to Parquet."""
    import glob

    import duckdb

    found = glob.glob(os.path.join(os.path.dirname(duckdb.__file__), "..", "duckdb_extension_tpch",
                                   "extensions", "*", "tpch.duckdb_extension"))
    if not found:
        print("the tpch extension package holds no tpch.duckdb_extension", file=sys.stderr)
        return 1
    scratch = folder / "_dbgen.duckdb"
    con = duckdb.connect(str(scratch))  # on disk, so scale factor 10 need not fit in memory
    con.execute(f"LOAD '{found[0]}'")
    start = time.perf_counter()
    con.execute(f"CALL dbgen(sf={sf})")
    print(f"data: dbgen(sf={sf_name(sf)}) took {time.perf_counter() - start:.0f} s", flush=True)
    for table in TABLES:
        start = time.perf_counter()
        path = folder / f"{table}.parquet"
        con.execute(f"COPY (SELECT * FROM {table}) TO '{path}' (FORMAT parquet, COMPRESSION zstd)")
        rows = con.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
        print(f"data: {table}.parquet, {rows} rows, {time.perf_counter() - start:.1f} s", flush=True)
    con.close()
    for leftover in folder.glob("_dbgen.duckdb*"):
        leftover.unlink()
    return 0


# --------------------------------------------------------------------------- the benchmark


def bench_model():
    """The TPC-H fixture model with the benchmark's report added."""
    from dataclasses import replace

    from modeldiff.load import load_path
    from modeldiff.model import Report

    loaded = load_path(MODEL)
    if loaded.model is None:
        raise SystemExit(f"{MODEL}: cannot load the model")
    model = loaded.model
    report = Report(name=REPORT, measures=MEASURES, by=BY, owner="benchmark")
    return replace(model, reports={**model.reports, REPORT: report})


def engine_answer(model, db) -> list[tuple]:
    from modeldiff.engine import report_query

    return db.run(report_query(model, REPORT), f"report {REPORT}")


def hand_answer(db) -> list[tuple]:
    return db.connection.execute(HAND_SQL).fetchall()


def comparable(engine_rows: list[tuple]) -> list[tuple]:
    """The engine's rows without the `_no_match` column; a (no match) row stays, marked, so it cannot match."""
    return [tuple(row[:-1]) if not row[-1] else ("(no match)",) + tuple(row[1:-1]) for row in engine_rows]


def peak_rss_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 / 1024  # ru_maxrss is in KiB on Linux


def timed(fn) -> tuple[float, object]:
    start = time.perf_counter()
    out = fn()
    return time.perf_counter() - start, out


def explain(model, db, path: Path) -> None:
    """EXPLAIN ANALYZE of the engine's query and of the hand-written SQL, into one text file."""
    from modeldiff.engine import report_query

    query = report_query(model, REPORT)
    parts = []
    for label, sql in (("engine", query.sql), ("hand-written", HAND_SQL)):
        plan = db.connection.execute("EXPLAIN ANALYZE " + sql).fetchall()
        parts.append(f"==== {label}\n{sql}\n\n" + "\n".join(str(row[-1]) for row in plan))
    path.write_text("\n\n".join(parts) + "\n", encoding="utf-8")
    say(f"explain: written to {path}")


def run(sf: float, cache: Path, repeat: int, memory: bool, explain_to: Path | None) -> int:
    sys.path.insert(0, str(ROOT))
    from modeldiff.data import Database

    folder = data_dir(sf, cache)
    model = bench_model()
    start = time.perf_counter()
    with Database.open(model, str(MODEL), data_dir=str(folder)) as db:
        counts = db.table_counts()
        say(f"load: Database.open read {counts['lineitem']} lineitem rows (all 8 tables, keys checked) "
            f"in {time.perf_counter() - start:.1f} s")
        loaded_peak = peak_rss_gib()
        engine_times, hand_times = [], []
        engine_rows = hand_rows = None
        for _ in range(repeat):
            spent, engine_rows = timed(lambda: engine_answer(model, db))
            engine_times.append(spent)
            spent, hand_rows = timed(lambda: hand_answer(db))
            hand_times.append(spent)
        ours, theirs = comparable(engine_rows), [tuple(row) for row in hand_rows]
        if ours != theirs:
            say(f"answers differ:\n  engine:       {ours}\n  hand-written: {theirs}")
            return 1
        say(f"answers equal: {len(ours)} rows ({', '.join(BY)}; {', '.join(MEASURES)}), no (no match) row")
        engine, hand = min(engine_times), min(hand_times)
        say(f"engine (report_query + Database.run): best {engine:.3f} s of {repeat}")
        say(f"hand-written SQL:                     best {hand:.3f} s of {repeat}")
        ratio = engine / hand if hand > 0 else float("inf")
        if sf == 1:
            goal = f"goal <= {GOAL}x: {'met' if ratio <= GOAL else 'NOT met'}"
        else:
            goal = f"the goal, <= {GOAL}x, is set at scale factor 1"
        say(f"ratio engine / hand-written SQL at scale factor {sf_name(sf)}: {ratio:.2f}x ({goal})")
        if explain_to is not None:
            explain(model, db, explain_to)
        if memory:
            limit, threads = (db.connection.execute(f"SELECT current_setting('{name}')").fetchone()[0]
                              for name in ("memory_limit", "threads"))
            say(f"memory: peak RSS {peak_rss_gib():.2f} GiB (ru_maxrss, the whole process: loading and the runs; "
                f"{loaded_peak:.2f} GiB after loading); DuckDB memory_limit {limit}, threads {threads}")
    return 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sf", type=float, default=1.0, help="TPC-H scale factor (default 1; 0.01 is the test data)")
    p.add_argument("--repeat", type=int, default=3, help="runs of each query; the best counts (default 3)")
    p.add_argument("--memory", action="store_true", help="print the process's peak memory and DuckDB's limit")
    p.add_argument("--smoke", action="store_true", help="scale factor 0.01 from the test data, one repeat")
    p.add_argument("--cache", type=Path, default=Path.home() / ".cache" / "modeldiff-bench",
                   help="where generated data and the generator's environment live")
    p.add_argument("--explain", type=Path, metavar="FILE", help="write EXPLAIN ANALYZE of both queries to FILE")
    p.add_argument("--generate-into", type=Path, help=argparse.SUPPRESS)  # inside the throw-away environment
    args = p.parse_args(argv)
    if args.sf <= 0:
        p.error("--sf must be positive")
    if args.generate_into is not None:
        return generate_into(args.generate_into, args.sf)
    if args.smoke:
        args.sf, args.repeat = FIXTURE_SF, 1
    return run(args.sf, args.cache.expanduser(), max(1, args.repeat), args.memory, args.explain)


if __name__ == "__main__":
    sys.exit(main())
