"""Time the configuration space on seeded random scenes (benchmarks/scenes.py).

Run: .venv/bin/python -m benchmarks.cspace_timing [n_vertices ...] [--kind sparse|dense]
Prints, per scene: obstacles, vertices, convex pieces, union vertices and the best CPU time of a
few runs of build_free_space, and of its two main steps: the pieces (decomposition + sums) and
their union. Also the wall time of one whole build.
"""

from __future__ import annotations

import argparse
import time

import shapely

from benchmarks.scenes import count_vertices, random_scene
from planner.config import Settings
from planner.cspace import (
    EPS_PER_RESOLUTION,
    build_free_space,
    c_obstacle_pieces,
    checked_union,
)
from planner.model import Circle, Head, Obstacle, Scene, Target, Travel


def scene_from_dict(d: dict) -> Scene:
    """A Scene from a generated dict (the generator's own subset of the format, no validation)."""
    obstacles = []
    for i, o in enumerate(d["obstacles"]):
        oid = o.get("id", f"o{i + 1}")
        if "polygon" in o:
            obstacles.append(Obstacle(oid, polygon=tuple(map(tuple, o["polygon"]))))
        elif "rect" in o:
            (x0, y0), (x1, y1) = o["rect"]["min"], o["rect"]["max"]
            obstacles.append(Obstacle(oid, polygon=((x0, y0), (x1, y0), (x1, y1), (x0, y1))))
        else:
            c = o["circle"]
            obstacles.append(Obstacle(oid, circle=Circle(tuple(c["center"]), c["radius"])))
    h = d["head"]
    return Scene(
        file="generated", sha256="", units=d["units"],
        travel=Travel(*d["travel"]["x"], *d["travel"]["y"]),
        head=Head(None, tuple(map(tuple, h["footprint"])), h["margin"], h.get("ride_height")),
        obstacles=tuple(obstacles), start=tuple(d["start"]),
        targets=tuple(Target(f"t{i + 1}", tuple(p)) for i, p in enumerate(d["targets"])),
    )


def best_of(fn, repeat: int) -> tuple[float, object]:
    """Best CPU time of this process over `repeat` runs (steadier than wall time on a shared
    machine; the work is single-threaded), and the last result."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.process_time()
        out = fn()
        best = min(best, time.process_time() - t0)
    return best, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("sizes", nargs="*", type=int, default=[20_000, 100_000])
    ap.add_argument("--kind", default="sparse")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    settings = Settings()
    for n in args.sizes:
        d = random_scene(n, args.seed, args.kind)
        scene = scene_from_dict(d)
        clearance = scene.head.margin + settings.resolution
        eps = settings.resolution * EPS_PER_RESOLUTION
        t_pieces, (pieces, _) = best_of(lambda s=scene, c=clearance: c_obstacle_pieces(
            s.obstacles, s.head.footprint, c, settings.arc_tolerance), args.repeat)
        t_union, blocked = best_of(lambda p=pieces, e=eps: checked_union(p, e), args.repeat)
        t_all, free = best_of(lambda s=scene: build_free_space(s, settings), args.repeat)
        w0 = time.perf_counter()
        build_free_space(scene, settings)
        wall = time.perf_counter() - w0
        print(f"{args.kind:6s} n={n:>7d} obstacles={len(scene.obstacles):>5d} "
              f"vertices={count_vertices(d):>7d} pieces={len(pieces):>6d} "
              f"union_vertices={shapely.get_num_coordinates(blocked):>7d} "
              f"cpu: pieces={t_pieces:.3f}s union={t_union:.3f}s build_free_space={t_all:.3f}s "
              f"(wall {wall:.3f}s) "
              f"valid={shapely.is_valid(free.blocked) and shapely.is_valid(free.region)}")


if __name__ == "__main__":
    main()
