"""`sidestep watch`: the drop-folder daemon. Plans each scene once it settled; keeps OUT current.

Events (watchdog, native or polling) only say "look at this name"; a file is read once its size
and mtime held still for the settle time, planned from exactly the bytes read, and its outputs are
replaced atomically. Outputs that no longer describe their scene are moved to OUT/superseded/
before anything else happens, so the machine side never finds a route for a table that changed.
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import logging.handlers
import os
import queue
import signal
import stat
import sys
import threading
import time
from pathlib import Path

from adapters import enabled_adapters, installed_adapters

from .config import Settings, effective_config_sha256, load_settings
from .debounce import MISSING, NOT_A_FILE, Settler, Signature, file_signature
from .dropnames import why_not_a_scene
from .errors import ConfigError, SceneError, format_error
from .files import is_temp_name, output_stem
from .jobs import JobOutcome, route_file_name, run_job
from .outlock import LOCK_NAME, OutLock
from .plan import PlanCache
from .scene import load_scene_bytes
from .superseded import (
    SUPERSEDED_DIR,
    ensure_superseded_dir,
    outputs_of,
    read_route_header,
    remove_error_file,
    supersede,
    write_error_file,
)
from .watchopts import WatchOptions, watch_options
from .watchstate import FINAL_STATES, SceneRecord, StatusBoard, read_status, utc_stamp

__all__ = ["Watcher", "run_watch", "config_files_sha256", "LOCK_NAME"]

LOG = logging.getLogger("sidestep.watch")
EXIT_CLEAN = 0
EXIT_USAGE = 2
_CONFIG = ("config",)  # settler key of the config folder (never a file name: names are str)
_WAKE = ("wake",)
_TICK_S = 0.05  # how often a settling file's signature is taken, at most (common practice)
_PAST = -1e12  # a "last changed" reading so old that any settle or parse wait has passed
_STATUS_EVERY_S = 0.25  # in a burst, status.json is rewritten at most this often (and at its end)


class _Changed(Exception):
    """The file changed while it was being read."""


def _one_line(text: str) -> str:
    return " | ".join(part.strip() for part in str(text).splitlines() if part.strip())


def config_files_sha256(config_dir: Path | None) -> str | None:
    """Hash over the names and bytes of the config folder's YAML files (None: no folder)."""
    if config_dir is None:
        return None
    digest = hashlib.sha256()
    try:
        names = sorted(os.listdir(config_dir))
    except OSError:
        return "unreadable"
    for name in names:
        if why_not_a_scene(name) is not None:
            continue
        path = Path(config_dir) / name
        try:
            if not stat.S_ISREG(os.stat(path).st_mode):
                continue
            data = path.read_bytes()
        except OSError:
            continue
        digest.update(name.encode("utf-8") + b"\0" + hashlib.sha256(data).digest())
    return digest.hexdigest()


def _identity(folder: Path | None) -> tuple | None:
    """(device, inode) of a folder: tells a folder replaced or remounted under the same name."""
    try:
        st = os.stat(folder) if folder is not None else None
    except OSError:
        return None
    return None if st is None else (st.st_dev, st.st_ino)


def _config_signature(config_dir: Path | None) -> Signature:
    if config_dir is None:
        return MISSING
    try:
        names = sorted(os.listdir(config_dir))
    except OSError:
        return MISSING
    return tuple((n, file_signature(Path(config_dir) / n)) for n in names
                 if why_not_a_scene(n) is None)


def _read_settled(path: Path, signature: Signature, max_bytes: int) -> bytes | None:
    """The file's bytes, provided it still has `signature` before and after the read; None when
    it is larger than `max_bytes` (it is then refused without being read).

    Opened without following links and without blocking (a FIFO swapped in cannot hang us).
    """
    flags = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0)
    fd = os.open(path, flags)
    try:
        before = os.fstat(fd)
        if not stat.S_ISREG(before.st_mode):
            raise _Changed
        sig = (before.st_size, before.st_mtime_ns, before.st_ino, before.st_dev)
        if sig != signature:
            raise _Changed
        if before.st_size > max_bytes:
            return None  # refused unread; the loader words the message
        chunks = []
        remaining = before.st_size + 1  # one more byte tells a file that grew meanwhile
        while remaining > 0:
            chunk = os.read(fd, min(remaining, 1 << 20))
            if not chunk:
                break
            chunks.append(chunk)
            remaining -= len(chunk)
        data = b"".join(chunks)
        after = os.fstat(fd)
        if (after.st_size, after.st_mtime_ns) != sig[:2] or len(data) != before.st_size:
            raise _Changed
        return data
    finally:
        os.close(fd)


class _Events:
    """watchdog handler: every event under a watched folder becomes a path on the queue."""

    def __init__(self, sink: queue.SimpleQueue) -> None:
        self.sink = sink

    def dispatch(self, event) -> None:
        if event.event_type in ("opened", "closed_no_write"):
            return  # our own reads; nothing changed
        for raw in (event.src_path, getattr(event, "dest_path", "")):
            if raw:
                self.sink.put(("path", os.fsdecode(raw)))


def _make_observer(options: WatchOptions):
    if options.observer == "polling":
        from watchdog.observers.polling import PollingObserver

        return PollingObserver(timeout=options.poll_interval_s)
    from watchdog.observers import Observer

    return Observer()


class Watcher:
    """One daemon run: DROP in, OUT out, until `stop` is called (or SIGTERM/SIGINT)."""

    def __init__(self, drop: Path, out: Path, settings: Settings, options: WatchOptions,
                 lock: OutLock | None = None) -> None:
        self.drop = drop
        self.out = out
        self.lock = lock  # held by run_watch; kept here while OUT comes and goes
        self._lock_problem: str | None = None
        self.settings = settings
        self.options = options
        self.config_dir = Path(settings.config_dir).resolve() if settings.config_dir else None
        self.config_sha = config_files_sha256(self.config_dir)
        self.config_sig = _config_signature(self.config_dir)
        self.config_problem: str | None = None  # the config error message while config is broken
        self.cache = PlanCache(options.cache_size)
        self.settler = Settler(options.settle_s)
        self.events: queue.SimpleQueue = queue.SimpleQueue()
        self.board = StatusBoard(out, {
            "drop": str(drop), "out": str(out),
            "config": str(self.config_dir) if self.config_dir else None,
            "observer": options.observer, "settle_s": options.settle_s,
            "heartbeat_s": options.heartbeat_s,
        })
        self.board.set_config(sha256=self.config_sha)
        self._stop = threading.Event()
        self._seen: dict[str, Signature] = {}  # name -> signature when last handled
        self._owner: dict[str, str] = {}  # output stem -> scene name that owns it
        self._previous: dict = {}  # status.json of the run before, by scene name
        self._suffixes = tuple(a.suffix for a in installed_adapters().values())
        self._next_rescan = 0.0
        self._plans = 0
        self._dirty = False  # status.json is behind the board
        self._observer = None
        self._handler: _Events | None = None
        self._folders: tuple = (None, None)

    # ----------------------------------------------------------------- control
    def stop(self) -> None:
        """Ask the loop to stop after the scene it is handling (safe from signal handlers)."""
        self._stop.set()
        self.events.put(_WAKE)

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def run(self) -> int:
        """Catch up on DROP and OUT, then handle events until stopped; returns the exit status."""
        ensure_superseded_dir(self.out)
        previous = read_status(self.out) or {}
        self._previous = previous.get("scenes", {}) if isinstance(previous, dict) else {}
        observer = _make_observer(self.options)
        self._observer, self._handler = observer, _Events(self.events)
        try:
            self._schedule()
            observer.start()  # before the first listing: nothing can slip between the two
        except OSError as exc:
            LOG.error("cannot watch %s with the %s observer (%s); set watch.observer: polling in "
                      "planner.yaml, or raise the system's limit on watches", self.drop,
                      self.options.observer, exc.strerror or exc)
            return EXIT_USAGE
        beat = threading.Thread(target=self._heartbeat, name="heartbeat", daemon=True)
        try:
            names = self._catch_up()
            self.board.set_daemon(state="running")
            self.board.flush()
            beat.start()
            LOG.info("watching %s -> %s (observer %s, settle %.3g s, config %s); %d scene(s) to "
                     "check", self.drop, self.out, self.options.observer, self.options.settle_s,
                     self.config_dir or "built-in defaults", len(names))
            self._loop()
        finally:
            self._stop.set()
            observer.stop()
            with contextlib.suppress(RuntimeError):
                observer.join(timeout=5)
            if beat.is_alive():
                beat.join(timeout=5)
            self.board.set_daemon(state="stopped", stopped=utc_stamp())
            self.board.set_queued(len(self.settler))
            with contextlib.suppress(OSError):
                self.board.flush()
        LOG.info("stopped cleanly (%d plan(s) this run, %d scene(s) left for the next start)",
                 self._plans, len(self.settler))
        return EXIT_CLEAN

    # -------------------------------------------------------------- catch-up
    def _schedule(self) -> None:
        """Watch DROP and the config folder (again, after either was replaced, e.g. remounted)."""
        self._observer.unschedule_all()
        self._observer.schedule(self._handler, str(self.drop), recursive=False)
        if self.config_dir is not None and self.config_dir.is_dir():
            self._observer.schedule(self._handler, str(self.config_dir), recursive=False)
        self._folders = (_identity(self.drop), _identity(self.config_dir))

    def _list_drop(self) -> list[str] | None:
        try:
            return sorted(n for n in os.listdir(self.drop)
                          if why_not_a_scene(n, self.options.ignore) is None)
        except OSError as exc:
            LOG.error("cannot list the drop folder %s: %s; trying again later", self.drop,
                      exc.strerror or exc)
            return None

    def _remove_leftovers(self) -> None:
        """Remove half-written temp files a killed writer left in OUT (their process is gone)."""
        for entry in os.listdir(self.out):
            if not is_temp_name(entry):
                continue
            try:
                pid = int(entry.rsplit(".tmp-", 1)[1].split("-")[0])
                if pid != os.getpid():
                    os.kill(pid, 0)
                    continue  # its writer is still running (a `sidestep plan` into OUT)
            except ProcessLookupError:
                pass
            except (ValueError, IndexError, PermissionError):
                continue
            with contextlib.suppress(FileNotFoundError):
                (self.out / entry).unlink()
                LOG.info("removed %s, a partial file left by an interrupted write", entry)

    def _catch_up(self) -> list[str]:
        """Queue every scene in DROP; move outputs in OUT whose scene is gone to superseded/."""
        self._remove_leftovers()
        names = self._list_drop() or []
        now = time.monotonic()
        for name in names:
            self._noticed(name, file_signature(self.drop / name), now)
        stems = {self._stem(name) for name in names}
        for entry in sorted(os.listdir(self.out)):
            if entry.endswith(".route.yaml") or entry.endswith(".error.txt"):
                stem = entry[: -len(".route.yaml")] if entry.endswith(".route.yaml") else \
                    entry[: -len(".error.txt")]
                if stem in stems:
                    continue
                self._retire(stem, "its scene is no longer in the drop folder")
        self._next_rescan = now + self.options.rescan_s
        return names

    def _stem(self, name: str) -> str:
        return output_stem(self.drop / name)

    # ------------------------------------------------------------------ loop
    def _loop(self) -> None:
        while not self._stop.is_set():
            now = time.monotonic()
            wait = self.settler.next_check(now, _TICK_S)
            timeout = self._next_rescan - now if wait is None else min(wait,
                                                                      self._next_rescan - now)
            self._drain(max(0.0, min(timeout, self.options.heartbeat_s)))
            if self._stop.is_set():
                break
            self._keep_lock()
            if self._stop.is_set():
                break
            now = time.monotonic()
            if now >= self._next_rescan:
                self._rescan()
                self._next_rescan = now + self.options.rescan_s
            ready = self.settler.due(now, self._signature_of)
            ready.sort(key=lambda item: item[0] != _CONFIG)  # a new config first
            for index, (key, sig, changed_at) in enumerate(ready):
                if self._stop.is_set():
                    for later, later_sig, later_changed in ready[index:]:
                        self.settler.retry(later, later_sig, later_changed, 0.0)
                    break
                self._handle(key, sig, changed_at)
                self._drain(0.0)
            self.board.set_queued(len(self.settler))
            if self._dirty:
                self._flush()

    def _keep_lock(self) -> None:
        """Take the output folder's lock again if its file went with a deleted OUT; stop if
        another watcher took the folder meanwhile (two must never write into one OUT)."""
        if self.lock is None:
            return
        try:
            gone = self.lock.held_file_is_gone()
            other = self.lock.retake() if gone else None
        except OSError as exc:
            problem = f"cannot lock {self.lock.path} again ({exc.strerror or exc})"
            if problem != self._lock_problem:
                LOG.warning("%s; trying again", problem)
            self._lock_problem = problem
            return
        self._lock_problem = None
        if other is not None:
            LOG.error("another watcher (pid %s) took %s while its lock file was gone; stopping "
                      "(fix: run one watcher per output folder)", other, self.out)
            self.stop()
        elif gone:
            LOG.warning("the lock file %s had gone (output folder deleted?); taken again",
                        self.lock.path)

    def _drain(self, timeout: float) -> None:
        """Take every queued event, waiting up to `timeout` for the first one."""
        try:
            item = self.events.get(timeout=timeout) if timeout > 0 else self.events.get_nowait()
        except queue.Empty:
            return
        while True:
            self._event(item)
            try:
                item = self.events.get_nowait()
            except queue.Empty:
                return

    def _event(self, item: tuple) -> None:
        if item[0] != "path":
            return
        raw = item[1]
        folder, name = os.path.split(raw)
        now = time.monotonic()
        if folder == str(self.drop):
            if why_not_a_scene(name, self.options.ignore) is None:
                LOG.debug("event: %s", name)
                self._noticed(name, file_signature(raw), now)
        elif self.config_dir is not None and folder == str(self.config_dir):
            if why_not_a_scene(name) is None:
                LOG.debug("event: config %s", name)
                self.settler.note(_CONFIG, _config_signature(self.config_dir), now)

    def _noticed(self, name: str, sig: Signature, now: float) -> None:
        """A scene file may have changed: let it settle; a new name shows as waiting meanwhile."""
        self.settler.note(name, sig, now)
        if sig != MISSING and self.board.get(name) is None:
            self.board.put(SceneRecord(name, "waiting", utc_stamp(), stem=self._stem(name),
                                       message="noticed; waiting for the file to settle"))
            self._dirty = True

    def _signature_of(self, key) -> Signature:
        if key == _CONFIG:
            return _config_signature(self.config_dir)
        return file_signature(self.drop / key)

    def _rescan(self) -> None:
        """Look at the whole drop folder (and config) in case an event never arrived."""
        names = self._list_drop()
        if names is None:
            return
        if (_identity(self.drop), _identity(self.config_dir)) != self._folders:
            LOG.warning("the drop or config folder was replaced (remounted?); watching it again")
            try:
                self._schedule()
            except OSError as exc:
                LOG.error("cannot watch %s again (%s); relying on the rescan every %g s",
                          self.drop, exc.strerror or exc, self.options.rescan_s)
        now = time.monotonic()
        for name in names:
            sig = file_signature(self.drop / name)
            if self._seen.get(name) != sig and name not in self.settler:
                LOG.debug("rescan: %s changed", name)
                self._noticed(name, sig, now)
        for name in set(self._seen) - set(names):
            if name not in self.settler:
                self.settler.note(name, MISSING, now)
        sig = _config_signature(self.config_dir)
        if sig != self.config_sig and _CONFIG not in self.settler:
            self.settler.note(_CONFIG, sig, now)

    def _heartbeat(self) -> None:
        while not self._stop.wait(self.options.heartbeat_s):
            try:
                self.board.flush()
            except OSError as exc:
                LOG.warning("cannot write %s: %s", self.board.path, exc.strerror or exc)

    # --------------------------------------------------------------- handling
    def _handle(self, key, sig: Signature, changed_at: float) -> None:
        """Handle one settled key; nothing a scene or the planner does may end the daemon."""
        try:
            if key == _CONFIG:
                self._reload_config(sig, changed_at)
            else:
                self._handle_scene(key, sig, changed_at)
        except OSError as exc:  # OUT is full, read-only or gone: say so, try again later
            if key == _CONFIG:
                LOG.error("config: cannot be read (%s); the daemon goes on", exc.strerror or exc)
            else:
                self._cannot_write(key, sig, changed_at, f"{key}: {exc.filename or self.out}: "
                                   f"{exc.strerror or exc}")
        except Exception as exc:  # a bug of ours or a file system error: log it, go on
            LOG.error("%s: internal error while handling it (%s: %s); the daemon goes on",
                      "config" if key == _CONFIG else key, type(exc).__name__, _one_line(exc))
        self._flush(force=False)

    def _flush(self, force: bool = True) -> None:
        """Write status.json; in a burst at most every _STATUS_EVERY_S (the last one always)."""
        if not force and time.monotonic() - self.board.flushed_at < _STATUS_EVERY_S:
            self._dirty = True
            return
        self._dirty = False
        try:
            self.board.flush()
        except OSError as exc:
            LOG.warning("cannot write %s: %s", self.board.path, exc.strerror or exc)

    def _handle_scene(self, name: str, sig: Signature, changed_at: float) -> None:
        path = self.drop / name
        if sig == MISSING or sig == NOT_A_FILE:
            why = "removed from the drop folder" if sig == MISSING else \
                "no longer a plain file (symbolic links are not followed)"
            if sig == NOT_A_FILE and self._seen.get(name) != NOT_A_FILE:
                LOG.warning("%s: not a plain file (a symbolic link or a folder); not followed, "
                            "not planned", name)
            self._scene_gone(name, why)
            if sig == MISSING:
                self._seen.pop(name, None)  # names come and go for weeks: forget this one
            else:
                self._seen[name] = sig  # warn about a link once, not at every rescan
            return
        stem = self._stem(name)
        owner = self._owner.get(stem)
        if owner is not None and owner != name and file_signature(self.drop / owner) != MISSING:
            message = (f"{name}: its output name {stem!r} is already used by {owner}; rename "
                       "one of the two files (nothing is written for this one)")
            if self._seen.get(name) != sig:
                LOG.error("%s", message)
            self.board.put(SceneRecord(name, "invalid", utc_stamp(), stem=stem, message=message))
            self._seen[name] = sig
            return
        self._owner[stem] = name
        max_bytes = int(self.settings.limits.max_file_bytes)
        try:
            data = _read_settled(path, sig, max_bytes)
        except _Changed:
            LOG.debug("%s: changed while being read; waiting for it to settle", name)
            self.settler.note(name, file_signature(path), time.monotonic())
            return
        except FileNotFoundError:
            self.settler.note(name, MISSING, time.monotonic())
            return
        except OSError:
            data = None  # unreadable: the loader below says why, in the words `plan` uses
        self._seen[name] = sig
        if data is None:
            self._refused(name, stem)
            return
        sha = hashlib.sha256(data).hexdigest()
        record = self.board.get(name)
        if (
            record is not None
            and record.state in FINAL_STATES
            and record.scene_sha256 == sha
            and record.config_files_sha256 == self.config_sha
        ):
            LOG.debug("%s: saved again with the same content; nothing to do", name)
            return
        if record is None or record.scene_sha256 is None:
            current = self._current_outputs(name, stem, data, sha)
            if current is not None:
                self.board.put(current)
                remove_error_file(self.out, stem)
                LOG.info("%s: outputs in %s are current (scene and config unchanged); nothing "
                         "to do", name, self.out)
                return
        self._plan(name, stem, data, sha, sig, changed_at)

    def _refused(self, name: str, stem: str) -> None:
        """A file too large to read, or not readable: reported as `plan` reports it."""
        try:
            outcome = run_job(self.drop / name, self.out, self.settings, write=False)
        except Exception as exc:  # a bug of ours must not end the daemon
            outcome = JobOutcome("failed", 4, f"{name}: internal error ({type(exc).__name__}: "
                                 f"{_one_line(exc)}); no route was written for this scene.")
        if outcome.state in ("planned", "incomplete"):  # it became readable meanwhile
            self.settler.note(name, file_signature(self.drop / name), time.monotonic())
            return
        record = self.board.get(name)
        if record is not None and record.state == outcome.state and \
                record.message == _one_line(outcome.message or ""):
            return
        self._failed(name, stem, None, outcome)

    def _plan(self, name: str, stem: str, data: bytes, sha: str, sig: Signature,
              changed_at: float) -> None:
        stale = outputs_of(self.out, stem, self._suffixes)
        if stale:
            moved = supersede(self.out, stale)
            LOG.info("%s: moved %d old output file(s) to %s/ (planned for other scene content or "
                     "config)", name, len(moved), SUPERSEDED_DIR)
        # status.json shows this within a heartbeat: a long plan is seen, a short one not rewritten
        self.board.put(SceneRecord(name, "waiting", utc_stamp(), stem=stem, scene_sha256=sha,
                                   config_files_sha256=self.config_sha,
                                   message="being planned"))
        started = time.perf_counter()
        hits = self.cache.hits
        try:
            outcome = run_job(self.drop / name, self.out, self.settings, cache=self.cache,
                              data=data)
        except Exception as exc:  # a planner bug must not end the daemon
            outcome = JobOutcome("failed", 4, (
                f"{name}: internal error ({type(exc).__name__}: {_one_line(exc)}); no route was "
                "written for this scene. Please report this with the scene file."))
        elapsed = time.perf_counter() - started
        if outcome.state == "invalid" and time.monotonic() - changed_at < self.options.parse_wait_s:
            # It may still be arriving (a writer that pauses longer than the settle time).
            LOG.debug("%s: does not load yet (%s); looking again in a moment", name,
                      _one_line(outcome.message or ""))
            self.board.put(SceneRecord(name, "waiting", utc_stamp(), stem=stem, scene_sha256=sha,
                                       config_files_sha256=self.config_sha,
                                       message="does not load yet; waiting for the file to be "
                                       "complete before reporting it"))
            self.settler.retry(name, sig, changed_at, changed_at + self.options.parse_wait_s)
            return
        if outcome.write_error:
            self._cannot_write(name, sig, changed_at, outcome.message or name)
            return
        if outcome.state not in ("planned", "incomplete"):
            self._failed(name, stem, sha, outcome)
            return
        self._plans += 1
        written = {p.name for p in outcome.files}
        leftover = [n for n in outputs_of(self.out, stem, self._suffixes) if n not in written]
        if leftover:
            supersede(self.out, leftover)
        remove_error_file(self.out, stem)
        route = outcome.result.route
        files = [p.name for p in outcome.files]
        self.board.put(SceneRecord(
            name, outcome.state, utc_stamp(), stem=stem, scene_sha256=sha,
            config_sha256=route.config_sha256, config_files_sha256=self.config_sha, files=files,
            legs=len(route.legs), length=round(route.length, 6), units=route.units,
            unreachable=[u.id for u in route.unreachable]))
        reused = " (free space and road map reused)" if self.cache.hits > hits else ""
        LOG.info("planned %s: %s, %d leg(s), length %.3f %s, %.3f s%s -> %s", name, route.status,
                 len(route.legs), route.length, route.units, elapsed, reused, ", ".join(files))
        for item in route.unreachable:
            LOG.info("  %s: unreachable %s: %s", name, item.id, _one_line(item.reason))

    def _cannot_write(self, name: str, sig: Signature, changed_at: float, message: str) -> None:
        """OUT cannot take files now (full, read-only, gone): report it and try the scene again
        after the rescan time (sooner if it changes); nothing half-written stays behind."""
        delay = self.options.rescan_s
        record = self.board.get(name)
        self.board.put(SceneRecord(
            name, "waiting", utc_stamp(), stem=self._stem(name),
            scene_sha256=record.scene_sha256 if record is not None else None,
            config_files_sha256=self.config_sha,
            message=f"{_one_line(message)}; trying again in {delay:g} s"))
        LOG.error("%s; trying again in %g s", _one_line(message), delay)
        self.settler.retry(name, sig, changed_at, time.monotonic() + delay)

    def _failed(self, name: str, stem: str, sha: str | None, outcome: JobOutcome) -> None:
        """The scene cannot be planned: no output of it may stay in OUT; the error file says why."""
        stale = outputs_of(self.out, stem, self._suffixes)
        if stale:
            supersede(self.out, stale)
            LOG.warning("%s: moved %d output file(s) to %s/: they no longer describe the scene",
                        name, len(stale), SUPERSEDED_DIR)
        message = outcome.message or f"{name}: {outcome.state}"
        error_name = write_error_file(self.out, stem, message)
        self.board.put(SceneRecord(name, outcome.state, utc_stamp(), stem=stem, scene_sha256=sha,
                                   config_files_sha256=self.config_sha, error_file=error_name,
                                   message=_one_line(message)))
        LOG.error("%s %s: %s (see %s)", outcome.state, name, _one_line(message), error_name)

    def _scene_gone(self, name: str, why: str) -> None:
        record = self.board.get(name)
        stem = record.stem if record is not None and record.stem else self._stem(name)
        if self._owner.get(stem, name) == name:
            self._retire(stem, why, name)
            self._owner.pop(stem, None)
            for other, other_record in list(self.board.scenes.items()):
                if other != name and other_record.stem == stem:
                    self.settler.note(other, file_signature(self.drop / other), _PAST)
        if record is not None:
            self.board.drop(name)

    def _retire(self, stem: str, why: str, name: str | None = None) -> None:
        stale = outputs_of(self.out, stem, self._suffixes)
        moved = supersede(self.out, stale) if stale else []
        removed = remove_error_file(self.out, stem)
        if moved or removed or name:
            LOG.info("%s: %s; %d output file(s) moved to %s/", name or stem, why, len(moved),
                     SUPERSEDED_DIR)

    def _current_outputs(self, name: str, stem: str, data: bytes, sha: str) -> SceneRecord | None:
        """A record for the outputs already in OUT if they were planned from these very bytes and
        the current config (route file hashes, companions' hashes, the config folder's hash)."""
        header = read_route_header(self.out / route_file_name(stem))
        if not header or header.get("route") != 1 or header.get("scene_sha256") != sha:
            return None
        before = self._previous.get(name)
        recorded = before.get("config_files_sha256") if isinstance(before, dict) else None
        if recorded is not None and recorded != self.config_sha:
            return None  # the last run handled it with another config folder
        try:
            scene = load_scene_bytes(data, name, self.settings)
        except (SceneError, ConfigError):
            return None
        config_sha = effective_config_sha256(self.settings.in_units(scene.units), scene.head)
        if header.get("config_sha256") != config_sha:
            return None
        listed = header.get("files") or {}
        if not isinstance(listed, dict):
            return None
        try:
            expected = {stem + a.suffix for a in enabled_adapters(self.settings.adapters)}
        except ConfigError:
            return None
        if set(listed) != expected:
            return None
        for companion, digest in listed.items():
            try:
                if hashlib.sha256((self.out / companion).read_bytes()).hexdigest() != digest:
                    return None
            except OSError:
                return None
        status = header.get("status")
        if status not in ("complete", "incomplete"):
            return None
        legs = header.get("legs") or []
        unreachable = header.get("unreachable") or []
        return SceneRecord(
            name, "planned" if status == "complete" else "incomplete", utc_stamp(), stem=stem,
            scene_sha256=sha, config_sha256=config_sha, config_files_sha256=self.config_sha,
            files=sorted(listed) + [route_file_name(stem)],
            legs=len(legs) if isinstance(legs, list) else None,
            length=header.get("length"), units=header.get("units"),
            unreachable=[str(u.get("id")) for u in unreachable if isinstance(u, dict)])

    def _reload_config(self, sig: Signature, changed_at: float) -> None:
        self.config_sig = sig
        new_sha = config_files_sha256(self.config_dir)
        if new_sha == self.config_sha:
            if self.config_problem is not None:  # put back as it was: the last good config
                self.config_problem = None
                self.board.set_config(state="ok", sha256=new_sha, message=None)
                LOG.info("config: back to the last good content; nothing to replan")
            else:
                LOG.debug("config saved again with the same content; nothing to do")
            return
        try:
            settings = load_settings(self.config_dir)
            options = watch_options(settings)
        except ConfigError as exc:
            if time.monotonic() - changed_at < self.options.parse_wait_s:
                self.settler.retry(_CONFIG, sig, changed_at,
                                   changed_at + self.options.parse_wait_s)
                return
            # Keep planning with the last good config (its routes stay valid for it); say so
            # in status.json and the log until the folder loads again.
            self.config_problem = format_error(exc)
            self.board.set_config(state="invalid", sha256=new_sha, message=self.config_problem)
            LOG.error("config: %s; planning goes on with the last good config until it is fixed",
                      _one_line(self.config_problem))
            return
        if options.observer != self.options.observer or options.log_file != self.options.log_file:
            LOG.warning("config: watch.observer and watch.log_file take effect at the next start")
        self.settings = settings
        self.options = WatchOptions(**{**options.__dict__, "observer": self.options.observer,
                                       "log_file": self.options.log_file})
        self.settler.settle_s = self.options.settle_s
        self.cache = PlanCache(self.options.cache_size)  # nothing planned with the old config
        self.config_sha = new_sha
        self.config_problem = None
        self.board.set_config(state="ok", sha256=new_sha, message=None)
        count = self._replan_all()
        LOG.info("config changed: replanning all %d scene(s) with it", count)

    def _replan_all(self) -> int:
        """Queue every known scene to be handled now (those still settling keep waiting)."""
        names = set(self._seen) | set(self.board.scenes)
        for name in self._list_drop() or []:
            names.add(name)
        now = time.monotonic()
        for name in sorted(names):
            if name not in self.settler:
                self.settler.retry(name, file_signature(self.drop / name), _PAST, now)
        return len(names)


# ----------------------------------------------------------------------- entry point
class _Formatter(logging.Formatter):
    def formatTime(self, record, datefmt=None):  # noqa: N802 - logging's name
        return utc_stamp(record.created)


def _setup_logging(out: Path, options: WatchOptions, verbose: bool) -> None:
    LOG.handlers.clear()
    LOG.propagate = False
    LOG.setLevel(logging.DEBUG if verbose else logging.INFO)
    if options.log_file:
        target = Path(options.log_file)
        target = target if target.is_absolute() else out / target
        handler: logging.Handler = logging.handlers.WatchedFileHandler(target, encoding="utf-8")
    else:
        handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_Formatter("%(asctime)s %(levelname)s %(message)s"))
    LOG.addHandler(handler)


def run_watch(drop: Path, out: Path | None, settings: Settings, *, verbose: bool = False) -> int:
    """Run the daemon on `drop`, writing into `out` (default: `drop`) until SIGTERM or SIGINT."""
    drop = Path(drop)
    if not drop.is_dir():
        print(f"sidestep watch: {drop}: not a folder (fix: give the drop folder the scenes are "
              "saved into)", file=sys.stderr)
        return EXIT_USAGE
    drop = drop.resolve()
    out = drop if out is None else Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        print(f"sidestep watch: {out}: cannot create the output folder ({exc.strerror or exc})",
              file=sys.stderr)
        return EXIT_USAGE
    out = out.resolve()
    try:
        options = watch_options(settings)
        _setup_logging(out, options, verbose)
        ensure_superseded_dir(out)
    except ConfigError as exc:
        print(format_error(exc), file=sys.stderr)
        return EXIT_USAGE
    except (OSError, ValueError) as exc:
        print(f"sidestep watch: {exc}", file=sys.stderr)
        return EXIT_USAGE
    lock = OutLock(out)
    other = lock.take()
    if other is not None:
        print(f"sidestep watch: another watcher (pid {other}) is already writing into {out} "
              "(fix: stop it first, or give this one another --out folder)", file=sys.stderr)
        return EXIT_USAGE
    watcher = Watcher(drop, out, settings, options, lock=lock)

    def on_signal(signum, frame):  # noqa: ARG001 - signal handler signature
        if watcher.stopping:
            LOG.warning("second %s: stopping at once (outputs are written atomically)",
                        signal.Signals(signum).name)
            os._exit(1)
        LOG.info("%s received: stopping after the current scene", signal.Signals(signum).name)
        watcher.stop()

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGTERM, signal.SIGINT)}
    try:
        return watcher.run()
    finally:
        for s, handler in old.items():
            signal.signal(s, handler)
        lock.release()
