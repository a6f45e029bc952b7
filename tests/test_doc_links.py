"""The documentation a clone holds is complete: every relative link resolves inside the repository.

README once pointed at `../shared/spec/`, which a clone does not have; the format guide is
docs/format.md and docs/meaning.md.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
LINK = re.compile(r"\[[^\]]*\]\(([^)\s]+)\)")


def documents() -> list[Path]:
    return [ROOT / "README.md", ROOT / "DEVELOPERS.md", ROOT / "CHANGELOG.md", ROOT / "examples" / "README.md",
            *sorted((ROOT / "docs").glob("*.md"))]


def broken_links(path: Path, text: str) -> list[str]:
    """Relative link targets in `text` that do not name a file or folder of the repository."""
    broken = []
    for target in LINK.findall(text):
        if re.match(r"[a-z]+:", target) or target.startswith("#"):
            continue
        resolved = (path.parent / target.split("#")[0]).resolve()
        if not resolved.exists() or ROOT not in (resolved, *resolved.parents):
            broken.append(target)
    return broken


def test_every_relative_link_of_the_docs_resolves_inside_the_repository():
    found = {str(p.relative_to(ROOT)): broken_links(p, p.read_text(encoding="utf-8")) for p in documents()}
    assert {name: links for name, links in found.items() if links} == {}


def test_a_link_outside_the_repository_is_found():  # twin: the check can fail
    readme = ROOT / "README.md"
    assert broken_links(readme, "[spec](../shared/spec/semantics.md) [guide](docs/format.md)") == [
        "../shared/spec/semantics.md"]
    assert broken_links(readme, "[missing](docs/nothing.md)") == ["docs/nothing.md"]


def test_readme_links_the_format_guide_and_names_nothing_outside_the_clone():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "](docs/format.md)" in readme and "](docs/meaning.md)" in readme
    assert "../shared" not in readme and "shared/spec" not in readme


def test_the_user_docs_do_not_send_readers_to_the_spec_folder():
    texts = {p.name: p.read_text(encoding="utf-8") for p in documents() if p.name != "DEVELOPERS.md"}
    assert sorted(name for name, text in texts.items() if "shared/" in text or "semantics.md" in text) == []
