"""Report conditions against SQL's GROUP BY ... HAVING: N seeded cases (tests/test_conditions.having_case).

    .venv/bin/python benchmarks/campaigns/having_campaign.py            # 2,000 cases
    .venv/bin/python benchmarks/campaigns/having_campaign.py -n 500 --start 10000

Each case: random rows for a small star (trips -> stations -> districts, trips
-> bikes), a report with a condition over its measures (comparisons, NULL
tests, a derived measure, OR), evaluated by modeldiff's engine and by a
hand-written `GROUP BY ... HAVING` over the same joins run by DuckDB (ISO/IEC
9075 <having clause>; DuckDB as the reference engine), the (no match) row
against the same HAVING over the rows in no group. Prints every difference;
exit 1 when there is one. `make test` runs 24 of these cases.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
sys.path.insert(0, ROOT)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("-n", type=int, default=2000, help="cases (default 2,000)")
    parser.add_argument("--start", type=int, default=0, help="first seed")
    args = parser.parse_args()
    from tests.test_conditions import having_case

    began, problems = time.time(), []
    for seed in range(args.start, args.start + args.n):
        found = having_case(seed)
        problems += found
        for line in found:
            print(line, flush=True)
    print(f"{args.n} cases, {len(problems)} differences, {time.time() - began:.0f} s")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
