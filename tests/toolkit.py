"""Outside programs some tests need (Graphviz `dot`, headless Chromium): skipped where missing, but under CI.

CI (`.ci/run`, which installs both with apt-get) sets CI=true: there a missing program fails the test
instead of skipping it, so a broken install step cannot turn the browser and layout checks off unseen.
"""

from __future__ import annotations

import os
import shutil

import pytest

CI = os.environ.get("CI", "").strip().lower() in ("1", "true", "yes")
INSTALL = {"dot": "apt-get install -y graphviz", "chromium": "apt-get install -y chromium"}


def program(name: str) -> str:
    """The path of `name`; skips the test where it is missing (fails it under CI=true)."""
    found = shutil.which(name)
    if found is None:
        message = f"{name} is not installed ({INSTALL.get(name, 'install it')})"
        if CI:
            pytest.fail(message + ": CI must install it (.ci/run)")
        pytest.skip(message)
    return found


def needs(name: str):
    """A parametrize mark: skip where `name` is missing, unless under CI (then the test runs and fails)."""
    return pytest.mark.skipif(shutil.which(name) is None and not CI, reason=f"{name} is not installed")
