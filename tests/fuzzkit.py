"""Hostile inputs for the fuzz tests and the long campaign: generators, one runner, one verdict.

Not a test module: tests/test_fuzz_*.py and tests/fuzz_campaign.py import it. Every generator
takes a `random.Random`, so a case is reproduced from its kind and seed alone
(`case(kind, seed)`); the hypothesis tests draw seeds, the campaign walks through them.

Verdicts (`Outcome.verdict`):
- planned / incomplete: a route came back and passed the outside safety check below;
- refused: one clear SceneError/ConfigError/PlanningError message (bad input, too complex...);
- unsafe: a route failed the outside check, or the planner's own check stopped one (a bug);
- crash: any other exception (the one-line "internal error" of the command line);
- unclear: a refusal whose message is not one line naming the file, or shows a traceback;
- hang: the case ran past its time limit.
"""

from __future__ import annotations

import copy
import json
import math
import random
import signal
import time
import traceback
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import shapely
import yaml

from adapters import enabled_adapters
from planner.config import Limits, Settings, load_settings
from planner.errors import ConfigError, PlanningError, SceneError, UnsafeRouteError, format_error
from planner.model import Route, Scene
from planner.plan import plan_scene
from planner.routefile import dump_route, load_route
from planner.scene import load_scene_bytes

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "config"
DEMO = REPO / "planner" / "demo"

__all__ = [
    "KINDS", "Case", "Outcome", "case", "run_case", "outside_violations", "fuzz_settings",
    "seed_texts",
]


# ------------------------------------------------------------------------------ seeds


def seed_texts() -> list[tuple[str, bytes]]:
    """Valid scene files to mutate: the bundled demo scenes and a small inline-head scene."""
    out = [(p.name, p.read_bytes()) for p in sorted(DEMO.glob("*.yaml"))]
    small = {
        "scene": 1, "units": "mm", "travel": {"x": [0, 1000], "y": [0, 500]},
        "head": {"footprint": [[-10, -10], [10, -10], [10, 10], [-10, 10]], "margin": 1.0},
        "obstacles": [
            {"id": "block", "rect": {"min": [400, 100], "max": [600, 300]}},
            {"polygon": [[700, 50], [800, 50], [750, 150]], "height": 5},
            {"circle": {"center": [200, 400], "radius": 30}},
        ],
        "start": [50, 50], "targets": [[900, 400], {"id": "corner", "at": [950, 50]}],
        "finish": [50, 50],
    }
    out.append(("small.yaml", yaml.safe_dump(small, sort_keys=False).encode()))
    out.append(("small.json", json.dumps(small).encode()))
    return out


_SEEDS: list[tuple[str, bytes]] | None = None


def _seeds() -> list[tuple[str, bytes]]:
    global _SEEDS
    if _SEEDS is None:
        _SEEDS = seed_texts()
    return _SEEDS


def fuzz_settings(time_budget_s: float = 20.0) -> Settings:
    """The repository's config with a time budget fit for fuzzing."""
    settings = load_settings(CONFIG)
    return replace(settings, limits=replace(settings.limits, time_budget_s=time_budget_s))


# --------------------------------------------------------------------- raw bytes

# Pieces that are known to upset YAML readers and loaders (common practice, no source).
_TOKENS = [
    b".nan", b".inf", b"-.inf", b"1e999", b"-0", b"0x1F", b"0o17", b"1_000", b"~", b"null",
    b"&a ", b"*a", b"<<: *a", b"!!python/object:os.system", b"!!binary", b"!custom ", b"%YAML 1.1",
    b"---", b"...", b"\t", b"\x00", b"\xff\xfe", b"\xef\xbb\xbf", b"\r\n", b"\r", b"\x85",
    b"\xe2\x80\xa8", b"'", b'"', b"[", b"]", b"{", b"}", b": ", b"- ", b"#", b"|", b">", b"?",
    b"9" * 5000, b"[" * 300, b"{a: " * 200, b"- " * 200, b"1.7976931348623157e308",
    b"4.9e-324", b"yes", b"on", b"012", b"+.5", b"\\u0000", b"\xed\xa0\x80",
]


def mutate_bytes(rnd: random.Random, data: bytes) -> bytes:
    """A few random edits: truncation, flips, token splices, duplicated or dropped slices."""
    buf = bytearray(data)
    for _ in range(rnd.randint(1, 6)):
        op = rnd.randrange(7)
        at = rnd.randint(0, len(buf))
        if op == 0 and buf:  # truncate
            del buf[at:]
        elif op == 1 and buf:  # flip bits of one byte
            i = rnd.randrange(len(buf))
            buf[i] ^= 1 << rnd.randrange(8)
        elif op == 2:  # splice a known-bad token
            buf[at:at] = rnd.choice(_TOKENS)
        elif op == 3 and buf:  # duplicate a slice
            j = rnd.randint(at, min(len(buf), at + 200))
            buf[at:at] = buf[at:j] * rnd.randint(1, 4)
        elif op == 4 and buf:  # drop a slice
            del buf[at:at + rnd.randint(1, 40)]
        elif op == 5:  # random bytes
            buf[at:at] = bytes(rnd.randrange(256) for _ in range(rnd.randint(1, 16)))
        elif op == 6 and buf:  # replace a digit run with an extreme number
            text = bytes(buf)
            digits = [i for i in range(len(text)) if 48 <= text[i] <= 57]
            if digits:
                i = rnd.choice(digits)
                buf[i:i + 1] = rnd.choice([b"1e300", b".nan", b"-.inf", b"1e-320", b"99999999999"])
    return bytes(buf)


# ------------------------------------------------------------------ YAML structures

_KEYS = [
    "scene", "units", "travel", "head", "obstacles", "start", "targets", "finish", "sequence",
    "x", "y", "id", "polygon", "circle", "rect", "center", "radius", "min", "max", "height",
    "after", "until", "at", "carry", "first", "last", "footprint", "margin", "ride_height",
    "Obstacles", "polygn", "", " id", "<<",
]


def _scalar(rnd: random.Random) -> Any:
    return rnd.choice([
        None, True, False, 0, -1, 1, 2**63, -(2**64), 10**400, 1.5, -0.0, 1e-320, 1e308,
        math.nan, math.inf, -math.inf, "", " ", "mm", "inch", "cm", "start", "finish", "none",
        "t1", "o1", "torch-80", "no-such-head", "shortest", "given", "1", "0x10", "\u202e",
        "a" * 300, "x\ny", "\x00",
    ])


def _value(rnd: random.Random, depth: int = 0) -> Any:
    roll = rnd.random()
    if depth > 3 or roll < 0.45:
        return _scalar(rnd)
    if roll < 0.7:
        return [_value(rnd, depth + 1) for _ in range(rnd.randint(0, 4))]
    if roll < 0.8:  # vertex-list shapes with wrong contents
        return [[_scalar(rnd), _scalar(rnd)] for _ in range(rnd.randint(0, 5))]
    return {rnd.choice(_KEYS): _value(rnd, depth + 1) for _ in range(rnd.randint(0, 4))}


def _nodes(tree: Any, path: tuple = ()) -> list[tuple]:
    out = [path]
    if isinstance(tree, dict):
        for k, v in tree.items():
            out += _nodes(v, (*path, k))
    elif isinstance(tree, list):
        for i, v in enumerate(tree):
            out += _nodes(v, (*path, i))
    return out


def _parent(tree: Any, path: tuple) -> Any:
    for step in path[:-1]:
        tree = tree[step]
    return tree


def mutate_structure(rnd: random.Random, tree: dict) -> dict:
    """A valid scene with a few nodes replaced, deleted, wrapped or given unknown siblings."""
    tree = copy.deepcopy(tree)
    for _ in range(rnd.randint(1, 4)):
        paths = [p for p in _nodes(tree) if p]
        if not paths:
            break
        path = rnd.choice(paths)
        parent = _parent(tree, path)
        key = path[-1]
        op = rnd.randrange(5)
        if op == 0:
            parent[key] = _value(rnd)
        elif op == 1:
            del parent[key]
        elif op == 2:
            parent[key] = [parent[key]]
        elif op == 3 and isinstance(parent, dict):
            parent[rnd.choice(_KEYS)] = _value(rnd)
        elif op == 4 and isinstance(parent, list):
            parent.extend(copy.deepcopy(parent[: rnd.randint(0, 3)]))
    return tree


def _plain(tree: Any) -> Any:
    """The tree with numpy numbers as Python ones (the YAML writer knows only those)."""
    if isinstance(tree, dict):
        return {k: _plain(v) for k, v in tree.items()}
    if isinstance(tree, list | tuple):
        return [_plain(v) for v in tree]
    if isinstance(tree, np.floating | np.integer):
        return tree.item()
    return tree


def _dump(rnd: random.Random, tree: Any) -> tuple[str, bytes]:
    tree = _plain(tree)
    if rnd.random() < 0.3:
        return "fuzz.json", json.dumps(tree, allow_nan=True).encode("utf-8", "surrogatepass")
    text = yaml.safe_dump(tree, sort_keys=False, allow_unicode=True,
                          default_flow_style=rnd.choice([None, False, True]))
    return "fuzz.yaml", text.encode("utf-8", "surrogatepass")


# ----------------------------------------------------------------- geometric scenes

_FOOTPRINTS = {
    "square": [[-1, -1], [1, -1], [1, 1], [-1, 1]],
    "slim": [[-0.5, -1.8], [0.5, -1.8], [0.5, 1.8], [-0.5, 1.8]],
    "triangle": [[-1, -1], [1.2, -0.8], [0, 1.1]],
    "u-shape": [[-1.4, -1], [1.4, -1], [1.4, 1], [0.8, 1], [0.8, -0.4], [-0.8, -0.4],
                [-0.8, 1], [-1.4, 1]],
    "sliver": [[-1, -0.001], [1, -0.001], [1, 0.001], [-1, 0.001]],
    "collinear": [[-1, -1], [0, -1], [1, -1], [1, 0], [1, 1], [0, 1], [-1, 1], [-1, 0]],
    "off-centre": [[2, 2], [3, 2], [3, 3], [2, 3]],
}


def _pt(p) -> list[float]:
    return [float(p[0]), float(p[1])]


def geometric_scene(rnd: random.Random) -> dict:
    """A scene dict with degenerate geometry: touching, overlapping and near-touching obstacles,
    passages exactly as wide as the head, points on grown boundaries, tiny and huge numbers."""
    s = rnd.choice([1.0, 1.0, 1.0, 10.0, 100.0, 1e-3, 1e-6, 1e-9, 1e3, 1e4])  # feature size
    name = rnd.choice(sorted(_FOOTPRINTS))
    foot = np.array(_FOOTPRINTS[name], dtype=float) * s * rnd.choice([1.0, 5.0, 20.0])
    fx0, fy0 = foot.min(axis=0)
    fx1, fy1 = foot.max(axis=0)
    margin = rnd.choice([0.0, 1e-9 * s, 0.1 * s, 1.0 * s, 3.0 * s, 1e-3])
    width, depth = s * rnd.uniform(40, 300), s * rnd.uniform(40, 300)
    # mostly where tables are; now and then near or past what the loader accepts (1e9, and
    # less where the output resolution would not be exact: 7e7 mm at 0.001 mm)
    units = rnd.choice(["mm", "mm", "inch"])
    far = rnd.random() < 0.15
    top = (1e9 if far else 6.9e7 / (25.4 if units == "inch" else 1.0)) - max(width, depth)
    ox = rnd.choice([0.0, 0.0, 0.0, -width / 2, 1e5, 1e6, top, -top - width])
    oy = rnd.choice([0.0, 0.0, ox, 1e4, -top])
    oy = min(max(oy, -top - depth), top)

    def point() -> list[float]:
        return [ox + rnd.uniform(0, width), oy + rnd.uniform(0, depth)]

    pass_w = (fx1 - fx0) + 2 * margin  # a passage exactly as wide as the grown head
    obstacles: list[dict] = []
    rects: list[tuple[float, float, float, float]] = []
    for _ in range(rnd.randint(0, 7)):
        kind = rnd.randrange(11)
        x0, y0 = point()
        w, h = s * rnd.uniform(1, 40), s * rnd.uniform(1, 40)
        if kind in (1, 2, 3) and rects:
            px0, py0, px1, py1 = rnd.choice(rects)
            gap = {1: 0.0, 2: -w / 3, 3: rnd.choice([pass_w, pass_w * (1 + 1e-12), pass_w - 1e-9,
                                                     1e-9 * s, 1e-3, 2 * margin])}[kind]
            x0, y0 = px1 + gap, py0 + rnd.choice([0.0, (py1 - py0) / 2, -h / 2])
        if kind in (0, 1, 2, 3):
            rects.append((x0, y0, x0 + w, y0 + h))
            obstacles.append({"rect": {"min": [x0, y0], "max": [x0 + w, y0 + h]}})
        elif kind == 4:  # the whole table and more
            obstacles.append({"rect": {"min": [ox - s, oy - s],
                                       "max": [ox + width + s, oy + depth + s]}})
        elif kind == 5:  # a circle, tiny to huge
            r = s * rnd.choice([1e-9, 0.01, 1.0, 10.0, 500.0])
            obstacles.append({"circle": {"center": [x0, y0], "radius": r}})
        elif kind == 6:  # polygon with collinear and near-collinear vertices
            ring = [[x0, y0], [x0 + w / 2, y0], [x0 + w, y0], [x0 + w, y0 + h / 2],
                    [x0 + w, y0 + h], [x0 + w / 2, y0 + h * (1 + 1e-12)], [x0, y0 + h]]
            obstacles.append({"polygon": ring})
        elif kind == 7:  # comb: a non-convex polygon with teeth a head just fits between
            teeth = rnd.randint(2, 6)
            tw = pass_w * rnd.choice([1.0, 0.5, 2.0])
            ring = [[x0, y0]]
            for t in range(teeth):
                bx = x0 + 2 * t * tw
                ring += [[bx + tw, y0], [bx + tw, y0 + h], [bx + 2 * tw, y0 + h]]
            ring += [[x0 + 2 * teeth * tw, y0 - h], [x0, y0 - h]]
            obstacles.append({"polygon": ring})
        elif kind == 8:  # sliver triangle
            obstacles.append({"polygon": [[x0, y0], [x0 + w, y0 + h], [x0 + w, y0 + h + 1e-7 * s]]})
        elif kind == 9:  # duplicate vertex, or a spike (the loader must refuse)
            ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0], [x0, y0 + h]]
            if rnd.random() < 0.5:
                ring = [[x0, y0], [x0 + w, y0], [x0 + 2 * w, y0], [x0 + w, y0], [x0, y0 + h]]
            obstacles.append({"polygon": ring})
        else:  # an exact duplicate of an earlier obstacle, or one low enough to pass over
            if obstacles:
                obstacles.append(copy.deepcopy(rnd.choice(obstacles)))
            else:
                obstacles.append({"rect": {"min": [x0, y0], "max": [x0 + w, y0 + h]},
                                  "height": 1e-9})
    if rnd.random() < 0.3 and obstacles:
        for ob in obstacles:
            ob["height"] = rnd.choice([0.0, 5.0 * s, 50.0 * s])

    def on_grown_boundary() -> list[float]:
        if not rects:
            return point()
        x0, y0, x1, y1 = rnd.choice(rects)
        side = rnd.randrange(4)
        ym, xm = (y0 + y1) / 2, (x0 + x1) / 2
        return [[x1 - fx0 + margin, ym], [x0 - fx1 - margin, ym], [xm, y1 - fy0 + margin],
                [xm, y0 - fy1 - margin]][side]

    def inside(p: list[float]) -> list[float]:
        return [min(max(p[0], ox), ox + width), min(max(p[1], oy), oy + depth)]

    start = inside(rnd.choice([point, on_grown_boundary, lambda: [ox, oy]])())
    targets: list = []
    for _ in range(rnd.randint(1, 5)):
        pick = rnd.randrange(6)
        if pick == 0:
            targets.append(inside(on_grown_boundary()))
        elif pick == 1:
            targets.append(list(start))
        elif pick == 2 and targets:
            targets.append(copy.deepcopy(targets[-1]))
        elif pick == 3:
            targets.append([ox + width, oy + depth])
        else:
            targets.append(point())
    scene: dict = {
        "scene": 1, "units": units,
        "travel": {"x": [ox, ox + width], "y": [oy, oy + depth]},
        "head": {"footprint": foot.tolist(), "margin": margin},
        "obstacles": obstacles, "start": start, "targets": targets,
    }
    if rnd.random() < 0.5:
        scene["finish"] = list(start) if rnd.random() < 0.5 else point()
    if rnd.random() < 0.3:  # a scene that changes as the job runs (after, until, carry)
        names = ["start"] + [f"t{k + 1}" for k in range(len(targets))]
        for ob in obstacles:
            if rnd.random() < 0.4:
                ob[rnd.choice(["after", "until"])] = rnd.choice(names)
        for k, at in enumerate(targets):
            if rnd.random() < 0.4:
                w, h = (fx1 - fx0) * rnd.uniform(0.5, 3), (fy1 - fy0) * rnd.uniform(0.5, 3)
                carry = [[fx0, fy0], [fx0 + w, fy0], [fx0 + w, fy0 + h], [fx0, fy0 + h]]
                targets[k] = {"at": at, "carry": rnd.choice([carry, "none"])}
    if obstacles and rnd.random() < 0.2:
        scene["head"]["ride_height"] = 10.0 * s
    return scene


# ------------------------------------------------------------------------- cases

KINDS = ("bytes", "structure", "geometry", "limits")


@dataclass(frozen=True)
class Case:
    kind: str
    seed: int
    name: str
    data: bytes
    limits: Limits | None = None  # tighter limits for the `limits` kind


def _limit_case(rnd: random.Random) -> Case:
    """A scene that breaks one configured limit (small limits keep the files small)."""
    base = Limits(max_file_bytes=20_000, max_vertices=60, max_obstacles=8, max_targets=6,
                  max_depth=10, max_aliases=0, max_abs_coordinate=1e6, time_budget_s=20.0)
    which = rnd.choice(["bytes", "vertices", "obstacles", "targets", "depth", "alias", "number"])
    scene = geometric_scene(random.Random(rnd.random()))
    scene["travel"] = {"x": [0, 1000], "y": [0, 1000]}
    scene["start"] = [1, 1]
    scene["targets"] = [[2, 2]]
    scene.pop("finish", None)
    scene["head"] = {"footprint": [[-1, -1], [1, -1], [1, 1], [-1, 1]], "margin": 0.5}
    scene["obstacles"] = []
    scene["units"] = "mm"
    text: str | None = None
    if which == "bytes":
        scene["obstacles"] = [{"rect": {"min": [10, 10], "max": [20, 20]}}] * 2
        text = yaml.safe_dump(scene) + "#" * (base.max_file_bytes + rnd.randint(0, 5000))
    elif which == "vertices":
        n = base.max_vertices + rnd.randint(1, 40)
        t = np.linspace(0, 2 * np.pi, n, endpoint=False)
        scene["obstacles"] = [{"polygon": np.c_[500 + 100 * np.cos(t),
                                                500 + 100 * np.sin(t)].tolist()}]
    elif which == "obstacles":
        scene["obstacles"] = [{"circle": {"center": [100 + 50 * i, 500], "radius": 5}}
                              for i in range(base.max_obstacles + rnd.randint(1, 5))]
    elif which == "targets":
        scene["targets"] = [[10 + i, 10] for i in range(base.max_targets + rnd.randint(1, 5))]
    elif which == "depth":
        deep: Any = 1
        for _ in range(base.max_depth + rnd.randint(1, 30)):
            deep = [deep] if rnd.random() < 0.5 else {"x": deep}
        scene["obstacles"] = [{"id": "deep", "rect": {"min": deep, "max": [1, 1]}}]
    elif which == "alias":  # the classic "billion laughs": nine levels of ten aliases each
        lines = ["a0: &a0 [lol, lol, lol, lol, lol, lol, lol, lol, lol, lol]"]
        for i in range(1, rnd.randint(3, 9)):
            lines.append(f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]")
        text = yaml.safe_dump(scene) + "\n".join(lines) + "\n"
    else:
        scene["targets"] = [[rnd.choice([math.nan, math.inf, -math.inf, 1e7, -1e300]), 2]]
    if text is None:
        name, data = _dump(rnd, scene)
    else:
        name, data = "limit.yaml", text.encode()
    return Case("limits", 0, name, data, base)


def case(kind: str, seed: int) -> Case:
    """The hostile input of `kind` number `seed` (the same bytes on every machine)."""
    rnd = random.Random(f"{kind}:{seed}")
    if kind == "bytes":
        name, data = rnd.choice(_seeds())
        return Case(kind, seed, name, mutate_bytes(rnd, data))
    if kind == "structure":
        name, data = rnd.choice(_seeds())
        tree = yaml.safe_load(data)
        name, data = _dump(rnd, mutate_structure(rnd, tree))
        return Case(kind, seed, name, data)
    if kind == "geometry":
        name, data = _dump(rnd, geometric_scene(rnd))
        return Case(kind, seed, name, data)
    if kind == "limits":
        return replace(_limit_case(rnd), seed=seed)
    raise ValueError(f"unknown kind {kind!r}")


# -------------------------------------------------------------- outside safety check


def _leg_worlds(route: Route, scene: Scene) -> list[tuple[shapely.Geometry, list]]:
    """Per leg: the footprint it moves with and the obstacles present, read from the contract
    (docs/scene-format.md, "Scenes that change"): the state after the leg's first point."""
    ride = scene.head.ride_height
    base = shapely.Polygon(scene.head.footprint)
    carry_of = {t.id: t.carry for t in scene.targets}
    first_leaving: dict[str, int] = {}
    first_arriving: dict[str, int] = {}
    for i, leg in enumerate(route.legs):
        first_leaving.setdefault(leg.from_id, i)
        first_arriving.setdefault(leg.to_id, i)
    never = len(route.legs) + 1
    worlds = []
    carried = None
    for i, leg in enumerate(route.legs):
        carry = carry_of.get(leg.from_id)
        if carry == "none":
            carried = None
        elif carry is not None:
            carried = shapely.Polygon(carry)
        foot = base if carried is None else shapely.union(base, carried)
        present = []
        for o in scene.obstacles:
            if not (o.height is None or ride is None or o.height >= ride):
                continue  # passed over
            since = 0 if o.after in (None, "start") else first_leaving.get(o.after, never)
            upto = never if o.until is None else -1 if o.until == "start" else \
                first_arriving.get(o.until, never)
            if since <= i <= upto:
                present.append(o)
        worlds.append((foot, present))
    return worlds


def outside_violations(route: Route, scene: Scene, tol: float) -> list[str]:
    """Why `route` is unsafe for `scene`, checked with shapely/GEOS alone (no planner code):
    an empty list means safe. Obstacles that come and go and carried outlines are taken leg by
    leg as the contract says.

    The area a translated convex set sweeps along a segment is the convex hull of its two end
    placements (Minkowski sum of convex sets is convex: de Berg et al., Computational Geometry,
    3rd ed., ch. 13); the footprint is cut into triangles by GEOS's constrained Delaunay
    triangulation, so each piece is convex. Circles are measured as true circles.
    """
    problems: list[str] = []
    t = scene.travel
    margin = scene.head.margin
    pieces: dict[bytes, list[np.ndarray]] = {}
    for i, (leg, (foot, obstacles)) in enumerate(zip(route.legs, _leg_worlds(route, scene),
                                                     strict=True)):
        key = shapely.to_wkb(foot)
        if key not in pieces:
            tris = shapely.get_parts(shapely.constrained_delaunay_triangles(foot))
            pieces[key] = [np.asarray(tr.exterior.coords)[:3] for tr in tris]
        tri_xy = pieces[key]
        pts = np.asarray(leg.points, dtype=float)
        if not np.isfinite(pts).all():
            problems.append(f"leg {i}: non-finite point")
            continue
        out = ((pts[:, 0] < t.xmin - tol) | (pts[:, 0] > t.xmax + tol)
               | (pts[:, 1] < t.ymin - tol) | (pts[:, 1] > t.ymax + tol))
        if out.any():
            problems.append(f"leg {i}: point {pts[np.argmax(out)].tolist()} outside travel")
        if len(pts) == 1:
            pts = np.vstack([pts, pts])
        hulls = []
        for p, q in zip(pts[:-1], pts[1:], strict=True):
            for tri in tri_xy:
                hulls.append(shapely.MultiPoint(np.vstack([tri + p, tri + q])).convex_hull)
        hulls_arr = np.asarray(hulls, dtype=object)
        for o in obstacles:
            if o.circle is not None:
                c = shapely.Point(o.circle.center)
                d = shapely.distance(hulls_arr, c) - o.circle.radius
                bad = d < margin - tol
                if margin <= tol:  # touching is allowed; inside is not (d is 0 inside too)
                    bad = d < -tol
                    bad |= shapely.dwithin(hulls_arr, c, max(o.circle.radius - tol, 0))
            else:
                geom = shapely.Polygon(o.polygon)
                if margin > tol:
                    bad = shapely.distance(hulls_arr, geom) < margin - tol
                else:
                    inner = geom.buffer(-tol, join_style="mitre")
                    bad = shapely.intersects(hulls_arr, inner) & ~inner.is_empty
            if np.any(bad):
                problems.append(f"leg {i} ({leg.from_id} -> {leg.to_id}): footprint too close "
                                f"to obstacle {o.id}")
    return problems


def check_tolerance(scene: Scene, settings: Settings) -> float:
    """Slack of the outside check: the planner's floating-point slack (a thousandth of the
    output resolution) plus a few rounding errors of the largest coordinate (common practice,
    no source)."""
    res = settings.in_units(scene.units).resolution
    t = scene.travel
    big = max(abs(t.xmin), abs(t.xmax), abs(t.ymin), abs(t.ymax), 1.0)
    return res * 1e-3 + 16 * np.finfo(float).eps * big


# ------------------------------------------------------------------------- running


@dataclass
class Outcome:
    case: Case
    verdict: str  # planned | incomplete | refused | unsafe | crash | unclear | hang
    message: str
    seconds: float
    error: str = ""  # exception type (refused, crash) or the first violation (unsafe)


class _Hang(BaseException):
    pass


def _alarm(signum, frame):  # noqa: ARG001 - signal handler signature
    raise _Hang


def clear_message(text: str, file: str) -> bool:
    """One line, names the file, no traceback (the contract's 'one clear message')."""
    return bool(text) and "\n" not in text.strip() and "Traceback" not in text and file in text


def run_case(c: Case, settings: Settings, hang_s: float = 60.0) -> Outcome:
    """Load and plan one case in this process; classify what happened.

    `hang_s` is a wall-clock limit enforced with SIGALRM (main thread only; 0 disables it):
    past it the case is a hang even if the planner's own budget never fired.
    """
    if c.limits is not None:
        settings = replace(settings, limits=c.limits)
    use_alarm = hang_s > 0 and hasattr(signal, "SIGALRM")
    old = signal.signal(signal.SIGALRM, _alarm) if use_alarm else None
    if use_alarm:
        signal.setitimer(signal.ITIMER_REAL, hang_s)
    started = time.perf_counter()
    try:
        try:
            scene = load_scene_bytes(c.data, c.name, settings)
            result = plan_scene(scene, settings)
        except _Hang:
            return Outcome(c, "hang", f"ran past {hang_s} s", time.perf_counter() - started)
        except UnsafeRouteError as exc:
            return Outcome(c, "unsafe", format_error(exc), time.perf_counter() - started,
                           exc.violations[0].message if exc.violations else "")
        except (SceneError, ConfigError, PlanningError) as exc:
            text = format_error(exc)
            if isinstance(exc, PlanningError) and c.name not in text:
                text = f"{c.name}: {text}"  # run_job puts the file name in front of these
            verdict = "refused" if clear_message(text, c.name) else "unclear"
            return Outcome(c, verdict, text, time.perf_counter() - started, type(exc).__name__)
        except Exception as exc:  # anything else is a crash
            return Outcome(c, "crash", "".join(traceback.format_exception(exc)),
                           time.perf_counter() - started, type(exc).__name__)
        try:
            # the route as a machine-side script reads it back from the file
            written = load_route(dump_route(result.route, result.settings.resolution))
            problems = outside_violations(written, scene, check_tolerance(scene, settings))
            for adapter in enabled_adapters(settings.adapters,
                                            adapter_settings=settings.adapter_settings):
                own = settings.adapter_settings.get(adapter.name, {})
                adapter.write(result.route, own, result)  # every file beside the route too
        except _Hang:
            return Outcome(c, "hang", f"checking or writing ran past {hang_s} s",
                           time.perf_counter() - started)
        except Exception as exc:
            return Outcome(c, "crash", "".join(traceback.format_exception(exc)),
                           time.perf_counter() - started, type(exc).__name__)
        elapsed = time.perf_counter() - started
        if problems:
            return Outcome(c, "unsafe", "; ".join(problems[:3]), elapsed, problems[0])
        return Outcome(c, "planned" if written.status == "complete" else "incomplete",
                       "", elapsed)
    finally:
        if use_alarm:
            signal.setitimer(signal.ITIMER_REAL, 0)
            signal.signal(signal.SIGALRM, old)


GOOD_VERDICTS = ("planned", "incomplete", "refused")
