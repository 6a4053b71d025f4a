"""File locks held by the operating system: released when the holder exits or is killed, so
a crash never leaves a stale lock. POSIX ``flock``; ``msvcrt.locking`` on Windows."""

from __future__ import annotations

import os
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

if os.name == "nt":  # pragma: no cover - exercised on Windows only
    import msvcrt

    def _try_lock(fd: int) -> bool:
        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False

    def _lock(fd: int) -> None:
        while not _try_lock(fd):
            time.sleep(0.5)

    def _unlock(fd: int) -> None:
        msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
else:
    import fcntl

    def _try_lock(fd: int) -> bool:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return True
        except BlockingIOError:
            return False

    def _lock(fd: int) -> None:
        fcntl.flock(fd, fcntl.LOCK_EX)

    def _unlock(fd: int) -> None:
        fcntl.flock(fd, fcntl.LOCK_UN)


class Busy(Exception):
    """The lock is held by another process (``holder`` is what it wrote into the file)."""

    def __init__(self, holder: str) -> None:
        super().__init__(holder)
        self.holder = holder


@contextmanager
def exclusive(path: str | Path, *, wait: bool, note: str = "",
              on_wait=None) -> Iterator[None]:
    """Hold an exclusive lock on ``path`` (created if need be) for the block.

    ``wait=False`` raises `Busy` at once when another process holds it; ``wait=True`` calls
    ``on_wait(holder)`` once and waits. ``note`` (who holds it, since when) is written into
    the file while it is held, for the message another process shows.
    """
    path = Path(path)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        if not _try_lock(fd):
            holder = path.read_text(encoding="utf-8", errors="replace").strip()
            if not wait:
                raise Busy(holder)
            if on_wait is not None:
                on_wait(holder)
            _lock(fd)
        try:
            os.ftruncate(fd, 0)
            os.write(fd, note.encode("utf-8"))
            yield
        finally:
            try:
                os.ftruncate(fd, 0)
            except OSError:
                pass
            _unlock(fd)
    finally:
        os.close(fd)


def holder(path: str | Path) -> str | None:
    """What the process holding the lock on ``path`` wrote into it, or None when no process
    holds it (or there is no such file). Takes the lock for an instant to find out."""
    path = Path(path)
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return None
    try:
        try:
            free = _try_lock(fd)
        except OSError:  # a file system without locks: nobody can be told apart
            return None
        if free:
            _unlock(fd)
            return None
        return path.read_text(encoding="utf-8", errors="replace").strip() or "another process"
    finally:
        os.close(fd)
