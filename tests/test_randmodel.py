"""The random model kit (tests/randmodel.py): what it generates is valid, and every mutation kind applies and is seen.

The kit is the ground of the property tests over random cases (section 5
reference, impact soundness); if it generated invalid models or mutations
that change nothing, those tests would prove nothing.
"""

from __future__ import annotations

import random

import pytest

import randmodel as R
from modeldiff import impact

SEEDS = range(60)


def test_every_generated_model_passes_check_with_no_error():
    for seed in SEEDS:
        case = R.generate(seed)
        assert R.errors_of(case.doc) == [], (seed, R.to_yaml(case.doc))


def test_generation_is_seeded():
    assert R.to_yaml(R.generate(7).doc) == R.to_yaml(R.generate(7).doc)
    assert R.generate(7).rows == R.generate(7).rows
    assert R.to_yaml(R.generate(7).doc) != R.to_yaml(R.generate(8).doc)


def test_the_generated_models_cover_the_shapes_the_proof_needs():
    seen = set()
    for seed in SEEDS:
        doc = R.generate(seed).doc
        for table in doc["tables"].values():
            seen.add(table["kind"])
            if "history" in table:
                seen.add("type-2")
            if isinstance(table["key"], list):
                seen.add("two-column key")
        for link in doc["links"].values():
            seen.add(link.get("flow", "one-way"))
            seen.add(link.get("cardinality", "many-to-one"))
            if link.get("standby"):
                seen.add("standby")
            if isinstance(link["from"], list):
                seen.add("two-column link")
            if link.get("security_flow") == "two-way":
                seen.add("security_flow")
        for m in doc["measures"].values():
            if "table" not in m and ("flow" in m or R.via_key() in m):
                seen.add("derived overrides")
            if "table" in m and R.via_key() in m:
                seen.add("measure follows standby")
        if doc.get("variants"):
            seen.add("variant")
        for role in doc.get("roles", {}).values():
            seen.add(":user" if any(":user" in p for p in role["filters"].values()) else "role without :user")
        for r in doc["reports"].values():
            if len(r.get("by", [])) >= 2:
                seen.add("several by")
            if "where" in r:
                seen.add("report where")
            if "role" in r:
                seen.add("report role")
            if "having" in r:
                seen.add("report condition")
                if set(R._words(r["having"])) & set(doc["measures"]) - set(r["measures"]):
                    seen.add("condition on a measure not shown")
        for name, rows in R.generate(seed).rows.items():
            table = doc["tables"][name]
            if "history" in table and len({r["nk"] for r in rows}) < len(rows):
                seen.add("repeated natural key")
            if any(None in r.values() for r in rows):
                seen.add("NULL")
    needed = {"fact", "dimension", "bridge", "access", "type-2", "two-column key", "one-way", "two-way",
              "one-to-one", "many-to-many", "many-to-one", "standby", "two-column link", "security_flow",
              "derived overrides", "measure follows standby", "variant", ":user", "role without :user",
              "several by", "report where", "report role", "repeated natural key", "NULL", "report condition",
              "condition on a measure not shown"}
    assert needed - seen == set()


@pytest.mark.parametrize("kind", sorted(R.MUTATIONS))
def test_each_mutation_kind_applies_keeps_the_model_valid_and_is_seen_by_the_diff(kind):
    applied = 0
    for seed in range(40):
        case = R.generate(seed)
        try:
            got, new = R.mutate(case.doc, random.Random(seed), kind)
        except LookupError:
            continue
        assert got == kind
        assert R.errors_of(new) == [], (seed, kind)
        old_model, new_model = R.load_model(case.doc), R.load_model(new)
        result = impact.analyse(old_model, new_model)
        assert result.changes, (seed, kind, "the mutation changed nothing the diff sees")
        applied += 1
        if applied == 4:
            break
    assert applied >= 1, f"mutation {kind} applied to none of the models"


def test_a_model_compared_with_itself_shows_no_change():
    for seed in range(10):
        model = R.load_model(R.generate(seed).doc)
        result = impact.analyse(model, R.load_model(R.generate(seed).doc))
        assert (result.changes, result.measures, result.roles, result.reports) == ((), (), (), ())


def test_random_mutation_picks_a_kind_that_applies():
    kinds = set()
    for seed in range(40):
        kind, new = R.mutate(R.generate(seed).doc, random.Random(seed))
        assert new != R.generate(seed).doc
        kinds.add(kind)
    assert len(kinds) >= 15
