"""The distribution name and every install instruction that names it.

`modeldiff` on the public package index is an unrelated project (checked against the index's list of
names when the name was chosen, and with `pip index versions`), so the distribution is `modeldiff-cli`;
the import package and the command stay `modeldiff`.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parent.parent
DISTRIBUTION = "modeldiff-cli"
# `pip install modeldiff` (alone, or with a version or extras) would install the unrelated project
TAKEN = re.compile(r"(pip|pipx|uv pip|uv tool) install\s+[\"']?modeldiff(?![-\w])")


def project() -> dict:
    return tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]


def install_texts() -> dict[str, str]:
    """Every tracked text a user reads install instructions in."""
    paths = [ROOT / "README.md", ROOT / "DEVELOPERS.md", ROOT / "hooks" / "pre-push", ROOT / "examples" / "README.md"]
    paths += sorted((ROOT / "docs").rglob("*.md")) + sorted((ROOT / "docs").rglob("*.yml"))
    return {str(p.relative_to(ROOT)): p.read_text(encoding="utf-8") for p in paths if p.exists()}


def test_the_distribution_is_not_the_taken_name_and_keeps_the_command_and_package():
    p = project()
    assert p["name"] == DISTRIBUTION
    assert p["scripts"] == {"modeldiff": "modeldiff.cli:run"}
    assert (ROOT / "modeldiff" / "__init__.py").exists()


def test_readme_says_what_to_type_to_install():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert f"pip install {DISTRIBUTION}" in readme


def test_no_install_instruction_names_the_taken_distribution():
    found = {name: m.group(0) for name, text in install_texts().items() for m in TAKEN.finditer(text)}
    assert found == {}


def test_the_taken_name_check_sees_a_bad_instruction():  # twin of the test above: the pattern can fail
    assert TAKEN.search("run: pip install modeldiff==1.0")
    assert TAKEN.search('python -m pip install "modeldiff"')
    assert not TAKEN.search(f"pip install {DISTRIBUTION}")


def test_the_sample_workflow_installs_the_distribution():
    workflow = yaml.safe_load((ROOT / "docs" / "examples" / "modeldiff.yml").read_text(encoding="utf-8"))
    assert workflow["env"]["MODELDIFF"] == DISTRIBUTION
