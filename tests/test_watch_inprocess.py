"""The daemon in this process (a thread): planner exceptions, stale outputs, status fields."""

from __future__ import annotations

import re
import threading
from pathlib import Path

import pytest
from watchkit import REPO, make_config, read_status, scene_text, sha256, wait_for

import planner.watch as watch
from planner.config import load_settings
from planner.superseded import outputs_of, supersede
from planner.watchopts import watch_options


@pytest.fixture
def folders(tmp_path: Path):
    tmp_path = tmp_path.resolve()
    config = make_config(tmp_path / "config")
    drop, out = tmp_path / "drop", tmp_path / "out"
    drop.mkdir()
    out.mkdir()
    return drop, out, config


def start(drop: Path, out: Path, config: Path) -> tuple[watch.Watcher, threading.Thread]:
    settings = load_settings(config)
    watcher = watch.Watcher(drop, out, settings, watch_options(settings))
    thread = threading.Thread(target=watcher.run, daemon=True)
    thread.start()
    wait_for(lambda: (read_status(out) or {}).get("daemon", {}).get("state") == "running", 20,
             "the watcher thread to start")
    return watcher, thread


def entry(out: Path, name: str, content: str) -> dict | None:
    item = (read_status(out) or {}).get("scenes", {}).get(name)
    if item and item["scene_sha256"] == sha256(content) and item["state"] != "waiting":
        return item
    return None


def test_a_planner_exception_is_reported_and_the_next_scene_is_still_planned(folders,
                                                                             monkeypatch):
    drop, out, config = folders
    real = watch.run_job

    def flaky(path, *args, **kwargs):
        if path.name == "boom.yaml":
            raise RuntimeError("simulated planner bug")
        return real(path, *args, **kwargs)

    monkeypatch.setattr(watch, "run_job", flaky)
    watcher, thread = start(drop, out, config)
    try:
        boom, fine = scene_text(), scene_text(targets=[(320, 260)])
        (drop / "boom.yaml").write_text(boom)
        (drop / "fine.yaml").write_text(fine)
        failed = wait_for(lambda: entry(out, "boom.yaml", boom), 20, "boom.yaml to fail")
        assert failed["state"] == "failed"
        text = (out / "boom.error.txt").read_text()
        assert "internal error (RuntimeError: simulated planner bug)" in text
        planned = wait_for(lambda: entry(out, "fine.yaml", fine), 20, "fine.yaml")
        assert planned["state"] == "planned"
        assert thread.is_alive()
    finally:
        watcher.stop()
        thread.join(timeout=20)
    assert not thread.is_alive()
    assert read_status(out)["daemon"]["state"] == "stopped"


def test_supersede_moves_in_order_never_deletes_and_ignores_names_outside_out(tmp_path: Path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "job.route.yaml").write_text(
        "route: 1\nfiles: {job.csv: x, ../evil.csv: y, other.nc: z}\n")
    (out / "job.csv").write_text("a\n")
    (out / "job.nc").write_text("G0\n")
    (tmp_path / "evil.csv").write_text("keep me\n")
    (out / "other.nc").write_text("not job's\n")
    names = outputs_of(out, "job", [".csv", ".nc"])
    assert names == ["job.route.yaml", "job.csv", "job.nc"]
    moved = supersede(out, names, now=0.0)
    assert [p.name for p in moved] == ["job.route.yaml.19700101T000000.000000Z",
                                       "job.csv.19700101T000000.000000Z",
                                       "job.nc.19700101T000000.000000Z"]
    assert (tmp_path / "evil.csv").exists() and (out / "other.nc").exists()
    # The same second again: a new name, the earlier copy is kept.
    (out / "job.csv").write_text("b\n")
    again = supersede(out, ["job.csv"], now=0.0)
    assert again[0].name.endswith("-2") and moved[1].read_text() == "a\n"


def test_every_status_field_is_documented(folders):
    drop, out, config = folders
    watcher, thread = start(drop, out, config)
    try:
        text = scene_text()
        (drop / "doc.yaml").write_text(text)
        wait_for(lambda: entry(out, "doc.yaml", text), 20, "doc.yaml")
    finally:
        watcher.stop()
        thread.join(timeout=20)
    status = read_status(out)
    keys = set(status) | {f"daemon.{k}" for k in status["daemon"]} | \
        {f"config.{k}" for k in status["config"]}
    keys |= {f"scenes.<name>.{k}" for k in status["scenes"]["doc.yaml"]}
    docs = (REPO / "docs" / "operations.md").read_text()
    documented = set(re.findall(r"`([a-z0-9_<>.]+)`", docs))
    assert keys - documented == set()
