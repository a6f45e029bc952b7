"""Campaign: the summary by cause keeps its rules over many seeded synthetic changes (outside `make test`).

    python benchmarks/campaigns/summary_campaign.py [--cases 300] [--tables 120]

Each case: a seeded synthetic model and the same model after a few ordinary changes (links flipped,
conditions edited, descriptions touched: benchmarks/synth.py); `summary.check_grouping` must find nothing.
"""

from __future__ import annotations

import argparse
import random
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))
sys.path.insert(0, str(HERE.parent))

from synth import ordinary_changes, synthetic_model_text  # noqa: E402

from modeldiff import impact, load, summary  # noqa: E402


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--cases", type=int, default=300)
    p.add_argument("--tables", type=int, default=120)
    args = p.parse_args(argv)
    failures = 0
    for seed in range(args.cases):
        rng = random.Random(seed)
        old = synthetic_model_text(args.tables, args.tables * 3 // 2, args.tables * 8, 8, seed=seed)
        new = ordinary_changes(old, rng.randint(1, 12), seed=seed)
        a, b = load.load_files([("old.model.yaml", old)]), load.load_files([("new.model.yaml", new)])
        problems = summary.check_grouping(impact.analyse(a.model, b.model, a.findings, b.findings))
        if problems:
            failures += 1
            print(f"seed {seed}: {'; '.join(problems)}")
    print(f"{args.cases} cases, {failures} failing")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
