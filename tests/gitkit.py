"""Shared helpers for tests that run git on real temporary repositories."""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest


def git(cwd: Path, *args: str) -> str:
    """Run git in `cwd`; its stripped stdout. Fails the test on a non-zero exit."""
    return subprocess.run(["git", *args], cwd=cwd, check=True, capture_output=True, text=True).stdout.strip()


def isolate_git(monkeypatch: pytest.MonkeyPatch, home: Path) -> None:
    """No GIT_* variable of the surrounding process (a hook, a CI runner) and no user or system config."""
    for name in list(os.environ):
        if name.startswith("GIT_"):
            monkeypatch.delenv(name)
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(home / "no-global-gitconfig"))
    monkeypatch.setenv("HOME", str(home))


def init_repo(path: Path) -> Path:
    """An empty repository on branch main with a local identity and no signing."""
    path.mkdir(parents=True, exist_ok=True)
    git(path, "init", "-q", "-b", "main")
    git(path, "config", "user.name", "Test Rider")
    git(path, "config", "user.email", "rider@example.invalid")
    git(path, "config", "commit.gpgsign", "false")
    return path
