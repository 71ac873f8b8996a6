"""`sidestep watch` end to end: real files, a real watcher process, bounded waits.

Times: the test config settles files for 0.3 s and waits 0.6 s before reporting a scene that does
not load; every wait below is bounded so a hung daemon fails the test instead of the suite.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import pytest
import yaml
from watchkit import (
    Daemon,
    make_config,
    read_status,
    rect,
    route_of,
    scene_text,
    set_head_margin,
    sha256,
    swept_clearance,
    wait_for,
)

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="POSIX signals needed")


@pytest.fixture
def env(tmp_path: Path):
    tmp_path = tmp_path.resolve()
    config = make_config(tmp_path / "config")
    daemon = Daemon(tmp_path / "drop", tmp_path / "out", config, tmp_path / "watch.log")
    yield daemon
    if daemon.proc is not None and daemon.proc.poll() is None:
        daemon.kill()


def companions_match(out: Path, route: dict) -> bool:
    # The hand-off rule (docs/operations.md): the route file names each companion's sha256.
    return all(sha256((out / name).read_bytes()) == digest
               for name, digest in (route.get("files") or {}).items())


def test_dropped_scene_gets_a_safe_route_and_status_says_so(env: Daemon):
    env.start()
    text = scene_text()
    (env.drop / "job-1.yaml").write_text(text)
    entry = env.wait_state("job-1.yaml", text)
    assert entry["state"] == "planned"
    route = route_of(env.out, "job-1")
    assert route["scene_sha256"] == sha256(text)
    assert entry["files"][-1] == "job-1.route.yaml"
    assert all((env.out / name).is_file() for name in entry["files"])
    assert set(route["files"]) == set(entry["files"][:-1])
    assert companions_match(env.out, route)
    # laser-slim keeps 2.0 mm (config/heads.yaml); checked with shapely, not with the planner.
    assert swept_clearance(route, [rect((150, 100), (190, 200))]) >= 2.0 - 1e-6
    status = read_status(env.out)
    assert status["daemon"]["pid"] == env.proc.pid
    first = status["daemon"]["heartbeat"]
    wait_for(lambda: read_status(env.out)["daemon"]["heartbeat"] != first, 5, "a new heartbeat")
    assert env.stop() == 0
    assert read_status(env.out)["daemon"]["state"] == "stopped"
    assert "Traceback" not in env.text()


def test_slow_chunked_write_is_planned_once_and_whole(env: Daemon):
    env.start()
    # Eight targets: every prefix cut at a line end would be a valid scene with fewer targets.
    text = scene_text(targets=[(300, 40 + 30 * i) for i in range(8)])
    data = text.encode()
    path = env.drop / "slow.yaml"
    seen = set()
    with open(path, "wb") as f:
        for i in range(0, len(data), 60):
            f.write(data[i:i + 60])
            f.flush()
            time.sleep(0.12)  # each pause shorter than the settle time (0.3 s)
            seen.add((env.entry("slow.yaml") or {}).get("state"))
    env.wait_state("slow.yaml", text)
    assert "waiting" in seen and "planned" not in seen  # status.json showed it was noticed
    time.sleep(0.5)
    assert env.plans_of("slow.yaml") == 1, env.text()
    assert len(route_of(env.out, "slow")["legs"]) == 8
    assert env.stop() == 0


def test_saved_twice_fast_is_planned_once_for_the_final_content(env: Daemon):
    env.start()
    first, final = scene_text(targets=[(300, 80)]), scene_text(targets=[(300, 250)])
    (env.drop / "twice.yaml").write_text(first)
    time.sleep(0.05)
    (env.drop / "twice.yaml").write_text(final)
    env.wait_state("twice.yaml", final)
    time.sleep(0.5)
    assert env.plans_of("twice.yaml") == 1, env.text()
    # An unchanged re-save does no work: same file, new mtime.
    route_path = env.out / "twice.route.yaml"
    before = os.stat(route_path)
    (env.drop / "twice.yaml").write_text(final)
    wait_for(lambda: "twice.yaml: saved again with the same content" in env.text(), 10,
             "the unchanged re-save to be noticed")
    after = os.stat(route_path)
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)
    assert env.plans_of("twice.yaml") == 1
    assert env.stop() == 0


def test_broken_scene_moves_the_old_route_away_and_says_why_then_recovers(env: Daemon, tmp_path):
    env.start()
    good = scene_text()
    scene = env.drop / "cell-4.yaml"
    scene.write_text(good)
    env.wait_state("cell-4.yaml", good)
    old_route = (env.out / "cell-4.route.yaml").read_bytes()
    broken = good.replace("targets:", "targtes:")
    scene.write_text(broken)
    entry = env.wait_state("cell-4.yaml", broken)
    assert entry["state"] == "invalid"
    assert not (env.out / "cell-4.route.yaml").exists()
    assert not any(p.name.startswith("cell-4.") and p.name != "cell-4.error.txt"
                   for p in env.out.iterdir())
    moved = [p for p in (env.out / "superseded").iterdir()
             if p.name.startswith("cell-4.route.yaml.")]
    assert len(moved) == 1 and moved[0].read_bytes() == old_route
    # The error file says what `sidestep plan` says about the same file.
    import subprocess
    import sys

    plan = subprocess.run([sys.executable, "-m", "planner.cli", "plan", str(scene), "--out",
                           str(tmp_path / "plan-out"), "--config", str(env.config)],
                          capture_output=True, text=True, timeout=60)
    assert plan.returncode == 2
    assert (env.out / "cell-4.error.txt").read_text().strip() == plan.stderr.strip()
    assert "targtes" in plan.stderr
    scene.write_text(good)
    entry = env.wait_state("cell-4.yaml", good)
    assert entry["state"] == "planned" and entry["error_file"] is None
    assert not (env.out / "cell-4.error.txt").exists()
    assert route_of(env.out, "cell-4")["scene_sha256"] == sha256(good)
    assert env.stop() == 0


def test_config_margin_change_replans_every_scene_of_that_head(env: Daemon):
    env.start()
    texts = {
        "a.yaml": scene_text(),
        "b.yaml": scene_text(targets=[(330, 60), (330, 240)]),
        "c.yaml": scene_text(head="router-spindle", targets=[(330, 250)]),
    }
    for name, text in texts.items():
        (env.drop / name).write_text(text)
    for name, text in texts.items():
        env.wait_state(name, text)
    before = {n: route_of(env.out, Path(n).stem)["config_sha256"] for n in texts}
    set_head_margin(env.config, "laser-slim", 6.0)

    def replanned():
        routes = {n: route_of(env.out, Path(n).stem) for n in ("a.yaml", "b.yaml")
                  if (env.out / f"{Path(n).stem}.route.yaml").exists()}
        return len(routes) == 2 and all(r["config_sha256"] != before[n]
                                        for n, r in routes.items()) and routes

    routes = wait_for(replanned, 20, "the laser-slim scenes to be replanned")
    for route in routes.values():
        # The new margin holds (shapely check, as above).
        assert swept_clearance(route, [rect((150, 100), (190, 200))]) >= 6.0 - 1e-6
    env.wait_state("c.yaml", texts["c.yaml"])
    wait_for(lambda: (env.out / "c.route.yaml").exists(), 20, "c.yaml's route")
    assert route_of(env.out, "c")["config_sha256"] == before["c.yaml"]
    assert env.stop() == 0


def test_removed_scene_takes_its_outputs_to_superseded(env: Daemon):
    make_polling = env.config / "planner.yaml"
    planner = yaml.safe_load(make_polling.read_text())
    planner["watch"]["observer"] = "polling"  # network-share mode, so the option is exercised
    planner["watch"]["log_file"] = "watch.log"  # and the log goes into OUT instead of stderr
    make_polling.write_text(yaml.safe_dump(planner, sort_keys=False))
    env.start()
    text = scene_text()
    (env.drop / "gone.yaml").write_text(text)
    entry = env.wait_state("gone.yaml", text)
    files = entry["files"]
    (env.drop / "gone.yaml").unlink()
    wait_for(lambda: "gone.yaml" not in read_status(env.out)["scenes"], 10, "the removal")
    assert not any((env.out / name).exists() for name in files)
    moved = {p.name.split(".20")[0] for p in (env.out / "superseded").iterdir()}
    assert set(files) <= moved
    assert env.stop() == 0
    log = (env.out / "watch.log").read_text()
    assert "gone.yaml: removed from the drop folder" in log and "stopped cleanly" in log
    assert env.text() == ""


def test_links_temp_files_and_own_outputs_are_never_planned(env: Daemon, tmp_path):
    outside = tmp_path / "elsewhere.yaml"
    outside.write_text(scene_text())
    env.drop.mkdir(parents=True)
    (env.drop / "link.yaml").symlink_to(outside)
    for name in (".job.yaml.swp", "job.yaml~", "#job.yaml#", "~$job.yaml", "job.route.yaml"):
        (env.drop / name).write_text(scene_text())
    env.start()
    text = scene_text()
    (env.drop / "real.yaml").write_text(text)
    env.wait_state("real.yaml", text)
    status = read_status(env.out)
    assert set(status["scenes"]) == {"real.yaml"}
    assert sorted(p.name for p in env.out.glob("*.route.yaml")) == ["real.route.yaml"]
    assert "link.yaml: not a plain file" in env.text()
    # Names are made safe; two scenes that would share output names are not both planned.
    odd = "Job #7 (rev 2).yaml"
    (env.drop / odd).write_text(text)
    env.wait_state(odd, text)
    assert (env.out / "Job__7__rev_2_.route.yaml").is_file()
    (env.drop / "real.yml").write_text(text)
    clash = wait_for(lambda: (env.entry("real.yml") or {}).get("state") == "invalid" and
                     env.entry("real.yml"), 10, "the name clash to be reported")
    assert "already used by real.yaml" in clash["message"]
    assert route_of(env.out, "real")["scene"] == "real.yaml"
    assert all(p.parent == env.out for p in env.out.iterdir())
    assert env.stop() == 0


def test_restart_catches_up_without_replanning_current_scenes(env: Daemon):
    env.start()
    texts = {f"s{i}.yaml": scene_text(targets=[(300, 60 + 40 * i)]) for i in range(3)}
    for name, text in texts.items():
        (env.drop / name).write_text(text)
    for name, text in texts.items():
        env.wait_state(name, text)
    assert env.stop() == 0
    kept = os.stat(env.out / "s0.route.yaml")
    # While it is down: one scene edited, one removed, one added.
    texts["s1.yaml"] = scene_text(targets=[(320, 270)])
    (env.drop / "s1.yaml").write_text(texts["s1.yaml"])
    (env.drop / "s2.yaml").unlink()
    texts["s3.yaml"] = scene_text(targets=[(340, 150)])
    (env.drop / "s3.yaml").write_text(texts["s3.yaml"])
    env.start()
    for name in ("s0.yaml", "s1.yaml", "s3.yaml"):
        env.wait_state(name, texts[name])
    wait_for(lambda: not (env.out / "s2.route.yaml").exists(), 10, "s2's route to be retired")
    now = os.stat(env.out / "s0.route.yaml")
    assert (now.st_ino, now.st_mtime_ns) == (kept.st_ino, kept.st_mtime_ns)
    assert env.plans_of("s0.yaml") == 1  # across both runs: the log file is appended to
    assert "s0.yaml: outputs in" in env.text()
    assert route_of(env.out, "s1")["scene_sha256"] == sha256(texts["s1.yaml"])
    assert env.stop(signal.SIGINT) == 0


def test_only_new_targets_reuse_the_free_space(env: Daemon):
    env.start()
    first = scene_text(targets=[(300, 80)])
    (env.drop / "reuse.yaml").write_text(first)
    env.wait_state("reuse.yaml", first)
    moved_targets = scene_text(targets=[(320, 250), (350, 40)])
    (env.drop / "reuse.yaml").write_text(moved_targets)
    env.wait_state("reuse.yaml", moved_targets)
    lines = [line for line in env.text().splitlines() if " planned reuse.yaml:" in line]
    assert "reused" not in lines[0] and "reused" in lines[1]
    moved_obstacle = scene_text(targets=[(320, 250)], obstacles=[((140, 100), (190, 210))])
    (env.drop / "reuse.yaml").write_text(moved_obstacle)
    env.wait_state("reuse.yaml", moved_obstacle)
    lines = [line for line in env.text().splitlines() if " planned reuse.yaml:" in line]
    assert "reused" not in lines[2]
    assert env.stop() == 0


def test_broken_config_is_reported_and_the_last_good_one_stays_in_use(env: Daemon):
    env.start()
    text = scene_text()
    (env.drop / "cfg.yaml").write_text(text)
    env.wait_state("cfg.yaml", text)
    heads = env.config / "heads.yaml"
    good = heads.read_text()
    heads.write_text(good.replace("laser-slim:", "laser-slim: [", 1))  # a YAML syntax error
    state = wait_for(lambda: read_status(env.out)["config"]["state"] == "invalid"
                     and read_status(env.out)["config"], 10, "the bad config")
    assert "heads.yaml" in state["message"]
    wait_for(lambda: "ERROR config:" in env.text(), 10, "the log to report it")
    # The route planned with the last good config stays; a new scene is planned with it too.
    assert (env.out / "cfg.route.yaml").exists() and env.entry("cfg.yaml")["state"] == "planned"
    later = scene_text(targets=[(320, 250)])
    (env.drop / "new.yaml").write_text(later)
    assert env.wait_state("new.yaml", later)["state"] == "planned"
    heads.write_text(good)
    wait_for(lambda: read_status(env.out)["config"]["state"] == "ok", 10, "the config to be ok")
    assert (env.out / "cfg.route.yaml").exists() and not (env.out / "cfg.error.txt").exists()
    assert env.stop() == 0


def test_second_watcher_on_the_same_output_folder_is_refused(env: Daemon):
    env.start()
    import subprocess
    import sys

    second = subprocess.run([sys.executable, "-m", "planner.cli", "watch", str(env.drop),
                             "--out", str(env.out), "--config", str(env.config)],
                            capture_output=True, text=True, timeout=60)
    assert second.returncode == 2
    assert f"pid {env.proc.pid}" in second.stderr and "Traceback" not in second.stderr
    assert env.stop() == 0


def test_a_replaced_drop_folder_is_watched_again(env: Daemon):
    # A network share that is remounted: same path, a new folder (another inode).
    env.start()
    first = scene_text()
    (env.drop / "a.yaml").write_text(first)
    env.wait_state("a.yaml", first)
    env.drop.rename(env.drop.with_name("drop-old"))
    env.drop.mkdir()
    wait_for(lambda: "watching it again" in env.text(), 10, "the new folder to be watched")
    wait_for(lambda: "a.yaml" not in read_status(env.out)["scenes"], 10, "a.yaml to be retired")
    assert not (env.out / "a.route.yaml").exists()
    later = scene_text(targets=[(320, 250)])
    (env.drop / "c.yaml").write_text(later)
    env.wait_state("c.yaml", later)
    assert "event: c.yaml" in env.text()  # noticed by an event, not only by the rescan
    assert env.stop() == 0
