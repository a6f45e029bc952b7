"""The pre-push gate: `modeldiff hook install | uninstall | status`, and `hook run`, which the hook calls.

`hook run` reads git's pre-push lines from stdin (all of them, always: git may die with SIGPIPE when a
hook leaves its input unread), works out what each pushed ref brings (prepush.py), and decides with
`git diff --name-only` whether any model changed before it imports anything heavy: a push that
touches no model costs a fraction of a second. When models changed it prints the verdict of
`modeldiff diff` for each range (plain text, no colour unless FORCE_COLOR), the teams to tell about
impacted reports, and blocks (exit 1, the reason on stderr) when changes of a blocked severity are
neither accepted by the policy of the pushed commit (`.modeldiff.yaml`, policy.py) nor named by a
`Model-Reviewed:` trailer in a pushed commit. Anything that stops the decision (a broken policy, a
model that cannot be read, input that is not git's) blocks too, with exit 2: a gate that cannot
decide never waves a push through.

With `--from-env` it reads the range from the hook framework's PRE_COMMIT_FROM_REF / PRE_COMMIT_TO_REF
instead of stdin.

Install etiquette: the script goes where git looks for hooks (`core.hooksPath` honoured), carries
the marker line `# installed by modeldiff`, keeps a hook that was already there as `pre-push.local`
and runs it first (same arguments, same input; its failure stops the push), refuses to install
twice, and uninstall puts back exactly what was there (the file is renamed, never rewritten).
"""

from __future__ import annotations

import os
import shlex
import sys
from dataclasses import dataclass, replace
from typing import Mapping, Sequence, TextIO

from modeldiff import prepush
from modeldiff.errors import ModeldiffError


HOOK_NAME = "pre-push"
CHAINED_NAME = "pre-push.local"
MARKER = "# installed by modeldiff"
CHAIN_MARKER = "# modeldiff chains: "
PYTHON_PREFIX = "PYTHON="
EXIT_BLOCKED = 1
EXIT_UNDECIDED = 2
SKIP_HINT = "`git push --no-verify` skips every pre-push hook (CI still checks the change)"


# --- the installed script -----------------------------------------------------------------------


# The installed tool, never the repository's code: `-I` (isolated mode) keeps the current folder (the
# repository being pushed, which may hold a `modeldiff.py` or `modeldiff/`), PYTHONPATH and the user's
# site folder off the import path. Exit 97 says "this Python has no modeldiff" (modeldiff's own exit
# codes are 0-3), so the script can tell a lost package from a verdict.
LOST = 97
RUN_INSTALLED = (
    "import sys\n"
    "try:\n"
    "    from modeldiff.cli import run\n"
    "except ModuleNotFoundError as exc:\n"
    '    if exc.name != "modeldiff":\n'
    "        raise\n"
    f"    sys.exit({LOST})\n"
    'sys.argv[0] = "modeldiff"\n'
    "run()\n"
)

# What the script does when no modeldiff can run: a push whose commits touch no model file goes on
# (with one line on stderr); one that does is blocked, since nothing can say what it does. The model
# paths are those of git.model_path_of: NAME.model.yaml/.yml files and YAML files under NAME.model/.
NO_TOOL = r"""no_tool() {
    # reads $input (git's pre-push lines) and says $missing (what could not run, in words)
    changed=no
    while read -r line; do
        [ -n "$line" ] || continue
        set -- $(printf '%s\n' "$line" | awk '{print $(NF-2), $(NF-1), $NF}')  # sha, remote ref, remote sha
        case "$1" in *[!0]*) ;; *) continue ;; esac  # a deleted ref brings nothing
        if case "$3" in *[!0]*) false ;; *) true ;; esac || ! git cat-file -e "$3^{commit}" 2>/dev/null; then
            paths=$(git -c core.quotePath=false log --format= --name-only "$1" --not --remotes -- 2>/dev/null) || paths=unknown.model.yaml
        else
            paths=$(git -c core.quotePath=false diff --name-only "$3" "$1" -- 2>/dev/null) || paths=unknown.model.yaml
        fi
        if printf '%s\n' "$paths" | grep -Eiq '[^/]\.model\.ya?ml"?$|[^/]\.model/(.*/)?[^/]*\.ya?ml"?$'; then
            changed=yes
        fi
    done <"$input"
    if [ "$changed" = yes ]; then
        echo "modeldiff: push blocked: this push changes a model but modeldiff cannot run ($missing); reinstall modeldiff (pip install modeldiff-cli), or run 'git push --no-verify' to skip the check (CI still checks the change)" >&2
        exit 1
    fi
    echo "modeldiff: $missing; this push changes no model, so it goes on (reinstall modeldiff: pip install modeldiff-cli; or run 'modeldiff hook uninstall')" >&2
    exit 0
}"""


def _shell_lines(text: str) -> list[str]:
    return text.splitlines()


def hook_script(python: str, chained: bool) -> str:
    """The script installed as pre-push: run the chained hook first, then modeldiff with the same input."""
    lines = [
        "#!/bin/sh",
        MARKER,
        "# Shows what pushed model changes do and blocks unacknowledged breaking ones (docs/hook.md).",
        "# `modeldiff hook uninstall` removes it and puts back the hook that was here before.",
        "# It runs the installed modeldiff only (isolated mode: never code from the repository being pushed).",
    ]
    if chained:
        lines.append(f"{CHAIN_MARKER}{CHAINED_NAME}")
    lines += [f"{PYTHON_PREFIX}{shlex.quote(python)}", f"RUN={shlex.quote(RUN_INSTALLED)}", ""]
    lines += [
        "# git writes the pushed refs on stdin once: keep them (for the chained hook, and to look at without modeldiff).",
        'input=$(mktemp "${TMPDIR:-/tmp}/modeldiff-pre-push.XXXXXX") || exit 1',
        "trap 'rm -f \"$input\"' EXIT",
        'cat >"$input"',
    ]
    if chained:
        lines += [
            f'previous="$(dirname "$0")/{CHAINED_NAME}"',
            'if [ -x "$previous" ]; then',
            '    "$previous" "$@" <"$input" || exit $?',
            "fi",
        ]
    lines += _shell_lines(NO_TOOL)
    lines += [
        'missing="no modeldiff command on PATH"',
        'if [ -x "$PYTHON" ]; then',
        '    "$PYTHON" -I -c "$RUN" hook run "$@" <"$input"',
        "    code=$?",
        f'    [ "$code" -eq {LOST} ] || exit "$code"',
        '    missing="$PYTHON has no modeldiff installed and $missing"',
        "else",
        '    missing="$PYTHON is gone and $missing"',
        "fi",
        "if command -v modeldiff >/dev/null 2>&1; then",
        '    modeldiff hook run "$@" <"$input"',
        "    exit $?",
        "fi",
        'no_tool',
        "",
    ]
    return "\n".join(lines)


def repository_script() -> str:
    """hooks/pre-push, the script to copy by hand: the installed modeldiff command, else a Python that has it."""
    lines = [
        "#!/bin/sh",
        MARKER,
        "# modeldiff's pre-push hook: shows what pushed model changes do and blocks unacknowledged breaking ones.",
        "# Copy it into .git/hooks/ (or the folder core.hooksPath names) and make it executable, or let",
        "# `modeldiff hook install` do that (it also keeps and chains a hook already there). See docs/hook.md.",
        "# It runs the installed modeldiff only: the command on PATH, else `python3 -I` (isolated mode keeps the",
        "# repository being pushed off the import path, so a modeldiff.py committed there never runs).",
        f"RUN={shlex.quote(RUN_INSTALLED)}",
        "",
        'input=$(mktemp "${TMPDIR:-/tmp}/modeldiff-pre-push.XXXXXX") || exit 1',
        "trap 'rm -f \"$input\"' EXIT",
        'cat >"$input"',
    ]
    lines += _shell_lines(NO_TOOL)
    lines += [
        "if command -v modeldiff >/dev/null 2>&1; then",
        '    modeldiff hook run "$@" <"$input"',
        "    exit $?",
        "fi",
        "for python in python3 python; do",
        '    if command -v "$python" >/dev/null 2>&1; then',
        '        "$python" -I -c "$RUN" hook run "$@" <"$input"',
        "        code=$?",
        f'        [ "$code" -eq {LOST} ] || exit "$code"',
        "    fi",
        "done",
        'missing="no modeldiff command on PATH and no Python with modeldiff installed"',
        "no_tool",
        "",
    ]
    return "\n".join(lines)


@dataclass(frozen=True)
class HookState:
    """What is installed where: read from the hooks folder, never from git's configuration alone."""

    folder: str
    exists: bool  # a pre-push hook (file or link) is there
    ours: bool  # it carries MARKER
    chains: str | None  # the hook ours runs first (CHAINED_NAME), when ours kept one
    chained_present: bool  # that hook is still there
    python: str | None  # the Python ours calls
    executable: bool


def _read_text(path: str) -> str:
    try:
        with open(path, "rb") as handle:
            return handle.read(64 * 1024).decode("utf-8", "replace")
    except OSError:
        return ""


def _is_ours(text: str) -> bool:
    return MARKER in text.splitlines()


def _script_value(text: str, prefix: str) -> str | None:
    for line in text.splitlines():
        if line.startswith(prefix):
            value = line[len(prefix):].strip()
            if prefix == PYTHON_PREFIX:
                parts = shlex.split(value) if value else []
                return parts[0] if parts else None
            return value or None
    return None


def hook_state(repo: str = ".") -> HookState:
    from modeldiff import git

    folder = git.hooks_dir(repo)
    path = os.path.join(folder, HOOK_NAME)
    exists = os.path.lexists(path)
    text = _read_text(path) if exists else ""
    ours = exists and _is_ours(text)
    chains = _script_value(text, CHAIN_MARKER) if ours else None
    return HookState(
        folder=folder,
        exists=exists,
        ours=ours,
        chains=chains,
        chained_present=bool(chains) and os.path.lexists(os.path.join(folder, chains or "")),
        python=_script_value(text, PYTHON_PREFIX) if ours else None,
        executable=exists and os.access(path, os.X_OK),
    )


def install(repo: str, stdout: TextIO, python: str | None = None) -> int:
    state = hook_state(repo)
    path = os.path.join(state.folder, HOOK_NAME)
    kept = os.path.join(state.folder, CHAINED_NAME)
    if state.ours:
        raise ModeldiffError(f"modeldiff's pre-push hook is already installed at {path}; "
                             "run 'modeldiff hook uninstall' first to reinstall it")
    if state.exists and os.path.lexists(kept):
        raise ModeldiffError(f"{path} exists and so does {kept}; install would have to overwrite one of them: "
                             "move one away, then run 'modeldiff hook install' again")
    try:
        os.makedirs(state.folder, exist_ok=True)
        if state.exists:
            os.rename(path, kept)  # a rename keeps the bytes, the mode bits and a symbolic link as they are
        _write_script(path, hook_script(python or sys.executable, chained=state.exists))
    except OSError as exc:
        if state.exists and os.path.lexists(kept) and not os.path.lexists(path):
            os.rename(kept, path)
        raise ModeldiffError(f"cannot install the hook in {state.folder}: {exc.strerror or exc}") from None
    stdout.write(f"installed {path}\n")
    if _outside_repository(repo, state.folder):
        stdout.write(f"note: core.hooksPath points outside this repository: every repository using "
                     f"{state.folder} now runs this hook\n")
    if state.exists:
        stdout.write(f"kept the hook that was there as {kept}; it runs first, and its failure stops the push\n")
    chosen = python or sys.executable
    if os.access(chosen, os.X_OK) and not _has_modeldiff_isolated(chosen):
        stdout.write(f"note: {chosen} -I cannot import modeldiff (installed with --user, or through PYTHONPATH?); "
                     "the hook runs Python isolated, so it will use the modeldiff command on PATH instead; "
                     "install modeldiff into that Python's environment (a virtual environment) to use it\n")
    return 0


def _has_modeldiff_isolated(python: str) -> bool:
    """Whether `python -I` (as the hook runs it: no current folder, PYTHONPATH or user site) finds modeldiff."""
    import subprocess

    try:
        done = subprocess.run([python, "-I", "-c", "import importlib.util, sys; "
                               "sys.exit(importlib.util.find_spec('modeldiff') is None)"],
                              capture_output=True, timeout=30, cwd="/")
    except (OSError, subprocess.SubprocessError):
        return False
    return done.returncode == 0


def _outside_repository(repo: str, folder: str) -> bool:
    from modeldiff import git

    root = os.path.realpath(git.repo_root(repo))
    real = os.path.realpath(folder)
    parent = os.path.dirname(real)
    in_git_dir = os.path.isfile(os.path.join(parent, "HEAD")) and os.path.isdir(os.path.join(parent, "objects"))
    return os.path.commonpath([root, real]) != root and not in_git_dir


def _write_script(path: str, text: str) -> None:
    temporary = path + ".modeldiff-new"
    with open(temporary, "w", encoding="utf-8", newline="\n") as handle:
        handle.write(text)
    os.chmod(temporary, 0o755)
    os.replace(temporary, path)


def uninstall(repo: str, stdout: TextIO) -> int:
    state = hook_state(repo)
    path = os.path.join(state.folder, HOOK_NAME)
    if not state.exists:
        raise ModeldiffError(f"no pre-push hook at {path}; nothing to uninstall")
    if not state.ours:
        raise ModeldiffError(f"{path} was not installed by modeldiff (no '{MARKER}' line); leaving it alone")
    try:
        if state.chains and state.chained_present:
            os.replace(os.path.join(state.folder, state.chains), path)
            stdout.write(f"removed modeldiff's hook and put back {path} (it was kept as {state.chains})\n")
            return 0
        os.remove(path)
    except OSError as exc:
        raise ModeldiffError(f"cannot uninstall the hook in {state.folder}: {exc.strerror or exc}") from None
    stdout.write(f"removed {path}\n")
    if state.chains:
        stdout.write(f"the hook it chained ({state.chains}) was no longer there, so none was put back\n")
    return 0


def status(repo: str, stdout: TextIO) -> int:
    state = hook_state(repo)
    path = os.path.join(state.folder, HOOK_NAME)
    out = [f"hooks folder: {state.folder}"]
    if not state.exists:
        out.append("pre-push: none (run 'modeldiff hook install')")
    elif not state.ours:
        out.append(f"pre-push: {path}, not modeldiff's; 'modeldiff hook install' would keep it as "
                   f"{CHAINED_NAME} and run it first")
    else:
        out.append(f"pre-push: modeldiff's, runs {state.python or '?'} -I (isolated) with modeldiff (else modeldiff on PATH)")
        if state.python and not os.access(state.python, os.X_OK):
            out.append(f"  warning: {state.python} is gone; the hook falls back to modeldiff on PATH")
        if state.chains:
            out.append(f"  runs {state.chains} first" + ("" if state.chained_present else " (missing: skipped)"))
        if not state.executable:
            out.append("  warning: the script is not executable, so git does not run it; chmod +x it")
    stdout.write("\n".join(out) + "\n")
    return 0


# --- running as the hook ------------------------------------------------------------------------


def read_all(stdin) -> str:
    """Everything on stdin, read to the end (an unread pipe can kill `git push` with SIGPIPE)."""
    if stdin is None:
        return ""
    data = stdin.buffer.read() if hasattr(stdin, "buffer") else stdin.read()
    return data.decode("utf-8", "surrogateescape") if isinstance(data, bytes) else data


def run_hook(remote: str | None, *, from_env: bool, stdin, stdout: TextIO, stderr: TextIO,
             env: Mapping[str, str], repo: str = ".") -> int:
    """The hook: 0 lets the push go, 1 blocks it for unacknowledged changes, 2 when it cannot decide."""
    if not from_env and stdin is not None and hasattr(stdin, "isatty") and stdin.isatty():
        stderr.write("modeldiff: 'hook run' reads the lines git writes to a pre-push hook on stdin, and git runs "
                     "it; to look at a range by hand run 'modeldiff diff --base REV --head REV'\n")
        return EXIT_UNDECIDED
    text = "" if from_env else read_all(stdin)  # first, whatever happens next
    try:
        if from_env:
            updates: Sequence[prepush.RefUpdate] = (prepush.from_env(env),)
            remote = prepush.remote_of_env(env, remote)
        else:
            updates = prepush.parse_lines(text)
        if not updates:
            return 0
        return _gate(repo, remote, updates, stdout, stderr)
    except ModeldiffError as exc:
        stdout.flush()
        stderr.write(f"modeldiff: push blocked: {exc}\n  (the check could not decide; {SKIP_HINT})\n")
        return EXIT_UNDECIDED


class _Facts:
    """git lookups for the range decisions, each made once."""

    def __init__(self, root: str, remote: str | None):
        self.root, self.remote = root, remote
        self._peeled: dict[str, str | None] = {}
        self._default: tuple[str, str] | None | bool = False
        self._fallbacks: dict[str, tuple[str | None, str | None]] = {}

    def peel(self, rev: str) -> str | None:
        """The commit `rev` names (tags peeled), None when it is not here or names no commit."""
        from modeldiff import git

        if rev not in self._peeled:
            self._peeled[rev] = git.resolve_rev(self.root, rev) if git.rev_exists(self.root, rev) else None
        return self._peeled[rev]

    def on_remote(self, head: str) -> bool:
        """Whether every commit of `head` is already on a branch of the remote, as known here."""
        from modeldiff import git

        name = self.remote if self.remote and prepush.is_remote_name(self.remote) else "origin"
        return git.on_remote_branches(self.root, head, name)

    def default_branch(self) -> tuple[str, str] | None:
        """(shown name, sha) of the remote's default branch as known here."""
        if self._default is False:
            self._default = None
            for candidate in prepush.default_branch_candidates(self.remote):
                sha = self.peel(candidate)
                if sha is not None:
                    self._default = (candidate.removeprefix("refs/remotes/"), sha)
                    break
        return self._default  # type: ignore[return-value]

    def fallback(self, head: str) -> tuple[str | None, str | None]:
        """(merge base of `head` with the remote's default branch, that branch's name)."""
        from modeldiff import git

        if head not in self._fallbacks:
            default = self.default_branch()
            if default is None:
                self._fallbacks[head] = (None, None)
            else:
                name, sha = default
                self._fallbacks[head] = (git.merge_base(self.root, sha, head), name)
        return self._fallbacks[head]


def plan_ranges(root: str, remote: str | None, updates: Sequence[prepush.RefUpdate],
                stderr: TextIO) -> list[prepush.PushRange]:
    """The ranges to check, with git's facts looked up; says what it skipped or did instead."""
    facts = _Facts(root, remote)
    ranges = []
    for update in updates:
        if update.deleted:
            continue
        head = facts.peel(update.local_sha)
        if head is None:
            stderr.write(f"modeldiff: {update.remote_ref}: {prepush.short(update.local_sha)} names no commit "
                         "here; nothing to compare\n")
            continue
        remote_base = None if update.new_on_remote else facts.peel(update.remote_sha)
        fallback_base = fallback_from = None
        if remote_base is None and facts.on_remote(head):
            continue  # e.g. a new tag of a commit already pushed on some branch: it brings no commit to check
        if remote_base is None:
            fallback_base, fallback_from = facts.fallback(head)
        decided = prepush.decide_range(update, head, remote_base, fallback_base, fallback_from)
        if decided is not None and decided.note:
            stderr.write(f"modeldiff: {decided.refs[0]}: {decided.note}\n")
        ranges.append(decided)
    return prepush.unique_ranges(ranges)


def _files_of(root: str, r: prepush.PushRange) -> list[str]:
    """The files the range changes (every file, for a range compared with nothing): one git call."""
    from modeldiff import git

    if r.base is None:
        return git.list_files(root, r.head)
    return git.changed_files(root, r.base, r.head)


def _gate(root: str, remote: str | None, updates, stdout: TextIO, stderr: TextIO) -> int:
    from modeldiff import git
    from modeldiff.policy import POLICY_FILE  # a small module: the fast path stays light

    root = git.repo_root(root)
    ranges = plan_ranges(root, remote, updates, stderr)
    touched, policy_only = [], []
    for r in ranges:
        files = _files_of(root, r)
        paths = git.model_files_of_paths(files)
        if paths:
            touched.append((r, paths))
        elif POLICY_FILE in files:
            policy_only.append(r)
    for r in policy_only:  # a policy pushed without a model: read now, not on the next push of a model
        _check_policy(root, r, stdout)
    if not touched:
        return 0  # the fast path: no model and no policy changed, nothing heavy was imported
    code = 0
    for r, paths in touched:
        code = max(code, _check_range(root, r, paths, stdout, stderr))
    return code


def _check_range(root: str, r: prepush.PushRange, paths: list[str], stdout: TextIO, stderr: TextIO) -> int:
    from modeldiff import policy as pol

    head_label = prepush.short(r.head)
    refs = ", ".join(r.refs)
    stdout.write(f"modeldiff: {refs}: {len(paths)} model(s) changed in {_range_label(r)} "
                 f"(compared with {r.base_from})\n")
    diffs = _diffs(root, r, paths)
    stdout.write(_as_text(diffs))
    policy = pol.read_policy(root, r.head, head_label)
    _say_policy_change(root, r, stdout)
    for line in pol.tell_lines(diffs, policy):
        stdout.write(line + "\n")
    items = pol.items_of(diffs)
    blocking = pol.blocking(items, policy)
    accepted = [i for i in items if policy.blocks(i.severity) and policy.accepts(i.subject)]
    if accepted:
        stdout.write(f"accepted by {policy.source}: {', '.join(sorted({i.subject for i in accepted}))}\n")
    if not blocking:
        stdout.write(f"modeldiff: {refs}: push allowed\n")
        return 0
    reviewed, refused = _reviewed(root, r)
    left = pol.unacknowledged(blocking, reviewed)
    acknowledged = sorted({i.subject for i in blocking if i.subject in reviewed})
    if acknowledged:
        stdout.write(f"acknowledged by {pol.TRAILER} trailers: {', '.join(acknowledged)}\n")
    for line in pol.covered_lines(blocking, reviewed):
        stdout.write(line + "\n")
    for entry, sha in refused:
        stderr.write(f"modeldiff: ignored '{pol.TRAILER}: {entry}' in commit {prepush.short(sha)}: "
                     f"{pol.WILDCARD_REFUSED}\n")
    if not left:
        stdout.write(f"modeldiff: {refs}: push allowed\n")
        return 0
    stdout.flush()
    stderr.write(_blocked_text(refs, r, left, policy))
    return EXIT_BLOCKED


def _check_policy(root: str, r: prepush.PushRange, stdout: TextIO) -> None:
    """Read the pushed `.modeldiff.yaml` (a PolicyError blocks the push with where and what); say it reads."""
    from modeldiff import policy as pol

    policy = pol.read_policy(root, r.head, prepush.short(r.head))
    stdout.write(f"modeldiff: {', '.join(r.refs)}: {policy.source or pol.POLICY_FILE} changed and reads correctly "
                 f"(blocks {' and '.join(policy.block) or 'nothing'}; {len(policy.accept)} accepted, "
                 f"{len(policy.owners)} owner pattern{'s' if len(policy.owners) != 1 else ''})\n")


def _range_label(r: prepush.PushRange) -> str:
    return f"{prepush.short(r.base)}..{prepush.short(r.head)}" if r.base else prepush.short(r.head)


def _diffs(root: str, r: prepush.PushRange, paths: list[str]):
    from modeldiff import compare

    if r.base is None:
        diffs = compare.compare_with_nothing(root, r.head, paths, old_label="(nothing)")
    else:
        diffs = compare.compare_revisions(root, r.base, r.head, paths)
    labels = {r.head: prepush.short(r.head)}
    if r.base:
        labels[r.base] = prepush.short(r.base)
    return [replace(d, old=replace(d.old, rev=labels.get(d.old.rev, d.old.rev)),
                    new=replace(d.new, rev=labels.get(d.new.rev, d.new.rev))) for d in diffs]


def _as_text(diffs) -> str:
    """diff_out's text, without colour unless FORCE_COLOR asks for it (a StringIO is not a terminal)."""
    import io

    from modeldiff.render import diff_out

    buffer = io.StringIO()
    diff_out.as_text(diffs, buffer)
    return buffer.getvalue()


def _say_policy_change(root: str, r: prepush.PushRange, stdout: TextIO) -> None:
    from modeldiff import git
    from modeldiff.policy import POLICY_FILE

    if r.base is None:
        return
    before, after = git.read_at(root, r.base, POLICY_FILE), git.read_at(root, r.head, POLICY_FILE)
    if (before and before.blob_id) != (after and after.blob_id):
        stdout.write(f"note: this push changes {POLICY_FILE}; the pushed commit's version was applied\n")


def _reviewed(root: str, r: prepush.PushRange) -> tuple[frozenset[str], list[tuple[str, str]]]:
    """Subjects named by Model-Reviewed trailers in the pushed commits, and the refused entries."""
    from modeldiff import git
    from modeldiff import policy as pol

    subjects: set[str] = set()
    refused: list[tuple[str, str]] = []
    for sha in git.commits_in_range(root, r.range_spec):
        values = pol.trailer_values(git.commit_trailers(root, sha))
        if not values:
            continue
        named, wild = pol.reviewed_subjects(values)
        subjects |= named
        refused += [(entry, sha) for entry in wild]
    return frozenset(subjects), refused


def _blocked_text(refs: str, r: prepush.PushRange, left, policy) -> str:
    from modeldiff import policy as pol

    count = len(left)
    severities = " or ".join(reversed(policy.block))
    lines = [f"modeldiff: push blocked: {refs} brings {count} unacknowledged {severities} change"
             f"{'s' if count != 1 else ''} ({_range_label(r)}):"]
    for item in left:
        lines.append(f"  {item.model}: {item.subject} ({item.kind}, {item.severity}): {item.message}")
    standing = sorted({c for i in left for c in i.causes})
    lines += [
        "After reviewing them, acknowledge them in a commit message of this push, for example",
        "  git commit --allow-empty -m 'Review model changes' "
        + " ".join(f"--trailer '{line}'" for line in pol.trailer_lines(left)),
        *([f"(a trailer naming {' or '.join(standing)} also acknowledges the path and ambiguity changes that "
           "link changes alone cause)"] if standing else []),
        "or accept them for good under accept: in .modeldiff.yaml. " + SKIP_HINT + ".",
        "",
    ]
    return "\n".join(lines)
