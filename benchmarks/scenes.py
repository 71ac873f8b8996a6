"""Seeded random scenes for benchmarks: a scene dict in the contract's format (scene version 1).

`random_scene(n_vertices, seed, kind)` gives the same scene for the same arguments on every
machine (numpy's PCG64 generator). Obstacles are a mix of rectangles, convex polygons, rounded
non-convex shapes (finely sampled curves) and true circles, laid out so that they do not overlap;
targets are placed where the head fits, as far as the scene allows.

Kinds:
- "sparse": tens to hundreds of obstacles on a jittered grid with aisles the head can use; most
  vertices sit on the curves of the rounded shapes (hundreds to thousands each).
- "dense": thousands of small polygons packed in nests (patches of the table), with aisles
  between the nests, like the parts left standing on a cut sheet.

`n_vertices` counts polygon vertices (a rect counts 4, a circle 0); the scene gets close to it
(within a few percent) and `count_vertices(scene)` says exactly.

Example::

    from benchmarks.scenes import random_scene
    scene = random_scene(20_000, seed=1)            # write it with yaml.safe_dump(scene)
"""

from __future__ import annotations

import numpy as np
import shapely

__all__ = ["random_scene", "count_vertices", "OCTAGON_80X60"]

# An 8-sided head 80 wide (x) and 60 deep (y): a rectangle with 15 mm chamfers.
OCTAGON_80X60 = [[-40.0, -15.0], [-25.0, -30.0], [25.0, -30.0], [40.0, -15.0],
                 [40.0, 15.0], [25.0, 30.0], [-25.0, 30.0], [-40.0, 15.0]]

_MIX = {  # share of obstacles by shape: rect, convex polygon, rounded non-convex, circle
    "sparse": (0.30, 0.20, 0.35, 0.15),
    "dense": (0.40, 0.30, 0.20, 0.10),
}


def _r(v: float) -> float:
    return round(float(v), 3)


def _ring(xy: np.ndarray) -> list[list[float]] | None:
    """Vertices rounded to 0.001 as a list, or None if rounding broke the polygon."""
    xy = np.round(np.asarray(xy, dtype=np.float64), 3)
    keep = np.any(xy != np.roll(xy, 1, axis=0), axis=1)
    xy = xy[keep]
    if len(xy) < 3:
        return None
    poly = shapely.Polygon(xy)
    if not poly.is_valid or poly.area <= 0:
        return None
    return xy.tolist()


def _convex(rng: np.random.Generator, c: np.ndarray, half: np.ndarray, k: int) -> np.ndarray:
    """k points at sorted random angles on a rotated ellipse inside the box: convex."""
    t = np.sort(rng.uniform(0, 2 * np.pi, k))
    a, b = half * rng.uniform(0.6, 1.0, 2)
    phi = rng.uniform(0, np.pi)
    x, y = a * np.cos(t), b * np.sin(t)
    cs, sn = np.cos(phi), np.sin(phi)
    scale = min(half[0] / max(a, b), half[1] / max(a, b), 1.0)
    return c + scale * np.column_stack([cs * x - sn * y, sn * x + cs * y])


def _rounded(rng: np.random.Generator, c: np.ndarray, half: np.ndarray, m: int) -> np.ndarray:
    """A smooth non-convex outline with about m vertices: a wavy blob or a rounded L/U plate."""
    if rng.random() < 0.5 or m < 40:
        t = np.linspace(0, 2 * np.pi, max(m, 12), endpoint=False)
        lobes = int(rng.integers(3, 7))
        amp = rng.uniform(0.12, 0.3)
        r = (1 + amp * np.sin(lobes * t + rng.uniform(0, 2 * np.pi))) / (1 + amp)
        return c + np.column_stack([half[0] * r * np.cos(t), half[1] * r * np.sin(t)])
    # A thick L or U centre line, buffered with round joins: convex and concave arcs.
    w = 0.35 * min(half)
    if rng.random() < 0.5:
        line = [(-1, 1), (-1, -1), (1, -1)]
    else:
        line = [(-1, 1), (-1, -1), (1, -1), (1, 1)]
    pts = np.array(line, dtype=np.float64) * (half - w)
    quad = max(2, m // (4 * len(line)))
    for _ in range(2):  # one correction of quad_segs brings the vertex count close to m
        shape = shapely.LineString(pts).buffer(w, quad_segs=quad, cap_style="round",
                                               join_style="round")
        got = len(shape.exterior.coords) - 1
        quad = max(2, round(quad * m / got))
    return c + np.asarray(shape.exterior.coords)[:-1]


def _layout(rng: np.random.Generator, n: int, kind: str, table: tuple[float, float],
            aisle: float) -> tuple[np.ndarray, np.ndarray]:
    """Centres and half-sizes of n non-overlapping obstacle boxes."""
    w, h = table
    if kind == "sparse":
        cells = int(np.ceil(n / 0.8))
        cols = max(1, int(np.ceil(np.sqrt(cells * w / h))))
        rows = max(1, int(np.ceil(cells / cols)))
        cw, ch = w / cols, h / rows
        picked = rng.choice(cols * rows, size=min(n, cols * rows), replace=False)
        ix, iy = picked % cols, picked // cols
        size = np.array([max(cw - aisle, 0.35 * cw), max(ch - aisle, 0.35 * ch)])
        half = size / 2 * rng.uniform(0.5, 1.0, (len(picked), 2))
        slack = np.array([cw, ch]) / 2 - half
        jitter = rng.uniform(-1, 1, (len(picked), 2)) * slack * 0.8
        centre = np.column_stack([(ix + 0.5) * cw, (iy + 0.5) * ch]) + jitter
        return centre, half
    if kind == "dense":
        # Nests: a 4 x 2 grid of patches with aisles between them, each packed with small parts.
        pcols, prows = 4, 2
        pw, ph = (w - (pcols + 1) * aisle) / pcols, (h - (prows + 1) * aisle) / prows
        per = int(np.ceil(n / (pcols * prows)))
        cols = max(1, int(np.ceil(np.sqrt(per * pw / ph))))
        rows = max(1, int(np.ceil(per / cols)))
        cw, ch = pw / cols, ph / rows
        centres, halves = [], []
        for k in range(pcols * prows):
            px = aisle + (k % pcols) * (pw + aisle)
            py = aisle + (k // pcols) * (ph + aisle)
            j = np.arange(per)
            centres.append(np.column_stack([px + (j % cols + 0.5) * cw,
                                            py + (j // cols + 0.5) * ch]))
            halves.append(np.array([cw, ch]) * 0.5 * rng.uniform(0.55, 0.8, (per, 2)))
        centre = np.concatenate(centres)[:n]
        half = np.concatenate(halves)[:n]
        return centre, half
    raise ValueError(f"unknown scene kind {kind!r}: use 'sparse' or 'dense'")


def _free_points(rng: np.random.Generator, obstacles: list[dict], table: tuple[float, float],
                 reach: float, count: int) -> list[list[float]]:
    """Up to `count` random points at least `reach` from every obstacle, then any points."""
    shapes = []
    for o in obstacles:
        if "polygon" in o:
            shapes.append(shapely.Polygon(o["polygon"]))
        elif "rect" in o:
            shapes.append(shapely.box(*o["rect"]["min"], *o["rect"]["max"]))
        else:
            shapes.append(shapely.Point(o["circle"]["center"]).buffer(o["circle"]["radius"]))
    tree = shapely.STRtree(shapes)
    w, h = table
    found: list[list[float]] = []
    tries = 0
    while len(found) < count and tries < 200:
        tries += 1
        cand = rng.uniform([reach, reach], [w - reach, h - reach], (256, 2))
        pts = shapely.points(cand)
        near = tree.query(pts, predicate="dwithin", distance=reach)
        ok = np.ones(len(cand), dtype=bool)
        ok[near[0]] = False
        for p in cand[ok][: count - len(found)]:
            found.append([_r(p[0]), _r(p[1])])
    while len(found) < count:  # the scene leaves no room: targets anywhere (may be unreachable)
        p = rng.uniform([0, 0], [w, h])
        found.append([_r(p[0]), _r(p[1])])
    return found


def count_vertices(scene: dict) -> int:
    """Polygon vertices of a scene dict's obstacles (rect = 4, circle = 0)."""
    total = 0
    for o in scene["obstacles"]:
        if "polygon" in o:
            total += len(o["polygon"])
        elif "rect" in o:
            total += 4
    return total


def random_scene(
    n_vertices: int,
    seed: int,
    kind: str = "sparse",
    *,
    n_targets: int = 20,
    table: tuple[float, float] = (3000.0, 1500.0),
    footprint: list[list[float]] | None = None,
    margin: float = 2.0,
) -> dict:
    """A seeded random scene dict (contract format) with about `n_vertices` obstacle vertices.

    The head is given inline (default: the 8-sided 80 x 60 head, margin 2 mm); ~`n_targets`
    targets, the start and the finish are placed where the head fits when there is room.
    """
    if kind not in _MIX:
        raise ValueError(f"unknown scene kind {kind!r}: use one of {sorted(_MIX)}")
    rng = np.random.default_rng(seed)
    footprint = OCTAGON_80X60 if footprint is None else footprint
    reach = float(np.max(np.hypot(*np.asarray(footprint, dtype=np.float64).T))) + margin
    shares = np.asarray(_MIX[kind])
    if kind == "sparse":
        n = int(np.clip(n_vertices / 400, 20, 500))
        small_k = (6, 13)
    else:
        n = max(50, int(n_vertices / 20))
        small_k = (5, 11)
    counts = np.floor(shares * n).astype(int)
    counts[0] += n - counts.sum()
    n_rect, n_conv, n_round, n_circ = counts
    conv_k = rng.integers(*small_k, n_conv)
    budget = max(n_vertices - 4 * n_rect - int(conv_k.sum()), 12 * max(n_round, 1))
    round_m = np.full(n_round, budget // max(n_round, 1))
    round_m[: budget - int(round_m.sum())] += 1

    kinds = np.repeat(np.arange(4), counts)
    rng.shuffle(kinds)
    centre, half = _layout(rng, n, kind, table, aisle=2.0 * reach + 10.0)
    obstacles: list[dict] = []
    ci = ri = 0
    for kind_i, c, hf in zip(kinds, centre, half, strict=True):
        ring = None
        if kind_i == 1:
            ring = _ring(_convex(rng, c, hf, int(conv_k[ci])))
            ci += 1
        elif kind_i == 2:
            ring = _ring(_rounded(rng, c, hf, int(round_m[ri])))
            ri += 1
        elif kind_i == 3:
            obstacles.append({"circle": {"center": [_r(c[0]), _r(c[1])],
                                         "radius": _r(min(hf) * rng.uniform(0.6, 1.0))}})
            continue
        if ring is not None:
            obstacles.append({"polygon": ring})
        else:  # rectangles, and any shape that rounding to 0.001 would have spoilt
            obstacles.append({"rect": {"min": [_r(c[0] - hf[0]), _r(c[1] - hf[1])],
                                       "max": [_r(c[0] + hf[0]), _r(c[1] + hf[1])]}})

    points = _free_points(rng, obstacles, table, reach + 1.0, n_targets + 1)
    return {
        "scene": 1,
        "units": "mm",
        "travel": {"x": [0.0, float(table[0])], "y": [0.0, float(table[1])]},
        "head": {"footprint": [list(map(float, p)) for p in footprint], "margin": float(margin)},
        "obstacles": obstacles,
        "start": points[0],
        "targets": points[1:],
        "finish": list(points[0]),
    }
