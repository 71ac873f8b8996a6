"""Decide when a file that is being written has settled: its size and mtime stayed unchanged.

A network copy arrives in chunks and editors save twice in a row; the watcher must read a file
only once it has kept the same signature for the settle time, and then only its final content.
Pure bookkeeping: the caller supplies the clock readings and the signatures (`file_signature`).
"""

from __future__ import annotations

import os
import stat
from collections.abc import Callable, Hashable
from dataclasses import dataclass

__all__ = ["Signature", "Settler", "file_signature", "MISSING", "NOT_A_FILE"]

# (size, mtime_ns, inode, device) of a regular file; or one of the two markers below.
Signature = tuple
MISSING: Signature = ("missing",)
NOT_A_FILE: Signature = ("not-a-file",)  # a symbolic link, a folder, a device...


def file_signature(path: str | os.PathLike) -> Signature:
    """What `Settler` compares: size, mtime, inode and device of the file (links not followed).

    The inode catches a file replaced by rename with the same size and time stamp.
    """
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return MISSING
    except NotADirectoryError:
        return MISSING
    if not stat.S_ISREG(st.st_mode):
        return NOT_A_FILE
    return (st.st_size, st.st_mtime_ns, st.st_ino, st.st_dev)


@dataclass
class _Pending:
    signature: Signature
    changed_at: float  # clock reading when the signature was last seen to change
    not_before: float  # do not hand it out before this clock reading (retries)


class Settler:
    """Keys (file names) waiting for their file to settle.

    `note` says a key may have changed (an event, a listing); `due` hands out, once, every key
    whose signature has been the same for `settle_s`, and forgets it; `retry` puts a key back to
    be looked at again later (a file that settled but does not load yet).
    """

    def __init__(self, settle_s: float) -> None:
        if settle_s < 0:
            raise ValueError("settle_s must be >= 0")
        self.settle_s = settle_s
        self._pending: dict[Hashable, _Pending] = {}

    def __contains__(self, key: Hashable) -> bool:
        return key in self._pending

    def __len__(self) -> int:
        return len(self._pending)

    def note(self, key: Hashable, signature: Signature, now: float) -> None:
        """Something happened to `key`: its settle time starts again from `now`.

        An event restarts the clock even when the signature looks the same, because file systems
        with coarse time stamps (FAT, some network shares) can hide a write inside one tick.
        """
        item = self._pending.get(key)
        if item is None:
            self._pending[key] = _Pending(signature, now, now)
        else:
            item.signature = signature
            item.changed_at = now
            item.not_before = now  # a new change cancels a pending retry's delay

    def retry(self, key: Hashable, signature: Signature, changed_at: float, at: float) -> None:
        """Look at `key` again no earlier than `at`, keeping when it last changed."""
        self._pending[key] = _Pending(signature, changed_at, at)

    def forget(self, key: Hashable) -> None:
        self._pending.pop(key, None)

    def stable_since(self, key: Hashable) -> float | None:
        item = self._pending.get(key)
        return None if item is None else item.changed_at

    def due(
        self, now: float, signature_of: Callable[[Hashable], Signature]
    ) -> list[tuple[Hashable, Signature, float]]:
        """Keys that have settled, as (key, signature, changed_at), oldest change first.

        Each pending key's signature is taken again; a different one restarts its settle time.
        Keys handed out are no longer pending.
        """
        ready: list[tuple[Hashable, Signature, float]] = []
        for key, item in list(self._pending.items()):
            if now < item.not_before and now - item.changed_at >= self.settle_s:
                continue  # a retry that is not due yet; no need to look at the file
            current = signature_of(key)
            if current != item.signature:
                item.signature = current
                item.changed_at = now
                continue
            if now - item.changed_at >= self.settle_s and now >= item.not_before:
                ready.append((key, current, item.changed_at))
        for key, _, _ in ready:
            del self._pending[key]
        ready.sort(key=lambda entry: entry[2])
        return ready

    def next_check(self, now: float, poll_s: float) -> float | None:
        """Seconds until `due` is worth calling again (None: nothing pending).

        While a file is settling its signature is looked at every `poll_s`; a retry sleeps until
        it is due.
        """
        if not self._pending:
            return None
        wait = None
        for item in self._pending.values():
            settled_at = item.changed_at + self.settle_s
            if now - item.changed_at < self.settle_s:
                candidate = min(poll_s, settled_at - now)
            else:
                candidate = max(item.not_before - now, 0.0)
            wait = candidate if wait is None else min(wait, candidate)
        return max(wait, 0.0)
