"""The daemon's figures: drop-to-route latency, burst throughput, replan speed-up (targets only).

Runs a real `sidestep watch` subprocess on temporary folders with the repository's config (the
`watch:` settle time set from `--settle`, reported separately because it is a chosen delay, not
work). Prints a summary and writes benchmarks/results/watch_latency-<observer>.json.

    .venv/bin/python -m benchmarks.watch_latency                  # 50 drops, burst of 200
    .venv/bin/python -m benchmarks.watch_latency --settle 2.0 --observer polling

Latency is measured from the end of the scene's last write (the file closed) to the moment its
route file exists in OUT; the reader polls every millisecond. Planning time alone is measured in
this process on the same scenes (`run_job`, no cache) so that latency - settle - plan = the
daemon's own overhead (noticing, settling checks, reading, writing, status).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

from benchmarks.scenes import count_vertices, random_scene
from planner.config import load_settings
from planner.jobs import run_job
from planner.plan import PlanCache, plan_scene
from planner.scene import load_scene_bytes

REPO = Path(__file__).resolve().parent.parent
RESULTS = REPO / "benchmarks" / "results"


def _config(folder: Path, settle: float, observer: str) -> Path:
    shutil.copytree(REPO / "config", folder)
    planner = yaml.safe_load((folder / "planner.yaml").read_text())
    planner["watch"] = {**planner.get("watch", {}), "settle_s": settle,
                        "parse_wait_s": max(2 * settle, 1.0), "observer": observer,
                        "poll_interval_s": 0.1, "heartbeat_s": 2.0}
    (folder / "planner.yaml").write_text(yaml.safe_dump(planner, sort_keys=False))
    return folder


class _NoAliases(yaml.SafeDumper):
    """Scenes refuse YAML aliases; write repeated values (start == finish) out in full."""

    def ignore_aliases(self, data) -> bool:
        return True


def _dump(data: dict) -> str:
    return yaml.dump(data, Dumper=_NoAliases, sort_keys=False, default_flow_style=None)


def _big_scene(seed: int, vertices: int) -> str:
    return _dump(random_scene(vertices, seed, "sparse", n_targets=10))


def _small_scene(i: int) -> str:
    return (
        "scene: 1\nunits: mm\ntravel: {x: [0, 600], y: [0, 400]}\nhead: laser-slim\n"
        "obstacles:\n"
        f"  - {{rect: {{min: [200, 100], max: [260, {250 + i % 50}]}}}}\n"
        "  - {circle: {center: [420, 250], radius: 30}}\n"
        f"start: [40, 60]\ntargets:\n  - [520, {60 + i % 280}]\n  - [330, 360]\n"
    )


def _with_new_targets(text: str) -> str:
    """The same scene with its targets in the opposite order: obstacles, head, travel unchanged."""
    data = yaml.safe_load(text)
    data["targets"] = list(reversed(data["targets"]))
    return _dump(data)


def _wait_route(out: Path, stem: str, sha: str, timeout: float) -> float:
    """perf_counter time at which OUT/<stem>.route.yaml names `sha` (polled every millisecond)."""
    path = out / f"{stem}.route.yaml"
    deadline = time.perf_counter() + timeout
    while time.perf_counter() < deadline:
        try:
            with open(path, "rb") as f:
                head = f.read(4096)
            if sha.encode() in head:
                return time.perf_counter()
        except FileNotFoundError:
            pass
        time.sleep(0.001)
    raise TimeoutError(f"no route for {stem} after {timeout} s")


def _sha(text: str) -> str:
    import hashlib

    return hashlib.sha256(text.encode()).hexdigest()


def _quantiles(values: list[float]) -> dict:
    values = sorted(values)
    q = statistics.quantiles(values, n=10) if len(values) >= 2 else values * 9
    return {"n": len(values), "median": statistics.median(values), "p10": q[0], "p90": q[-1],
            "min": values[0], "max": values[-1]}


class Watch:
    def __init__(self, drop: Path, out: Path, config: Path, log: Path) -> None:
        self.out = out
        self.log = open(log, "ab")  # noqa: SIM115 - closed in stop()
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "planner.cli", "watch", str(drop), "--out", str(out),
             "--config", str(config)], cwd=REPO, stdout=self.log, stderr=self.log)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                status = json.loads((out / "status.json").read_text())
                if status["daemon"]["pid"] == self.proc.pid and \
                        status["daemon"]["state"] == "running":
                    return
            except (OSError, ValueError, KeyError):
                pass
            if self.proc.poll() is not None:
                raise RuntimeError(f"watcher exited with {self.proc.returncode}")
            time.sleep(0.05)
        raise TimeoutError("watcher did not start")

    def stop(self) -> int:
        self.proc.send_signal(signal.SIGTERM)
        code = self.proc.wait(timeout=300)
        self.log.close()
        return code


def measure(drops: int, burst: int, settle: float, observer: str, vertices: int) -> dict:
    tmp = Path(tempfile.mkdtemp(prefix="sidestep-bench-"))
    try:
        config = _config(tmp / "config", settle, observer)
        settings = load_settings(config)
        scenes = [_big_scene(seed, vertices) for seed in range(drops)]
        counted = [count_vertices(yaml.safe_load(t)) for t in scenes]

        # Planning alone (this process, no cache): what the daemon cannot avoid doing.
        alone = []
        (tmp / "alone").mkdir()
        for i, text in enumerate(scenes):
            path = tmp / "alone" / f"drop-{i:03d}.yaml"
            path.write_text(text)
            t0 = time.perf_counter()
            outcome = run_job(path, tmp / "alone-out", settings)
            alone.append(time.perf_counter() - t0)
            assert outcome.state in ("planned", "incomplete"), outcome.message

        drop, out = tmp / "drop", tmp / "out"
        drop.mkdir()
        watch = Watch(drop, out, config, tmp / "watch.log")
        try:
            latency = []
            for i, text in enumerate(scenes):
                path = drop / f"drop-{i:03d}.yaml"
                with open(path, "w") as f:
                    f.write(text)
                t_written = time.perf_counter()
                latency.append(_wait_route(out, path.stem, _sha(text), 120) - t_written)

            # Only the targets change: free space and road map come from the daemon's cache
            # (an LRU of watch.cache_size entries: take scenes planned last, still in it).
            replan_latency = []
            recent = list(range(max(0, drops - 10), drops))
            for i in recent:
                moved = _with_new_targets(scenes[i])
                path = drop / f"drop-{i:03d}.yaml"
                path.write_text(moved)
                t_written = time.perf_counter()
                replan_latency.append(_wait_route(out, path.stem, _sha(moved), 120) - t_written)
            cold_latency = [latency[i] for i in recent]

            small = [_small_scene(i) for i in range(burst)]
            t_first = time.perf_counter()
            for i, text in enumerate(small):
                (drop / f"burst-{i:03d}.yaml").write_text(text)
            t_last = time.perf_counter()
            done = [_wait_route(out, f"burst-{i:03d}", _sha(t), 300) for i, t in enumerate(small)]
            t_end = max(done)
        finally:
            code = watch.stop()

        # In-process replan speed-up, the same 1,000-vertex scenes: cold vs cached free space.
        cold, warm = [], []
        for text in scenes[:10]:
            scene = load_scene_bytes(text.encode(), "a.yaml", settings)
            moved = load_scene_bytes(_with_new_targets(text).encode(), "a.yaml", settings)
            t0 = time.perf_counter()
            plan_scene(moved, settings)
            cold.append(time.perf_counter() - t0)
            cache = PlanCache(4)
            plan_scene(scene, settings, cache=cache)
            t0 = time.perf_counter()
            plan_scene(moved, settings, cache=cache)
            warm.append(time.perf_counter() - t0)
            assert cache.hits == 1
        return {
            "machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                        "platform": platform.platform()},
            "observer": observer,
            "settle_s": settle,
            "scene_vertices": {"min": min(counted), "max": max(counted)},
            "latency_s": _quantiles(latency),
            "latency_minus_settle_s": _quantiles([x - settle for x in latency]),
            "plan_and_write_alone_s": _quantiles(alone),
            "daemon_overhead_s": statistics.median(
                [lat - settle - a for lat, a in zip(latency, alone, strict=True)]),
            "targets_only_replan_latency_s": _quantiles(replan_latency),
            "targets_only_vs_cold_latency_minus_settle": (
                statistics.median([x - settle for x in cold_latency])
                / statistics.median([x - settle for x in replan_latency])),
            "inprocess_plan_cold_s": _quantiles(cold),
            "inprocess_plan_cached_s": _quantiles(warm),
            "inprocess_speedup": statistics.median(cold) / statistics.median(warm),
            "burst": {
                "scenes": burst,
                "write_s": t_last - t_first,
                "first_write_to_last_route_s": t_end - t_first,
                "scenes_per_s_including_settle": burst / (t_end - t_first),
                "scenes_per_s_after_settle": burst / max(t_end - t_last - settle, 1e-9),
            },
            "watcher_exit": code,
        }
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--drops", type=int, default=50)
    parser.add_argument("--burst", type=int, default=200)
    parser.add_argument("--settle", type=float, default=0.5)
    parser.add_argument("--observer", choices=("native", "polling"), default="native")
    parser.add_argument("--vertices", type=int, default=1030,
                        help="asked of the scene generator; it lands within a few percent")
    args = parser.parse_args()
    result = measure(args.drops, args.burst, args.settle, args.observer, args.vertices)
    RESULTS.mkdir(parents=True, exist_ok=True)
    (RESULTS / f"watch_latency-{args.observer}.json").write_text(
        json.dumps(result, indent=2) + "\n")
    lat, alone = result["latency_s"], result["plan_and_write_alone_s"]
    print(f"observer {result['observer']}, settle {result['settle_s']} s, scenes of "
          f"{result['scene_vertices']['min']}-{result['scene_vertices']['max']} vertices")
    print(f"latency, last write -> route file: median {lat['median']:.3f} s "
          f"(p10 {lat['p10']:.3f}, p90 {lat['p90']:.3f}) over {lat['n']} drops")
    print(f"  of which settle {result['settle_s']:.3f} s; plan + write alone median "
          f"{alone['median']:.3f} s; daemon overhead median {result['daemon_overhead_s']:.3f} s")
    b = result["burst"]
    print(f"burst of {b['scenes']}: {b['first_write_to_last_route_s']:.2f} s from first write to "
          f"last route, {b['scenes_per_s_after_settle']:.1f} scenes/s after the settle time")
    print(f"targets-only replan: in process {result['inprocess_speedup']:.1f}x faster "
          f"(median {result['inprocess_plan_cold_s']['median']:.3f} s -> "
          f"{result['inprocess_plan_cached_s']['median']:.3f} s); through the daemon "
          f"{result['targets_only_vs_cold_latency_minus_settle']:.1f}x (latency minus settle)")
    print(f"watcher exit status {result['watcher_exit']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
