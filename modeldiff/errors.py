"""The one error type that the command line turns into a single line and exit code 2."""

from __future__ import annotations


class ModeldiffError(Exception):
    """Input that cannot be read or a command that was misused.

    The message is one sentence for a person: what is wrong, where (file:line
    when known) and what to do about it.
    """

    exit_code = 2


class UsageError(ModeldiffError):
    """The command line itself was misused."""


class GitError(ModeldiffError):
    """A revision, path or repository that git could not give us."""
