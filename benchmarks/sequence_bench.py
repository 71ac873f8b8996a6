"""Time `sequence: shortest` against the given order on a seeded random scene.

Run: .venv/bin/python -m benchmarks.sequence_bench [--vertices 5000] [--targets 200] [--seed 1]
     [--out benchmarks/results/sequence.json]

The same scene (benchmarks/scenes.py) is planned end to end by plan_scene three times: in the
given order, with `sequence: shortest` by length, and with `sequence: shortest` by time (the
config's axis model). Each plan builds its own free space and road map (no cache), so the times
compare whole plans. Printed and written: wall times, the ratio shortest / given, the tours'
lengths and estimated traverse times and the saving against the given order.
"""

from __future__ import annotations

import argparse
import json
import platform
import time
from pathlib import Path

import yaml

from benchmarks.scenes import count_vertices, random_scene
from planner.config import load_settings
from planner.files import atomic_write
from planner.plan import plan_scene
from planner.scene import load_scene_bytes

REPO = Path(__file__).resolve().parent.parent


class _NoAliases(yaml.SafeDumper):
    def ignore_aliases(self, data) -> bool:
        return True


def _plan(data: dict, settings) -> tuple[float, object]:
    scene = load_scene_bytes(yaml.dump(data, Dumper=_NoAliases).encode(), "bench.yaml", settings)
    t0 = time.perf_counter()
    result = plan_scene(scene, settings)
    return time.perf_counter() - t0, result


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--vertices", type=int, default=5000)
    parser.add_argument("--targets", type=int, default=200)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--out", default=str(REPO / "benchmarks" / "results" / "sequence.json"))
    args = parser.parse_args(argv)

    settings = load_settings(REPO / "config")
    base = random_scene(args.vertices, seed=args.seed, n_targets=args.targets)
    runs = {}
    for name, extra in (("given", {"sequence": "given"}),
                        ("shortest-length", {"sequence": "shortest", "cost": "length"}),
                        ("shortest-time", {"sequence": "shortest", "cost": "time"})):
        seconds, result = _plan({**base, **extra}, settings)
        route = result.route
        runs[name] = {
            "seconds": round(seconds, 3),
            "legs": len(route.legs),
            "unreachable": len(route.unreachable),
            "length": round(route.length, 3),
            "time_s": route.extra.get("time"),
        }
        if result.order is not None:
            runs[name]["matrix_given_cost"] = round(result.order.given_cost, 3)
            runs[name]["matrix_planned_cost"] = round(result.order.planned_cost, 3)
        print(f"{name:16s} {seconds:8.2f} s  {len(route.legs):4d} legs  length "
              f"{route.length:10.1f}  est. time {route.extra.get('time')} s  "
              f"unreachable {len(route.unreachable)}")

    given = runs["given"]
    summary = {
        "scene": {"vertices": count_vertices(base), "obstacles": len(base["obstacles"]),
                  "targets": len(base["targets"]), "seed": args.seed},
        "runs": runs,
        "ratio_shortest_length_to_given": round(runs["shortest-length"]["seconds"]
                                                / given["seconds"], 2),
        "ratio_shortest_time_to_given": round(runs["shortest-time"]["seconds"]
                                              / given["seconds"], 2),
        "length_saving_pct": round(100 * (1 - runs["shortest-length"]["length"]
                                          / given["length"]), 1),
        "time_saving_pct": round(100 * (1 - runs["shortest-time"]["time_s"]
                                        / given["time_s"]), 1),
        "machine": {"python": platform.python_version(), "cpu": platform.processor() or
                    platform.machine()},
    }
    print(f"shortest/given time ratio: {summary['ratio_shortest_length_to_given']} (length), "
          f"{summary['ratio_shortest_time_to_given']} (time); saving "
          f"{summary['length_saving_pct']}% of length, {summary['time_saving_pct']}% of time")
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(out, json.dumps(summary, indent=2) + "\n")
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
