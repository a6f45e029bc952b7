"""Shared by the tests that run over every scenario folder and over small synthetic models."""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))
from synth import ordinary_changes, synthetic_model_text  # noqa: E402,F401 (re-exported)

SMALL = dict(tables=30, links=45, measures=120, roles=6)


def scenario_pairs() -> list[tuple[Path, Path]]:
    """(old, new) model files of every folder in tests/scenarios and tests/impact_scenarios, sorted."""
    found = []
    for folder in ("scenarios", "impact_scenarios"):
        for case in sorted((ROOT / "tests" / folder).iterdir()):
            old, new = case / "old.model.yaml", case / "new.model.yaml"
            if old.is_file() and new.is_file():
                found.append((old, new))
    return found
