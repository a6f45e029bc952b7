"""Benchmark: the engine's report shapes inside PostgreSQL, each against hand-written SQL for the same answer.

    python benchmarks/warehouse_shapes.py              # scale factor 0.1
    python benchmarks/warehouse_shapes.py --sf 1       # TPC-H-shaped SF 1 (copying 6 million lines takes minutes)

The shapes, their data and their hand-written SQL are benchmarks/engine_shapes.py's. A throw-away
PostgreSQL server is started (tests/serverkit.py: initdb in a temporary folder, 127.0.0.1 only), the
Parquet data is copied in (with ANALYZE), and each shape runs through `eval`'s path (`--db postgresql://`:
rendered by sqlglot, read-only transaction) and as the hand-written SQL (transpiled from DuckDB's
dialect by sqlglot) on the same server; rounds interleave them and the best of each counts. Every answer
must equal the hand-written one (exit 1 otherwise). Prints the ratios; docs/performance.md keeps them.
Not a timed test: numbers are meaningful only on an otherwise idle machine.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests"), str(ROOT / "benchmarks")]

import engine_shapes as S  # noqa: E402


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--sf", type=float, default=0.1)
    p.add_argument("--rounds", type=int, default=3)
    p.add_argument("--cache", type=Path, default=Path.home() / ".cache" / "modeldiff-bench")
    args = p.parse_args(argv)
    import sqlglot

    import serverkit
    import warehousekit as W
    from modeldiff.data import Database, open_database
    from modeldiff.load import load_path

    folder = S.data_dir(args.sf, args.cache.expanduser())
    model = load_path(S.MODEL).model
    server = serverkit.start_postgres()
    try:
        start = time.perf_counter()
        with Database.open(model, str(S.MODEL), data_dir=str(folder)) as duck:
            W.create_database(server, "shapes")
            W.to_postgres(duck.connection, sorted(model.tables), server, "shapes")
        with server.connect("shapes") as admin:
            admin.execute("ANALYZE")
        serverkit.grant_reader(server, "shapes")
        S.say(f"load into PostgreSQL: {time.perf_counter() - start:.0f} s")
        ratios = {}
        with open_database(model, db_url=server.reader_url("shapes")) as db, server.connect("shapes") as hand_db:
            hand_db.read_only = True
            for shape, sql in S.HAND.items():
                hand_sql = sqlglot.transpile(sql, read="duckdb", write="postgres")[0]
                engine_times, hand_times = [], []
                for _ in range(args.rounds):
                    t0 = time.perf_counter()
                    ours = S.engine_answer(model, db, shape)
                    t1 = time.perf_counter()
                    theirs = hand_db.execute(hand_sql).fetchall()
                    t2 = time.perf_counter()
                    engine_times.append(t1 - t0)
                    hand_times.append(t2 - t1)
                if S.normal(ours) != S.normal([tuple(r) for r in theirs]):
                    S.say(f"answers differ: {shape}\n  engine: {S.normal(ours)}\n  hand:   {S.normal(theirs)}")
                    return 1
                engine, hand = min(engine_times), min(hand_times)
                ratios[shape] = engine / hand if hand > 0 else float("inf")
                S.say(f"shape {shape}: answers equal; engine {engine:.3f} s, hand-written {hand:.3f} s, "
                      f"ratio {ratios[shape]:.2f}x")
        S.say(f"PostgreSQL ratios at scale factor {S.sf_name(args.sf)}: "
              + ", ".join(f"{k} {v:.2f}x" for k, v in ratios.items()))
    finally:
        server.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
