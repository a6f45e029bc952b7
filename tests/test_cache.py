"""The cache of compared revisions (modeldiff/cache.py) and compare.py's use of it."""

from __future__ import annotations

import io
import os
import pickle
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from modeldiff import cache, compare, model
from modeldiff.render import diff_out

ROOT = Path(__file__).resolve().parent.parent
OLD = ROOT / "examples" / "bikeshare.model.yaml"
NEW = ROOT / "examples" / "revision-2" / "bikeshare.model.yaml"


@pytest.fixture
def folder(tmp_path, monkeypatch):
    where = tmp_path / "cache"
    monkeypatch.setenv(cache.DIR_ENV, str(where))
    monkeypatch.delenv(cache.NO_CACHE_ENV, raising=False)
    return where


# a model section read from its files on first use: the cache's own, or the compared revision's
# (a comparison found in the cache reads its models through the revisions being compared)
DEFERRED = (cache._Section, model.DeferredSection)


def _json(md) -> str:
    out = io.StringIO()
    diff_out.as_json([md], out)
    return out.getvalue()


def _pairs(folder: Path) -> list[Path]:
    return sorted(folder.glob("pair-*" + cache.SUFFIX)) if folder.exists() else []


def test_a_repeated_diff_comes_from_the_cache_and_says_the_same(folder):
    fresh = compare.compare_specs(str(OLD), str(NEW), use_cache=False)
    assert not _pairs(folder)  # use_cache=False neither reads nor writes
    first = compare.compare_specs(str(OLD), str(NEW))
    assert len(_pairs(folder)) == 1
    again = compare.compare_specs(str(OLD), str(NEW))
    assert isinstance(again.result.new.tables, DEFERRED)  # read from the cache: no YAML parsed yet
    assert _json(again) == _json(first) == _json(fresh)
    assert again.result == fresh.result  # the models too, read from the files on first use


def test_a_diff_not_seen_before_is_computed(folder):
    compare.compare_specs(str(OLD), str(NEW))
    other = compare.compare_specs(str(NEW), str(OLD))
    assert not isinstance(other.result.new.tables, DEFERRED)
    assert len(_pairs(folder)) == 2


def test_environment_switch_turns_the_cache_off(folder, monkeypatch):
    monkeypatch.setenv(cache.NO_CACHE_ENV, "1")
    compare.compare_specs(str(OLD), str(NEW))
    assert not _pairs(folder)
    monkeypatch.setenv(cache.NO_CACHE_ENV, "0")
    compare.compare_specs(str(OLD), str(NEW))
    assert len(_pairs(folder)) == 1


def test_changed_content_gets_a_new_key(tmp_path):
    files = [("m.model.yaml", OLD.read_bytes())]
    same = [("m.model.yaml", OLD.read_bytes())]
    edited = [("m.model.yaml", OLD.read_bytes() + b"\n# a comment\n")]
    renamed = [("n.model.yaml", OLD.read_bytes())]
    assert cache.revision_key(files) == cache.revision_key(same)
    assert cache.revision_key(files) != cache.revision_key(edited)
    assert cache.revision_key(files) != cache.revision_key(renamed)  # display names appear in positions
    assert cache.pair_key("a", "b") != cache.pair_key("b", "a")
    assert cache.pair_key(None, "b") != cache.pair_key("b", None)


@pytest.mark.parametrize("damage", ["truncate", "flip", "header", "foreign"])
def test_a_damaged_entry_is_rebuilt_not_trusted(folder, damage):
    first = compare.compare_specs(str(OLD), str(NEW))
    (entry,) = _pairs(folder)
    blob = entry.read_bytes()
    if damage == "truncate":
        entry.write_bytes(blob[: len(blob) // 2])
    elif damage == "flip":
        entry.write_bytes(blob[:-10] + bytes([blob[-10] ^ 0xFF]) + blob[-9:])
    elif damage == "header":
        entry.write_bytes(blob.replace(cache.MAGIC, b"something-else", 1))
    else:  # a well-formed entry whose payload builds something that is not a modeldiff record
        payload = pickle.dumps({"format": cache.FORMAT, "call": os.system})  # a function: refused by the unpickler
        entry.write_bytes(cache._header(payload) + payload)
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)  # computed afresh
    assert _json(again) == _json(first)
    assert entry.read_bytes() == blob  # removed and written again whole


def test_an_entry_of_another_tool_version_is_not_used(folder, monkeypatch):
    compare.compare_specs(str(OLD), str(NEW))
    monkeypatch.setattr(cache, "_FINGERPRINT", "another version")
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)


def test_the_unpickler_builds_only_modeldiff_records():
    with pytest.raises(pickle.UnpicklingError):
        cache._unpickle(pickle.dumps(os.system))
    from modeldiff.model import Pos

    assert cache._unpickle(pickle.dumps({"p": Pos("f", 1, 2)})) == {"p": Pos("f", 1, 2)}


def test_a_diff_without_the_cache_loads_no_hashing_or_pickling():
    # MODELDIFF_NO_CACHE=1: the cache's libraries are never imported (start-up time, docs/performance.md).
    # (pickle is not probed: rich imports it for its own styles.)
    code = ("import sys; from modeldiff.cli import main; main(['diff', sys.argv[1], sys.argv[2]]); "
            "print(sorted(m for m in ('hashlib', 'tempfile') if m in sys.modules), file=sys.stderr)")
    done = subprocess.run([sys.executable, "-c", code, str(OLD), str(NEW)], capture_output=True, text=True,
                          env={**os.environ, "MODELDIFF_NO_CACHE": "1"})
    assert done.stderr.strip() == "[]", done.stderr


def test_a_diff_with_the_cache_does_hash_and_pickle(tmp_path):
    # The twin of the test above: with the cache on, they are loaded (so the probe can see them).
    code = ("import sys; from modeldiff.cli import main; main(['diff', sys.argv[1], sys.argv[2]]); "
            "print(sorted(m for m in ('hashlib', 'tempfile') if m in sys.modules), file=sys.stderr)")
    env = {k: v for k, v in os.environ.items() if k != "MODELDIFF_NO_CACHE"}
    done = subprocess.run([sys.executable, "-c", code, str(OLD), str(NEW)], capture_output=True, text=True,
                          env={**env, "MODELDIFF_CACHE_DIR": str(tmp_path)})
    assert done.stderr.strip() == "['hashlib', 'tempfile']", done.stderr


def test_eviction_keeps_the_most_recently_used(tmp_path):
    for index in range(6):
        assert cache.write(str(tmp_path), "pair", f"k{index}", {"n": index})
        os.utime(tmp_path / f"pair-k{index}{cache.SUFFIX}", (1000 + index, 1000 + index))
    assert cache.read(str(tmp_path), "pair", "k0") == {"n": 0}  # read: now the most recent
    assert cache.evict(str(tmp_path), max_entries=3) == 3
    left = sorted(p.name for p in tmp_path.glob("*" + cache.SUFFIX))
    assert left == [f"pair-k{i}{cache.SUFFIX}" for i in (0, 4, 5)]
    assert cache.evict(str(tmp_path), max_entries=3) == 0  # within the limits: nothing goes
    assert cache.evict(str(tmp_path), max_entries=10, max_bytes=1) == 3  # over the size limit


def test_concurrent_writers_leave_one_whole_entry(tmp_path):
    values = [{"n": i, "pad": "x" * 50_000} for i in range(8)]
    threads = [threading.Thread(target=cache.write, args=(str(tmp_path), "pair", "same", v)) for v in values]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert cache.read(str(tmp_path), "pair", "same") in values
    assert [p.name for p in tmp_path.iterdir()] == [f"pair-same{cache.SUFFIX}"]  # no temporary file left


def test_an_unwritable_folder_only_turns_the_cache_off(tmp_path, monkeypatch):
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("x")
    monkeypatch.setenv(cache.DIR_ENV, str(blocker / "cache"))
    monkeypatch.delenv(cache.NO_CACHE_ENV, raising=False)
    result = compare.compare_specs(str(OLD), str(NEW))
    assert result.result.changes


def test_cache_folder_is_inside_the_git_folder(tmp_path, monkeypatch):
    monkeypatch.delenv(cache.DIR_ENV, raising=False)
    (tmp_path / "repo" / ".git").mkdir(parents=True)
    (tmp_path / "repo" / "models").mkdir()
    assert cache.directory(tmp_path / "repo" / "models") == str(tmp_path / "repo" / ".git" / "modeldiff-cache")
    (tmp_path / "linked").mkdir()
    (tmp_path / "linked" / ".git").write_text("gitdir: ../repo/.git/worktrees/linked\n")
    assert cache.directory(tmp_path / "linked") == os.path.normpath(
        str(tmp_path / "repo" / ".git" / "worktrees" / "linked" / "modeldiff-cache"))


def test_cache_folder_outside_a_repository_is_the_users(tmp_path, monkeypatch):
    monkeypatch.delenv(cache.DIR_ENV, raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert cache.git_dir(tmp_path) is None
    assert cache.directory(tmp_path) == str(tmp_path / "xdg" / "modeldiff")


def test_revisions_compared_through_git_use_the_cache(tmp_path, monkeypatch):
    import subprocess

    monkeypatch.delenv(cache.DIR_ENV, raising=False)
    monkeypatch.delenv(cache.NO_CACHE_ENV, raising=False)
    repo = tmp_path / "repo"
    repo.mkdir()
    env = {**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid",
           "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.invalid"}
    for variable in ("GIT_DIR", "GIT_WORK_TREE", "GIT_INDEX_FILE"):
        env.pop(variable, None)

    def git(*args):
        subprocess.run(["git", *args], cwd=repo, env=env, check=True, capture_output=True)

    git("init", "-q")
    (repo / "bikeshare.model.yaml").write_bytes(OLD.read_bytes())
    git("add", ".")
    git("commit", "-q", "-m", "one")
    (repo / "bikeshare.model.yaml").write_bytes(NEW.read_bytes())
    git("commit", "-q", "-am", "two")
    fresh = compare.compare_revisions(str(repo), "HEAD~1", "HEAD", use_cache=False)
    assert not (repo / ".git" / "modeldiff-cache").exists()
    first = compare.compare_revisions(str(repo), "HEAD~1", "HEAD")
    assert len(_pairs(repo / ".git" / "modeldiff-cache")) == 1
    again = compare.compare_revisions(str(repo), "HEAD~1", "HEAD")
    assert isinstance(again[0].result.new.tables, DEFERRED)
    assert [_json(d) for d in again] == [_json(d) for d in first] == [_json(d) for d in fresh]


def test_a_writers_abandoned_temporary_file_is_removed_once_stale(tmp_path):
    stale = tmp_path / f".tmp-old{cache.SUFFIX}"
    fresh = tmp_path / f".tmp-new{cache.SUFFIX}"
    stale.write_bytes(b"half an entry")
    fresh.write_bytes(b"being written")
    os.utime(stale, (1000, 1000))
    cache.evict(str(tmp_path))
    assert not stale.exists()
    assert fresh.exists()  # another writer may still be at work on it


def _checks(folder: Path) -> list[Path]:
    return sorted(folder.glob("check-*" + cache.SUFFIX)) if folder.exists() else []


def test_a_repeated_check_comes_from_the_cache_and_says_the_same(folder):
    from modeldiff import check

    label, model, fresh = compare.check_spec(str(OLD), use_cache=False)
    assert not _checks(folder)
    loaded = compare.read_model(str(OLD))[1]
    assert fresh == check.check_model(loaded.model, loaded.findings)
    first = compare.check_spec(str(OLD))
    assert len(_checks(folder)) == 1
    again_label, again_model, again = compare.check_spec(str(OLD))
    assert isinstance(again_model.tables, cache._Section)  # from the cache: nothing parsed
    assert (again_label, again) == (first[0], first[2]) == (label, fresh)
    assert again_model == model and again_model.name == model.name


def test_a_changed_model_is_checked_afresh(folder, tmp_path):
    copy = tmp_path / "bikeshare.model.yaml"
    copy.write_bytes(OLD.read_bytes())
    compare.check_spec(str(copy))
    copy.write_bytes(OLD.read_bytes().replace(b"model: bikeshare", b"model: bikeshare_two", 1))
    _, model, _ = compare.check_spec(str(copy))
    assert not isinstance(model.tables, cache._Section)
    assert model.name == "bikeshare_two"
    assert len(_checks(folder)) == 2
