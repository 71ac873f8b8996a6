"""The long fuzz campaign behind docs/reliability.md: hostile inputs by the thousand, and the
daemon's fault tests repeated; prints the figures and writes them as JSON.

    .venv/bin/python tests/fuzz_campaign.py                      # 1000 cases of each kind
    .venv/bin/python tests/fuzz_campaign.py --per-kind 200 --fault-runs 0
    .venv/bin/python tests/fuzz_campaign.py --json benchmarks/results/reliability.json

Kinds (tests/fuzzkit.py): `bytes` (valid scenes mutated byte by byte), `structure` (right shape,
wrong types and values), `geometry` (degenerate but mostly valid scenes, planned and checked
with the outside safety check), `limits` (each configured limit breached), `config` (planner.yaml
and heads.yaml mutated). Every case is named by kind and seed and reproduces from them alone.
A sample of the cases also goes through the real command line (`sidestep plan`, a subprocess)
to count tracebacks and internal errors on stderr. Not part of `make test`.
"""

from __future__ import annotations

import argparse
import collections
import json
import os
import random
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import yaml  # noqa: E402
from fuzzkit import (  # noqa: E402
    CONFIG,
    REPO,
    case,
    fuzz_settings,
    mutate_bytes,
    mutate_structure,
    run_case,
)

KINDS = ("bytes", "structure", "geometry", "limits", "config")
FAULT_KINDS = {  # test name in tests/test_faults_daemon.py -> kind of fault
    "test_output_folder_deleted_while_running_is_made_again": "output folder deleted",
    "test_read_only_output_folder_fails_clearly_and_recovers_when_writable":
        "output folder read-only",
    "test_disk_full_leaves_no_partial_file_and_recovers_when_space_returns": "disk full",
    "test_a_thousand_scenes_dropped_at_once_are_all_planned": "1,000 scenes at once",
    "test_scene_replaced_by_a_folder_or_a_symlink_loop_is_not_followed":
        "scene replaced by a folder / symlink loop",
    "test_invalid_config_is_reported_and_the_last_good_one_stays_in_use":
        "config invalid (bad value, heads.yaml a folder, config folder gone)",
}


def _config_case(seed: int) -> dict:
    """Mutate planner.yaml or heads.yaml; Settings or one ConfigError is fine, else a crash."""
    from planner.config import load_settings
    from planner.errors import ConfigError, format_error
    from planner.watchopts import watch_options

    rnd = random.Random(f"config:{seed}")
    name = rnd.choice(["planner.yaml", "heads.yaml"])
    original = (CONFIG / name).read_bytes()
    if rnd.random() < 0.5:
        data = mutate_bytes(rnd, original)
    else:
        tree = mutate_structure(rnd, yaml.safe_load(original))
        data = yaml.safe_dump(tree, allow_unicode=True).encode("utf-8", "surrogatepass")
    started = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for other in ("planner.yaml", "heads.yaml"):
            (folder / other).write_bytes((CONFIG / other).read_bytes())
        (folder / name).write_bytes(data)
        try:
            watch_options(load_settings(folder))
            verdict, message = "accepted", ""
        except ConfigError as exc:
            text = format_error(exc)
            verdict = "refused" if "\n" not in text and name in text else "unclear"
            message = text
        except Exception as exc:  # anything else is a crash
            verdict, message = "crash", f"{type(exc).__name__}: {exc}"
    return {"kind": "config", "seed": seed, "verdict": verdict, "message": message[:500],
            "seconds": time.perf_counter() - started}


def _one(job: tuple[str, int, float, bool]) -> dict:
    kind, seed, hang_s, through_cli = job
    if kind == "config":
        return _config_case(seed)
    c = case(kind, seed)
    outcome = run_case(c, fuzz_settings(), hang_s=hang_s)
    row = {"kind": kind, "seed": seed, "verdict": outcome.verdict, "seconds": outcome.seconds,
           "message": outcome.message[-800:] if outcome.verdict not in (
               "planned", "incomplete", "refused") else ""}
    if through_cli and c.limits is None:
        row["cli"] = _through_cli(c.name, c.data)
    return row


def _through_cli(name: str, data: bytes) -> dict:
    """`sidestep plan` on the case as a user runs it; what stderr and the exit status show."""
    with tempfile.TemporaryDirectory() as tmp:
        scene = Path(tmp) / name
        scene.write_bytes(data)
        run = subprocess.run([sys.executable, "-m", "planner.cli", "plan", str(scene), "--out",
                              str(Path(tmp) / "out"), "--config", str(CONFIG)],
                             capture_output=True, text=True, cwd=REPO, timeout=600)
        leftovers = [p.name for p in (Path(tmp) / "out").glob(".*")] if \
            (Path(tmp) / "out").is_dir() else []
    return {"exit": run.returncode, "traceback": "Traceback" in run.stderr,
            "internal": "internal error" in run.stderr, "partial": leftovers,
            "lines": len(run.stderr.strip().splitlines())}


def fuzz(per_kind: int, start: int, hang_s: float, cli_every: int, workers: int) -> dict:
    jobs = [(kind, seed, hang_s, cli_every > 0 and seed % cli_every == 0)
            for kind in KINDS for seed in range(start, start + per_kind)]
    rows: list[dict] = []
    with ProcessPoolExecutor(max_workers=workers) as pool:
        for row in pool.map(_one, jobs, chunksize=8):
            rows.append(row)
            if row["verdict"] not in ("planned", "incomplete", "refused", "accepted"):
                print(f"  {row['kind']} seed {row['seed']}: {row['verdict']}: "
                      f"{row['message'][:300]}", flush=True)
    by_kind: dict[str, collections.Counter] = {k: collections.Counter() for k in KINDS}
    slowest: dict[str, float] = {k: 0.0 for k in KINDS}
    cli = collections.Counter()
    for row in rows:
        by_kind[row["kind"]][row["verdict"]] += 1
        slowest[row["kind"]] = max(slowest[row["kind"]], row["seconds"])
        if "cli" in row:
            cli["runs"] += 1
            cli["tracebacks"] += row["cli"]["traceback"]
            cli["internal errors"] += row["cli"]["internal"]
            cli["partial files"] += bool(row["cli"]["partial"])
            cli["exit codes outside 0/2/3/4"] += row["cli"]["exit"] not in (0, 2, 3, 4)
            cli["messages over one line"] += row["cli"]["exit"] in (2, 4) and \
                row["cli"]["lines"] != 1
    total = collections.Counter()
    for counts in by_kind.values():
        total.update(counts)
    failures = [r for r in rows if r["verdict"] not in ("planned", "incomplete", "refused",
                                                        "accepted")]
    return {"per_kind": per_kind, "first_seed": start, "hang_limit_s": hang_s,
            "by_kind": {k: dict(v) for k, v in by_kind.items()},
            "slowest_s": {k: round(v, 3) for k, v in slowest.items()},
            "crashes": total["crash"], "unclear": total["unclear"], "hangs": total["hang"],
            "unsafe": total["unsafe"], "cli": dict(cli), "failures": failures[:50]}


def faults(runs: int) -> dict:
    """Run tests/test_faults_daemon.py `runs` times; passes, failures and skips by kind."""
    counts: dict[str, collections.Counter] = {}
    skipped_why: set[str] = set()
    failed_runs: list[str] = []
    for _ in range(runs):
        run = subprocess.run([sys.executable, "-m", "pytest", "tests/test_faults_daemon.py",
                              "-q", "-rA", "-p", "no:cacheprovider"], capture_output=True,
                             text=True, cwd=REPO, timeout=1800)
        if run.returncode not in (0, 5):
            failed_runs.append(run.stdout[-6000:])
        for line in run.stdout.splitlines():
            parts = line.split(" ", 1)
            if parts[0] not in ("PASSED", "FAILED", "SKIPPED", "ERROR") or len(parts) < 2:
                continue
            test = parts[1].split("::")[-1].split(" ")[0]
            base = test.split("[")[0]
            kind = FAULT_KINDS.get(base, base)
            counts.setdefault(kind, collections.Counter())[parts[0].lower()] += 1
            if parts[0] == "SKIPPED":
                skipped_why.add(parts[1])
    return {"runs": runs, "by_kind": {k: dict(v) for k, v in counts.items()},
            "skipped": sorted(skipped_why), "failed_runs": failed_runs}


def markdown(figures: dict) -> str:
    f = figures["fuzz"]
    lines = ["| kind | cases | planned | incomplete | refused (clear error) | accepted | crash | "
             "unclear | hang | unsafe | slowest s |", "|" + " --- |" * 11]
    for kind, counts in f["by_kind"].items():
        n = sum(counts.values())
        lines.append(f"| {kind} | {n} | " + " | ".join(str(counts.get(v, 0)) for v in (
            "planned", "incomplete", "refused", "accepted", "crash", "unclear", "hang",
            "unsafe")) + f" | {f['slowest_s'][kind]} |")
    lines.append("")
    lines.append(f"crashes {f['crashes']}, unclear messages {f['unclear']}, hangs {f['hangs']}, "
                 f"unsafe routes {f['unsafe']}; through the command line: {f['cli']}")
    if "faults" in figures:
        lines += ["", "| fault | passed | failed | skipped |", "| --- | --- | --- | --- |"]
        for kind, counts in figures["faults"]["by_kind"].items():
            lines.append(f"| {kind} | {counts.get('passed', 0)} | {counts.get('failed', 0)} | "
                         f"{counts.get('skipped', 0)} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--per-kind", type=int, default=1000, help="cases of each kind")
    parser.add_argument("--first-seed", type=int, default=0)
    parser.add_argument("--hang-s", type=float, default=120.0,
                        help="wall-clock limit of one case (past it: a hang)")
    parser.add_argument("--cli-every", type=int, default=20,
                        help="every n-th case also through `sidestep plan` (0: none)")
    parser.add_argument("--fault-runs", type=int, default=3,
                        help="runs of tests/test_faults_daemon.py (0: none)")
    parser.add_argument("--workers", type=int, default=max(1, (os.cpu_count() or 2)))
    parser.add_argument("--json", type=Path, help="write the figures here as JSON")
    args = parser.parse_args(argv)
    started = time.time()
    figures = {"fuzz": fuzz(args.per_kind, args.first_seed, args.hang_s, args.cli_every,
                            args.workers)}
    if args.fault_runs:
        figures["faults"] = faults(args.fault_runs)
    figures["seconds"] = round(time.time() - started, 1)
    print(markdown(figures))
    if args.json:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(figures, indent=1) + "\n")
    bad = figures["fuzz"]
    faults_failed = sum(c.get("failed", 0) + c.get("error", 0)
                        for c in figures.get("faults", {}).get("by_kind", {}).values())
    ok = not (bad["crashes"] or bad["unclear"] or bad["hangs"] or bad["unsafe"] or faults_failed)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
