"""`kill -9` in the middle of a burst: no torn file is ever seen, and a restart finishes the job.

A reader loop runs beside the watcher the whole time, as a machine-side script would, and checks
every route file it reads parses completely and that the companions it names have the hashes it
names (the hand-off rule of docs/operations.md).
"""

from __future__ import annotations

import json
import os
import signal
import threading
from pathlib import Path

import pytest
import yaml
from watchkit import Daemon, make_config, scene_text, sha256, wait_for

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="POSIX signals needed")

_Loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
BURST = 50


class Reader(threading.Thread):
    """Reads every output in OUT over and over; records anything torn or mixed."""

    def __init__(self, out: Path) -> None:
        super().__init__(daemon=True)
        self.out = out
        self.halt = threading.Event()
        self.problems: list[str] = []
        self.routes_read = 0

    def run(self) -> None:
        while not self.halt.is_set():
            try:
                names = sorted(os.listdir(self.out))
            except FileNotFoundError:
                continue
            for name in names:
                self.check(name)

    def check(self, name: str) -> None:
        path = self.out / name
        try:
            data = path.read_bytes()
        except (FileNotFoundError, IsADirectoryError):
            return
        if name == "status.json":
            try:
                doc = json.loads(data)
                assert doc["status"] == 1 and isinstance(doc["scenes"], dict)
            except (ValueError, KeyError, AssertionError) as exc:
                self.problems.append(f"{name}: torn ({exc!r})")
            return
        if not name.endswith(".route.yaml"):
            return
        try:
            doc = yaml.load(data, Loader=_Loader)  # noqa: S506 - a safe loader
        except yaml.YAMLError as exc:
            self.problems.append(f"{name}: torn ({exc})")
            return
        if not isinstance(doc, dict) or doc.get("route") != 1 or \
                doc.get("status") not in ("complete", "incomplete") or "legs" not in doc:
            self.problems.append(f"{name}: incomplete document {str(doc)[:80]!r}")
            return
        self.routes_read += 1
        # Strict: in this burst no route is ever replaced or moved, so a reader following the
        # hand-off rule would never need its "read both again" step; any mismatch is a fault.
        for companion, digest in (doc.get("files") or {}).items():
            try:
                if sha256((self.out / companion).read_bytes()) != digest:
                    self.problems.append(f"{companion}: does not match {name}")
            except FileNotFoundError:
                self.problems.append(f"{companion}: named by {name} but missing")


def test_kill_9_during_a_burst_then_restart_plans_every_scene_exactly_once(tmp_path: Path):
    tmp_path = tmp_path.resolve()
    config = make_config(tmp_path / "config")
    daemon = Daemon(tmp_path / "drop", tmp_path / "out", config, tmp_path / "watch.log")
    reader = Reader(daemon.out)
    try:
        daemon.start()
        reader.start()
        texts = {f"burst-{i:02d}.yaml": scene_text(targets=[(300, 40 + 4 * i), (340, 250 - i)])
                 for i in range(BURST)}
        for name, text in texts.items():
            (daemon.drop / name).write_text(text)
        wait_for(lambda: len(list(daemon.out.glob("*.route.yaml"))) >= 8, 60,
                 "the first routes of the burst")
        daemon.kill()
        before = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns)
                  for p in daemon.out.glob("*.route.yaml")}
        assert len(before) < BURST, "the burst finished before the kill; nothing was tested"
        daemon.start()
        for name, text in texts.items():
            daemon.wait_state(name, text, timeout=60)
        reader.halt.set()
        reader.join(timeout=10)
        assert daemon.stop() == 0
    finally:
        reader.halt.set()
        if daemon.proc is not None and daemon.proc.poll() is None:
            daemon.kill()
    assert reader.problems == []
    assert reader.routes_read > BURST
    # Routes written before the kill were not written again after the restart.
    for name, identity in before.items():
        st = (daemon.out / name).stat()
        assert (st.st_ino, st.st_mtime_ns) == identity, name
    # Each scene planned once over both runs; at most one (killed between writing its route and
    # logging it) has no log line, and then its route is one that was there before the restart.
    counts = {name: daemon.plans_of(name) for name in texts}
    assert all(count <= 1 for count in counts.values()), counts
    unlogged = [name for name, count in counts.items() if count == 0]
    assert len(unlogged) <= 1
    assert all(Path(name).stem + ".route.yaml" in before for name in unlogged)
    # Nothing partial or stray left in OUT: only each scene's outputs and the daemon's own files.
    status = json.loads((daemon.out / "status.json").read_text())
    expected = {"status.json", "superseded", ".sidestep-watch.lock"}
    for name in texts:
        expected.update(status["scenes"][name]["files"])
    assert set(os.listdir(daemon.out)) == expected
    for name, text in texts.items():
        route = yaml.safe_load((daemon.out / (Path(name).stem + ".route.yaml")).read_text())
        assert route["scene_sha256"] == sha256(text)
