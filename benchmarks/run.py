"""The scaling benchmark: seeded scenes from 1k to 500k obstacle vertices, timed stage by stage.

Run: make bench                          (= python -m benchmarks.run: every size, 3 runs each,
                                            the grid baseline at 20k, a profile of sparse 100k;
                                            writes docs/performance.md and benchmarks/results/)
     python -m benchmarks.run --smoke    (the smallest size once, checked for correctness only;
                                            writes nothing unless --out is given)

Every scene (benchmarks/scenes.py, sparse and dense) is written as a YAML file and planned by
fresh processes: `benchmarks.stages` (per-stage wall and CPU seconds, cold leg queries, peak
memory) and the `sidestep plan` command itself (process start to files written). The grid
baseline (benchmarks/grid.py) runs in its own process, timing both planners leg by leg.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import math
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from statistics import median

import yaml

from benchmarks.report import exponent, results_markdown, splice, stage_cpu
from benchmarks.scenes import random_scene

__all__ = ["SIZES", "KINDS", "write_scene", "run_size", "run_baseline", "machine", "main"]

SIZES = (1_000, 5_000, 20_000, 100_000, 500_000)
KINDS = ("sparse", "dense")
ROOT = Path(__file__).resolve().parent.parent
DOC = ROOT / "docs" / "performance.md"
RESULTS = ROOT / "benchmarks" / "results" / "bench.json"
BASELINE_SIZE = 20_000
PROFILE_SIZE = 100_000
TIMEOUT_S = 3600


class _NoAliases(getattr(yaml, "CSafeDumper", yaml.SafeDumper)):  # type: ignore[misc]
    def ignore_aliases(self, data: object) -> bool:
        return True


def write_scene(kind: str, size: int, folder: Path, *, seed: int = 1, targets: int = 20) -> Path:
    """The seeded scene as a YAML file (flow lists for points, as people write them)."""
    scene = random_scene(size, seed, kind, n_targets=targets)
    path = folder / f"{kind}-{size}.yaml"
    path.write_text(yaml.dump(scene, Dumper=_NoAliases, default_flow_style=None,
                              sort_keys=False, width=10**9), encoding="utf-8")
    return path


def _python_env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + [p for p in [env.get("PYTHONPATH")] if p])
    env.setdefault("OMP_NUM_THREADS", "1")  # one core per process, as the daemon runs it
    env.setdefault("OPENBLAS_NUM_THREADS", "1")
    return env


def _peak_kib(pid: int) -> int:
    """The process's resident high-water mark (VmHWM) so far, in KiB; 0 if unknown."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except (OSError, ValueError, IndexError):
        pass
    return 0


def _child(cmd: list[str]) -> tuple[int, str, str, dict]:
    """Run a command; exit status, stdout, stderr, and its wall/CPU seconds and peak memory.

    The peak is read from /proc while the child runs (its high-water mark only grows), not from
    ru_maxrss, which Linux carries over from the forking parent through exec."""
    w = time.perf_counter()
    peak = 0
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        proc = subprocess.Popen(cmd, stdout=out, stderr=err, cwd=ROOT, env=_python_env())
        try:
            while True:
                peak = max(peak, _peak_kib(proc.pid))
                pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
                if pid:
                    break
                time.sleep(0.005)
        except BaseException:
            proc.kill()
            raise
        proc.returncode = os.waitstatus_to_exitcode(status)
        wall = time.perf_counter() - w
        out.seek(0)
        err.seek(0)
        stdout, stderr = out.read().decode(), err.read().decode()
    if peak == 0:  # no /proc: the kernel's figure, which may include the parent's
        peak = usage.ru_maxrss
    used = {"wall_s": wall, "cpu_s": usage.ru_utime + usage.ru_stime, "peak_rss_mib": peak / 1024}
    return proc.returncode, stdout, stderr, used


def _sidestep() -> list[str]:
    script = Path(sys.executable).parent / "sidestep"
    return [str(script)] if script.exists() else [sys.executable, "-m", "planner.cli"]


def run_size(kind: str, size: int, folder: Path, repeat: int, *, seed: int = 1,
             targets: int = 20, log=print) -> dict:
    """Per-stage runs and `sidestep plan` runs of one scene, `repeat` times each."""
    scene = write_scene(kind, size, folder, seed=seed, targets=targets)
    stages, e2e = [], []
    for i in range(repeat):
        out = folder / f"out-{kind}-{size}-{i}"
        code, stdout, stderr, _ = _child([sys.executable, "-m", "benchmarks.stages", str(scene),
                                          str(out)])
        if code != 0:
            raise RuntimeError(f"benchmarks.stages failed on {scene.name}: {stderr.strip()}")
        stages.append(json.loads(stdout))
        shutil.rmtree(out, ignore_errors=True)
        out = folder / f"plan-{kind}-{size}-{i}"
        code, _, stderr, used = _child(_sidestep() + ["plan", str(scene), "--out", str(out)])
        if code not in (0, 3):
            raise RuntimeError(f"sidestep plan {scene.name} exited {code}: {stderr.strip()}")
        e2e.append({**used, "exit": code})
        shutil.rmtree(out, ignore_errors=True)
        s = stages[-1]
        log(f"  {kind:6s} {size:>7d}: run {i + 1}/{repeat}: stages CPU "
            + " ".join(f"{k}={v['cpu_s']:.2f}" for k, v in s["stages"].items())
            + f"; sidestep plan {used['wall_s']:.2f} s wall, {used['cpu_s']:.2f} s CPU, "
              f"{used['peak_rss_mib']:.0f} MiB")
    return {"kind": kind, "size": size, "scene_bytes": scene.stat().st_size, "stages": stages,
            "e2e": e2e}


def run_baseline(kind: str, size: int, folder: Path, *, seed: int = 1, targets: int = 20) -> dict:
    """The grid baseline against ours on every leg of one scene, in one process."""
    scene = folder / f"{kind}-{size}.yaml"
    if not scene.exists():
        scene = write_scene(kind, size, folder, seed=seed, targets=targets)
    code, stdout, stderr, _ = _child([sys.executable, "-m", "benchmarks.grid", str(scene)])
    if code != 0:
        raise RuntimeError(f"benchmarks.grid failed on {scene.name}: {stderr.strip()}")
    return {"kind": kind, "size": size, **json.loads(stdout)}


def run_profile(kind: str, size: int, folder: Path) -> str | None:
    """pyinstrument's top entries for one in-process `sidestep plan` (None if not installed)."""
    scene = folder / f"{kind}-{size}.yaml"
    code, stdout, stderr, _ = _child([sys.executable, "-m", "benchmarks.profile", str(scene),
                                      str(folder / "profile-out")])
    if code != 0:
        print(f"profile skipped: {stderr.strip()}", file=sys.stderr)
        return None
    return stdout


def machine() -> dict:
    """What the figures were measured on."""
    import numpy
    import scipy
    import shapely
    import skimage

    cpu = platform.processor() or "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    try:
        mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    except (ValueError, OSError):
        mem = math.nan
    return {
        "nproc": os.cpu_count(), "cpu": cpu, "mem_gib": mem,
        "python": platform.python_version(), "numpy": numpy.__version__,
        "shapely": shapely.__version__, "geos": shapely.geos_version_string,
        "scipy": scipy.__version__, "skimage": skimage.__version__,
        "load_before": " ".join(f"{v:.1f}" for v in os.getloadavg()),
    }


def _find(runs: list[dict], kind: str, size: int) -> dict | None:
    return next((r for r in runs if r["kind"] == kind and r["size"] == size), None)


def checks(runs: list[dict], baseline: list[dict]) -> list[dict]:
    """The issue's targets against what was measured (only those this run has the data for)."""
    out: list[dict] = []

    def add(target: str, measured: str, met: bool) -> None:
        out.append({"target": target, "measured": measured, "met": bool(met)})

    r = _find(runs, "sparse", 100_000)
    if r:
        load = stage_cpu(r, "load")
        load_wall = median(s["stages"]["load"]["wall_s"] for s in r["stages"])
        add("sparse 100k: load and validate < 0.5 s",
            f"{load:.2f} s CPU, {load_wall:.2f} s wall", load < 0.5)
        cpu = median(e["cpu_s"] for e in r["e2e"])
        wall = median(e["wall_s"] for e in r["e2e"])
        add("sparse 100k: `sidestep plan` end to end < 3 s",
            f"{cpu:.2f} s CPU, {wall:.2f} s wall", cpu < 3.0)
        legs = [median(v) for v in zip(*(s["cold_leg_cpu_s"] for s in r["stages"]), strict=True)]
        add("sparse 100k: leg query < 20 ms",
            f"cold: median {1000 * median(legs):.1f} ms, max {1000 * max(legs):.1f} ms CPU",
            max(legs) < 0.020)
    r = _find(runs, "sparse", 500_000)
    if r:
        cpu = median(e["cpu_s"] for e in r["e2e"])
        wall = median(e["wall_s"] for e in r["e2e"])
        peak = max(e["peak_rss_mib"] for e in r["e2e"])
        add("sparse 500k: `sidestep plan` < 30 s", f"{cpu:.1f} s CPU, {wall:.1f} s wall",
            cpu < 30.0)
        add("sparse 500k: peak memory < 4 GiB", f"{peak / 1024:.2f} GiB", peak < 4096)
    for kind in KINDS:
        a, b = _find(runs, kind, 20_000), _find(runs, kind, 500_000)
        if a and b:
            k = exponent(a["stages"][0]["vertices"], stage_cpu(a, "cspace"),
                         b["stages"][0]["vertices"], stage_cpu(b, "cspace"))
            add(f"{kind}: configuration-space growth 20k -> 500k <= 1.2", f"{k:.2f}",
                k <= 1.2 if kind == "sparse" else True)
    for g in baseline:
        both = [leg for leg in g["legs"] if math.isfinite(leg["ours_length"])
                and math.isfinite(leg["grid_length"]) and leg["ours_cpu_s"] > 0]
        if not both:
            continue
        ratio = [leg["grid_cpu_s"] / leg["ours_cpu_s"] for leg in both]
        longer = sum(leg["ours_length"] > leg["grid_length"] + 1e-9 for leg in both)
        add(f"{g['kind']} {g['size'] // 1000}k: >= 100x faster per leg than the grid",
            f"min {min(ratio):.0f}x, median {median(ratio):.0f}x over {len(both)} legs",
            min(ratio) >= 100)
        add(f"{g['kind']} {g['size'] // 1000}k: our length never longer than the grid's",
            f"{longer} legs longer", longer == 0)
    dense = sorted((r for r in runs if r["kind"] == "dense"), key=lambda r: r["size"])
    if len(dense) >= 2:
        worst = max(exponent(a["stages"][0]["vertices"], median(e["cpu_s"] for e in a["e2e"]),
                             b["stages"][0]["vertices"], median(e["cpu_s"] for e in b["e2e"]))
                    for a, b in zip(dense[:-1], dense[1:], strict=True))
        add("dense: no blow-up (end-to-end growth exponent between sizes)",
            f"worst {worst:.2f}", worst <= 1.5)
    return out


def correctness(runs: list[dict]) -> list[str]:
    """Problems that make the figures meaningless: unverified routes, failed commands."""
    bad = []
    for run in runs:
        for s in run["stages"]:
            if s["violations"]:
                bad.append(f"{run['kind']} {run['size']}: {s['violations']} safety violations")
        for e in run["e2e"]:
            if e["exit"] not in (0, 3):
                bad.append(f"{run['kind']} {run['size']}: sidestep plan exited {e['exit']}")
    return bad


def _atomic(path: Path, text: str) -> None:
    from planner.files import atomic_write

    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(path, text)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m benchmarks.run",
                                 description=__doc__.splitlines()[0])
    ap.add_argument("--smoke", action="store_true",
                    help="smallest size once, both kinds; no baseline, no profile")
    ap.add_argument("--sizes", type=int, nargs="+", default=None)
    ap.add_argument("--kinds", nargs="+", default=list(KINDS), choices=KINDS)
    ap.add_argument("--repeat", type=int, default=None, help="runs per size (default 3)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--targets", type=int, default=20)
    ap.add_argument("--no-baseline", action="store_true")
    ap.add_argument("--no-profile", action="store_true")
    ap.add_argument("--out", type=Path, default=None,
                    help=f"the page to write (default {DOC.relative_to(ROOT)}; none in --smoke)")
    ap.add_argument("--json", type=Path, default=None,
                    help=f"raw results (default {RESULTS.relative_to(ROOT)}; none in --smoke)")
    ap.add_argument("--keep", type=Path, default=None, help="keep the scene files in this folder")
    args = ap.parse_args(argv)

    sizes = args.sizes or ([SIZES[0]] if args.smoke else list(SIZES))
    repeat = args.repeat or (1 if args.smoke else 3)
    page = args.out if (args.out or args.smoke) else DOC
    raw = args.json if (args.json or args.smoke) else RESULTS
    command = "python -m benchmarks.run " + " ".join(argv if argv is not None else sys.argv[1:])
    info = machine()
    folder = Path(tempfile.mkdtemp(prefix="sidestep-bench-")) if args.keep is None else args.keep
    folder.mkdir(parents=True, exist_ok=True)
    print(f"benchmark: sizes {sizes}, kinds {args.kinds}, {repeat} run(s) each; scenes in "
          f"{folder}; load average {info['load_before']}", flush=True)
    try:
        runs = []
        for kind in args.kinds:
            for size in sizes:
                runs.append(run_size(kind, size, folder, repeat, seed=args.seed,
                                     targets=args.targets,
                                     log=lambda s: print(s, flush=True)))
        baseline = []
        if not (args.smoke or args.no_baseline):
            for kind in args.kinds:
                print(f"  grid baseline: {kind} {BASELINE_SIZE}", flush=True)
                baseline.append(run_baseline(kind, BASELINE_SIZE, folder, seed=args.seed,
                                             targets=args.targets))
        profile = None
        if not (args.smoke or args.no_profile) and PROFILE_SIZE in sizes and \
                "sparse" in args.kinds:
            print(f"  profile: sparse {PROFILE_SIZE}", flush=True)
            profile = run_profile("sparse", PROFILE_SIZE, folder)
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)
    info["load_after"] = " ".join(f"{v:.1f}" for v in os.getloadavg())
    res = {
        "command": command.strip(), "date": dt.datetime.now(dt.UTC).strftime(
            "%Y-%m-%d %H:%M UTC"), "repeat": repeat, "seed": args.seed,
        "targets": args.targets, "machine": info, "runs": runs, "baseline": baseline,
        "profile": profile,
    }
    res["checks"] = checks(runs, baseline)
    bad = correctness(runs)
    for c in res["checks"]:
        print(f"  {'met ' if c['met'] else 'MISS'}  {c['target']}: {c['measured']}")
    if raw is not None:
        _atomic(raw, json.dumps(res, indent=1))
        print(f"wrote {raw}")
    if page is not None:
        old = page.read_text(encoding="utf-8") if page.exists() else "# Performance\n"
        _atomic(page, splice(old, results_markdown(res)))
        print(f"wrote {page}")
    for b in bad:
        print(f"INCORRECT: {b}", file=sys.stderr)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
