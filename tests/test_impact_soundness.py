"""Impact is sound (changes.md, Impact): nothing moves on data that the diff did not list.

On seeded random cases (tests/soundness.py: a random valid model and data
from tests/randmodel.py, one random change of any kind, the diff, and
`verify --all` on the data, all in process), the items `verify --all` sees
moving (reports, measures in any grouping or role, roles' visible rows) must
all be listed by the diff. Here only what the diff does not list is
evaluated, which is all the property needs; 120 cases keep `make test`
short. benchmarks/campaigns/impact_soundness.py runs 10,000 cases, evaluates
everything and prints precision per change kind (docs/verify.md).
"""

from __future__ import annotations

import pytest

import soundness

SEEDS = range(120)


@pytest.fixture(scope="module")
def outcomes():
    return [soundness.run_case(seed, only_unlisted=True) for seed in SEEDS]


def test_nothing_moves_on_data_that_the_diff_did_not_list(outcomes):
    missed = [f"seed {o.seed} ({o.kind}): {m.kind} {m.name}: {m.evidence}" for o in outcomes for m in o.missed]
    assert missed == []


def test_the_cases_are_varied_and_the_diff_lists_impacts_in_many(outcomes):
    # the property above is worth something only over varied changes that do impact things
    assert len({o.kind for o in outcomes}) >= 25
    assert sum(bool(o.listed) for o in outcomes) >= 30
