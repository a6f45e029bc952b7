"""modeldiff.git on real temporary repositories (git itself, no mocks)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from gitkit import git, init_repo, isolate_git

from modeldiff import git as mgit
from modeldiff.errors import GitError, ModeldiffError

TRIPS_V1 = b"model: bikeshare\nformat: 1\ntables:\n  trips: {kind: fact, key: trip_id, columns: {trip_id: integer}}\n"
TRIPS_V2 = TRIPS_V1 + b"measures:\n  trip_count: {table: trips, expr: count(*)}\n"


run_git = git


def write(root: Path, relative: str, content: bytes | str) -> None:
    target = root / relative
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_bytes(content.encode() if isinstance(content, str) else content)


def commit_all(root: Path, message: str) -> str:
    run_git(root, "add", "-A")
    run_git(root, "commit", "-q", "-m", message)
    return run_git(root, "rev-parse", "HEAD")


make_repo = init_repo


@pytest.fixture(autouse=True)
def clean_git_env(monkeypatch, tmp_path):
    isolate_git(monkeypatch, tmp_path)


@pytest.fixture
def repo(tmp_path) -> Path:
    """Two commits: v1 then v2 of models/bikeshare.model.yaml, plus a folder model and an unrelated file."""
    root = make_repo(tmp_path / "repo")
    write(root, "models/bikeshare.model.yaml", TRIPS_V1)
    write(root, "models/stock.model/tables.yaml", "tables: {}\n")
    write(root, "models/stock.model/README.md", "not yaml\n")
    write(root, "docs/notes.yaml", "not: a model\n")
    commit_all(root, "first")
    write(root, "models/bikeshare.model.yaml", TRIPS_V2)
    commit_all(root, "second")
    return root


def one_line(exc: pytest.ExceptionInfo) -> str:
    text = str(exc.value)
    assert "\n" not in text and "Traceback" not in text
    return text


# --- pure helpers ----------------------------------------------------------


def test_model_files_of_paths_maps_folder_members_to_the_folder():
    paths = [
        "models/stock.model/tables.yaml",
        "models/stock.model/nested/links.yml",
        "models/bikeshare.model.yaml",
        "models/old.model.yml",
    ]
    assert mgit.model_files_of_paths(paths) == [
        "models/bikeshare.model.yaml",
        "models/old.model.yml",
        "models/stock.model",
    ]


def test_model_files_of_paths_ignores_files_that_are_no_model():
    paths = [
        "docs/notes.yaml",  # yaml, but not NAME.model.yaml
        "models/stock.model/README.md",  # inside a model folder, but not yaml
        "models/.model.yaml",  # no NAME
        "src/app.py",
    ]
    assert mgit.model_files_of_paths(paths) == []


def test_split_spec_respects_braces_in_revisions():
    assert mgit.split_spec("main:models/x.model.yaml") == ("main", "models/x.model.yaml")
    assert mgit.split_spec("main@{2024-05-01 10:00}:x.model.yaml") == ("main@{2024-05-01 10:00}", "x.model.yaml")
    assert mgit.split_spec("models/x.model.yaml") is None


@pytest.mark.parametrize("sha", ["0" * 40, "0" * 64, "0000000"])
def test_null_sha_is_detected_at_any_length(sha):
    assert mgit.is_null_sha(sha)


@pytest.mark.parametrize("sha", ["0" * 39 + "1", "1" * 64, "", "main"])
def test_other_shas_are_not_null(sha):
    assert not mgit.is_null_sha(sha)


def test_importing_the_module_does_not_import_gitpython():
    code = "import sys, modeldiff.git; print('git' in sys.modules, 'gitdb' in sys.modules)"
    done = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True)
    assert done.stdout.split() == ["False", "False"]


# --- reading ---------------------------------------------------------------


def test_read_file_at_previous_revision_and_in_working_tree(repo):
    write(repo, "models/bikeshare.model.yaml", TRIPS_V2 + b"# local edit\n")
    old = mgit.read_at(repo, "HEAD~1", "models/bikeshare.model.yaml")
    new = mgit.read_at(repo, None, "models/bikeshare.model.yaml")
    assert old.files == (("HEAD~1:models/bikeshare.model.yaml", TRIPS_V1),)
    assert old.rev == "HEAD~1" and old.commit == run_git(repo, "rev-parse", "HEAD~1")
    assert old.blob_id == run_git(repo, "rev-parse", "HEAD~1:models/bikeshare.model.yaml")
    assert new.files == (("models/bikeshare.model.yaml", TRIPS_V2 + b"# local edit\n"),)
    assert new.rev is None and new.blob_id is None


def test_read_folder_model_at_revision_returns_its_yaml_files_sorted(repo):
    write(repo, "models/stock.model/links.yml", "links: {}\n")
    write(repo, "models/stock.model/more/roles.yaml", "roles: {}\n")
    commit_all(repo, "more stock files")
    source = mgit.read_at(repo, "main", "models/stock.model")
    assert [name for name, _ in source.files] == [
        "main:models/stock.model/links.yml",
        "main:models/stock.model/more/roles.yaml",
        "main:models/stock.model/tables.yaml",
    ]
    assert source.blob_id == run_git(repo, "rev-parse", "main:models/stock.model")
    in_tree = mgit.read_at(repo, None, "models/stock.model")
    assert [name for name, _ in in_tree.files] == [
        "models/stock.model/links.yml",
        "models/stock.model/more/roles.yaml",
        "models/stock.model/tables.yaml",
    ]
    assert [data for _, data in in_tree.files] == [data for _, data in source.files]


def test_read_at_returns_none_for_a_path_missing_at_the_revision(repo):
    write(repo, "models/new.model.yaml", TRIPS_V1)
    commit_all(repo, "new model")
    assert mgit.read_at(repo, "HEAD~1", "models/new.model.yaml") is None
    assert mgit.read_at(repo, "HEAD", "models/new.model.yaml") is not None


def test_read_at_treats_a_folder_without_yaml_as_no_model(repo):
    write(repo, "models/empty.model/README.md", "later\n")
    commit_all(repo, "placeholder")
    assert mgit.read_at(repo, "HEAD", "models/empty.model") is None
    assert mgit.read_at(repo, None, "models/empty.model") is None


def test_read_at_follows_a_symlinked_model_file(repo):
    (repo / "models" / "alias.model.yaml").symlink_to("bikeshare.model.yaml")
    commit_all(repo, "alias")
    source = mgit.read_at(repo, "HEAD", "models/alias.model.yaml")
    assert source.path == "models/alias.model.yaml"
    assert source.files == (("HEAD:models/alias.model.yaml", TRIPS_V2),)


def test_read_spec_reads_rev_colon_path_relative_to_the_repository_root(repo):
    source = mgit.read_spec("HEAD~1:models/bikeshare.model.yaml", cwd=repo / "models")
    assert source.files[0][1] == TRIPS_V1 and source.path == "models/bikeshare.model.yaml"


def test_read_spec_dot_slash_path_is_relative_to_cwd(repo):
    source = mgit.read_spec("HEAD~1:./bikeshare.model.yaml", cwd=repo / "models")
    assert source.path == "models/bikeshare.model.yaml" and source.files[0][1] == TRIPS_V1


def test_read_spec_plain_path_reads_the_disk(repo):
    write(repo, "models/bikeshare.model.yaml", b"edited\n")
    source = mgit.read_spec("models/bikeshare.model.yaml", cwd=repo)
    assert source.rev is None and source.files[0][1] == b"edited\n"


def test_read_spec_prefers_an_existing_file_whose_name_has_a_colon(tmp_path):
    write(tmp_path, "main:odd.model.yaml", b"on disk\n")
    source = mgit.read_spec("main:odd.model.yaml", cwd=tmp_path)  # tmp_path is not even a repository
    assert source.rev is None and source.files == ((str(tmp_path / "main:odd.model.yaml"), b"on disk\n"),)


def test_read_spec_missing_plain_path_is_one_clear_line(tmp_path):
    with pytest.raises(ModeldiffError) as exc:
        mgit.read_spec("nowhere.model.yaml", cwd=tmp_path)
    assert "REV:PATH" in one_line(exc)


def test_read_spec_path_missing_at_revision_is_a_git_error(repo):
    with pytest.raises(GitError) as exc:
        mgit.read_spec("HEAD~1:models/nope.model.yaml", cwd=repo)
    assert "'models/nope.model.yaml' does not exist at revision 'HEAD~1'" in one_line(exc)


# --- listing and comparing -------------------------------------------------


def test_list_models_at_a_revision(repo):
    write(repo, "models/later.model.yaml", TRIPS_V1)
    commit_all(repo, "later")
    assert mgit.list_models(repo, "HEAD~1") == ["models/bikeshare.model.yaml", "models/stock.model"]
    assert mgit.list_models(repo, "HEAD") == [
        "models/bikeshare.model.yaml",
        "models/later.model.yaml",
        "models/stock.model",
    ]


def test_list_models_in_working_tree_includes_untracked_and_excludes_ignored(repo):
    write(repo, ".gitignore", "scratch/\n")
    write(repo, "models/draft.model.yaml", TRIPS_V1)  # untracked, not ignored
    write(repo, "scratch/tmp.model.yaml", TRIPS_V1)  # ignored
    (repo / "models" / "bikeshare.model.yaml").unlink()  # tracked, deleted on disk
    assert mgit.list_models(repo, None) == ["models/draft.model.yaml", "models/stock.model"]


def test_changed_models_between_two_commits(repo):
    assert mgit.changed_models(repo, "HEAD~1", "HEAD") == ["models/bikeshare.model.yaml"]


def test_changed_models_is_empty_when_no_model_changed(repo):
    write(repo, "docs/notes.yaml", "still: not a model\n")
    write(repo, "models/stock.model/README.md", "a readme is no model file\n")
    commit_all(repo, "docs only")
    assert mgit.changed_models(repo, "HEAD~1", "HEAD") == []
    assert mgit.changed_models(repo, "HEAD", None) == []


def test_changed_models_against_the_working_tree(repo):
    write(repo, "models/stock.model/links.yaml", "links: {}\n")  # untracked file in a folder model
    write(repo, "models/new.model.yaml", TRIPS_V1)  # untracked model
    write(repo, "docs/notes.yaml", "edited: yes\n")  # not a model
    assert mgit.changed_models(repo, "HEAD", None) == ["models/new.model.yaml", "models/stock.model"]
    assert mgit.changed_models(repo, "HEAD~1", None) == [
        "models/bikeshare.model.yaml",
        "models/new.model.yaml",
        "models/stock.model",
    ]


def test_moved_model_file_shows_up_as_removed_and_added(repo):
    run_git(repo, "mv", "models/bikeshare.model.yaml", "models/rides.model.yaml")
    run_git(repo, "commit", "-q", "-m", "move")
    expected = ["models/bikeshare.model.yaml", "models/rides.model.yaml"]
    assert mgit.changed_models(repo, "HEAD~1", "HEAD") == expected
    assert mgit.read_at(repo, "HEAD", "models/bikeshare.model.yaml") is None
    assert mgit.read_at(repo, "HEAD~1", "models/rides.model.yaml") is None


# --- revisions -------------------------------------------------------------


def test_tags_are_peeled_to_their_commit(repo):
    run_git(repo, "tag", "-a", "v1", "-m", "release", "HEAD~1")
    run_git(repo, "tag", "light", "HEAD")
    tag_object = run_git(repo, "rev-parse", "v1")
    commit = run_git(repo, "rev-parse", "HEAD~1")
    assert tag_object != commit
    assert mgit.resolve_rev(repo, "v1") == commit
    assert mgit.resolve_rev(repo, tag_object) == commit
    assert mgit.resolve_rev(repo, "light") == run_git(repo, "rev-parse", "HEAD")


def test_unknown_revision_is_one_clear_line(repo):
    with pytest.raises(GitError) as exc:
        mgit.resolve_rev(repo, "no-such-branch")
    text = one_line(exc)
    assert "revision 'no-such-branch' not found in" in text and "shallow" not in text


def test_null_sha_cannot_be_resolved_or_read(repo):
    with pytest.raises(GitError) as exc:
        mgit.read_at(repo, "0" * 40, "models/bikeshare.model.yaml")
    assert "all-zero" in one_line(exc)
    assert not mgit.rev_exists(repo, "0" * 64)


def test_rev_exists(repo):
    assert mgit.rev_exists(repo, run_git(repo, "rev-parse", "HEAD"))
    assert not mgit.rev_exists(repo, "1234567" * 5 + "89abc")


def test_not_a_repository_is_one_clear_line(tmp_path):
    plain = tmp_path / "plain"
    plain.mkdir()
    with pytest.raises(GitError) as exc:
        mgit.list_models(plain, None)
    assert "is not inside a git repository" in one_line(exc)


def test_repo_root_from_a_subfolder(repo):
    assert os.path.samefile(mgit.repo_root(repo / "models"), repo)


def test_shallow_clone_missing_base_says_shallow(repo, tmp_path):
    base = run_git(repo, "rev-parse", "HEAD~1")
    clone = tmp_path / "clone"
    run_git(tmp_path, "clone", "-q", "--depth", "1", repo.as_uri(), str(clone))
    assert mgit.rev_exists(repo, base)  # the full repository has it
    assert not mgit.rev_exists(clone, base)
    with pytest.raises(GitError) as exc:
        mgit.changed_models(clone, base, "HEAD")
    text = one_line(exc)
    assert "shallow" in text and "git fetch --unshallow" in text
    with pytest.raises(GitError) as exc:
        mgit.read_at(clone, "HEAD~1", "models/bikeshare.model.yaml")
    assert "shallow" in one_line(exc)


def test_merge_base_of_two_branches_and_of_unrelated_histories(repo):
    fork = run_git(repo, "rev-parse", "HEAD")
    run_git(repo, "switch", "-q", "-c", "feature")
    write(repo, "models/stock.model/tables.yaml", "tables: {parts: {}}\n")
    commit_all(repo, "feature work")
    run_git(repo, "switch", "-q", "main")
    write(repo, "docs/notes.yaml", "main: moved on\n")
    commit_all(repo, "main work")
    assert mgit.merge_base(repo, "main", "feature") == fork
    run_git(repo, "switch", "-q", "--orphan", "island")
    write(repo, "island.model.yaml", TRIPS_V1)
    commit_all(repo, "unrelated root")
    assert mgit.merge_base(repo, "main", "island") is None


def test_commits_in_range_oldest_first(repo):
    first = run_git(repo, "rev-parse", "HEAD~1")
    second = run_git(repo, "rev-parse", "HEAD")
    write(repo, "docs/notes.yaml", "third\n")
    third = commit_all(repo, "third")
    assert mgit.commits_in_range(repo, f"{first}..HEAD") == [second, third]
    assert mgit.commits_in_range(repo, "HEAD..HEAD") == []
    assert mgit.commits_in_range(repo, "HEAD") == [first, second, third]


def test_commit_trailers_are_parsed(repo):
    message = (
        "Widen the trips link\n\nBody text: not a trailer.\n\n"
        "Model-Reviewed: links.trips_bike\nModel-Reviewed: measures.fare_revenue\nRefs: 12\n"
    )
    write(repo, "docs/notes.yaml", "x\n")
    run_git(repo, "add", "-A")
    run_git(repo, "commit", "-q", "-m", message)
    assert mgit.commit_trailers(repo, "HEAD") == {
        "Model-Reviewed": ["links.trips_bike", "measures.fare_revenue"],
        "Refs": ["12"],
    }


def test_commit_without_trailers_gives_empty_dict(repo):
    assert mgit.commit_trailers(repo, "HEAD") == {}


# --- environment -----------------------------------------------------------


def test_git_dir_of_another_repository_does_not_leak(repo, tmp_path, monkeypatch):
    other = make_repo(tmp_path / "other")
    write(other, "elsewhere.model.yaml", TRIPS_V1)
    commit_all(other, "other")
    monkeypatch.setenv("GIT_DIR", str(other / ".git"))
    monkeypatch.setenv("GIT_INDEX_FILE", str(other / ".git" / "index"))
    assert mgit.list_models(repo, "HEAD") == ["models/bikeshare.model.yaml", "models/stock.model"]
    assert mgit.changed_models(repo, "HEAD~1", None) == ["models/bikeshare.model.yaml"]
    assert os.environ["GIT_DIR"] == str(other / ".git")  # restored afterwards


def test_index_of_the_same_repository_is_kept(repo, monkeypatch):
    # As in a pre-commit hook of this repository: git exports GIT_DIR and GIT_INDEX_FILE (here an index
    # where an otherwise ignored model is staged), and they must stay visible to the git we run.
    write(repo, ".gitignore", "scratch/\n")
    write(repo, "scratch/hot.model.yaml", TRIPS_V1)
    alternate = repo / ".git" / "alternate-index"
    alternate.write_bytes((repo / ".git" / "index").read_bytes())
    subprocess.run(
        ["git", "add", "-f", "scratch/hot.model.yaml"],
        cwd=repo,
        check=True,
        env={**os.environ, "GIT_INDEX_FILE": str(alternate)},
    )
    assert "scratch/hot.model.yaml" not in mgit.list_models(repo, None)
    monkeypatch.setenv("GIT_DIR", str(repo / ".git"))
    monkeypatch.setenv("GIT_INDEX_FILE", str(alternate))
    assert "scratch/hot.model.yaml" in mgit.list_models(repo, None)
    assert os.environ["GIT_INDEX_FILE"] == str(alternate)


def test_missing_object_in_a_damaged_repository_is_one_clear_line(repo):
    blob = run_git(repo, "rev-parse", "HEAD~1:models/bikeshare.model.yaml")
    (repo / ".git" / "objects" / blob[:2] / blob[2:]).unlink()  # fresh repositories keep loose objects
    with pytest.raises(GitError) as exc:
        mgit.read_at(repo, "HEAD~1", "models/bikeshare.model.yaml")
    assert "cannot be read" in one_line(exc)
    assert mgit.read_at(repo, "HEAD", "models/bikeshare.model.yaml") is not None
