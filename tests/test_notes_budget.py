"""`notes --format markdown` within a budget (`--budget`, shared with `diff`: render/md_budget.py).

The history: the synthetic model (benchmarks/synth.py) of 300 tables and 3,000 measures, then 30 commits of
ordinary changes made by benchmarks/history.py (links made two-way or back, conditions edited, descriptions
touched, one commit in ten changing no model): about 100 kB of per-commit notes and 75 kB squashed in full,
with breaking changes (ambiguities) in several commits.
"""

from __future__ import annotations

import io
import re
import sys
from pathlib import Path

import pytest
from gitkit import isolate_git

from modeldiff import cli, notes
from modeldiff.render import md_budget

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))
from history import build_history  # noqa: E402

COMMENT = 65_536
COMMITS = 30
SPAN = f"HEAD~{COMMITS}..HEAD"
EXAMPLES = Path(__file__).parent.parent / "examples"


@pytest.fixture(scope="module")
def repo(tmp_path_factory):
    mp = pytest.MonkeyPatch()
    isolate_git(mp, tmp_path_factory.mktemp("home"))
    mp.setenv("MODELDIFF_CACHE_DIR", str(tmp_path_factory.mktemp("cache")))
    mp.delenv("MODELDIFF_NO_CACHE", raising=False)
    root = tmp_path_factory.mktemp("budget") / "repo"
    build_history(str(root), COMMITS, (300, 450, 3000, 10))
    yield root
    mp.undo()


@pytest.fixture(scope="module")
def walked(repo):
    """The per-commit and squashed notes read once, in memory (each commit keeps its diffs)."""
    return {mode: notes.read_notes(str(repo), SPAN, mode) for mode in ("per-commit", "squash")}


def _cli(repo: Path, *argv: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    code = cli.main(["notes", SPAN, "--repo", str(repo), *argv], out, err)
    return code, out.getvalue(), err.getvalue()


def _markdown(found: notes.Notes, budget: int | None) -> str:
    out = io.StringIO()
    notes.as_markdown(found, out, budget=budget)
    return out.getvalue()


def _breaking_lines(text: str) -> list[str]:
    """Every line under a **Breaking** title of the notes (up to the blank line that ends the list)."""
    lines, found, inside = text.splitlines(), [], False
    for index, line in enumerate(lines):
        if line == "**Breaking**":
            inside = True
            continue
        if inside and line.startswith("- "):
            found.append(line)
        elif inside and line == "" and found and lines[index - 1].startswith("- "):
            inside = False
    return found


def _last(text: str) -> str:
    return text.rstrip("\n").splitlines()[-1]


@pytest.mark.parametrize("mode", ["per-commit", "squash"])
def test_the_notes_of_a_large_range_fit_a_comment_with_every_breaking_change_whole(repo, walked, mode):
    whole = _markdown(walked[mode], None)
    assert len(whole) > COMMENT  # without the budget they would not fit
    flag = ["--per-commit"] if mode == "per-commit" else []
    code, text, err = _cli(repo, *flag)
    assert (code, err) == (0, "")
    assert text == _markdown(walked[mode], COMMENT)  # the walk through the spool says what the records say
    assert len(text) <= COMMENT
    breaking = _breaking_lines(whole)
    assert len(breaking) >= 3
    assert [line for line in breaking if line not in text.splitlines()] == []  # every one whole
    last = _last(text)
    assert last.startswith("_Shortened to fit 65,536 characters; left out: ")
    assert "`--format json`" in last and "`--budget none`" in last and "`--budget 1MiB`" in last
    # what is folded says how many it holds; the title of each model counts its changes
    assert re.search(r"<details><summary>Impacted measures \(\d+\): the first \d+ shown</summary>", text)
    assert re.search(r"^#+ `synthetic` \(`models/synthetic.model.yaml`\): \w+ — \d+ changes? \(", text, re.M)


def test_budget_none_is_the_whole_notes(repo, walked):
    code, text, _ = _cli(repo, "--per-commit", "--budget", "none")
    assert code == 0 and text == _markdown(walked["per-commit"], None) and "Shortened to fit" not in text


@pytest.mark.parametrize("mode", ["per-commit", "squash"])
def test_every_impacted_measure_is_listed_or_counted(walked, mode):
    text = _markdown(walked[mode], COMMENT)
    total = sum(int(n.replace(",", "")) for n in re.findall(r"; impacted: ([0-9,]+) measures?", text))
    listed = len(re.findall(r"^- m\d+ \(", text, re.M))
    counted = re.search(r"([0-9,]+) impacted measures", _last(text))
    assert 0 < listed < total
    assert listed + (int(counted.group(1).replace(",", "")) if counted else 0) == total


def test_a_larger_budget_holds_more(walked):
    found = walked["per-commit"]
    comment, summary = _markdown(found, COMMENT), _markdown(found, 90_000)
    assert COMMENT < len(summary) <= 90_000
    assert len(re.findall(r"^- m\d+ \(", summary, re.M)) > len(re.findall(r"^- m\d+ \(", comment, re.M))


def _count(text: str, what: str) -> int:
    found = re.search(rf"([0-9,]+) {re.escape(what)}", _last(text))
    return int(found.group(1).replace(",", "")) if found else 0


@pytest.mark.parametrize("budget", [4_000, 12_000])
def test_a_small_budget_holds_and_every_breaking_change_is_named_or_counted(walked, budget):
    found = walked["per-commit"]
    whole = _markdown(found, None)
    breaking = _breaking_lines(whole)
    text = _markdown(found, budget)
    assert len(text) <= budget  # the budget always holds: a longer comment is not posted at all
    named = [line for line in _breaking_lines(text)]
    assert set(named) <= set(breaking) | {line for line in named if "message left out for length" in line}
    shortened = sum("message left out for length" in line for line in named)
    assert shortened == _count(text, "messages of breaking changes")
    assert len(named) + _count(text, "breaking changes (beyond the budget)") == len(breaking)
    changed = sum(c.changed_models for c in found.commits)
    shown = len(re.findall(r"^## `", text, re.M))
    assert shown + _count(text, "commits' sections") == changed and _count(text, "commits' sections") > 0


def test_a_budget_short_of_the_breaking_changes_messages_names_each_by_id_kind_and_subject(walked):
    found = walked["per-commit"]
    breaking = _breaking_lines(_markdown(found, None))
    # room for every breaking change's short form, not for every message
    text = _markdown(found, sum(len(line) for line in breaking) // 2 + 4_000)
    named = _breaking_lines(text)
    assert len(named) == len(breaking) and any("message left out for length" in line for line in named)
    assert "beyond the budget" not in _last(text)


def test_notes_that_fit_are_written_whole_without_a_note(tmp_path, monkeypatch):
    from test_notes import commit, new_repo

    isolate_git(monkeypatch, tmp_path)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    root = new_repo(tmp_path / "small")
    commit(root, "base", {"models/bikeshare.model.yaml": (EXAMPLES / "bikeshare.model.yaml").read_text()})
    commit(root, "revision 2", {"models/bikeshare.model.yaml":
                                (EXAMPLES / "revision-2" / "bikeshare.model.yaml").read_text()})
    out, err = io.StringIO(), io.StringIO()
    assert cli.main(["notes", "HEAD~1..HEAD", "--per-commit", "--repo", str(root)], out, err) == 0
    whole = io.StringIO()
    cli.main(["notes", "HEAD~1..HEAD", "--per-commit", "--repo", str(root), "--budget", "none"], whole, err)
    assert out.getvalue() == whole.getvalue() and "Shortened to fit" not in out.getvalue()
    assert "```mermaid" in out.getvalue()


@pytest.mark.parametrize("argv, words", [(["--budget", "12"], "--budget '12'"),
                                         (["--format", "json", "--budget", "1MiB"], "--budget goes with")])
def test_a_bad_budget_is_one_line_and_exit_2(repo, argv, words):
    code, text, err = _cli(repo, *argv)
    assert (code, text) == (2, "") and len(err.strip().splitlines()) == 1 and words in err


def test_the_diagram_says_under_it_what_it_left_out(walked):
    whole = _markdown(walked["squash"], None)
    caption = re.search(r"^_synthetic: showing 40 of the (\d+) tables near what changed.*left out.*_$", whole, re.M)
    assert caption and int(caption.group(1)) > 40
    assert whole.count("```mermaid") == 1


@pytest.mark.parametrize("seed", range(200))
def test_fair_shares_give_each_block_what_it_needs_or_an_equal_part(seed):
    import random

    rng = random.Random(seed)
    needs = [rng.randrange(0, 5_000) for _ in range(rng.randrange(1, 12))]
    whole = [rng.random() < 0.3 for _ in needs]
    room = rng.randrange(0, 30_000)
    shares = md_budget.fair_shares(needs, room, whole)
    assert sum(shares) <= room and all(0 <= s <= n for s, n in zip(shares, needs))
    assert all(s in (0, n) for s, n, w in zip(shares, needs, whole) if w)  # whole or nothing
    if sum(needs) <= room:
        assert shares == needs
    else:  # a block short of its need got at least what any other block got, but for dropped whole blocks
        cut = [s for s, n in zip(shares, needs) if s < n and s > 0]
        assert all(c >= max((s for s, w in zip(shares, whole) if not w), default=0) - 1 for c in cut)
