"""Hostile or odd repositories (issue 16, point 8): links out of the repository, a model deleted whole,
a tag of a commit the remote already has, a Git LFS pointer in place of a model.

Every repository is real and temporary, with the surrounding GIT_* variables cleared.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from gitkit import git, init_repo, isolate_git
from modeldiff import cli, hook

ROOT = Path(__file__).resolve().parent.parent
MODEL = (ROOT / "examples" / "bikeshare.model.yaml").read_text()
SMALL = """\
model: rides
format: 1
tables:
  trips: {kind: fact, key: trip_id, columns: {trip_id: integer, fare: decimal}}
measures:
  fare_revenue: {table: trips, expr: sum(fare)}
reports:
  weekly_fares: {measures: [fare_revenue]}
"""
LFS_POINTER = ("version https://git-lfs.github.com/spec/v1\n"
               "oid sha256:4d7a214614ab2935c943f9e0ff69d22eadbb8f32b1258daaa5e2ca24d17e2393\nsize 12345\n")


def run(*argv: str, cwd: Path) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    here = os.getcwd()
    os.chdir(cwd)
    try:
        code = cli.main(list(argv), stdout=out, stderr=err)
    finally:
        os.chdir(here)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def repo(tmp_path, monkeypatch):
    isolate_git(monkeypatch, tmp_path)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    path = init_repo(tmp_path / "repo")
    (path / "bikeshare.model.yaml").write_text(MODEL)
    (path / "rides.model.yaml").write_text(SMALL)
    return path


def commit(path: Path, message: str) -> None:
    git(path, "add", "-A")
    git(path, "commit", "-q", "--allow-empty", "-m", message)


# --- a committed model that is a link out of the repository ------------------------------------------------


@pytest.mark.parametrize("target", ["/etc/passwd", "../../outside.txt"])
@pytest.mark.parametrize("where", ["working tree", "revision"])
def test_a_model_linked_out_of_the_repository_is_named_not_read_and_the_others_are_compared(repo, target, where,
                                                                                          capsys):
    (repo.parent / "outside.txt").write_text("TOKEN=very-secret-value\nroot:x:0:0:root:/root:/bin/bash\n")
    os.symlink(target, repo / "secrets.model.yaml")
    commit(repo, "one")
    (repo / "rides.model.yaml").write_text(SMALL.replace("sum(fare)", "max(fare)"))
    if where == "revision":
        commit(repo, "two")
        code, out, err = run("diff", "--base", "HEAD~1", "--head", "HEAD", "--format", "json", cwd=repo)
    else:
        code, out, err = run("diff", "--base", "HEAD", "--format", "json", cwd=repo)
    err += capsys.readouterr().err
    assert code == 1, err  # rides: numbers move; bikeshare unchanged; the link is left out
    models = json.loads(out)["models"]
    assert sorted(m["model"] for m in models) == ["bikeshare", "rides"]
    notes = err.strip().splitlines()
    assert len(notes) == 1 and "secrets.model.yaml" in notes[0] and "outside the repository" in notes[0], err
    for leaked in ("root:x", "very-secret", "TOKEN"):
        assert leaked not in out + err


def test_a_model_linked_inside_the_repository_is_followed(repo):
    (repo / "shared").mkdir()
    (repo / "shared" / "rides.yaml").write_text(SMALL.replace("model: rides", "model: rides_too"))
    os.symlink("shared/rides.yaml", repo / "alias.model.yaml")
    commit(repo, "one")
    (repo / "shared" / "rides.yaml").write_text(SMALL.replace("model: rides", "model: rides_too")
                                                .replace("sum(fare)", "max(fare)"))
    code, out, err = run("diff", "--base", "HEAD", "--format", "json", cwd=repo)
    assert err == "" and code == 1
    assert "rides_too" in [m["model"] for m in json.loads(out)["models"]]


# --- a model deleted whole ---------------------------------------------------------------------------------------


def test_deleting_a_whole_model_is_breaking(repo):
    commit(repo, "one")
    (repo / "rides.model.yaml").unlink()
    code, out, err = run("diff", "--base", "HEAD", "rides.model.yaml", "--format", "json", cwd=repo)
    assert code == 3, err
    document = json.loads(out)
    kinds = {(c["kind"], c["severity"]) for c in document["changes"]}
    assert ("measure.removed", "breaking") in kinds and ("report.removed", "breaking") in kinds


def test_adding_a_whole_model_is_not_breaking(repo):
    commit(repo, "one")
    (repo / "more.model.yaml").write_text(SMALL.replace("model: rides", "model: more"))
    code, out, err = run("diff", "--base", "HEAD", "more.model.yaml", "--format", "json", cwd=repo)
    assert code in (0, 1), err  # additions: safe, or numbers where something already uses them
    assert all(c["severity"] != "breaking" for c in json.loads(out)["changes"])


def test_removing_one_report_and_its_measure_inside_a_model_stays_numbers(repo):
    # the twin: the model is still there, only items nothing else uses went (changes.md's rule applies)
    commit(repo, "one")
    (repo / "rides.model.yaml").write_text(SMALL.split("measures:")[0])
    code, out, err = run("diff", "--base", "HEAD", "rides.model.yaml", "--format", "json", cwd=repo)
    assert code == 1, err
    assert {c["severity"] for c in json.loads(out)["changes"]} == {"numbers"}


# --- a Git LFS pointer in place of a model --------------------------------------------------------------------------


@pytest.mark.parametrize("where", ["disk", "revision"])
def test_a_git_lfs_pointer_says_so(repo, where):
    (repo / "rides.model.yaml").write_text(LFS_POINTER)
    commit(repo, "one")
    spec = "rides.model.yaml" if where == "disk" else "HEAD:rides.model.yaml"
    code, out, err = run("check", spec, cwd=repo)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "Git LFS pointer" in err and "git lfs pull" in err and "rides.model.yaml" in err


def test_a_model_that_mentions_lfs_is_read_as_a_model(repo):
    (repo / "rides.model.yaml").write_text("# version https://git-lfs.github.com/spec/v1\n" + SMALL)
    code, out, err = run("check", "rides.model.yaml", cwd=repo)
    assert code == 0 and "LFS" not in err


# --- a tag of a commit the remote already has ------------------------------------------------------------------------


@pytest.fixture
def pushed(tmp_path, monkeypatch):
    """A work repository with main on a bare remote, and a branch `release` (a breaking change) pushed too."""
    isolate_git(monkeypatch, tmp_path)
    monkeypatch.setenv("MODELDIFF_NO_CACHE", "1")
    git(tmp_path, "init", "-q", "--bare", "remote.git")
    work = init_repo(tmp_path / "work")
    git(work, "config", "tag.gpgsign", "false")
    (work / "rides.model.yaml").write_text(SMALL)
    commit(work, "first")
    git(work, "remote", "add", "origin", "../remote.git")
    git(work, "push", "-q", "origin", "main")
    git(work, "checkout", "-q", "-b", "release")
    (work / "rides.model.yaml").write_text(SMALL.replace("  fare_revenue: {table: trips, expr: sum(fare)}\n", ""))
    commit(work, "drop fare revenue")  # breaking: weekly_fares still shows it
    git(work, "push", "-q", "--no-verify", "origin", "release")
    hook.install(str(work), io.StringIO(), python=sys.executable)
    return work


def push(work: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(["git", "push", *args], cwd=work, capture_output=True, text=True)


@pytest.mark.parametrize("annotated", [False, True])
def test_a_tag_of_a_commit_already_pushed_on_another_branch_brings_nothing_to_check(pushed, annotated):
    git(pushed, "tag", *(["-a", "-m", "release one"] if annotated else []), "v1", "release")
    done = push(pushed, "origin", "v1")
    assert done.returncode == 0, done.stderr
    assert "push blocked" not in done.stderr and "model(s) changed" not in done.stdout + done.stderr
    assert git(pushed.parent / "remote.git", "rev-parse", "--verify", "refs/tags/v1^{commit}") == git(pushed, "rev-parse", "release")


def test_a_tag_of_a_new_breaking_commit_is_still_blocked(pushed):
    (pushed / "rides.model.yaml").write_text(SMALL.replace("sum(fare)", "sum(fare)\n  extra: {table: nowhere, expr: sum(x)}"))
    commit(pushed, "a broken reference")
    git(pushed, "tag", "v2")
    done = push(pushed, "origin", "v2")
    assert done.returncode != 0 and "push blocked" in done.stderr


# --- a model blob over the size limit ---------------------------------------------------------------------------


@pytest.mark.parametrize("size, refused", [(64, False), (65, True)])
def test_a_committed_model_over_the_limit_is_refused_before_it_is_read(repo, monkeypatch, size, refused):
    from modeldiff import load

    monkeypatch.setattr(load.text, "MAX_FILE_BYTES", 64)
    (repo / "rides.model.yaml").write_text("model: rides\nformat: 1\ntables: {}\n" + "#" * (size - 34))
    commit(repo, "one")
    assert (repo / "rides.model.yaml").stat().st_size == size
    code, out, err = run("check", "HEAD:rides.model.yaml", cwd=repo)
    assert (code == 2 and "limit" in err) is refused, (code, err)


# --- a model path on disk that links out of its repository ------------------------------------------------------


@pytest.mark.parametrize("command", ["check", "diff"])
@pytest.mark.parametrize("where", ["file", "in a folder"])
def test_a_model_on_disk_linking_out_of_its_repository_is_refused_without_its_content(repo, command, where):
    (repo.parent / "outside.txt").write_text("TOKEN=very-secret-value\nroot:x:0:0:root:/root:/bin/bash\n")
    if where == "file":
        os.symlink("../outside.txt", repo / "secrets.model.yaml")
        target = "secrets.model.yaml"
    else:
        (repo / "more.model").mkdir()
        (repo / "more.model" / "a.yaml").write_text(SMALL)
        os.symlink("../../outside.txt", repo / "more.model" / "b.yaml")
        target = "more.model"
    argv = ["check", target] if command == "check" else ["diff", "rides.model.yaml", target]
    code, out, err = run(*argv, cwd=repo)
    assert code == 2 and err.count("\n") == 1 and "outside the repository" in err, err
    assert "very-secret" not in out + err and "root:x" not in out + err


def test_the_same_file_named_by_its_own_path_is_read(repo, tmp_path):
    # the twin: the person running the command names a model outside the repository on purpose
    outside = tmp_path / "elsewhere.model.yaml"
    outside.write_text(SMALL)
    code, out, err = run("check", str(outside), cwd=repo)
    assert code == 0 and err == ""
    os.symlink("bikeshare.model.yaml", repo / "alias.model.yaml")  # and a link inside the repository is followed
    code, out, err = run("check", "alias.model.yaml", cwd=repo)
    assert code in (0, 3) and "outside" not in err
