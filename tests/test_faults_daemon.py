"""`sidestep watch` under faults: real watcher processes, real file systems, bounded waits.

Each test breaks something under a running daemon (the output folder vanishes or turns
read-only, the disk fills up, a thousand scenes land at once, a scene turns into a folder or a
symbolic link loop, the config turns invalid) and then checks the same promises:

- the daemon keeps running (or stops with one clear message), and its log holds no traceback;
- no partial file is left in the output folder (no temp names, every route file reads back
  whole and names companions whose sha256 matches);
- no scene file is modified or deleted;
- every route file present belongs to the scene now in the drop folder (same sha256) and is
  safe for it by an outside check (shapely swept hulls, tests/fuzzkit.py).

Read-only and full file systems are made with mounts (tmpfs, a read-only remount), which need
root and mount rights; elsewhere those tests are skipped and say why. chmod is not used: it does
not stop root, and CI runs as root.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml
from fuzzkit import check_tolerance, outside_violations
from watchkit import Daemon, make_config, read_status, scene_text, sha256, wait_for

from planner.config import load_settings
from planner.files import is_temp_name
from planner.outlock import LOCK_NAME
from planner.routefile import load_route
from planner.scene import load_scene_bytes

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="POSIX signals needed")

WAIT = 20  # seconds: the longest any single promise may take in these tests


# ------------------------------------------------------------------------------ helpers


def _config(folder: Path, **watch) -> Path:
    """The test config with only the CSV adapter (fewer files, faster plans)."""
    config = make_config(folder, **watch)
    planner = yaml.safe_load((config / "planner.yaml").read_text())
    planner["adapters"] = ["csv"]
    (config / "planner.yaml").write_text(yaml.safe_dump(planner, sort_keys=False))
    return config


@pytest.fixture
def env(tmp_path: Path):
    tmp_path = tmp_path.resolve()
    daemon = Daemon(tmp_path / "drop", tmp_path / "out", _config(tmp_path / "config"),
                    tmp_path / "watch.log")
    yield daemon
    if daemon.proc is not None and daemon.proc.poll() is None:
        daemon.kill()


def _can_mount() -> str | None:
    """None when this process may mount file systems, else why not."""
    if os.geteuid() != 0:
        return "mounting a tmpfs needs root"
    if shutil.which("mount") is None:
        return "no mount command"
    probe = Path(f"/tmp/sidestep-mount-probe-{os.getpid()}")
    probe.mkdir(exist_ok=True)
    try:
        run = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(probe)],
                             capture_output=True, text=True, timeout=10)
        if run.returncode != 0:
            return f"mount is not allowed here ({run.stderr.strip() or run.returncode})"
        subprocess.run(["umount", str(probe)], capture_output=True, timeout=10)
        return None
    finally:
        with contextlib.suppress(OSError):
            probe.rmdir()


_NO_MOUNT = _can_mount()
needs_mount = pytest.mark.skipif(_NO_MOUNT is not None, reason=f"{_NO_MOUNT}")


@contextlib.contextmanager
def tmpfs(where: Path, size: str):
    where.mkdir(parents=True, exist_ok=True)
    subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size},mode=0755", "tmpfs", str(where)],
                   check=True, timeout=10)
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], timeout=10)


@contextlib.contextmanager
def read_only(where: Path):
    """Cover `where` with a read-only bind mount of itself (the files stay, writes fail with
    EROFS even for root); unmounting makes it writable again."""
    subprocess.run(["mount", "--bind", str(where), str(where)], check=True, timeout=10)
    try:
        subprocess.run(["mount", "-o", "remount,bind,ro", str(where)], check=True, timeout=10)
        yield where
    finally:
        subprocess.run(["umount", str(where)], check=True, timeout=10)


def logged(env: Daemon, *words: str) -> str | None:
    """The first log line holding all `words`."""
    return next((line for line in env.text().splitlines() if all(w in line for w in words)),
                None)


def drop(env: Daemon, name: str, text: str, scenes: dict[str, bytes]) -> None:
    (env.drop / name).write_text(text)
    scenes[name] = text.encode()


def check_promises(env: Daemon, scenes: dict[str, bytes], settings=None) -> int:
    """The four promises of this module; returns how many route files were checked."""
    assert "Traceback" not in env.text(), env.text()
    # no scene file modified or deleted (those the test itself removed are not in `scenes`)
    for name, data in scenes.items():
        assert (env.drop / name).read_bytes() == data, f"{name} was modified"
    if not env.out.is_dir():
        return 0
    names = os.listdir(env.out)
    temps = {n for n in names if is_temp_name(n)}
    if temps:  # a write in progress (the heartbeat's status.json) leaves within moments
        time.sleep(1.0)
        temps &= set(os.listdir(env.out))
    assert not temps, temps  # no partial file stays
    checked = 0
    for name in names:
        if not name.endswith(".route.yaml"):
            continue
        route = load_route((env.out / name).read_bytes(), file=name)  # reads back whole
        for companion, digest in (route.extra.get("files") or {}).items():
            assert sha256((env.out / companion).read_bytes()) == digest, companion
        scene_name = route.scene_file
        assert scene_name in scenes, f"{name} is for {scene_name}, which is not in the drop"
        assert route.scene_sha256 == sha256(scenes[scene_name]), f"{name} is stale"
        settings = settings or load_settings(env.config)
        scene = load_scene_bytes(scenes[scene_name], scene_name, settings)
        assert outside_violations(route, scene, check_tolerance(scene, settings)) == []
        checked += 1
    return checked


def settled(env: Daemon, names, states=("planned", "incomplete")) -> dict:
    def done():
        env.running()
        status = read_status(env.out) or {}
        entries = status.get("scenes", {})
        if all(entries.get(n, {}).get("state") in states for n in names):
            return status
        return None

    return wait_for(done, WAIT, f"{sorted(names)[:3]}... to be {states}")


# ------------------------------------------------------------------- output folder faults


def test_output_folder_deleted_while_running_is_made_again(env: Daemon):
    scenes: dict[str, bytes] = {}
    env.start()
    drop(env, "a.yaml", scene_text(), scenes)
    env.wait_state("a.yaml", scenes["a.yaml"])
    shutil.rmtree(env.out)
    # The lock went with the folder: the daemon takes it again, so a second watcher started on
    # the same folder now is still refused (two writers into one OUT would race).
    wait_for(lambda: (env.out / LOCK_NAME).is_file() and "taken again" in env.text(), WAIT,
             "the lock to be taken again")
    second = subprocess.run([sys.executable, "-m", "planner.cli", "watch", str(env.drop),
                             "--out", str(env.out), "--config", str(env.config)],
                            capture_output=True, text=True, timeout=60)
    assert second.returncode == 2 and f"pid {env.proc.pid}" in second.stderr
    drop(env, "b.yaml", scene_text(targets=[(300, 250)]), scenes)
    entry = env.wait_state("b.yaml", scenes["b.yaml"], timeout=WAIT)
    assert entry["state"] == "planned"
    assert (env.out / "b.route.yaml").is_file()
    assert check_promises(env, scenes) >= 1
    assert env.stop() == 0


@needs_mount
def test_read_only_output_folder_fails_clearly_and_recovers_when_writable(env: Daemon):
    scenes: dict[str, bytes] = {}
    env.start()
    drop(env, "a.yaml", scene_text(), scenes)
    env.wait_state("a.yaml", scenes["a.yaml"])
    with read_only(env.out):
        drop(env, "b.yaml", scene_text(targets=[(300, 250)]), scenes)
        wait_for(lambda: logged(env, "b.yaml", "Read-only file system"), WAIT,
                 "the write failure to be logged")
        env.running()
        assert not (env.out / "b.route.yaml").exists()
        assert check_promises(env, scenes) == 1  # a's route is still there, whole and current
    entry = env.wait_state("b.yaml", scenes["b.yaml"], timeout=WAIT, states=("planned",))
    assert entry["files"][-1] == "b.route.yaml"
    assert check_promises(env, scenes) == 2
    assert env.stop() == 0


@needs_mount
def test_disk_full_leaves_no_partial_file_and_recovers_when_space_returns(env: Daemon):
    scenes: dict[str, bytes] = {}
    with tmpfs(env.out, "256k"):
        env.start()
        drop(env, "a.yaml", scene_text(), scenes)
        env.wait_state("a.yaml", scenes["a.yaml"])
        filler = env.out / "filler.bin"
        with contextlib.suppress(OSError), open(filler, "wb", buffering=0) as f:
            while True:  # fill the disk up to the last block
                f.write(b"\0" * 4096)
        many = [(20 + 3 * (i % 120), 20 + 2 * (i // 120)) for i in range(400)]
        drop(env, "big.yaml", scene_text(targets=many, obstacles=()), scenes)
        wait_for(lambda: logged(env, "big.yaml", "No space left on device"), WAIT,
                 "the full disk to be logged")
        env.running()
        assert not (env.out / "big.route.yaml").exists()
        assert check_promises(env, scenes) == 1
        filler.unlink()
        entry = env.wait_state("big.yaml", scenes["big.yaml"], timeout=WAIT, states=("planned",))
        assert entry["legs"] == len(many)
        assert check_promises(env, scenes) == 2
        assert env.stop() == 0


# ---------------------------------------------------------------------------- floods


def test_a_thousand_scenes_dropped_at_once_are_all_planned(env: Daemon, tmp_path: Path):
    scenes: dict[str, bytes] = {}
    env.start()
    stage = tmp_path / "stage"  # same file system: each scene appears whole, by rename
    stage.mkdir()
    for i in range(1000):
        text = scene_text(targets=[(300, 40 + (i % 200)), (300, 250)])
        (stage / f"s{i:04d}.yaml").write_text(text)
        scenes[f"s{i:04d}.yaml"] = text.encode()
    for name in scenes:
        os.rename(stage / name, env.drop / name)

    def all_planned():
        env.running()
        status = read_status(env.out) or {}
        return status.get("counts", {}).get("planned") == len(scenes) and status

    status = wait_for(all_planned, 150, "1000 scenes to be planned", poll=0.5)
    assert set(status["scenes"]) == set(scenes)
    assert check_promises(env, scenes) == len(scenes)
    assert env.stop() == 0


# ----------------------------------------------------------------- scenes that turn odd


def test_scene_replaced_by_a_folder_or_a_symlink_loop_is_not_followed(env: Daemon):
    scenes: dict[str, bytes] = {}
    env.start()
    for name in ("dir.yaml", "loop.yaml", "keep.yaml"):
        drop(env, name, scene_text(), scenes)
    settled(env, scenes)
    for name in ("dir.yaml", "loop.yaml"):
        (env.drop / name).unlink()
        del scenes[name]
    (env.drop / "dir.yaml").mkdir()
    (env.drop / "dir.yaml" / "inner.yaml").write_text(scene_text())
    os.symlink("loop.yaml", env.drop / "loop.yaml")  # a link to itself
    os.symlink("pong.yaml", env.drop / "ping.yaml")  # and a loop of two
    os.symlink("ping.yaml", env.drop / "pong.yaml")

    def retired():
        env.running()
        status = read_status(env.out) or {}
        gone = {"dir.yaml", "loop.yaml"} & set(status.get("scenes", {}))
        return not gone and not (env.out / "dir.route.yaml").exists() and \
            not (env.out / "loop.route.yaml").exists()

    wait_for(retired, WAIT, "the outputs of the replaced scenes to be retired")
    wait_for(lambda: "ping.yaml: not a plain file" in env.text(), WAIT, "the loop to be noticed")
    assert (env.drop / "dir.yaml" / "inner.yaml").read_text() == scene_text()
    assert os.readlink(env.drop / "loop.yaml") == "loop.yaml"
    drop(env, "after.yaml", scene_text(targets=[(300, 250)]), scenes)
    env.wait_state("after.yaml", scenes["after.yaml"])  # still planning
    assert check_promises(env, scenes) == 2  # keep.yaml and after.yaml
    assert env.stop() == 0


# ------------------------------------------------------------------------ config faults


def _config_state(env: Daemon) -> dict:
    env.running()
    return (read_status(env.out) or {}).get("config", {})


@pytest.mark.parametrize("breakage", ["bad-value", "heads-folder", "folder-gone"])
def test_invalid_config_is_reported_and_the_last_good_one_stays_in_use(
        env: Daemon, breakage: str, tmp_path: Path):
    scenes: dict[str, bytes] = {}
    env.start()
    drop(env, "a.yaml", scene_text(), scenes)
    env.wait_state("a.yaml", scenes["a.yaml"])
    planner = env.config / "planner.yaml"
    good_planner = planner.read_bytes()
    good_settings = load_settings(env.config)
    saved = tmp_path / "config-saved"
    if breakage == "bad-value":
        planner.write_text(good_planner.decode().replace("margin: 2.0", "margin: -2.0", 1))
        words = "planner.yaml"
    elif breakage == "heads-folder":
        shutil.move(env.config / "heads.yaml", tmp_path / "heads.yaml")
        (env.config / "heads.yaml").mkdir()
        words = "heads.yaml"
    else:
        shutil.move(env.config, saved)
        words = "config folder"
    state = wait_for(lambda: _config_state(env).get("state") == "invalid" and _config_state(env),
                     WAIT, "status.json to report the invalid config")
    assert words in state["message"]
    wait_for(lambda: "ERROR config:" in env.text(), WAIT, "the log to report it")
    # Planning goes on with the last good config: a new scene is planned, a.yaml's route stays.
    drop(env, "b.yaml", scene_text(targets=[(300, 250)]), scenes)
    entry = env.wait_state("b.yaml", scenes["b.yaml"], timeout=WAIT)
    assert entry["state"] == "planned"
    assert check_promises(env, scenes, good_settings) == 2
    if breakage == "bad-value":
        planner.write_bytes(good_planner)
    elif breakage == "heads-folder":
        (env.config / "heads.yaml").rmdir()
        shutil.move(tmp_path / "heads.yaml", env.config / "heads.yaml")
    else:
        shutil.move(saved, env.config)
    wait_for(lambda: _config_state(env).get("state") == "ok", WAIT, "the config to be ok again")
    settled(env, ["a.yaml", "b.yaml"], states=("planned",))
    assert check_promises(env, scenes) == 2
    assert env.stop() == 0
