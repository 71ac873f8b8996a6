"""The practitioner's alternative to exact paths: a raster grid and a least-cost path.

The grown obstacles (our configuration space, so both planners avoid the same shapes) are
rasterised at `cell` (1 mm by default) by cell centres, then dilated by one cell so that a path
of free cell centres keeps clear of what a centre test misses; scikit-image's `MCP_Geometric`
(through `route_through_array`, 8-connected, steps weighted by their length) finds the least-cost
chain of cells. A leg's polyline is the exact start, the cell centres, the exact end.

Run on its own: .venv/bin/python -m benchmarks.grid SCENE.yaml  (prints one JSON document: per
leg the grid's time, length and safety by planner.verify, and ours, measured in this process;
also the length and safety of the naive grid, rasterised by cell centres without the dilation).
"""

from __future__ import annotations

import json
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely
from scipy import ndimage
from skimage.graph import route_through_array

from planner.model import Leg, Route, Scene, Travel

__all__ = ["Grid", "rasterise", "grid_leg", "unsafe_kinds", "compare_scene"]

# Violations of planner.verify that mean "not safe" for a leg checked on its own (the order and
# continuity checks are about whole routes, which a one-leg route is not).
_SAFETY_KINDS = ("clearance", "travel", "point")


@dataclass(frozen=True)
class Grid:
    """Cell costs over the travel box: 1 where free, inf where blocked; row = y, column = x."""

    cost: np.ndarray
    x0: float
    y0: float
    cell: float

    def index(self, p) -> tuple[int, int]:
        """(row, column) of the cell holding point p (clamped to the grid)."""
        ny, nx = self.cost.shape
        col = int(np.clip(np.floor((p[0] - self.x0) / self.cell), 0, nx - 1))
        row = int(np.clip(np.floor((p[1] - self.y0) / self.cell), 0, ny - 1))
        return row, col

    def centres(self, cells: np.ndarray) -> np.ndarray:
        """(k, 2) xy of cell centres from (k, 2) (row, column) indices."""
        cells = np.asarray(cells, dtype=float).reshape(-1, 2)
        return np.column_stack([self.x0 + (cells[:, 1] + 0.5) * self.cell,
                                self.y0 + (cells[:, 0] + 0.5) * self.cell])


def rasterise(blocked: shapely.Geometry, travel: Travel, cell: float, *, dilate: int = 1,
              rows_per_pass: int = 256) -> Grid:
    """Cells whose centre lies in `blocked` (closed), grown by `dilate` cells (8-neighbourhood)."""
    nx = int(np.ceil((travel.xmax - travel.xmin) / cell))
    ny = int(np.ceil((travel.ymax - travel.ymin) / cell))
    xs = travel.xmin + (np.arange(nx) + 0.5) * cell
    ys = travel.ymin + (np.arange(ny) + 0.5) * cell
    hit = np.zeros((ny, nx), dtype=bool)
    if not blocked.is_empty:
        shapely.prepare(blocked)
        for r0 in range(0, ny, rows_per_pass):
            gx, gy = np.meshgrid(xs, ys[r0:r0 + rows_per_pass])
            hit[r0:r0 + rows_per_pass] = shapely.intersects_xy(blocked, gx, gy)
    if dilate > 0 and hit.any():
        hit = ndimage.binary_dilation(hit, structure=np.ones((3, 3), dtype=bool),
                                      iterations=dilate)
    return Grid(np.where(hit, np.inf, 1.0), travel.xmin, travel.ymin, cell)


def grid_leg(grid: Grid, a, b) -> tuple[np.ndarray | None, float]:
    """The grid's polyline from a to b (None when its cells do not connect) and its length."""
    ia, ib = grid.index(a), grid.index(b)
    if not (np.isfinite(grid.cost[ia]) and np.isfinite(grid.cost[ib])):
        return None, float("inf")
    cells, cost = route_through_array(grid.cost, ia, ib, fully_connected=True, geometric=True)
    if not np.isfinite(cost):
        return None, float("inf")
    pts = np.vstack([np.asarray(a, dtype=float), grid.centres(np.asarray(cells)),
                     np.asarray(b, dtype=float)])
    return pts, float(np.hypot(*np.diff(pts, axis=0).T).sum())


def unsafe_kinds(scene: Scene, from_id: str, to_id: str, pts: np.ndarray, tolerance: float
                 ) -> list[str]:
    """Kinds of safety violations of one polyline by the independent check (empty: safe)."""
    from planner.verify import verify_route

    length = float(np.hypot(*np.diff(pts, axis=0).T).sum())
    leg = Leg(from_id=from_id, to_id=to_id, points=tuple(map(tuple, pts)), length=length)
    route = Route(scene_file=scene.file, scene_sha256=scene.sha256, config_sha256="",
                  units=scene.units, legs=(leg,), unreachable=())
    found = verify_route(route, scene, tolerance=tolerance, resolution=0.0)
    return sorted({v.kind for v in found if v.kind in _SAFETY_KINDS})


def compare_scene(path: Path, cell_mm: float = 1.0) -> dict:
    """Ours against the grid on every leg of one scene (given order), in this one process."""
    from planner.config import MM_PER_UNIT, load_settings
    from planner.cspace import build_free_space
    from planner.model import FINISH, START
    from planner.plan import verify_tolerance
    from planner.roadmap import NoPath, build_roadmap
    from planner.scene import load_scene

    settings = load_settings(None)
    scene = load_scene(path, settings)
    s = settings.in_units(scene.units)
    free = build_free_space(scene, s)
    roadmap = build_roadmap(free)
    cell = cell_mm / MM_PER_UNIT[scene.units]
    c0 = time.process_time()
    grid = rasterise(free.blocked, scene.travel, cell)
    raster_cpu = time.process_time() - c0
    naive = rasterise(free.blocked, scene.travel, cell, dilate=0)
    tol = verify_tolerance(s)
    stops = [(START, scene.start)] + [(t.id, t.at) for t in scene.targets]
    if scene.finish is not None:
        stops.append((FINISH, scene.finish))
    legs = []
    for (fid, a), (tid, b) in zip(stops[:-1], stops[1:], strict=True):
        roadmap.clear_cache()  # a cold query: neither end has been looked from before
        c0 = time.process_time()
        try:
            ours, our_len = roadmap.path(a, b)
        except NoPath:
            ours, our_len = None, float("inf")
        our_cpu = time.process_time() - c0
        c0 = time.process_time()
        pts, grid_len = grid_leg(grid, a, b)
        grid_cpu = time.process_time() - c0
        legs.append({
            "from": fid, "to": tid,
            "ours_cpu_s": our_cpu, "ours_length": our_len,
            "ours_unsafe": unsafe_kinds(scene, fid, tid, ours, tol) if ours is not None else [],
            "grid_cpu_s": grid_cpu, "grid_length": grid_len,
            "grid_unsafe": unsafe_kinds(scene, fid, tid, pts, tol) if pts is not None else [],
            "grid_cells": 0 if pts is None else len(pts) - 2,
        })
        # the same without the dilation: cheaper, shorter, and not safe
        pts, naive_len = grid_leg(naive, a, b)
        legs[-1].update({
            "naive_length": naive_len,
            "naive_unsafe": unsafe_kinds(scene, fid, tid, pts, tol) if pts is not None else [],
        })
    return {"scene": str(path), "cell": cell, "units": scene.units,
            "grid_shape": list(grid.cost.shape), "raster_cpu_s": raster_cpu,
            "blocked_share": float(np.mean(~np.isfinite(grid.cost))), "legs": legs}


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if not args:
        print(__doc__, file=sys.stderr)
        return 2
    cell = float(args[1]) if len(args) > 1 else 1.0
    print(json.dumps(compare_scene(Path(args[0]), cell)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
