"""Helpers for the daemon's end-to-end tests: a test config folder, scene text, a running watcher.

Not a test module: tests/test_watch_*.py import it.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import shapely
import yaml

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "config"
FINAL = ("planned", "incomplete", "invalid", "failed")

# The laser-slim head of config/heads.yaml: a 50 x 90 rectangle around the tool point.
LASER = [(-25.0, -45.0), (25.0, -45.0), (25.0, 45.0), (-25.0, 45.0)]


def make_config(folder: Path, **watch) -> Path:
    """A copy of config/ with short watcher times (and `watch` overrides) for tests."""
    shutil.copytree(CONFIG, folder)
    planner = yaml.safe_load((folder / "planner.yaml").read_text())
    planner["watch"] = {"settle_s": 0.3, "parse_wait_s": 0.6, "heartbeat_s": 0.5,
                        "rescan_s": 2.0, "poll_interval_s": 0.1, **watch}
    (folder / "planner.yaml").write_text(yaml.safe_dump(planner, sort_keys=False))
    return folder


def set_head_margin(config: Path, head: str, margin: float) -> None:
    """Change one head's margin in heads.yaml, written in place like an editor would."""
    heads = yaml.safe_load((config / "heads.yaml").read_text())
    heads["heads"][head]["margin"] = margin
    (config / "heads.yaml").write_text(yaml.safe_dump(heads, sort_keys=False))


def scene_text(targets=((300, 80), (300, 220)), obstacles=(((150, 100), (190, 200)),),
               head: str = "laser-slim", start=(40, 60)) -> str:
    """A small scene: rect obstacles ((xmin, ymin), (xmax, ymax)) on a 400 x 300 table."""
    lines = ["scene: 1", "units: mm", "travel: {x: [0, 400], y: [0, 300]}", f"head: {head}",
             "obstacles:"]
    for i, (lo, hi) in enumerate(obstacles, 1):
        lines.append(f"  - {{id: block-{i}, rect: {{min: [{lo[0]}, {lo[1]}], "
                     f"max: [{hi[0]}, {hi[1]}]}}}}")
    if not obstacles:
        lines[-1] = "obstacles: []"
    lines.append(f"start: [{start[0]}, {start[1]}]")
    lines.append("targets:")
    lines += [f"  - [{x}, {y}]" for x, y in targets]
    return "\n".join(lines) + "\n"


def sha256(data: bytes | str) -> str:
    if isinstance(data, str):
        data = data.encode("utf-8")
    return hashlib.sha256(data).hexdigest()


def read_status(out: Path) -> dict | None:
    try:
        return json.loads((out / "status.json").read_text())
    except (OSError, ValueError):
        return None


def wait_for(predicate, timeout: float, what: str, poll: float = 0.02):
    """Poll `predicate()` until it returns something truthy; fail the test after `timeout` s."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(poll)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def swept_clearance(route: dict, obstacles: list[shapely.Geometry],
                    footprint=LASER) -> float:
    """Smallest distance between the footprint swept along the route and any obstacle.

    The area swept by a convex footprint translated along a segment is the convex hull of its
    two end placements (Minkowski sum of convex sets is convex: de Berg et al., Computational
    Geometry, ch. 13); computed here with shapely/GEOS, sharing nothing with the planner.
    """
    foot = shapely.Polygon(footprint)
    best = float("inf")
    for leg in route["legs"]:
        pts = leg["points"]
        for (x0, y0), (x1, y1) in zip(pts[:-1], pts[1:], strict=True):
            a = shapely.affinity.translate(foot, x0, y0)
            b = shapely.affinity.translate(foot, x1, y1)
            hull = shapely.union(a, b).convex_hull
            for obstacle in obstacles:
                best = min(best, hull.distance(obstacle))
    return best


class Daemon:
    """`sidestep watch` as a real subprocess, its log in a file."""

    def __init__(self, drop: Path, out: Path, config: Path, log: Path) -> None:
        self.drop, self.out, self.config, self.log = drop, out, config, log
        self.proc: subprocess.Popen | None = None

    def start(self, *extra: str) -> Daemon:
        self.drop.mkdir(parents=True, exist_ok=True)
        with open(self.log, "ab") as log:
            self.proc = subprocess.Popen(
                [sys.executable, "-m", "planner.cli", "watch", str(self.drop), "--out",
                 str(self.out), "--config", str(self.config), "--verbose", *extra],
                cwd=REPO, stdin=subprocess.DEVNULL, stdout=log, stderr=log,
            )
        wait_for(self.running, 30, "the watcher to start")
        return self

    def running(self) -> dict | None:
        if self.proc.poll() is not None:
            raise AssertionError(f"watcher exited with {self.proc.returncode}:\n{self.text()}")
        status = read_status(self.out)
        if status and status["daemon"]["pid"] == self.proc.pid and \
                status["daemon"]["state"] == "running":
            return status
        return None

    def text(self) -> str:
        try:
            return self.log.read_text()
        except OSError:
            return ""

    def entry(self, name: str) -> dict | None:
        status = read_status(self.out)
        return (status or {}).get("scenes", {}).get(name)

    def wait_state(self, name: str, content: bytes | str, timeout: float = 20,
                   states=FINAL) -> dict:
        """Wait until status.json says `name` was handled with exactly `content`."""
        digest = sha256(content)

        def done():
            self.running()
            entry = self.entry(name)
            if entry and entry["scene_sha256"] == digest and entry["state"] in states:
                return entry
            return None

        return wait_for(done, timeout, f"{name} to be handled")

    def plans_of(self, name: str) -> int:
        return sum(1 for line in self.text().splitlines() if f" planned {name}:" in line)

    def stop(self, sig: int = signal.SIGTERM, timeout: float = 30) -> int:
        if self.proc is None or self.proc.poll() is not None:
            return self.proc.returncode if self.proc else 0
        self.proc.send_signal(sig)
        return self.proc.wait(timeout=timeout)

    def kill(self) -> None:
        os.kill(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=30)


def route_of(out: Path, stem: str) -> dict:
    return yaml.safe_load((out / f"{stem}.route.yaml").read_text())


def rect(lo, hi) -> shapely.Geometry:
    return shapely.box(lo[0], lo[1], hi[0], hi[1])
