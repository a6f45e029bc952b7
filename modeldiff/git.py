"""Reading models at git revisions: the only module that calls git.

Everything here returns plain types (strings, tuples of bytes, `ModelSource`)
and raises `GitError` with one actionable sentence; GitPython's exceptions
never leave this module. GitPython is imported inside functions only, so the
fast paths of the command line (`--version`, plain files) never pay for it.

Model paths:
- a file whose name is `NAME.model.yaml` or `NAME.model.yml`;
- a folder `NAME.model/`: every `.yaml`/`.yml` file below it (recursively)
  belongs to it, sorted by path relative to the folder. A folder without such
  files is not a model.

Environment: git exports `GIT_DIR` and friends to hooks. When the repository
opened here is not the one those variables name, they are removed for the
duration of the call (GitPython offers no way to unset a variable for its
subprocesses), and restored afterwards.
"""

from __future__ import annotations

import contextlib
import os
import posixpath
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Iterable, Iterator, Sequence

from modeldiff.errors import GitError, ModeldiffError

if TYPE_CHECKING:  # pragma: no cover
    import git as gitpython

YAML_SUFFIXES = (".yaml", ".yml")
MODEL_FILE_SUFFIXES = (".model.yaml", ".model.yml")
MODEL_DIR_SUFFIX = ".model"

# Variables that tell git which repository, work tree, index and object store to use.
_LOCATION_VARS = (
    "GIT_DIR",
    "GIT_WORK_TREE",
    "GIT_INDEX_FILE",
    "GIT_OBJECT_DIRECTORY",
    "GIT_ALTERNATE_OBJECT_DIRECTORIES",
    "GIT_COMMON_DIR",
    "GIT_NAMESPACE",
    "GIT_QUARANTINE_PATH",
)
_FETCHABLE = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_./-]*")  # a sha or a ref name, not HEAD~1 or main^2
_SYMLINK_MODE = 0o120000
_MAX_LINK_HOPS = 8


@dataclass(frozen=True)
class ModelSource:
    """The raw files of one model at one revision, before any YAML is parsed."""

    rev: str | None  # the revision as the user wrote it; None = working tree / plain path
    path: str  # as given (plain path) or relative to the repository root (revision)
    files: tuple[tuple[str, bytes], ...]  # (display name, content), sorted
    blob_id: str | None  # git object id of the file or folder at the revision; None on disk
    commit: str | None = None  # full sha the revision resolved to; None on disk


# ---------------------------------------------------------------------------
# Pure path helpers (no git)


def is_null_sha(sha: str) -> bool:
    """True for git's all-zero placeholder id, in SHA-1 (40) or SHA-256 (64) repositories alike."""
    text = sha.strip()
    return bool(text) and set(text) == {"0"}


def _is_yaml_name(name: str) -> bool:
    return name.lower().endswith(YAML_SUFFIXES)


def _is_model_file_name(name: str) -> bool:
    lower = name.lower()
    return any(lower.endswith(s) and len(lower) > len(s) for s in MODEL_FILE_SUFFIXES)


def _is_model_dir_name(name: str) -> bool:
    return name.lower().endswith(MODEL_DIR_SUFFIX) and len(name) > len(MODEL_DIR_SUFFIX)


def model_path_of(path: str) -> str | None:
    """The model a repository file belongs to, or None when it belongs to none.

    The outermost `NAME.model/` folder wins; otherwise the file itself when it
    is a `NAME.model.yaml`. Non-YAML files never belong to a model.
    """
    parts = [p for p in path.replace("\\", "/").split("/") if p not in ("", ".")]
    if not parts or not _is_yaml_name(parts[-1]):
        return None
    for index, part in enumerate(parts[:-1]):
        if _is_model_dir_name(part):
            return "/".join(parts[: index + 1])
    if _is_model_file_name(parts[-1]):
        return "/".join(parts)
    return None


def model_files_of_paths(paths: Iterable[str]) -> list[str]:
    """Map changed file paths to the model paths they belong to; sorted, without duplicates."""
    found = {model_path_of(p) for p in paths}
    found.discard(None)
    return sorted(found)  # type: ignore[arg-type]


def split_spec(spec: str) -> tuple[str, str] | None:
    """Split git's `REV:PATH` notation at the first colon outside `{...}`; None without one.

    Braces matter for revisions such as `main@{2024-05-01 10:00}:models/x.model.yaml`.
    """
    depth = 0
    for index, char in enumerate(spec):
        if char == "{":
            depth += 1
        elif char == "}" and depth:
            depth -= 1
        elif char == ":" and not depth:
            return spec[:index], spec[index + 1 :]
    return None


def _clean_repo_path(path: str, where: str) -> str:
    """A path relative to the repository root in git's form; refuse the root itself and escapes."""
    text = path.replace("\\", "/").strip()
    normal = posixpath.normpath(text) if text else "."
    if normal.startswith("/") or normal == ".." or normal.startswith("../"):
        raise GitError(f"path '{path}' {where} is outside the repository; give a path relative to its root")
    if normal == ".":
        raise GitError(f"no model path given {where}; write REV:PATH, for example main:models/bikeshare.model.yaml")
    return normal


def _split_lines_z(output: str) -> list[str]:
    return [p for p in output.split("\0") if p]


# ---------------------------------------------------------------------------
# Opening repositories


def _gitpython():
    try:
        import git
    except ImportError as exc:
        if exc.name == "git":  # the library itself is missing
            raise GitError("the GitPython library is missing; reinstall modeldiff (pip install modeldiff-cli) with its dependencies") from None
        raise GitError("git is not installed or not on PATH; install git or set GIT_PYTHON_GIT_EXECUTABLE") from None
    return git


def _same_git_dir(env_git_dir: str | None, repo: "gitpython.Repo") -> bool:
    if not env_git_dir:
        return False
    try:
        return os.path.samefile(env_git_dir, repo.git_dir)
    except OSError:
        return False


def _restore_env(saved: dict[str, str]) -> None:
    for name in _LOCATION_VARS:
        if name in saved:
            os.environ[name] = saved[name]
        else:
            os.environ.pop(name, None)


_SESSION: dict[str, object] = {}  # while `session` runs: "dir" (as given, absolute), "repo", "resolved" (rev -> sha)


@contextlib.contextmanager
def session(repo_dir: str | os.PathLike[str] = ".") -> Iterator[None]:
    """Keep the repository of `repo_dir` open for every call inside the block, for a command that reads many commits.

    Each call otherwise opens the repository, starts git's helper processes
    and resolves its revisions afresh (several processes per model read: most
    of the time of a walk over many commits). Inside the block, calls naming
    the same `repo_dir` share one open repository, and a revision resolved
    once is not resolved again (the repository is only read meanwhile).
    Nested or for another folder, the block changes nothing.
    """
    where = os.path.abspath(os.fspath(repo_dir))
    if _SESSION:
        yield
        return
    with _open(repo_dir) as repo:
        _SESSION.update({"dir": where, "repo": repo, "resolved": {}})
        try:
            yield
        finally:
            _SESSION.clear()


@contextlib.contextmanager
def _open(repo_dir: str | os.PathLike[str] = ".") -> Iterator["gitpython.Repo"]:
    """Open the repository containing `repo_dir`, closing it (and git's helper processes) afterwards."""
    if _SESSION and _SESSION["dir"] == os.path.abspath(os.fspath(repo_dir)):
        yield _SESSION["repo"]
        return
    git = _gitpython()
    saved = {name: os.environ.pop(name) for name in _LOCATION_VARS if name in os.environ}
    try:
        repo = _construct_repo(git, repo_dir)
        with repo:
            if _same_git_dir(saved.get("GIT_DIR"), repo):
                os.environ.update(saved)  # e.g. a hook of this very repository: keep its index and object store
            yield repo
    finally:
        _restore_env(saved)


def _construct_repo(git, repo_dir) -> "gitpython.Repo":
    where = os.path.abspath(os.fspath(repo_dir))
    try:
        return git.Repo(where, search_parent_directories=True)
    except git.exc.NoSuchPathError:
        raise GitError(f"'{where}' does not exist; run modeldiff from inside the repository") from None
    except git.exc.InvalidGitRepositoryError:
        raise GitError(
            f"'{where}' is not inside a git repository; run modeldiff inside one or compare plain paths"
        ) from None
    except OSError as exc:
        raise GitError(f"cannot open the git repository at '{where}': {exc.strerror or exc}") from None


def _location(repo: "gitpython.Repo") -> str:
    return str(repo.working_tree_dir or repo.git_dir)


def _run(repo: "gitpython.Repo", command: str, *args: str) -> str:
    """Run one git command in the repository; any failure becomes a GitError naming the command."""
    git = _gitpython()
    try:
        # No optional locks: reading must never take index.lock from a concurrent `git commit`.
        return getattr(repo.git, command.replace("-", "_"))(*args, env={"GIT_OPTIONAL_LOCKS": "0"})
    except git.exc.GitCommandNotFound:
        raise GitError("git is not installed or not on PATH; install git or set GIT_PYTHON_GIT_EXECUTABLE") from None
    except git.exc.GitCommandError as exc:
        detail = _first_line(exc.stderr) or f"exit status {exc.status}"
        raise GitError(f"`git {command}` failed in {_location(repo)}: {detail}") from None


def _first_line(stderr: object) -> str:
    text = str(stderr or "").strip().strip("'").strip()
    for line in text.splitlines():
        line = line.strip()
        if line.startswith("stderr:"):
            line = line[len("stderr:") :].strip().strip("'")
        if line:
            return line
    return ""


# ---------------------------------------------------------------------------
# Revisions


def _is_shallow(repo: "gitpython.Repo") -> bool:
    try:
        return _run(repo, "rev-parse", "--is-shallow-repository").strip() == "true"
    except GitError:
        return False


def _missing_revision(repo: "gitpython.Repo", rev: str) -> GitError:
    where = _location(repo)
    if _is_shallow(repo):
        fetch = f"git fetch origin {rev}" if _FETCHABLE.fullmatch(rev) else "git fetch --deepen=100"
        return GitError(
            f"revision '{rev}' is not in this shallow clone ({where}); run `git fetch --unshallow` or `{fetch}`"
        )
    return GitError(f"revision '{rev}' not found in {where}; check `git log` or fetch it")


def _check_rev_text(rev: str) -> None:
    if is_null_sha(rev):
        raise GitError(
            f"revision '{rev}' is git's all-zero placeholder for a branch that does not exist; "
            "there is nothing to read at it"
        )
    if not rev.strip() or rev.startswith("-"):
        raise GitError(f"'{rev}' is not a revision; give a branch, tag or commit such as main or HEAD~1")


def _resolve(repo: "gitpython.Repo", rev: str) -> str:
    """Full sha of the commit `rev` names (tags are peeled); remembered for the rest of a `session`."""
    resolved = _SESSION.get("resolved") if _SESSION and _SESSION["repo"] is repo else None
    if resolved is not None and rev in resolved:
        return resolved[rev]
    sha = _resolve_now(repo, rev)
    if resolved is not None:
        resolved[rev] = sha
    return sha


def _resolve_now(repo: "gitpython.Repo", rev: str) -> str:
    _check_rev_text(rev)
    try:
        out = _run(repo, "rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}")
    except GitError:
        raise _missing_revision(repo, rev) from None
    sha = out.strip()
    if not sha:
        raise _missing_revision(repo, rev)
    return sha


def _object_errors() -> tuple[type[BaseException], ...]:
    """What GitPython raises for an object it cannot find or read (gitdb's share no base with its own)."""
    git = _gitpython()
    import gitdb.exc

    return (ValueError, KeyError, gitdb.exc.ODBError, git.exc.GitError)


def _commit(repo: "gitpython.Repo", sha: str, rev: str):
    try:
        commit = repo.commit(sha)
        commit.tree  # noqa: B018 - fails here, not later, when the object is missing
        return commit
    except _object_errors() as exc:
        raise _missing_object(repo, rev, exc) from None


def _missing_object(repo: "gitpython.Repo", rev: str, exc: Exception) -> GitError:
    if _is_shallow(repo):
        return _missing_revision(repo, rev)
    return GitError(
        f"the objects of revision '{rev}' cannot be read in {_location(repo)} ({type(exc).__name__}); "
        "run `git fsck` or fetch the revision again"
    )


def repo_root(path: str | os.PathLike[str] = ".") -> str:
    """Top folder of the working tree containing `path` (the git folder of a bare repository)."""
    with _open(path) as repo:
        return _location(repo)


def hooks_dir(repo_dir=".") -> str:
    """Absolute path of the folder git runs hooks from: `core.hooksPath` when set (a relative value is
    taken from the work tree's root, `~` expanded, as git does), else the common git folder's `hooks`."""
    with _open(repo_dir) as repo:
        out = _run(repo, "rev-parse", "--git-path", "hooks").strip()
        return os.path.normpath(os.path.join(_location(repo), out))


def resolve_rev(repo_dir, rev: str) -> str:
    """Full sha of the commit `rev` names; tags are peeled. Raises GitError when it cannot be found."""
    with _open(repo_dir) as repo:
        return _resolve(repo, rev)


def rev_exists(repo_dir, sha: str) -> bool:
    """True when `sha` (or any revision) names a commit present in the repository."""
    if is_null_sha(sha) or not sha.strip() or sha.startswith("-"):
        return False
    with _open(repo_dir) as repo:
        try:
            out = _run(repo, "rev-parse", "--verify", "--quiet", f"{sha}^{{commit}}")
        except GitError:
            return False
        return bool(out.strip())


def merge_base(repo_dir, a: str, b: str) -> str | None:
    """The best common ancestor of two revisions; None when they share no history (here)."""
    with _open(repo_dir) as repo:
        sha_a, sha_b = _resolve(repo, a), _resolve(repo, b)
        git = _gitpython()
        try:
            out = repo.git.merge_base(sha_a, sha_b)
        except git.exc.GitCommandError as exc:
            if exc.status == 1:  # no common ancestor
                return None
            raise GitError(f"`git merge-base {a} {b}` failed in {_location(repo)}: {_first_line(exc.stderr)}") from None
        lines = out.split()
        return lines[0] if lines else None


def on_remote_branches(repo_dir, sha: str, remote: str) -> bool:
    """Whether commit `sha` is reachable from a remote-tracking branch of `remote` (refs/remotes/REMOTE/*) here."""
    with _open(repo_dir) as repo:  # no commit of sha's history outside them (none there: every commit is outside)
        return not _run(repo, "rev-list", "-n", "1", _resolve(repo, sha), "--not", f"--remotes={remote}", "--").strip()


def _range_ends(range_spec: str) -> tuple[str, str, str] | None:
    for operator in ("...", ".."):
        if operator in range_spec:
            left, right = range_spec.split(operator, 1)
            return left or "HEAD", operator, right or "HEAD"
    return None


def commits_in_range(repo_dir, range_spec: str) -> list[str]:
    """Full shas of the commits in `A..B` (or `A...B`, or all ancestors of `B`), oldest first."""
    with _open(repo_dir) as repo:
        ends = _range_ends(range_spec)
        if ends is None:
            spec = _resolve(repo, range_spec)
        else:
            left, operator, right = ends
            spec = f"{_resolve(repo, left)}{operator}{_resolve(repo, right)}"
        out = _run(repo, "rev-list", "--reverse", spec, "--")
        return out.split()


def commit_trailers(repo_dir, sha: str) -> dict[str, list[str]]:
    """Trailers of a commit message (`Key: value` lines of its last paragraph), keys as written.

    Values of a repeated key keep their order; folded lines are unfolded.
    """
    with _open(repo_dir) as repo:
        full = _resolve(repo, sha)
        commit = _commit(repo, full, sha)
        git = _gitpython()
        try:
            return {key: list(values) for key, values in commit.trailers_dict.items()}
        except (git.exc.GitError, ValueError, UnicodeError) as exc:
            raise GitError(f"cannot read the trailers of commit '{sha}' in {_location(repo)}: {exc}") from None


def commit_facts(repo_dir, shas: Sequence[str]) -> dict[str, tuple[tuple[str, ...], str]]:
    """sha -> (parent shas, subject line), read in batches of 200 commits."""
    facts: dict[str, tuple[tuple[str, ...], str]] = {}
    with _open(repo_dir) as repo:
        for start in range(0, len(shas), 200):
            out = _run(repo, "show", "-s", "--no-color", "--format=%H%x00%P%x00%s", *shas[start:start + 200])
            for line in out.splitlines():
                sha, parents, subject = (line.split("\0") + ["", ""])[:3]
                facts[sha] = (tuple(parents.split()), subject)
    return facts


# ---------------------------------------------------------------------------
# Reading models


def _display(rev: str, path: str) -> str:
    return f"{rev}:{path}"


def _blob_bytes(blob, shown: str | None = None) -> bytes:
    """A blob's bytes; a model file over the size limit is refused before it is read (load.text._too_big)."""
    if shown is not None:
        from modeldiff.load import text as model_text

        if blob.size > model_text.MAX_FILE_BYTES:
            raise model_text._too_big(shown, blob.size)
    return blob.data_stream.read()


def _tree_entry(tree, path: str):
    """The object at `path` in `tree`, or None."""
    try:
        return tree / path
    except (KeyError, IndexError, TypeError):
        return None


def _follow_links(tree, path: str, entry):
    """Follow symbolic links stored in the tree, as a checkout would; None when they lead nowhere."""
    for _ in range(_MAX_LINK_HOPS):
        if entry is None or entry.type != "blob" or entry.mode != _SYMLINK_MODE:
            return path, entry
        target = _blob_bytes(entry).decode("utf-8", "surrogateescape")
        if target.startswith("/"):
            return path, None
        path = posixpath.normpath(posixpath.join(posixpath.dirname(path), target))
        if path == ".." or path.startswith("../"):
            return path, None
        entry = _tree_entry(tree, path)
    return path, None


def _folder_files_at(tree, folder, rev: str, folder_path: str, shown_path: str) -> tuple[tuple[str, bytes], ...]:
    """The folder's YAML files, named under `shown_path` (the path asked for, even through a link)."""
    files = []
    for item in folder.traverse():
        if item.type != "blob" or not _is_yaml_name(item.name):
            continue
        relative = posixpath.relpath(item.path, folder_path)
        _, target = _follow_links(tree, item.path, item)
        if target is None or target.type != "blob":
            continue
        shown = _display(rev, posixpath.join(shown_path, relative))
        files.append((relative, shown, _blob_bytes(target, shown)))
    files.sort()
    return tuple((name, data) for _, name, data in files)


def _read_at_rev(repo: "gitpython.Repo", rev: str, path: str) -> ModelSource | None:
    sha = _resolve(repo, rev)
    tree = _commit(repo, sha, rev).tree
    try:
        target, entry = _follow_links(tree, path, _tree_entry(tree, path))
        if entry is None:
            return None
        if entry.type == "blob":
            files = ((_display(rev, path), _blob_bytes(entry, _display(rev, path))),)
        elif entry.type == "tree":
            files = _folder_files_at(tree, entry, rev, target, path)
        else:  # a submodule
            return None
    except _object_errors() as exc:
        raise _missing_object(repo, rev, exc) from None
    if not files:
        return None
    return ModelSource(rev=rev, path=path, files=files, blob_id=entry.hexsha, commit=sha)


def _read_file(full: str, display: str) -> bytes:
    from modeldiff.load import read_file  # regular files only, within the size limit

    return read_file(full, display)


def _disk_files(full: str, display: str, root: str | None = None) -> tuple[tuple[str, bytes], ...] | None:
    """The file, or the folder's YAML files sorted by relative path; None when nothing is there.

    With `root` (a repository's working tree), a folder's files that link out of it are left out.
    """
    if not os.path.exists(full):
        return None
    if not os.path.isdir(full):  # a file, or something else in its place: refused by _read_file
        return ((display, _read_file(full, display)),)
    found = []
    for folder, subfolders, names in os.walk(full):
        subfolders.sort()
        for name in names:
            if not _is_yaml_name(name):
                continue
            real = os.path.join(folder, name)
            if not os.path.exists(real) or (root is not None and not _inside(root, real)):
                continue
            relative = os.path.relpath(real, full).replace(os.sep, "/")
            found.append((relative, os.path.join(display, *relative.split("/")), real))
    found.sort()
    return tuple((shown, _read_file(real, shown)) for _, shown, real in found) or None


def _inside(root: str, full: str) -> bool:
    """Whether `full`, links followed, is inside the folder `root`."""
    from modeldiff.files import leaves

    return not leaves(root, full)


def _read_worktree(repo: "gitpython.Repo", path: str) -> ModelSource | None:
    root = repo.working_tree_dir
    if root is None:
        raise GitError(f"{repo.git_dir} is a bare repository without a working tree; name a revision to read from")
    full = os.path.join(root, *path.split("/"))
    if not _inside(root, full):  # a link out of the repository is not followed, as in a revision (link_leaving)
        return None
    files = _disk_files(full, path, root)
    if files is None:
        return None
    return ModelSource(rev=None, path=path, files=files, blob_id=None)


def link_leaving(repo_dir, rev: str | None, path: str) -> str | None:
    """Where `path` points when it is a symbolic link (at `rev`, None: the working tree) leading out of the
    repository, else None. Such a link is never followed: read_at answers None for it."""
    clean = _clean_repo_path(path, "in the working tree" if rev is None else f"at revision '{rev}'")
    with _open(repo_dir) as repo:
        if rev is None:
            root = repo.working_tree_dir
            full = os.path.join(root or ".", *clean.split("/"))
            if root is None or not os.path.lexists(full) or _inside(root, full):
                return None
            return os.readlink(full) if os.path.islink(full) else os.path.realpath(full)
        tree = _commit(repo, _resolve(repo, rev), rev).tree
        entry, here = _tree_entry(tree, clean), clean
        for _ in range(_MAX_LINK_HOPS):
            if entry is None or entry.type != "blob" or entry.mode != _SYMLINK_MODE:
                return None
            target = _blob_bytes(entry).decode("utf-8", "surrogateescape")
            here = posixpath.normpath(posixpath.join(posixpath.dirname(here), target))
            if target.startswith("/") or here == ".." or here.startswith("../"):
                return target
            entry = _tree_entry(tree, here)
        return None


def read_at(repo_dir, rev: str | None, path: str) -> ModelSource | None:
    """The model at `path` (relative to the repository root) at `rev`, or None when it is not there.

    `rev` None reads the working tree. Display names are `REV:PATH` for revisions
    and the repository-relative path for the working tree.
    """
    where = "in the working tree" if rev is None else f"at revision '{rev}'"
    clean = _clean_repo_path(path, where)
    with _open(repo_dir) as repo:
        if rev is None:
            return _read_worktree(repo, clean)
        return _read_at_rev(repo, rev, clean)


def _read_disk_spec(spec: str, full: str) -> ModelSource:
    display = os.path.normpath(full)
    files = _disk_files(full, display)
    if files is None:
        raise ModeldiffError(f"folder '{spec}' holds no .yaml or .yml files; a model folder needs at least one")
    return ModelSource(rev=None, path=spec, files=files, blob_id=None)


def _spec_path_in_repo(repo: "gitpython.Repo", path: str, cwd: str, rev: str) -> str:
    """git's rule: `REV:PATH` is relative to the repository root, `REV:./PATH` to the current folder."""
    where = f"at revision '{rev}'"
    if not (path.startswith("./") or path.startswith("../") or path in (".", "..")):
        return _clean_repo_path(path, where)
    root = repo.working_tree_dir
    if root is None:
        raise GitError(f"'{rev}:{path}' is relative to the current folder, but {repo.git_dir} has no working tree")
    absolute = os.path.realpath(os.path.join(cwd, path))
    relative = os.path.relpath(absolute, os.path.realpath(root)).replace(os.sep, "/")
    return _clean_repo_path(relative, where)


def read_spec(spec: str, cwd: str | os.PathLike[str] = ".") -> ModelSource:
    """Read `REV:PATH` or a plain path (relative to `cwd`). A path that exists on disk always wins."""
    cwd = os.fspath(cwd)
    full = os.path.join(cwd, spec)
    if spec and os.path.exists(full):
        return _read_disk_spec(spec, full)
    parts = split_spec(spec)
    if parts is None:
        raise ModeldiffError(
            f"model '{spec}' not found: no such file or folder; for a git revision write REV:PATH, "
            "for example main:models/bikeshare.model.yaml"
        )
    rev, path = parts
    if not rev:
        raise GitError(f"'{spec}' names no revision; write REV:PATH, for example HEAD:{path or 'models/x.model.yaml'}")
    with _open(cwd) as repo:
        clean = _spec_path_in_repo(repo, path, cwd, rev)
        source = _read_at_rev(repo, rev, clean)
        if source is None:
            raise GitError(
                f"'{clean}' does not exist at revision '{rev}' (or holds no YAML files); "
                f"check `git ls-tree -r --name-only {rev}`"
            )
        return source


# ---------------------------------------------------------------------------
# Listing and comparing


def _worktree_files(repo: "gitpython.Repo") -> list[str]:
    out = _run(repo, "ls-files", "-z", "--cached", "--others", "--exclude-standard")
    root = _location(repo)
    return [p for p in _split_lines_z(out) if not p.endswith("/") and os.path.lexists(os.path.join(root, p))]


def list_models(repo_dir, rev: str | None) -> list[str]:
    """Every model path in the repository at `rev`, sorted.

    `rev` None lists the working tree: tracked files still on disk and untracked
    files that are not ignored.
    """
    return model_files_of_paths(list_files(repo_dir, rev))


def list_files(repo_dir, rev: str | None) -> list[str]:
    """Every file path in the repository at `rev` (None: the working tree, as `list_models` reads it)."""
    with _open(repo_dir) as repo:
        if rev is None:
            return list(_worktree_files(repo))
        sha = _resolve(repo, rev)
        return _split_lines_z(_run(repo, "ls-tree", "-r", "-z", "--name-only", "--full-tree", sha))


_DIFF_OPTIONS = ("--name-only", "-z", "--no-renames", "--no-ext-diff", "--no-color")


def changed_models(repo_dir, base: str, head: str | None) -> list[str]:
    """Model paths whose files differ between `base` and `head` (None = working tree), sorted.

    Added and removed models are included; a moved model file appears under its
    old and its new path. Untracked, not ignored files count as added.
    """
    return model_files_of_paths(changed_files(repo_dir, base, head))


def changed_files(repo_dir, base: str, head: str | None) -> list[str]:
    """Every file path that differs between `base` and `head` (None = working tree), as `changed_models` reads it."""
    with _open(repo_dir) as repo:
        base_sha = _resolve(repo, base)
        if head is None:
            changed = _split_lines_z(_run(repo, "diff", *_DIFF_OPTIONS, base_sha, "--"))
            changed += _split_lines_z(_run(repo, "ls-files", "-z", "--others", "--exclude-standard"))
        else:
            head_sha = _resolve(repo, head)
            changed = _split_lines_z(_run(repo, "diff", *_DIFF_OPTIONS, base_sha, head_sha, "--"))
        return changed
