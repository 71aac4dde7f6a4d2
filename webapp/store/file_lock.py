"""A lock between threads and processes that is released when its holder dies.

The compute cache used ``diskcache.Lock``: a row in the cache that stays after
its holder is killed (``kill -9``, out of memory) until it expires, so every
later request for that result waited out the expiry for a holder that no longer
existed. An ``fcntl.flock`` lock belongs to an open file, and the kernel drops
it when the file is closed, which happens at once when the process dies: the
next waiter simply gets it. Process ids are never compared, so a reused pid
cannot fool it.

Two ``open()`` calls give two independent locks even within one process
(flock(2)), so threads of one worker exclude each other too. That holds on
local file systems; on NFS Linux emulates flock with POSIX record locks, which
do not separate threads of one process (the data directory's SQLite index wants
a local disk anyway).

The holder removes the file just before it lets go, so lock files do not pile
up. A waiter that then gets the lock on the removed file sees that its
descriptor no longer names the path, and starts again on the new file; removal
therefore never lets two holders in. The holder writes its process id and host
into the file: a waiter that finds such a note in a file it has just locked
knows the previous holder died holding it (see :attr:`FileLock.taken_over_from`).
"""

from __future__ import annotations

import fcntl
import os
import socket
import time
from pathlib import Path

__all__ = ["FileLock"]

_FIRST_PAUSE_SECONDS = 0.002
_LONGEST_PAUSE_SECONDS = 0.05


class FileLock:
    """An exclusive lock named by a file path; ``acquire`` waits, ``release`` may run in another thread."""

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        self._fd: int | None = None
        self.taken_over_from: str | None = None  # the note of a holder that died holding the lock

    def acquire(self, timeout: float | None = None) -> bool:
        """Wait for the lock; False if ``timeout`` seconds passed without it (None: wait as long as it takes)."""
        deadline = None if timeout is None else time.monotonic() + timeout
        pause = _FIRST_PAUSE_SECONDS
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o600)
            if _try_lock(fd):
                if _still_names(fd, self.path):
                    self._take(fd)
                    return True
                os.close(fd)  # the holder removed it as it let go: lock the new file instead
                continue
            os.close(fd)
            if deadline is not None and time.monotonic() >= deadline:
                return False
            time.sleep(pause)
            pause = min(pause * 2, _LONGEST_PAUSE_SECONDS)

    def release(self) -> None:
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            self.path.unlink(missing_ok=True)
        finally:
            os.close(fd)  # closing the last descriptor drops the lock

    def __enter__(self) -> "FileLock":
        self.acquire()
        return self

    def __exit__(self, *exc_info) -> None:
        self.release()

    def _take(self, fd: int) -> None:
        previous = os.pread(fd, 256, 0).decode("utf-8", "replace").strip()
        self.taken_over_from = previous or None
        note = f"{os.getpid()} {socket.gethostname()}\n".encode()
        os.ftruncate(fd, 0)
        os.pwrite(fd, note, 0)
        self._fd = fd


def _try_lock(fd: int) -> bool:
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except BlockingIOError:
        return False


def _still_names(fd: int, path: Path) -> bool:
    try:
        named = os.stat(path)
    except FileNotFoundError:
        return False
    held = os.fstat(fd)
    return (held.st_dev, held.st_ino) == (named.st_dev, named.st_ino)
