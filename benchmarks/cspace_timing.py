"""Time the configuration space on seeded random scenes (benchmarks/scenes.py).

Run: .venv/bin/python -m benchmarks.cspace_timing [n_vertices ...] [--kind sparse|dense]
Prints, per scene: obstacles, vertices, convex pieces, union vertices and the best of a few runs
of build_free_space, split into pieces (decomposition + sums) and union.
"""

from __future__ import annotations

import argparse
import time

import shapely

from benchmarks.scenes import count_vertices, random_scene
from planner.config import Settings
from planner.cspace import build_free_space, c_obstacle_pieces, checked_union
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
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
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
        eps = settings.resolution * 1e-3
        t_pieces, (pieces, _) = best_of(lambda s=scene, c=clearance: c_obstacle_pieces(
            s.obstacles, s.head.footprint, c, settings.arc_tolerance), args.repeat)
        t_union, blocked = best_of(lambda p=pieces: checked_union(p, eps), args.repeat)
        t_all, free = best_of(lambda s=scene: build_free_space(s, settings), args.repeat)
        print(f"{args.kind:6s} n={n:>7d} obstacles={len(scene.obstacles):>5d} "
              f"vertices={count_vertices(d):>7d} pieces={len(pieces):>6d} "
              f"union_vertices={shapely.get_num_coordinates(blocked):>7d} "
              f"pieces_s={t_pieces:.3f} union_s={t_union:.3f} build_free_space_s={t_all:.3f} "
              f"valid={shapely.is_valid(free.blocked) and shapely.is_valid(free.region)}")


if __name__ == "__main__":
    main()
