"""The watcher's settings: the `watch:` section of planner.yaml, checked, with defaults.

Everything an operator tunes for a drop folder (native or polling events, settle time, log file)
lives in config/, not in code; a typo in a key is an error, never silently a default.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path

from .config import Settings
from .dropnames import DEFAULT_IGNORE
from .errors import ConfigError

__all__ = ["WatchOptions", "watch_options", "OBSERVERS"]

OBSERVERS = ("native", "polling")


@dataclass(frozen=True)
class WatchOptions:
    """How the daemon watches; times in seconds."""

    observer: str = "native"  # native (inotify and the like) | polling (network shares)
    poll_interval_s: float = 1.0  # how often the polling observer lists the folder
    settle_s: float = 2.0  # size and mtime unchanged this long before a file is read
    parse_wait_s: float = 5.0  # a settled file that does not load is retried until stable this long
    rescan_s: float = 30.0  # full listing of the drop folder in case an event was lost
    heartbeat_s: float = 5.0  # status.json is rewritten at least this often
    cache_size: int = 16  # free spaces and road maps kept for replans with new targets only
    log_file: str | None = None  # send the log to this file instead of stderr (relative: in OUT)
    ignore: tuple[str, ...] = DEFAULT_IGNORE  # name patterns never read as scenes


_NUMBERS = {"poll_interval_s", "settle_s", "parse_wait_s", "rescan_s", "heartbeat_s"}


def _located(settings: Settings, path: tuple, message: str, hint: str,
             at_key: bool) -> ConfigError | None:
    """The error with the line and column of `path` in planner.yaml, when the file can say."""
    if settings.config_dir is None:
        return None
    from .document import parse_document
    from .problem import Problem

    file = Path(settings.config_dir) / "planner.yaml"
    try:
        doc = parse_document(file.read_bytes(), str(file), settings.limits, ConfigError)
        error = doc.error(Problem(path, message, hint, at_key=at_key), ConfigError)
    except Exception:  # a location is a courtesy: never let it hide the message
        return None
    return error if isinstance(error, ConfigError) else None


def watch_options(settings: Settings) -> WatchOptions:
    """The checked `watch:` section of `settings`; raises ConfigError naming the key and the fix."""
    raw = settings.watch or {}
    where = "planner.yaml"
    if settings.config_dir:
        where = str(Path(settings.config_dir) / "planner.yaml")

    def fail(key: str, message: str, hint: str) -> ConfigError:
        located = _located(settings, ("watch", key) if key else ("watch",), message, hint,
                           at_key=key not in known)
        return located or ConfigError(file=where, line=None, column=None,
                                      path=f"watch.{key}" if key else "watch", message=message,
                                      hint=hint)

    known = {f.name for f in fields(WatchOptions)}

    if not isinstance(raw, dict):
        raise fail("", "must be a mapping of watcher settings", "write e.g. `watch: {settle_s: 2}`")
    values: dict = {}
    for key, value in raw.items():
        if key not in known:
            raise fail(str(key), f"unknown key {key!r}", "known keys: " + ", ".join(sorted(known)))
        if key == "observer":
            if value not in OBSERVERS:
                raise fail(key, f"unknown observer {value!r}", "use native or polling")
        elif key in _NUMBERS:
            if isinstance(value, bool) or not isinstance(value, int | float) or value < 0:
                raise fail(key, f"must be a number of seconds >= 0, not {value!r}",
                           f"e.g. {key}: {getattr(WatchOptions, key)}")
            value = float(value)
        elif key == "cache_size":
            if isinstance(value, bool) or not isinstance(value, int) or value < 0:
                raise fail(key, f"must be a whole number >= 0, not {value!r}",
                           "e.g. cache_size: 16")
        elif key == "log_file":
            if value is not None and (not isinstance(value, str) or not value.strip()):
                raise fail(key, f"must be a file name or null, not {value!r}",
                           "e.g. log_file: watch.log (relative names go into the output folder)")
        elif key == "ignore":
            if not isinstance(value, list) or not all(isinstance(p, str) and p for p in value):
                raise fail(key, "must be a list of name patterns", 'e.g. ignore: ["~$*", "*~"]')
            value = tuple(value)
        values[key] = value
    options = WatchOptions(**values)
    if options.poll_interval_s <= 0:
        raise fail("poll_interval_s", "must be more than 0", "e.g. poll_interval_s: 1.0")
    if options.heartbeat_s <= 0:
        raise fail("heartbeat_s", "must be more than 0", "e.g. heartbeat_s: 5")
    if options.rescan_s <= 0:
        raise fail("rescan_s", "must be more than 0", "e.g. rescan_s: 30")
    if options.parse_wait_s < options.settle_s:
        raise fail("parse_wait_s", f"must be at least settle_s ({options.settle_s:g})",
                   f"e.g. parse_wait_s: {max(5.0, options.settle_s):g}")
    return options
