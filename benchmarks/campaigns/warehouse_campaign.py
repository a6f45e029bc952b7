"""Campaign (outside `make test`): every random report gives the same rows on DuckDB and on PostgreSQL (and Spark).

    python benchmarks/campaigns/warehouse_campaign.py [--seeds 300] [--first 0] [--spark 0]

Starts a throw-away PostgreSQL server (tests/serverkit.py: initdb in a temporary folder, 127.0.0.1
only), loads each seeded random model's data (tests/randmodel.py) into it and compares every report,
for every viewer, with DuckDB's answer (floats to 9 significant digits). `--spark N` also compares the
first N seeds on a local Spark session (slow: seconds per query). The test suite runs a few seeds of
the same comparison (tests/test_warehouse_postgres.py, tests/test_warehouse_spark.py).
Prints the number of reports compared and exits 1 on the first difference, with the seed.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]

import randmodel as R  # noqa: E402
import serverkit  # noqa: E402
import warehousekit as W  # noqa: E402
from test_warehouse_postgres import report_rows  # noqa: E402

from modeldiff.data import open_database  # noqa: E402


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=300)
    parser.add_argument("--first", type=int, default=0)
    parser.add_argument("--spark", type=int, default=0)
    args = parser.parse_args()
    server = serverkit.start_postgres()
    compared = 0
    try:
        for seed in range(args.first, args.first + args.seeds):
            case = R.generate(seed)
            model = R.load_model(case.doc)
            with R.database(model, case.rows) as duck:
                W.create_database(server, "campaign")
                W.to_postgres(duck.connection, sorted(model.tables), server, "campaign")
                serverkit.grant_reader(server, "campaign")
                targets = [("postgresql", dict(db_url=server.reader_url("campaign")))]
                if seed - args.first < args.spark:
                    folder = W.to_parquet(duck.connection, sorted(model.tables),
                                          Path(tempfile.mkdtemp(prefix=f"campaign{seed}-")))
                    targets.append(("spark", dict(db_url="spark:local[1]", data_dir=str(folder))))
                for kind, where in targets:
                    with open_database(model, **where) as db:
                        for name, report in model.reports.items():
                            for user in R.viewers(case.doc, report.role):
                                ours, theirs = report_rows(model, duck, name, user), report_rows(model, db, name, user)
                                compared += 1
                                if ours != theirs:
                                    print(f"seed {seed} report {name} user {user} on {kind}: {ours} != {theirs}")
                                    return 1
            if (seed + 1) % 25 == 0:
                print(f"{seed + 1 - args.first} seeds, {compared} reports equal", flush=True)
    finally:
        server.stop()
        serverkit.stop_spark()
    print(f"{args.seeds} seeds, {compared} reports equal on DuckDB and the servers")
    return 0


if __name__ == "__main__":
    sys.exit(main())
