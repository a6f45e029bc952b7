"""`notes --per-commit` over a longer history: each revision read once, comparisons seen before from the cache,
and the models of a commit released once the next one is compared.

The history: the bike-share example, then commits that in turn make trips_start_station two-way, touch a
measure's description, and make the link one-way again (a link change draws a diagram, so the models are
needed even when the comparison comes from the cache), with a commit touching no model in between.
"""

from __future__ import annotations

import io
import json
import re
import weakref
from pathlib import Path

import pytest
from gitkit import isolate_git
from test_notes import commit, new_repo

from modeldiff import cli, compare, load, notes

EXAMPLES = Path(__file__).parent.parent / "examples"
TEXT = (EXAMPLES / "bikeshare.model.yaml").read_text()
LINK = "    from: trips.start_station_key\n    to: stations.station_key\n"
TWO_WAY = LINK + "    flow: two-way\n"
MODEL = "models/bikeshare.model.yaml"
COMMITS = 8


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    mp = pytest.MonkeyPatch()
    home = tmp_path_factory.mktemp("home")
    isolate_git(mp, home)
    root = new_repo(tmp_path_factory.mktemp("history") / "repo")
    text = TEXT
    commit(root, "base model", {MODEL: text})
    for number in range(COMMITS):
        if number % 4 == 3:
            commit(root, f"docs {number}", {"README.md": f"note {number}\n"})
            continue
        if number % 2 == 0:
            text = text.replace(LINK, TWO_WAY) if TWO_WAY not in text else text.replace(TWO_WAY, LINK)
        else:
            edited = re.sub(r"(    description: Units held)[^;]*;", rf"\1 ({number});", text)
            assert edited != text
            text = edited
        commit(root, f"change {number}", {MODEL: text})
    yield root
    mp.undo()


@pytest.fixture(autouse=True)
def clean_git_env(monkeypatch, tmp_path):
    isolate_git(monkeypatch, tmp_path)
    monkeypatch.setenv("MODELDIFF_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("MODELDIFF_NO_CACHE", raising=False)


def _notes(root: Path, *argv: str) -> str:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["notes", f"HEAD~{COMMITS}..HEAD", "--per-commit", *argv, "--repo", str(root)], out, err)
    assert (code, err.getvalue()) == (0, "")
    return out.getvalue()


class _Reads:
    """Counts whole reads and splices of a model, and keeps a weak reference to each revision read."""

    def __init__(self, monkeypatch) -> None:
        self.whole = self.spliced = 0
        self.results: list[weakref.ref] = []
        real_load, real_splice = load.load_files, load.splice_files

        def load_files(*args, **kwargs):
            self.whole += 1
            return self._keep(real_load(*args, **kwargs))

        def splice_files(*args, **kwargs):
            self.spliced += 1
            return self._keep(real_splice(*args, **kwargs))

        monkeypatch.setattr(load, "load_files", load_files)
        monkeypatch.setattr(load, "splice_files", splice_files)

    def _keep(self, result):
        self.results.append(weakref.ref(result))
        return result

    def alive(self) -> int:
        return sum(ref() is not None for ref in self.results)


def test_a_warm_cache_reads_each_revision_at_most_once_and_says_the_same(history, monkeypatch):
    cold = _notes(history)
    assert cold.count("```mermaid") == 4  # the link changes are drawn: their models are needed
    reads = _Reads(monkeypatch)
    warm = _notes(history)
    assert warm == cold
    # six revisions changed a model: one is read whole, the others spliced from their neighbour
    assert reads.whole <= 2  # the first revision, and the squashed comparison's start (named otherwise)
    assert reads.whole + reads.spliced <= COMMITS


def test_a_cold_walk_reads_the_shared_revision_once_per_commit(history, monkeypatch):
    reads = _Reads(monkeypatch)
    cold = _notes(history)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    assert _notes(history) == cold
    # without the walk's memory each commit read both of its sides, two per model commit
    assert reads.whole <= 2 * 2  # per run: the first revision and the squashed comparison's start


def test_without_the_cache_the_walk_says_the_same(history, monkeypatch):
    warm_again = _notes(history)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    assert _notes(history) == warm_again


@pytest.mark.parametrize("warm", [False, True], ids=["cold", "warm"])
def test_the_models_of_earlier_commits_are_released(history, monkeypatch, warm):
    if warm:
        _notes(history)
    reads = _Reads(monkeypatch)
    alive = []

    def render(commit):
        alive.append(reads.alive())
        return notes.commit_markdown(commit)

    found = notes.read_notes(str(history), f"HEAD~{COMMITS}..HEAD", "per-commit", render)
    assert all(c.diffs == () for c in found.commits)  # nothing of the models stays with the commits
    assert len(alive) == COMMITS and reads.whole + reads.spliced >= 3
    assert max(alive) <= 2  # the commit's two sides, never the revisions before them


def test_the_records_kept_by_the_walk_hold_the_rendered_text(history):
    spool = notes.Spool()
    try:
        found = notes.read_notes(str(history), f"HEAD~{COMMITS}..HEAD", "per-commit",
                                 lambda c: spool.add(notes.commit_markdown(c)))
        plain = notes.read_notes(str(history), f"HEAD~{COMMITS}..HEAD", "per-commit")
        assert [spool.text(c.rendered) for c in found.commits] == [notes.commit_markdown(c) for c in plain.commits]
        assert [c.changed_models for c in found.commits] == [c.changed_models for c in plain.commits]
    finally:
        spool.close()


def test_streamed_json_is_the_document_built_whole(history):
    streamed = json.loads(_notes(history, "--format", "json"))
    whole = notes.notes_json(notes.read_notes(str(history), f"HEAD~{COMMITS}..HEAD", "per-commit"))
    assert streamed == json.loads(json.dumps(whole))
    assert [len(c["models"]) for c in streamed["commits"]] == [0 if n % 4 == 3 else 1 for n in range(COMMITS)]


def test_history_remembers_only_the_latest_revision_of_a_path():
    walk = compare.History()
    first = walk.revision("m", (("a", b"1"),))
    walk.keep("m", first)
    assert walk.revision("m", (("a", b"1"),)) is first
    second = walk.revision("m", (("a", b"2"),))
    assert second is not first
    second.base = first
    walk.keep("m", second)
    assert walk.revision("m", (("a", b"1"),)) is not first  # forgotten once the next one is kept
    assert walk.revision("other", (("a", b"2"),)) is not second  # per path


def test_a_walk_leaves_one_cache_entry_per_commit(history, tmp_path):
    _notes(history)
    names = [p.name for p in (tmp_path / "cache").iterdir()]
    pairs = [n for n in names if n.startswith("pair-")]
    revisions = [n for n in names if n.startswith("rev-")]
    # six commits changed the model, and the squashed comparison of the range as a whole
    assert len(pairs) == 6 + 1
    assert len(revisions) == 2  # the squashed comparison's two sides only: the walk keeps its findings in memory
