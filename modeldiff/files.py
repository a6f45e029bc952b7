"""Reading a file from disk that someone else may have put there: regular files only, within a size limit.

One function for every place that reads a file it did not write itself (a model, a cache entry, the
cache's key): `read_regular(path, limit)` opens without blocking (a named pipe opened for reading
would otherwise wait for a writer for ever), looks at what it opened (never at the name: the name can
change in between), refuses anything that is not a regular file (a link to `/dev/zero`, a FIFO, a
device, a socket, a folder), and reads at most `limit + 1` bytes, so a file that grows while it is
read, or that lies about its size, still costs at most the limit.
"""

from __future__ import annotations

import os
import stat


class NotRegular(OSError):
    """The path names something other than a regular file (`kind` says what, in words)."""

    def __init__(self, kind: str) -> None:
        super().__init__(kind)
        self.kind = kind


class TooBig(OSError):
    """The file holds more than the limit (`size`: at least this many bytes)."""

    def __init__(self, size: int) -> None:
        super().__init__(size)
        self.size = size


def kind_of(mode: int) -> str:
    """What a file of this mode is, in words."""
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def read_regular(path: str, limit: int, follow_links: bool = True) -> bytes:
    """The bytes of the regular file at `path`; NotRegular, TooBig, or the OSError of opening it.

    `follow_links=False` refuses a symbolic link itself (for files only this program writes).
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)
    if not follow_links:
        flags |= getattr(os, "O_NOFOLLOW", 0)
    descriptor = os.open(path, flags)
    try:
        info = os.fstat(descriptor)
        if not stat.S_ISREG(info.st_mode):
            raise NotRegular(kind_of(info.st_mode))
        if info.st_size > limit:
            raise TooBig(info.st_size)
        chunks = []
        left = limit + 1
        while left > 0:
            chunk = os.read(descriptor, min(left, max(info.st_size, 1 << 16) + 1))
            if not chunk:
                break
            chunks.append(chunk)
            left -= len(chunk)
        data = b"".join(chunks)
        if len(data) > limit:
            raise TooBig(len(data))
        return data
    finally:
        os.close(descriptor)


def enclosing_work_tree(path: str) -> str | None:
    """The folder holding `.git` (a folder or a file) above where `path` is written, links not followed; or None."""
    here = os.path.dirname(os.path.abspath(path))
    while True:
        if os.path.lexists(os.path.join(here, ".git")):
            return here
        parent = os.path.dirname(here)
        if parent == here:
            return None
        here = parent


def leaves(root: str, path: str) -> bool:
    """Whether `path`, symbolic links followed, is outside the folder `root` (links in `root` itself followed too)."""
    real_root = os.path.realpath(root)
    return os.path.commonpath([real_root, os.path.realpath(path)]) != real_root
