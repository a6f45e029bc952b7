"""The cache of compared revisions (modeldiff/cache.py) and compare.py's use of it."""

from __future__ import annotations

import io
import os
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
DEFERRED = model.DeferredSection


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
    else:  # a correctly signed entry whose payload names something that is not a modeldiff record
        payload = b'{"format":2,"call":["os.system","true"]}'
        entry.write_bytes(cache._header(cache._secret(str(folder), False), "pair", entry.name[5:-6], payload) + payload)
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)  # computed afresh
    assert _json(again) == _json(first)
    assert entry.read_bytes() == blob  # removed and written again whole


def test_an_entry_of_another_tool_version_is_not_used(folder, monkeypatch):
    compare.compare_specs(str(OLD), str(NEW))
    monkeypatch.setattr(cache, "_FINGERPRINT", "another version")
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)


def test_the_reader_builds_only_modeldiff_records():
    from modeldiff.model import Pos

    for foreign in (["os.system", "true"], ["Popen", "x"], ["t", {"a": ["eval", "1"]}], [], [1, 2], ["Pos", "f", 1]):
        with pytest.raises(cache._Unfit):
            cache._decode(foreign)
    cache._record_table()
    assert cache._decode(cache._encode({"p": Pos("f", 1, 2)})) == {"p": Pos("f", 1, 2)}
    with pytest.raises(cache._Unfit):  # a record whose field has the wrong type
        cache._decode(["Pos", "f", "1", 2])


def test_a_diff_without_the_cache_loads_no_hashing():
    # MODELDIFF_NO_CACHE=1: the cache's libraries are never imported (start-up time, docs/performance.md).
    code = ("import sys; from modeldiff.cli import main; main(['diff', sys.argv[1], sys.argv[2]]); "
            "print(sorted(m for m in ('hashlib', 'tempfile') if m in sys.modules), file=sys.stderr)")
    done = subprocess.run([sys.executable, "-c", code, str(OLD), str(NEW)], capture_output=True, text=True,
                          env={**os.environ, "MODELDIFF_NO_CACHE": "1"})
    assert done.stderr.strip() == "[]", done.stderr


def test_a_diff_with_the_cache_does_hash(tmp_path):
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
    assert sorted(p.name for p in tmp_path.iterdir()) == [cache.KEY_FILE, f"pair-same{cache.SUFFIX}"]  # no temporary file left


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
    assert isinstance(again_model.tables, DEFERRED)  # from the cache: nothing parsed
    assert (again_label, again) == (first[0], first[2]) == (label, fresh)
    assert again_model == model and again_model.name == model.name


def test_a_changed_model_is_checked_afresh(folder, tmp_path):
    copy = tmp_path / "bikeshare.model.yaml"
    copy.write_bytes(OLD.read_bytes())
    compare.check_spec(str(copy))
    copy.write_bytes(OLD.read_bytes().replace(b"model: bikeshare", b"model: bikeshare_two", 1))
    _, model, _ = compare.check_spec(str(copy))
    assert not isinstance(model.tables, DEFERRED)
    assert model.name == "bikeshare_two"
    assert len(_checks(folder)) == 2


# --------------------------------------------------------------------------- hostile cache folders (issue 16)


def _old_style_entry(payload: bytes) -> bytes:
    """An entry as the pickle-based cache (format 1) wrote it: magic, format, fingerprint, SHA-256 of the payload."""
    import hashlib

    return b" ".join((cache.MAGIC, b"1", cache.fingerprint().encode(),
                      hashlib.sha256(payload).hexdigest().encode())) + b"\n" + payload


def _pickle_running(command: str) -> bytes:
    """A pickle that calls os.system(command) through a dotted name of a modeldiff module (protocol 4)."""
    import struct

    def text(value: str) -> bytes:
        data = value.encode()
        return b"\x8c" + struct.pack("<B", len(data)) + data  # SHORT_BINUNICODE

    return (b"\x80\x04" + text("modeldiff.cache") + text("os.system") + b"\x93"  # STACK_GLOBAL
            + text(command) + b"\x85" + b"R" + b".")  # TUPLE1, REDUCE, STOP


def test_a_planted_entry_runs_no_code(folder, tmp_path):
    compare.compare_specs(str(OLD), str(NEW))
    (entry,) = _pairs(folder)
    marker = tmp_path / "ran"
    payload = _pickle_running(f"touch {marker}")
    for forged in (_old_style_entry(payload), payload, b"modeldiff-cache 2 0000\n" + payload):
        entry.write_bytes(forged)
        again = compare.compare_specs(str(OLD), str(NEW))
        assert again.result.changes  # computed afresh
        assert not marker.exists()
    assert "import pickle" not in Path(cache.__file__).read_text()


def test_an_entry_signed_without_the_secret_changes_no_verdict(folder):
    fresh = compare.compare_specs(str(OLD), str(NEW))
    assert fresh.result.verdict != "safe"
    (entry,) = _pairs(folder)
    key = entry.name[len("pair-"):-len(cache.SUFFIX)]
    import json

    forged = cache._encode({"format": cache.FORMAT, "old": ("bikeshare", 1), "new": ("bikeshare", 1),
                            "changes": (), "measures": (), "roles": (), "reports": (), "new_errors": ()})
    payload = json.dumps(forged).encode()
    entry.write_bytes(cache._header(b"x" * cache.KEY_BYTES, "pair", key, payload) + payload)  # a guessed secret
    again = compare.compare_specs(str(OLD), str(NEW))
    assert again.result.verdict == fresh.result.verdict
    assert _json(again) == _json(fresh)


def test_a_valid_entry_moved_under_another_key_is_not_believed(folder, tmp_path):
    # "no changes" of OLD against itself, renamed to the key of OLD against NEW: the MAC names its key.
    compare.compare_specs(str(OLD), str(OLD))
    (same,) = _pairs(folder)
    fresh = compare.compare_specs(str(OLD), str(NEW))
    target = [p for p in _pairs(folder) if p != same][0]
    target.write_bytes(same.read_bytes())
    again = compare.compare_specs(str(OLD), str(NEW))
    assert again.result.verdict == fresh.result.verdict != "safe"
    assert not isinstance(again.result.new.tables, DEFERRED)


def test_a_signed_entry_of_the_wrong_shape_is_a_miss_and_removed(folder):
    compare.compare_specs(str(OLD), str(NEW))
    (entry,) = _pairs(folder)
    key = entry.name[len("pair-"):-len(cache.SUFFIX)]
    secret = cache._secret(str(folder), False)
    bad_change = ["Change", "table.added", "tables.x", "catastrophic", "m", None, None, {}, "c1"]
    for payload in (b'{"format": 2}', b"[1, 2", b'["t"]', f'{{"format":2,"old":["t","m",1],"new":["t","m",1],'
                    f'"changes":["t",{__import__("json").dumps(bad_change)}],"measures":["t"],"roles":["t"],'
                    f'"reports":["t"],"new_errors":["t"]}}'.encode()):
        entry.write_bytes(cache._header(secret, "pair", key, payload) + payload)
        assert cache.load_pair(str(folder), key, None, None) is None
        assert not entry.exists() or entry.read_bytes() != cache._header(secret, "pair", key, payload) + payload


def test_a_fifo_or_a_link_to_a_device_as_entry_does_not_hang(folder):
    compare.compare_specs(str(OLD), str(NEW))
    (entry,) = _pairs(folder)
    for plant in ("fifo", "zero"):
        entry.unlink()
        if plant == "fifo":
            os.mkfifo(entry)
        else:
            os.symlink("/dev/zero", entry)
        done = subprocess.run([sys.executable, "-m", "modeldiff", "diff", str(OLD), str(NEW)], capture_output=True,
                              text=True, timeout=120, env={**os.environ, cache.DIR_ENV: str(folder)})
        assert done.returncode == 3, done.stderr
        assert "Traceback" not in done.stderr
        assert entry.is_file() and not entry.is_symlink()  # replaced by a real entry


def test_the_cache_folder_is_made_private(folder):
    compare.compare_specs(str(OLD), str(NEW))
    assert folder.stat().st_mode & 0o777 == 0o700
    key = folder / cache.KEY_FILE
    assert key.stat().st_mode & 0o777 == 0o600 and key.stat().st_size == cache.KEY_BYTES


@pytest.mark.parametrize("problem", ["group-writable", "world-writable", "another-owner"])
def test_a_folder_others_may_write_is_refused_with_a_note(folder, monkeypatch, capsys, problem):
    folder.mkdir(mode=0o700)
    if problem == "another-owner":
        real = os.geteuid()
        monkeypatch.setattr(os, "geteuid", lambda: real + 1)
    else:
        folder.chmod(0o770 if problem == "group-writable" else 0o707)
    fresh = compare.compare_specs(str(OLD), str(NEW))
    again = compare.compare_specs(str(OLD), str(NEW))
    assert fresh.result.changes and _json(again) == _json(fresh)
    assert not list(folder.iterdir())  # nothing written there, nothing read
    notes = capsys.readouterr().err.splitlines()
    assert len(notes) == 1 and str(folder) in notes[0] and "not using the cache folder" in notes[0], notes


def test_a_private_folder_gets_no_note(folder, capsys):
    folder.mkdir(mode=0o755)  # others may read but not write: fine
    compare.compare_specs(str(OLD), str(NEW))
    compare.compare_specs(str(OLD), str(NEW))
    assert capsys.readouterr().err == ""
    assert len(_pairs(folder)) == 1


def test_a_key_file_others_may_read_is_replaced(folder):
    compare.compare_specs(str(OLD), str(NEW))
    key = folder / cache.KEY_FILE
    before = key.read_bytes()
    key.chmod(0o644)
    cache._SECRETS.clear()
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)  # old entries were signed by a shown key
    assert key.read_bytes() != before and key.stat().st_mode & 0o777 == 0o600


def test_a_key_from_the_environment_signs_instead(folder, monkeypatch):
    monkeypatch.setenv(cache.KEY_ENV, "one secret")
    compare.compare_specs(str(OLD), str(NEW))
    cache._SECRETS.clear()
    monkeypatch.setenv(cache.KEY_ENV, "another secret")
    again = compare.compare_specs(str(OLD), str(NEW))
    assert not isinstance(again.result.new.tables, DEFERRED)
    cache._SECRETS.clear()
    monkeypatch.setenv(cache.KEY_ENV, "another secret")
    third = compare.compare_specs(str(OLD), str(NEW))
    assert isinstance(third.result.new.tables, DEFERRED)


def test_every_scenario_comes_back_from_an_entry_equal():
    # The JSON form keeps every record, tuple, list, set and dict of a comparison as it was.
    from scenariokit import scenario_pairs

    cache._record_table()
    for old, new in scenario_pairs():
        result = compare.compare_specs(str(old), str(new), use_cache=False).result
        for part in (result.changes, result.measures, result.roles, result.reports, result.new_errors):
            import json

            assert cache._decode(json.loads(json.dumps(cache._encode(tuple(part))))) == tuple(part), old


def test_random_values_round_trip_and_foreign_json_never_raises_past_unfit():
    import json
    import random

    rng = random.Random(16)
    scalars = [None, True, False, 0, -1, 2**70, 1.5, float("inf"), "", "x", "\udcff", "t", "Change"]

    def value(depth=0):
        pick = rng.randrange(8 if depth < 4 else 1)
        if pick == 0:
            return rng.choice(scalars)
        items = [value(depth + 1) for _ in range(rng.randrange(4))]
        if pick == 1:
            return tuple(items)
        if pick == 2:
            return items
        if pick == 3:
            return {str(rng.randrange(5)): v for v in items}
        if pick == 4:
            return {(1, str(i)): v for i, v in enumerate(items)}
        if pick == 5:
            return frozenset(x for x in items if x is None or isinstance(x, (str, int, float)))
        return rng.choice(scalars)

    for _ in range(300):
        original = value()
        assert cache._decode(json.loads(json.dumps(cache._encode(original)))) == original
        garbage = json.loads(json.dumps(cache._encode(original)).replace('"t"', '"Impact"').replace('"l"', '"d"'))
        try:
            cache._decode(garbage)
        except cache._Unfit:
            pass


def _random_value(rng, depth: int = 0):
    choice = rng.randrange(9 if depth < 3 else 4)
    if choice == 0:
        return None
    if choice == 1:
        return rng.choice([0, -7, 3.5, 1e300, True, False])
    if choice in (2, 3):
        return rng.choice(["", "a", "é ü", "\u2192", "quote \" and \\\\", "\ud800"])
    if choice == 4:
        return tuple(_random_value(rng, depth + 1) for _ in range(rng.randrange(4)))
    if choice == 5:
        return [_random_value(rng, depth + 1) for _ in range(rng.randrange(4))]
    if choice == 6:
        return {f"k{i}": _random_value(rng, depth + 1) for i in range(rng.randrange(4))}
    if choice == 7:
        return frozenset(rng.sample(["x", "y", "z"], rng.randrange(3)))
    return {1: "a", (2,): "b"}


@pytest.mark.parametrize("seed", range(300))
def test_an_entry_encoded_piece_by_piece_is_the_entry_encoded_whole(seed):
    import json
    import random

    rng = random.Random(seed)
    value = {f"f{i}": _random_value(rng) for i in range(rng.randrange(5))} if seed % 5 else _random_value(rng)
    whole = json.dumps(cache._encode(value), separators=(",", ":")).encode("utf-8", "surrogatepass")
    assert cache._payload(value, 1 << 20) == whole
    assert cache._payload(value, len(whole)) == whole and (len(whole) < 3 or cache._payload(value, len(whole) - 1) is None)


def test_an_entry_larger_than_can_be_read_back_is_not_written(tmp_path, monkeypatch):
    monkeypatch.setattr(cache, "MAX_ENTRY_BYTES", 4096)
    built = []
    real_encode = cache._encode

    def encode(value):
        built.append(value)
        return real_encode(value)

    monkeypatch.setattr(cache, "_encode", encode)
    large = {"format": 1, "changes": tuple(f"change {n}" * 10 for n in range(10_000))}
    assert cache.write(str(tmp_path), "pair", "large", large) is False
    assert not list(tmp_path.glob("pair-*"))
    assert len(built) < 100  # given up at the limit, not encoded whole first
    small = {"format": 1, "changes": tuple(f"change {n}" for n in range(10))}  # twin: within the limit
    assert cache.write(str(tmp_path), "pair", "small", small) is True
    assert cache.read(str(tmp_path), "pair", "small") == small
