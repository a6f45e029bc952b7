"""git's pre-push protocol as pure functions: parse the lines git writes on the hook's stdin, and decide
which range of commits each pushed ref brings to the remote.

Nothing here runs git. The hook looks the facts up (is the remote's commit in this repository? what
is the merge base with the remote's default branch?) and passes them in, so every rule is tested with
made-up lines.

The protocol (git's githooks documentation): one line per ref,
`<local-ref> <local-sha> <remote-ref> <remote-sha>`. A ref new on the remote has an all-zero remote
sha; a deleted ref has `(delete)` and an all-zero local sha. Zero ids are 40 characters in SHA-1
repositories and 64 in SHA-256 ones. The local ref is what the user typed (`HEAD~1`, even
`main@{2 days ago}` with spaces), so a line is split from the right. A tag line carries the tag
object's id: the caller peels it to a commit.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterable, Mapping

from modeldiff.errors import ModeldiffError
from modeldiff.git import is_null_sha

ZERO_SHA = "0" * 40
_OBJECT_ID = re.compile(r"[0-9a-fA-F]{40}|[0-9a-fA-F]{64}")
_REMOTE_NAME = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.-]*(?:/[A-Za-z0-9_][A-Za-z0-9_.-]*)*")


class PrePushInputError(ModeldiffError):
    """A line on the hook's stdin that is not git's pre-push format."""


@dataclass(frozen=True)
class RefUpdate:
    """One line of git's pre-push input.

    From git, the shas are full object ids. From the hook framework's variables (`from_env`) they are
    whatever revision it gives (usually a sha); an absent `from` is the all-zero id.
    """

    local_ref: str  # as the user wrote it: refs/heads/main, HEAD~1, (delete)
    local_sha: str
    remote_ref: str  # refs/heads/main, refs/tags/v1
    remote_sha: str

    @property
    def deleted(self) -> bool:
        return is_null_sha(self.local_sha) or self.local_ref == "(delete)"

    @property
    def new_on_remote(self) -> bool:
        return is_null_sha(self.remote_sha)

    @property
    def is_tag(self) -> bool:
        return self.remote_ref.startswith("refs/tags/")


@dataclass(frozen=True)
class PushRange:
    """What one pushed ref brings: the commits in `base..head` (every ancestor of head when base is None)."""

    refs: tuple[str, ...]  # the remote refs this range is pushed to
    head: str  # the pushed commit (peeled)
    base: str | None  # the commit to compare with; None: nothing, every model at head is new
    base_from: str  # how the base was chosen, for people: "the remote's refs/heads/main", ...
    note: str = ""  # what was done instead of the obvious, to be said even when no model changed

    @property
    def range_spec(self) -> str:
        return f"{self.base}..{self.head}" if self.base else self.head


def parse_line(line: str, number: int = 1) -> RefUpdate:
    """One pre-push line; PrePushInputError when it is not `<local-ref> <sha> <remote-ref> <sha>`."""
    parts = line.rstrip("\r\n").rsplit(None, 3)  # the local ref may hold spaces, the other three never do
    if len(parts) != 4 or not all(_OBJECT_ID.fullmatch(parts[i]) for i in (1, 3)):
        raise PrePushInputError(
            f"pre-push input line {number} is not '<local-ref> <local-sha> <remote-ref> <remote-sha>': "
            f"{line.strip()[:200]!r}; the hook expects the lines git writes to a pre-push hook's stdin"
        )
    local_ref, local_sha, remote_ref, remote_sha = parts
    return RefUpdate(local_ref.strip(), local_sha.lower(), remote_ref, remote_sha.lower())


def parse_lines(text: str) -> tuple[RefUpdate, ...]:
    """Every line of git's pre-push input (blank lines ignored; empty input: nothing is being pushed)."""
    return tuple(parse_line(line, n) for n, line in enumerate(text.splitlines(), 1) if line.strip())


def from_env(env: Mapping[str, str]) -> RefUpdate:
    """The range the hook framework gives in PRE_COMMIT_FROM_REF / PRE_COMMIT_TO_REF, as a RefUpdate.

    Both are absent when the push brings a brand-new root branch: the pushed commit is then
    PRE_COMMIT_LOCAL_BRANCH (else HEAD) and the remote side is the all-zero id (nothing there).
    """
    to_ref = env.get("PRE_COMMIT_TO_REF") or env.get("PRE_COMMIT_LOCAL_BRANCH") or "HEAD"
    from_ref = env.get("PRE_COMMIT_FROM_REF") or ZERO_SHA
    remote_ref = env.get("PRE_COMMIT_REMOTE_BRANCH") or "(the remote branch)"
    return RefUpdate(local_ref=to_ref, local_sha=to_ref, remote_ref=remote_ref, remote_sha=from_ref)


def remote_of_env(env: Mapping[str, str], given: str | None) -> str | None:
    return given or env.get("PRE_COMMIT_REMOTE_NAME") or None


def default_branch_candidates(remote: str | None) -> tuple[str, ...]:
    """Where the remote's default branch may be known here, best first.

    The remote's HEAD, main and master only when `remote` is a remote's name (git passes the URL
    as the name when the user pushes to a URL), then origin's.
    """
    names = []
    if remote and is_remote_name(remote):
        names += [f"refs/remotes/{remote}/{branch}" for branch in ("HEAD", "main", "master")]
    names += ["refs/remotes/origin/HEAD", "refs/remotes/origin/main", "refs/remotes/origin/master"]
    return tuple(dict.fromkeys(names))


def is_remote_name(remote: str) -> bool:
    """Whether git passed a remote's name (not a URL, as when the user pushes to a URL)."""
    return bool(_REMOTE_NAME.fullmatch(remote)) and ".." not in remote


def short(sha: str) -> str:
    return sha[:12] if _OBJECT_ID.fullmatch(sha) else sha


def decide_range(
    update: RefUpdate,
    head: str | None,
    remote_base: str | None,
    fallback_base: str | None = None,
    fallback_from: str | None = None,
) -> PushRange | None:
    """The range one ref line pushes, or None when there is nothing to compare.

    `head`: the local sha peeled to a commit (None when it names no commit, e.g. a tag of a tree).
    `remote_base`: the remote sha peeled to a commit, when that commit is in this repository.
    `fallback_base`: the merge base of head with the remote's default branch (`fallback_from` names
    that branch), used for a new ref or when the remote's commit is not here; when there is none
    either, every model at head counts as added.
    """
    if update.deleted or head is None:
        return None
    note = ""
    if remote_base is not None:
        base, base_from = remote_base, f"the remote's {update.remote_ref}"
    else:
        if fallback_base is not None:
            base, base_from = fallback_base, f"the merge base with {fallback_from}"
        else:
            base, base_from = None, "nothing: no common history with the remote's branches, so every model counts as added"
        if not update.new_on_remote:
            note = (f"the remote's {update.remote_ref} is at {short(update.remote_sha)}, which is not in this "
                    f"repository (fetch it to compare against it); compared {short(head)} with {base_from} instead")
    if base == head:
        return None
    return PushRange((update.remote_ref,), head, base, base_from, note)


def unique_ranges(ranges: Iterable[PushRange | None]) -> list[PushRange]:
    """Ranges without repeats: a branch and a tag pushing the same commits are checked once."""
    found: dict[tuple[str | None, str], PushRange] = {}
    for r in ranges:
        if r is None:
            continue
        key = (r.base, r.head)
        if key in found:
            kept = found[key]
            found[key] = PushRange(kept.refs + tuple(x for x in r.refs if x not in kept.refs), kept.head,
                                   kept.base, kept.base_from, kept.note or r.note)
        else:
            found[key] = r
    return list(found.values())
