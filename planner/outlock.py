"""The one-daemon-per-output-folder lock: OUT/.sidestep-watch.lock, held with flock.

The kernel releases the lock when the process ends, even on kill -9. Because the lock lives on
a file inside OUT, deleting OUT (or the file) would silently free it for a second daemon; the
holder therefore checks now and then that the file on disk is still the one it holds, and takes
a fresh one if it is gone.
"""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

__all__ = ["LOCK_NAME", "OutLock"]

LOCK_NAME = ".sidestep-watch.lock"


def _take(path: Path) -> tuple[int | None, str | None]:
    """(fd, None) with the lock held and our pid written, or (None, pid of the holder)."""
    fd = os.open(path, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        try:
            other = os.read(fd, 32).decode("ascii", "replace").strip() or "?"
        finally:
            os.close(fd)
        return None, other
    os.ftruncate(fd, 0)
    os.write(fd, f"{os.getpid()}\n".encode("ascii"))
    return fd, None


class OutLock:
    """The exclusive lock of one daemon on one output folder."""

    def __init__(self, out: Path) -> None:
        self.out = Path(out)
        self.path = self.out / LOCK_NAME
        self._fd: int | None = None

    def take(self) -> str | None:
        """Take the lock; None when it is ours, else the pid another daemon wrote into it."""
        fd, other = _take(self.path)
        if fd is not None:
            self.release()
            self._fd = fd
        return other

    def held_file_is_gone(self) -> bool:
        """True when the lock file on disk is missing or is not the one we hold."""
        if self._fd is None:
            return True
        try:
            on_disk = os.stat(self.path, follow_symlinks=False)
        except FileNotFoundError:
            return True
        mine = os.fstat(self._fd)
        return (on_disk.st_dev, on_disk.st_ino) != (mine.st_dev, mine.st_ino)

    def retake(self) -> str | None:
        """Take the lock on a new file after the old one went (the folder made again if need
        be); None when it is ours, else the pid of the daemon that took it meanwhile. OSError if
        OUT cannot be made or written."""
        self.out.mkdir(parents=True, exist_ok=True)
        return self.take()

    def release(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None
