"""`sidestep demo`: a real watcher on a fresh drop folder, demo scenes dropped in, a clean stop."""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path

import yaml
from watchkit import REPO, make_config

from planner.demo import demo_scenes


def test_demo_runs_the_watcher_and_finds_every_route(tmp_path: Path):
    config = make_config(tmp_path / "config")
    run = subprocess.run([sys.executable, "-m", "planner.cli", "demo", "--out",
                          str(tmp_path / "demo"), "--config", str(config)],
                         capture_output=True, text=True, cwd=REPO, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "watcher stopped cleanly (exit 0)" in run.stdout
    (folder,) = (tmp_path / "demo").iterdir()
    for scene in demo_scenes():
        route = yaml.safe_load((folder / "routes" / f"{scene.stem}.route.yaml").read_text())
        assert route["scene_sha256"] == hashlib.sha256(scene.read_bytes()).hexdigest()
        assert str(folder / "routes" / f"{scene.stem}.route.yaml") in run.stdout
    log = (folder / "watch.log").read_text()
    assert "stopped cleanly" in log and "Traceback" not in log
    # A second run gets a folder of its own; the first one is kept.
    from planner.demo import _fresh_folder

    second = _fresh_folder(tmp_path / "demo")
    assert second != folder and folder.is_dir() and not any(second.iterdir())
