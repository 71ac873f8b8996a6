"""`sidestep demo`: the main job as it really runs. A watcher on a fresh drop folder, the bundled
scenes dropped in one by one as an operator would, each route waited for, then a clean stop."""

from __future__ import annotations

import contextlib
import hashlib
import signal
import subprocess
import sys
import time
from datetime import datetime
from importlib.resources import files
from pathlib import Path

from .config import Settings
from .safety import caution_text
from .superseded import read_route_header
from .watchopts import watch_options
from .watchstate import FINAL_STATES, read_status

__all__ = ["demo_scenes", "run_demo"]

_OPERATOR_PAUSE_S = 0.5  # between two drops, so the log reads like a person at work
_START_TIMEOUT_S = 60.0


def demo_scenes() -> list[Path]:
    """The bundled demo scene files, in name order."""
    folder = files("planner") / "demo"
    return sorted(Path(str(p)) for p in folder.iterdir() if p.name.endswith(".yaml"))


def _fresh_folder(out: Path) -> Path:
    """A new run folder under `out` (earlier runs are kept: nothing the user has is deleted)."""
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    run = out / f"run-{stamp}"
    serial = 1
    while run.exists():
        serial += 1
        run = out / f"run-{stamp}-{serial}"
    run.mkdir(parents=True)
    return run


def _wait(what, timeout: float, child: subprocess.Popen, poll_s: float = 0.05):
    """Poll `what()` until it returns something, the watcher exits, or `timeout` passes."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = what()
        if value is not None:
            return value
        if child.poll() is not None:
            return None
        time.sleep(poll_s)
    return None


def _log_tail(log: Path, lines: int = 5) -> str:
    try:
        return "\n".join("    " + line for line in log.read_text().splitlines()[-lines:])
    except OSError:
        return ""


def _stop(child: subprocess.Popen) -> int:
    if child.poll() is None:
        child.send_signal(signal.SIGTERM)
    try:
        return child.wait(timeout=60)
    except subprocess.TimeoutExpired:
        child.kill()
        return child.wait()


def run_demo(out: Path, settings: Settings, *, config: Path | None = None,
             keep_running: bool = False) -> int:
    """Start `sidestep watch` on `out/run-*/drop`, drop the demo scenes, report, stop (exit 0)."""
    options = watch_options(settings)
    run = _fresh_folder(out)
    drop, routes, log = run / "drop", run / "routes", run / "watch.log"
    drop.mkdir()
    config = config if config is not None else settings.config_dir
    command = [sys.executable, "-m", "planner.cli", "watch", str(drop), "--out", str(routes)]
    if config is not None:
        command += ["--config", str(config)]
    print(f"Sidestep demo: a watcher plans every scene saved into {drop}/")
    print(f"  routes appear in {routes}/, its log is {log}")
    with open(log, "ab") as log_file:
        child = subprocess.Popen(command, stdin=subprocess.DEVNULL, stdout=log_file,
                                 stderr=log_file, start_new_session=True)
    try:
        return _drive(child, drop, routes, log, options, settings, keep_running)
    except KeyboardInterrupt:
        print("\nstopping the watcher...")
        code = _stop(child)
        print(f"watcher stopped (exit {code})")
        return 0 if code == 0 else 1
    finally:
        if child.poll() is None and not keep_running:
            _stop(child)


def _drive(child, drop: Path, routes: Path, log: Path, options, settings: Settings,
           keep_running: bool) -> int:
    def running():
        status = read_status(routes)
        if status and status["daemon"].get("pid") == child.pid and \
                status["daemon"].get("state") == "running":
            return status
        return None

    if _wait(running, _START_TIMEOUT_S, child) is None:
        print(f"the watcher did not start (exit {child.poll()}); its log says:\n{_log_tail(log)}")
        _stop(child)
        return 1
    print(f"  watcher running (pid {child.pid}, observer {options.observer}, settle time "
          f"{options.settle_s:g} s: a scene is planned once it has not changed for that long)")
    budget = options.settle_s + options.parse_wait_s + settings.limits.time_budget_s + 30
    sheets: list[tuple[str, Path]] = []
    problems = 0  # bundled scenes that did not plan: a bug worth an exit status
    for scene in demo_scenes():
        time.sleep(_OPERATOR_PAUSE_S)
        data = scene.read_bytes()
        sha = hashlib.sha256(data).hexdigest()
        dropped = time.monotonic()
        (drop / scene.name).write_bytes(data)
        print(f"\ndropped {scene.name}")

        def planned(name=scene.name, sha=sha):
            status = read_status(routes)
            entry = (status or {}).get("scenes", {}).get(name)
            if entry and entry.get("scene_sha256") == sha and entry.get("state") in FINAL_STATES:
                return entry
            return None

        entry = _wait(planned, budget, child)
        if entry is None:
            print(f"  no answer from the watcher for {scene.name}; its log says:\n{_log_tail(log)}")
            _stop(child)
            return 1
        waited = time.monotonic() - dropped
        _report(entry, routes, waited)
        problems += entry["state"] not in ("planned", "incomplete")
        sheets += [(entry.get("state"), routes / n) for n in entry.get("files", [])
                   if n.endswith(".html")]
    if keep_running:
        _closing(sheets)
        print(f"\nThe watcher keeps watching {drop}/ (pid {child.pid}): save more scenes there.")
        print(f"Stop it with Ctrl-C here, or from another terminal: kill -TERM {child.pid}")
        while child.poll() is None:
            time.sleep(0.2)
        code = child.returncode
        print(f"watcher stopped (exit {code})")
        return 0 if code == 0 and not problems else 1
    code = _stop(child)
    print(f"\nwatcher stopped cleanly (exit {code})" if code == 0 else
          f"\nthe watcher stopped with exit {code}; its log says:\n{_log_tail(log)}")
    _closing(sheets)
    return 0 if code == 0 and not problems else 1


def _closing(sheets: list[tuple[str, Path]]) -> None:
    if sheets:  # the one with an unreachable target shows the most
        first = next((s for state, s in sheets if state == "incomplete"), sheets[0][1])
        print(f"\nOpen first: {first} in a web browser: the picture of the table and route, "
              "the legs, and why a target cannot be reached.")
    print("Before running any route on a machine:")
    print(caution_text())


def _report(entry: dict, routes: Path, waited: float) -> None:
    state = entry["state"]
    if state in ("planned", "incomplete"):
        print(f"  {state} after {waited:.1f} s: {entry.get('legs')} legs, "
              f"{entry.get('length'):.1f} {entry.get('units')}")
        route_name = entry["files"][-1] if entry.get("files") else None
        header = read_route_header(routes / route_name) if route_name else None
        for item in (header or {}).get("unreachable") or []:
            with contextlib.suppress(AttributeError, KeyError):
                print(f"      unreachable {item['id']}: {item['reason']}")
        for name in entry.get("files", []):
            sheet = "   <- job sheet with the picture" if name.endswith(".html") else ""
            print(f"      {routes / name}{sheet}")
    else:
        print(f"  {state} after {waited:.1f} s: {entry.get('message')}")
        if entry.get("error_file"):
            print(f"      {routes / entry['error_file']}")
