"""Time every stage of the pipeline on one scene file, in this process, and print one JSON document.

Run: .venv/bin/python -m benchmarks.stages SCENE.yaml OUT_DIR

Stages, in pipeline order (each with wall and CPU seconds): import, settings, load (read, parse and
validate the scene), cspace (build_free_space), roadmap (build_roadmap), queries (every leg of the
given order with Roadmap.path, as the planner asks them: each leg brings one new end point),
plan (plan_scene with the free space and road map already built: queries, explanations of
unreachable targets, rounding, the safety check), verify (the safety check alone), write (every
enabled adapter and the route file, written atomically as `sidestep plan` does). Also per leg:
the CPU time of a cold query (neither end looked from before), and the peak resident memory.
"""

from __future__ import annotations

import json
import resource
import sys
import time
from pathlib import Path

_T0 = time.perf_counter()
_C0 = time.process_time()


class Clock:
    """Wall and CPU seconds of named stages."""

    def __init__(self) -> None:
        self.stages: dict[str, dict[str, float]] = {}

    def run(self, name: str, fn):
        w, c = time.perf_counter(), time.process_time()
        out = fn()
        self.stages[name] = {"wall_s": time.perf_counter() - w, "cpu_s": time.process_time() - c}
        return out


def _peak_kib() -> int:
    """This process's resident high-water mark in KiB (/proc; ru_maxrss would include what the
    forking parent had)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except (OSError, ValueError, IndexError):
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def _reflex_count(scene) -> int:
    """Polygon obstacle vertices where the outline turns inwards (a convex decomposition's work
    grows with these; they grow faster than all vertices in the sparse scenes)."""
    import numpy as np

    total = 0
    for o in scene.obstacles:
        if o.polygon is None or len(o.polygon) < 4:
            continue
        p = np.asarray(o.polygon, dtype=float)
        d_in = p - np.roll(p, 1, axis=0)
        d_out = np.roll(p, -1, axis=0) - p
        turn = d_in[:, 0] * d_out[:, 1] - d_in[:, 1] * d_out[:, 0]
        area2 = float(np.sum(p[:, 0] * np.roll(p[:, 1], -1) - np.roll(p[:, 0], -1) * p[:, 1]))
        total += int(np.sum(turn * np.sign(area2) < 0))
    return total


def _route_legs(scene) -> list[tuple[str, tuple, str, tuple]]:
    from planner.model import FINISH, START

    stops = [(START, scene.start)] + [(t.id, t.at) for t in scene.targets]
    if scene.finish is not None:
        stops.append((FINISH, scene.finish))
    return [(f, a, t, b) for (f, a), (t, b) in zip(stops[:-1], stops[1:], strict=True)]


def run_stages(scene_path: Path, out_dir: Path) -> dict:
    """All stage timings for one scene (see the module docstring)."""
    clock = Clock()
    clock.stages["import"] = {"wall_s": 0.0, "cpu_s": 0.0}
    w, c = time.perf_counter(), time.process_time()
    from adapters import enabled_adapters
    from planner.config import load_settings
    from planner.cspace import build_free_space, free_space_key
    from planner.files import atomic_write, output_path, output_stem
    from planner.plan import PlanCache, plan_scene, verify_tolerance
    from planner.roadmap import NoPath, build_roadmap
    from planner.routefile import dump_route
    from planner.scene import load_scene
    from planner.verify import verify_route

    clock.stages["import"] = {"wall_s": time.perf_counter() - w + (w - _T0),
                              "cpu_s": time.process_time() - c + (c - _C0)}
    settings = clock.run("settings", lambda: load_settings(None))
    scene = clock.run("load", lambda: load_scene(scene_path, settings))
    s = settings.in_units(scene.units)
    free = clock.run("cspace", lambda: build_free_space(scene, s))
    roadmap = clock.run("roadmap", lambda: build_roadmap(free))

    def queries() -> list[float]:
        lengths = []
        current = scene.start
        for _, _, _, b in _route_legs(scene):
            try:
                lengths.append(roadmap.path(current, b)[1])
                current = b
            except NoPath:
                lengths.append(float("inf"))
        return lengths

    lengths = clock.run("queries", queries)
    cold = []
    for _, a, _, b in _route_legs(scene):
        roadmap.clear_cache()
        c0 = time.process_time()
        try:
            roadmap.path(a, b)
        except NoPath:
            pass
        cold.append(time.process_time() - c0)
    roadmap.clear_cache()

    cache = PlanCache()
    cache.put(free_space_key(scene, s), (free, roadmap))
    result = clock.run("plan", lambda: plan_scene(scene, settings, cache=cache))
    route = result.route
    violations = clock.run("verify", lambda: verify_route(
        route, scene, tolerance=verify_tolerance(s), resolution=s.resolution))

    adapter_s: dict[str, float] = {}

    def write() -> list[str]:
        out_dir.mkdir(parents=True, exist_ok=True)
        stem = output_stem(scene_path)
        written = []
        for adapter in enabled_adapters(settings.adapters):
            c0 = time.process_time()
            own = settings.adapter_settings.get(adapter.name, {})
            text = adapter.write(route, own, result)
            path = output_path(out_dir, stem, adapter.suffix)
            atomic_write(path, text)
            adapter_s[adapter.name] = time.process_time() - c0
            written.append(path.name)
        path = output_path(out_dir, stem, ".route.yaml")
        atomic_write(path, dump_route(route, s.resolution))
        written.append(path.name)
        return written

    written = clock.run("write", write)
    peak_kib = _peak_kib()
    import shapely
    stats = {k: v for k, v in roadmap.stats.items() if k != "seconds"}
    return {
        "scene": str(scene_path),
        "obstacles": len(scene.obstacles),
        "vertices": sum(len(o.polygon) for o in scene.obstacles if o.polygon is not None),
        "legs": len(route.legs),
        "unreachable": [u.id for u in route.unreachable],
        "route_length": route.length,
        "violations": len(violations),
        "stages": clock.stages,
        "roadmap_seconds": roadmap.stats.get("seconds", {}),
        "roadmap": stats,
        "cspace": {"pieces": int(len(free.pieces)),
                   "blocked_vertices": int(shapely.get_num_coordinates(free.blocked)),
                   "reflex_input_vertices": _reflex_count(scene)},
        "query_lengths": lengths,
        "cold_leg_cpu_s": cold,
        "adapter_cpu_s": adapter_s,
        "files": written,
        "peak_rss_mib": peak_kib / 1024.0,
        "total_wall_s": time.perf_counter() - _T0,
        "total_cpu_s": time.process_time() - _C0,
    }


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 2:
        print(__doc__, file=sys.stderr)
        return 2
    print(json.dumps(run_stages(Path(args[0]), Path(args[1]))))
    return 0


if __name__ == "__main__":
    sys.exit(main())
