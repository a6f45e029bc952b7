"""Campaign: the engine against the independent section 5 evaluator (tests/section5.py) on many random models.

    python benchmarks/campaigns/section5_campaign.py [FIRST_SEED] [LAST_SEED]   # default 130 2000

tests/test_section5_reference.py runs seeds 0-129 (and a few found here)
inside `make test`; this runs a larger range outside it and prints each
disagreement (seed, report, user, group). Exit 1 when any is found.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent.parent
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT))

import randmodel as R  # noqa: E402
import section5_compare as C  # noqa: E402


def main(argv: list[str]) -> int:
    first, last = (int(argv[0]), int(argv[1])) if len(argv) >= 2 else (130, 2000)
    found = compared = 0
    for seed in range(first, last):
        case = R.generate(seed)
        model = R.load_model(case.doc)
        with R.database(model, case.rows) as db:
            for name, report in model.reports.items():
                for user in R.viewers(case.doc, report.role):
                    compared += 1
                    for line in C.disagreements(model, case.rows, db, name, user):
                        print(f"seed {seed} report {name} user {user}: {line}", flush=True)
                        found += 1
    print(f"seeds {first}-{last - 1}: {compared} reports compared, {found} disagreements")
    return 1 if found else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
