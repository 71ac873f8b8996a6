"""OUT/status.json: is the daemon alive, and what is the state of each scene (written atomically).

A machine-side script polls this one small file instead of guessing from the folder: the heartbeat
and pid say the daemon runs; each scene's entry says whether its route in OUT is current.
"""

from __future__ import annotations

import json
import os
import threading
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

from .files import atomic_write

__all__ = ["STATES", "FINAL_STATES", "SceneRecord", "StatusBoard", "utc_stamp", "read_status",
           "STATUS_NAME", "STATUS_VERSION"]

STATUS_NAME = "status.json"
STATUS_VERSION = 1
STATES = ("planned", "incomplete", "invalid", "failed", "waiting")
FINAL_STATES = ("planned", "incomplete", "invalid", "failed")


def utc_stamp(t: float | None = None) -> str:
    """ISO 8601 UTC time with milliseconds, e.g. 2025-01-05T09:30:12.481Z."""
    moment = datetime.fromtimestamp(time.time() if t is None else t, tz=UTC)
    return moment.strftime("%Y-%m-%dT%H:%M:%S.") + f"{moment.microsecond // 1000:03d}Z"


@dataclass
class SceneRecord:
    """One scene file of the drop folder as the daemon last handled it."""

    name: str  # file name in DROP
    state: str  # one of STATES
    time: str  # when it entered this state (utc_stamp)
    stem: str = ""
    scene_sha256: str | None = None  # of the bytes handled (None: not read yet)
    config_sha256: str | None = None  # effective config of the route (from the route file)
    config_files_sha256: str | None = None  # the config folder's content it was handled with
    files: list[str] = field(default_factory=list)  # outputs in OUT, route file last
    error_file: str | None = None
    message: str | None = None
    legs: int | None = None
    length: float | None = None
    units: str | None = None
    unreachable: list[str] = field(default_factory=list)

    def as_json(self) -> dict:
        entry: dict = {
            "state": self.state,
            "time": self.time,
            "scene_sha256": self.scene_sha256,
            "config_sha256": self.config_sha256,
            "config_files_sha256": self.config_files_sha256,
            "files": list(self.files),
            "error_file": self.error_file,
            "message": self.message,
        }
        if self.state in ("planned", "incomplete"):
            entry.update(legs=self.legs, length=self.length, units=self.units,
                         unreachable=list(self.unreachable))
        return entry


class StatusBoard:
    """The daemon's state, shared by the main loop and the heartbeat thread; `flush` writes it."""

    def __init__(self, out_dir: Path, daemon: dict) -> None:
        self.path = out_dir / STATUS_NAME
        self._lock = threading.Lock()  # guards the fields below
        self._write_lock = threading.Lock()  # one writer of status.json at a time
        self.daemon = dict(daemon)
        self.daemon.setdefault("pid", os.getpid())
        self.daemon.setdefault("started", utc_stamp())
        self.daemon.setdefault("state", "starting")
        self.config: dict = {"state": "ok", "sha256": None, "message": None}
        self.scenes: dict[str, SceneRecord] = {}
        self.queued = 0
        self.flushed_at = float("-inf")  # time.monotonic() of the last write

    def get(self, name: str) -> SceneRecord | None:
        with self._lock:
            return self.scenes.get(name)

    def put(self, record: SceneRecord) -> None:
        with self._lock:
            self.scenes[record.name] = record

    def drop(self, name: str) -> None:
        with self._lock:
            self.scenes.pop(name, None)

    def set_daemon(self, **values) -> None:
        with self._lock:
            self.daemon.update(values)

    def set_config(self, **values) -> None:
        with self._lock:
            self.config.update(values)

    def set_queued(self, count: int) -> None:
        with self._lock:
            self.queued = count

    def snapshot(self) -> dict:
        """The JSON document, with a fresh heartbeat."""
        with self._lock:
            scenes = {name: self.scenes[name].as_json() for name in sorted(self.scenes)}
            counts = {state: 0 for state in STATES}
            for record in self.scenes.values():
                counts[record.state] = counts.get(record.state, 0) + 1
            return {
                "status": STATUS_VERSION,
                "daemon": {**self.daemon, "heartbeat": utc_stamp(), "queued": self.queued},
                "config": dict(self.config),
                "counts": counts,
                "scenes": scenes,
            }

    def flush(self) -> None:
        """Write status.json atomically (a reader sees the old or the new file, never a mix)."""
        with self._write_lock:
            text = json.dumps(self.snapshot(), indent=1, sort_keys=False) + "\n"
            atomic_write(self.path, text)
            self.flushed_at = time.monotonic()


def read_status(out_dir: Path) -> dict | None:
    """The previous run's status.json, or None when there is none or it cannot be read."""
    path = out_dir / STATUS_NAME
    try:
        if path.is_symlink():
            return None
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("status") != STATUS_VERSION:
        return None
    if not isinstance(data.get("scenes"), dict):
        return None
    return data
