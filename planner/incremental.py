"""Configuration spaces that follow a job's states: one per footprint, updated as obstacles change.

States of a job differ by a few obstacles (a part that was just cut, a tray that was emptied)
or by the carried outline. For each distinct footprint this keeps every obstacle's grown pieces
(computed once) and, per state, redoes only what a change can touch:

- clusters: the present obstacles grouped by grown shapes that meet; each cluster keeps its
  union, that union shrunk by eps (the road map's visibility test) and the free space's reflex
  corners along it. A state's union is its clusters side by side (they are disjoint).
- the road map: edges between corners a change does not concern are kept, less those that now
  cross an added obstacle; the corners on a changed obstacle find their edges again by a tangent
  test against every corner, an occlusion filter and the exact visibility test; where an
  obstacle went, the other corners walk a triangulation of the free space (kept in tiles, see
  tiles.py) only in the directions that point at the place it left.
- queries first try a kept state with fewer obstacles: its shortest path is a lower bound, and
  the answer here when it stays clear of everything added since (no state update needed).

The first state of a footprint is built whole by build_roadmap; later ones are derived from the
kept state that differs least. Every step is exact (no approximation beyond the static
planner's), so a derived state has the same free space and the same shortest path lengths as one
built from scratch; tests compare the two. Cluster unions are formed from the member obstacles'
pieces, so a state's geometry does not depend on the path by which it was reached.
"""

from __future__ import annotations

import time
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import shapely
from scipy.sparse import csr_matrix

from ._visibility import Triangulation, node_windows, point_windows, triangulate, walk
from .budget import check_time
from .config import Settings
from .cspace import (
    EPS_PER_RESOLUTION,
    FreeSpace,
    build_free_space,
    c_obstacle_pieces,
    checked_union,
    free_space_key,
    obstacle_digest,
)
from .model import Obstacle, Ring, Scene
from .roadmap import (
    Roadmap,
    assemble_roadmap,
    build_roadmap,
    reflex_corners,
    segments_occluded,
)
from .states import State, footprint_of, present_obstacles
from .tiles import TileGrid, TileMesh, TileMismatch, assemble, tile_mesh, vertex_ids

__all__ = ["LegSpace", "StateSpaces", "FootprintSpace", "StateSpace"]

# Region vertices per triangulation tile: small tiles make an update cheap, large ones keep the
# walks short (fewer cut lines to cross). Common practice, no source: measured on the benchmark
# scenes (benchmarks/states_bench.py), where a few hundred per tile did best.
_VERTICES_PER_TILE = 400
_MAX_TILES_PER_AXIS = 64
_MAX_DISKS = 1024  # occlusion disks per road map, the largest (a filter only)
_PAIR_CHUNK = 64  # source corners tested together against every corner (array sizes only)
_UNION_BLOCK = 16  # obstacles per block of a cluster's union (blocks are cached)
# A derived state that changes more than this share of the obstacles is built whole instead.
_REBUILD_SHARE = 0.5


def _cross(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]


def _unit(v: np.ndarray) -> np.ndarray:
    n = np.hypot(v[..., 0], v[..., 1])
    return v / np.where(n > 0, n, 1.0)[..., None]


@dataclass(frozen=True)
class LegSpace:
    """What one leg is planned in: its state, the free space, the road map, and what they were
    built from (the obstacles present and the footprint), for explanations."""

    state: State
    free: FreeSpace
    roadmap: Roadmap
    obstacles: tuple[Obstacle, ...]
    footprint: Ring | shapely.Geometry


@dataclass(frozen=True, eq=False)
class _Cluster:
    """Present obstacles whose grown shapes meet: their union, shrunk union and free corners."""

    key: frozenset[int]  # member indices into FootprintSpace.obstacles
    geom: shapely.Geometry
    bounds: tuple[float, float, float, float]
    shrunk: shapely.Geometry
    corners_xy: np.ndarray
    corners_prev: np.ndarray
    corners_next: np.ndarray
    pinch: np.ndarray


class _UnionFind:
    def __init__(self, n: int) -> None:
        self.parent = list(range(n))

    def find(self, i: int) -> int:
        while self.parent[i] != i:
            self.parent[i] = self.parent[self.parent[i]]
            i = self.parent[i]
        return i

    def join(self, a: int, b: int) -> None:
        ra, rb = self.find(a), self.find(b)
        if ra != rb:
            self.parent[max(ra, rb)] = min(ra, rb)


@dataclass(eq=False)
class StateSpace:
    """One state of one footprint: its clusters, free space, road map and edge list."""

    present: frozenset[int]
    clusters: tuple[_Cluster, ...]
    free: FreeSpace
    roadmap: Roadmap
    edges: np.ndarray  # (E, 2) node index pairs, u < v
    tiles: tuple  # per tile, the key its triangles were cached under
    stats: dict = field(default_factory=dict)


def _expand(bounds: np.ndarray, pad: float) -> np.ndarray:
    b = np.asarray(bounds, dtype=float).reshape(-1, 4).copy()
    b[:, :2] -= pad
    b[:, 2:] += pad
    return b


def _in_boxes(xy: np.ndarray, boxes: np.ndarray) -> np.ndarray:
    """Points inside (or on) any of the boxes (k, 4)."""
    out = np.zeros(len(xy), dtype=bool)
    for x0, y0, x1, y1 in boxes:
        out |= (xy[:, 0] >= x0) & (xy[:, 0] <= x1) & (xy[:, 1] >= y0) & (xy[:, 1] <= y1)
    return out


def _segments_near(p: np.ndarray, q: np.ndarray, boxes: np.ndarray) -> np.ndarray:
    """Segments p-q whose bounding box meets any of the boxes (a superset of those that meet
    a box: the exact test decides)."""
    lo, hi = np.minimum(p, q), np.maximum(p, q)
    out = np.zeros(len(p), dtype=bool)
    for x0, y0, x1, y1 in boxes:
        out |= (lo[:, 0] <= x1) & (hi[:, 0] >= x0) & (lo[:, 1] <= y1) & (hi[:, 1] >= y0)
    return out


def _match(old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """For each row of `old`, the index of the equal row of `new` (-1 if none)."""
    if len(old) == 0 or len(new) == 0:
        return np.full(len(old), -1, dtype=np.int64)
    ko = old[:, 0] + 1j * old[:, 1]
    kn = new[:, 0] + 1j * new[:, 1]
    order = np.argsort(kn, kind="stable")  # complex numbers sort by (real, imag)
    sk = kn[order]
    pos = np.minimum(np.searchsorted(sk, ko), len(sk) - 1)
    return np.where(sk[pos] == ko, order[pos], -1).astype(np.int64)


def _sectors(xy: np.ndarray, boxes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Directions from each point to each box (outside it): the arc from `lo` counter-clockwise
    to `hi` that holds the whole box, as unit vectors of shape (P, B, 2)."""
    corners = np.stack([boxes[:, [0, 1]], boxes[:, [2, 1]], boxes[:, [2, 3]], boxes[:, [0, 3]]],
                       axis=1)  # (B, 4, 2)
    d = corners[None, :, :, :] - xy[:, None, None, :]  # (P, B, 4, 2)
    c = _cross(d[:, :, :, None, :], d[:, :, None, :, :])  # (P, B, 4, 4): cross(d_i, d_j)
    first = np.all(c >= 0, axis=3)  # every other corner counter-clockwise of i
    last = np.all(c <= 0, axis=3)
    i_lo = np.argmax(first, axis=2)
    i_hi = np.argmax(last, axis=2)
    lo = np.take_along_axis(d, i_lo[..., None, None], axis=2)[:, :, 0]
    hi = np.take_along_axis(d, i_hi[..., None, None], axis=2)[:, :, 0]
    return _unit(lo), _unit(hi)


def _in_arc(x: np.ndarray, lo: np.ndarray, hi: np.ndarray, tol: float) -> np.ndarray:
    return (_cross(lo, x) >= -tol) & (_cross(x, hi) >= -tol)


def _arc_and(a0, a1, b0, b1, tol: float):
    """Intersection of two counter-clockwise arcs narrower than pi: (lo, hi, non-empty)."""
    a0_in = _in_arc(a0, b0, b1, tol)
    b0_in = _in_arc(b0, a0, a1, tol)
    a1_in = _in_arc(a1, b0, b1, tol)
    lo = np.where(a0_in[..., None], a0, b0)
    hi = np.where(a1_in[..., None], a1, b1)
    return lo, hi, a0_in | b0_in


class FootprintSpace:
    """The configuration spaces of one footprint for any set of the scene's avoided obstacles.

    `state(present)` gives the StateSpace for a set of obstacle indices (into `obstacles`),
    derived from the nearest kept one. Keeps the `keep` most recently used states.
    """

    def __init__(self, scene: Scene, settings: Settings, footprint: Ring | shapely.Geometry,
                 obstacles: Sequence[Obstacle], *, keep: int = 3) -> None:
        self.scene = scene
        self.settings = settings
        self.footprint = footprint
        self.obstacles = tuple(obstacles)
        self._digests = [obstacle_digest(o) for o in self.obstacles]  # for each state's key
        self.keep = max(1, keep)
        self.clearance = scene.head.margin + settings.resolution
        self.eps = settings.resolution * EPS_PER_RESOLUTION
        t = scene.travel
        self.box = shapely.box(t.xmin, t.ymin, t.xmax, t.ymax)
        diameter = self.diameter = float(np.hypot(t.xmax - t.xmin, t.ymax - t.ymin)) or 1.0
        self.tol = max(self.eps / diameter, 1e-11)
        self.pad = 4.0 * self.eps + 4.0 * self.tol * diameter  # around a change: who may see it

        t0 = time.perf_counter()
        pieces, owner = c_obstacle_pieces(self.obstacles, footprint, self.clearance,
                                          settings.arc_tolerance)
        order = np.argsort(owner, kind="stable")
        self._pieces = pieces[order]
        self._ptr = np.zeros(len(self.obstacles) + 1, dtype=np.int64)
        np.cumsum(np.bincount(owner, minlength=len(self.obstacles)), out=self._ptr[1:])
        pb = shapely.bounds(self._pieces) if len(self._pieces) else np.zeros((0, 4))
        self._bounds = np.array([
            [pb[a:b, 0].min(), pb[a:b, 1].min(), pb[a:b, 2].max(), pb[a:b, 3].max()]
            if b > a else [np.inf, np.inf, -np.inf, -np.inf]
            for a, b in zip(self._ptr[:-1], self._ptr[1:], strict=True)
        ]).reshape(-1, 4)
        self._grown: dict[int, shapely.Geometry] = {}
        self._blocks: dict[tuple[int, ...], shapely.Geometry] = {}
        self._disk_xy: np.ndarray | None = None
        self._disk_r: np.ndarray | None = None
        self._clusters: dict[frozenset[int], _Cluster] = {}
        self._tile_cache: dict[tuple, TileMesh] = {}
        self._states: OrderedDict[frozenset[int], StateSpace] = OrderedDict()
        self._grid(int(shapely.get_num_coordinates(self._pieces).sum()) if len(pieces) else 0)
        self.stats: dict = {"pieces_s": time.perf_counter() - t0, "built": 0, "derived": 0,
                            "fallback_triangulations": 0, "updates_s": [], "build_s": [],
                            "lazy": 0}

    # -- pieces and clusters ----------------------------------------------------------------------

    def pieces_of(self, i: int) -> np.ndarray:
        return self._pieces[self._ptr[i]:self._ptr[i + 1]]

    def grown(self, i: int) -> shapely.Geometry:
        g = self._grown.get(i)
        if g is None:
            g = self._grown[i] = checked_union(self.pieces_of(i), self.eps)
        return g

    def _disks(self, members: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
        """Disks inside the members' pieces shrunk by eps, largest first (at most _MAX_DISKS)."""
        if self._disk_r is None:
            self._disk_xy, self._disk_r = _inscribed_disks(self._pieces, self.eps,
                                                           self.diameter)
        if not len(members):
            return np.empty((0, 2)), np.empty(0)
        idx = np.concatenate([np.arange(self._ptr[i], self._ptr[i + 1]) for i in members])
        idx = idx[self._disk_r[idx] > 0]
        idx = idx[np.argsort(-self._disk_r[idx], kind="stable")[:_MAX_DISKS]]
        return self._disk_xy[idx], self._disk_r[idx]

    def _block_union(self, members: tuple[int, ...]) -> shapely.Geometry:
        """The union of the pieces of some members of one block of obstacle indices (cached)."""
        g = self._blocks.get(members)
        if g is None:
            g = self._blocks[members] = checked_union(
                np.concatenate([self.pieces_of(i) for i in members]), self.eps)
        return g

    def _cluster(self, key: frozenset[int]) -> _Cluster:
        """The cluster of these members (cached): the union of its members' pieces, taken per
        fixed block of obstacle indices and then over the blocks, so that its geometry depends
        on the members only (never on the order they came in) and a new member costs the union
        of its block and of the blocks' unions."""
        cl = self._clusters.get(key)
        if cl is not None:
            return cl
        by_block: dict[int, list[int]] = {}
        for i in sorted(key):
            by_block.setdefault(i // _UNION_BLOCK, []).append(i)
        blocks = [self._block_union(tuple(m)) for m in by_block.values()]
        geom = blocks[0] if len(blocks) == 1 else checked_union(np.array(blocks, dtype=object),
                                                                self.eps)
        shapely.prepare(geom)
        shrunk = geom.buffer(-self.eps, join_style="mitre")
        corners = reflex_corners(shapely.difference(self.box, geom))
        cl = _Cluster(key, geom, tuple(map(float, geom.bounds)), shrunk, corners.xy,
                      corners.prev, corners.next, corners.pinch)
        self._clusters[key] = cl
        return cl

    def _clusters_for(self, present: frozenset[int], parent: StateSpace | None
                      ) -> tuple[_Cluster, ...]:
        """Group the present obstacles into clusters, reusing the parent's unchanged ones."""
        kept: list[_Cluster] = []
        loose: set[int] = set(present)
        if parent is not None:
            loose = set(present - parent.present)
            removed = parent.present - present
            for cl in parent.clusters:
                if cl.key & removed:
                    loose |= cl.key - removed
                else:
                    kept.append(cl)
        loose_list = sorted(loose)
        if not loose_list:
            return tuple(sorted(kept, key=lambda c: min(c.key)))
        geoms = np.array([c.geom for c in kept] + [self.grown(i) for i in loose_list],
                         dtype=object)
        k = len(kept)
        tree = shapely.STRtree(geoms)
        a, b = tree.query(geoms[k:], predicate="intersects")
        uf = _UnionFind(len(geoms))
        for i, j in zip(a + k, b, strict=True):
            uf.join(int(i), int(j))
        groups: dict[int, list[int]] = {}
        for i in range(len(geoms)):
            groups.setdefault(uf.find(i), []).append(i)
        out = []
        for items in groups.values():
            if len(items) == 1 and items[0] < k:
                out.append(kept[items[0]])
                continue
            key: set[int] = set()
            for i in items:
                key |= kept[i].key if i < k else {loose_list[i - k]}
            out.append(self._cluster(frozenset(key)))
        return tuple(sorted(out, key=lambda c: min(c.key)))

    # -- tiles ------------------------------------------------------------------------------------

    def _grid(self, vertices: int) -> None:
        self.grid = TileGrid.over(self.box.bounds, vertices // _VERTICES_PER_TILE,
                                  _MAX_TILES_PER_AXIS)
        self.tile_bounds = self.grid.bounds

    def _tile_keys(self, present: frozenset[int]) -> list[tuple]:
        """Per tile, what its part of the free space depends on: the present obstacles whose
        grown shapes reach into it."""
        tb = self.tile_bounds
        members = np.array(sorted(present), dtype=np.int64)
        if len(members) == 0:
            return [(t,) for t in range(len(tb))]
        ob = self._bounds[members]
        hit = ((ob[None, :, 0] <= tb[:, None, 2]) & (ob[None, :, 2] >= tb[:, None, 0])
               & (ob[None, :, 1] <= tb[:, None, 3]) & (ob[None, :, 3] >= tb[:, None, 1]))
        return [(t, frozenset(members[hit[t]].tolist())) for t in range(len(tb))]

    def _tile_mesh(self, key: tuple, region: shapely.Geometry) -> TileMesh:
        mesh = self._tile_cache.get(key)
        if mesh is None:
            mesh = self._tile_cache[key] = tile_mesh(region, self.tile_bounds[key[0]], self.grid)
        return mesh

    def _trim_tiles(self) -> None:
        """Forget tile triangulations no kept state uses (bounded memory)."""
        used = {k for s in self._states.values() for k in s.tiles}
        if len(self._tile_cache) > 2 * len(used) + len(self.tile_bounds):
            self._tile_cache = {k: v for k, v in self._tile_cache.items() if k in used}
        live = {c.key for s in self._states.values() for c in s.clusters}
        if len(self._clusters) > 4 * len(live) + 64:
            self._clusters = {k: v for k, v in self._clusters.items() if k in live}
        if len(self._blocks) > 4 * len(live) + 256:
            keep = {tuple(sorted(i for i in k if i // _UNION_BLOCK == b))
                    for k in live for b in {i // _UNION_BLOCK for i in k}}
            self._blocks = {k: v for k, v in self._blocks.items() if k in keep}

    # -- states -----------------------------------------------------------------------------------

    def state(self, present: frozenset[int]) -> StateSpace:
        """The state with exactly these obstacles present (indices into `obstacles`)."""
        present = frozenset(present)
        st = self._states.get(present)
        if st is not None:
            self._states.move_to_end(present)
            return st
        parent = None
        if self._states:
            parent = min(reversed(self._states.values()),
                         key=lambda s: len(s.present ^ present))
            if len(parent.present ^ present) > _REBUILD_SHARE * max(len(present), 1) + 2:
                parent = None
        t0 = time.perf_counter()
        st = self._build(present, parent)
        kind = "derived" if parent is not None else "built"
        self.stats[kind] += 1
        self.stats["updates_s" if parent is not None else "build_s"].append(
            time.perf_counter() - t0)
        self._states[present] = st
        while len(self._states) > self.keep:
            self._states.popitem(last=False)
        self._trim_tiles()
        return st

    # -- queries that may not need the state's own road map ---------------------------------------
    #
    # A kept state whose obstacles are a subset of the wanted ones has a larger free space, so
    # its cheapest path is a lower bound; when that path (and its two ends) stays clear of every
    # added obstacle's grown shape by more than the visibility tolerance, it is feasible here
    # too, hence the cheapest here. Only a path that comes near an added obstacle needs the
    # state itself (derived then, with every change since the subset state at once).

    def _subset_base(self, present: frozenset[int]) -> StateSpace | None:
        best = None
        for st in self._states.values():
            if st.present <= present and (best is None or len(st.present) > len(best.present)):
                best = st
        return best

    def _clear_of(self, added: Sequence[int], geoms: np.ndarray) -> bool:
        """Every geometry farther than the pad from every added obstacle's grown shape."""
        if not len(added):
            return True
        b = _expand(self._bounds[list(added)], self.pad)
        lo, hi = shapely.bounds(geoms)[:, :2], shapely.bounds(geoms)[:, 2:]
        near_a, near_g = np.nonzero((lo[:, None, 0] <= b[None, :, 2])
                                    & (hi[:, None, 0] >= b[None, :, 0])
                                    & (lo[:, None, 1] <= b[None, :, 3])
                                    & (hi[:, None, 1] >= b[None, :, 1]))
        if not len(near_a):
            return True
        grown = np.array([self.grown(added[j]) for j in near_g], dtype=object)
        return not np.any(shapely.dwithin(geoms[near_a], grown, self.pad))

    def path(self, present: frozenset[int], a, b, cost=None) -> tuple[np.ndarray, float]:
        """Roadmap.path in the state with these obstacles present (NoPath as it would raise)."""
        present = frozenset(present)
        st = self._states.get(present)
        if st is None:
            base = self._subset_base(present)
            if base is not None:
                added = sorted(present - base.present)
                if self._clear_of(added, shapely.points([a, b])):
                    pts, length = base.roadmap.path(a, b, cost)  # NoPath holds here too
                    if self._clear_of(added, np.array([shapely.linestrings(pts)])):
                        self.stats["lazy"] += 1
                        return pts, length
            st = self.state(present)
        else:
            self._states.move_to_end(present)
        return st.roadmap.path(a, b, cost)

    def distances(self, present: frozenset[int], a, targets: np.ndarray, cost=None
                  ) -> np.ndarray:
        """Roadmap.distances_from in the state with these obstacles present."""
        present = frozenset(present)
        targets = np.asarray(targets, dtype=float).reshape(-1, 2)
        st = self._states.get(present)
        if st is None:
            # (with a cost other than length a polyline's cost need not be its moves' sum as the
            # search counts them, so only length takes the shortcut)
            base = self._subset_base(present) if cost is None else None
            if base is not None:
                added = sorted(present - base.present)
                if self._clear_of(added, shapely.points(np.vstack([a, targets]))):
                    paths = base.roadmap.paths_from(a, targets, cost)  # NoPath holds here too
                    found = [p for p in paths if p is not None]
                    lines = np.array([shapely.linestrings(p[0]) for p in found], dtype=object)
                    if self._clear_of(added, lines):
                        self.stats["lazy"] += 1
                        return np.array([np.inf if p is None else p[1] for p in paths])
            st = self.state(present)
        else:
            self._states.move_to_end(present)
        return st.roadmap.distances_from(a, targets, cost)

    def bound_distances(self, present: frozenset[int], a, targets: np.ndarray, cost=None
                        ) -> np.ndarray:
        """Lower bounds on Roadmap.distances_from in the state with these obstacles present:
        from the largest kept state with a subset of them (exact when there is none)."""
        present = frozenset(present)
        base = self._states.get(present) or self._subset_base(present)
        if base is None:
            return self.state(present).roadmap.distances_from(a, targets, cost)
        return base.roadmap.distances_from(a, targets, cost)

    def _free_space(self, present: frozenset[int], clusters: Sequence[_Cluster]) -> FreeSpace:
        members = sorted(present)
        obstacles = [self.obstacles[i] for i in members]
        if members:
            pieces = np.concatenate([self.pieces_of(i) for i in members])
            owner = np.concatenate([np.full(self._ptr[i + 1] - self._ptr[i], j, dtype=np.int64)
                                    for j, i in enumerate(members)])
        else:
            pieces, owner = np.empty(0, dtype=object), np.zeros(0, dtype=np.int64)
        parts = [p for c in clusters for p in shapely.get_parts(c.geom)]
        if not parts:
            blocked = shapely.Polygon()
        elif len(parts) == 1:
            blocked = parts[0]
        else:
            blocked = shapely.multipolygons(parts)
        if not shapely.is_valid(blocked):
            blocked = checked_union(np.array([c.geom for c in clusters], dtype=object), self.eps)
        region = shapely.difference(self.box, blocked)
        if not shapely.is_valid(region):  # let the static builder repair it (or refuse)
            return build_free_space(self.scene, self.settings, obstacles=obstacles,
                                    footprint=self.footprint)
        t = self.scene.travel
        return FreeSpace(
            units=self.scene.units, travel=t, box=self.box, clearance=self.clearance,
            eps=self.eps, blocked=blocked, region=region,
            obstacle_ids=tuple(o.id for o in obstacles), pieces=pieces, piece_owner=owner,
            key=free_space_key(self.scene, self.settings, obstacles=obstacles,
                               footprint=self.footprint,
                               digests=[self._digests[i] for i in members]),
        )

    def _build(self, present: frozenset[int], parent: StateSpace | None) -> StateSpace:
        check_time("updating the configuration space for the next state")
        timing: dict[str, float] = {}
        t0 = time.perf_counter()
        clusters = self._clusters_for(present, parent)
        free = self._free_space(present, clusters)
        timing["clusters"] = time.perf_counter() - t0
        if parent is None:  # nothing to derive from: the static builder's walk over it all
            return self._whole(present, clusters, free)
        added = sorted(present - parent.present)
        removed = sorted(parent.present - present)

        # corners: the clusters' own, side by side
        cxy = [c.corners_xy for c in clusters]
        c_xy_all = np.concatenate(cxy) if cxy else np.zeros((0, 2))
        c_prev_all = np.concatenate([c.corners_prev for c in clusters]) if cxy else np.zeros(
            (0, 2))
        c_next_all = np.concatenate([c.corners_next for c in clusters]) if cxy else np.zeros(
            (0, 2))
        pinch_all = np.concatenate([c.pinch for c in clusters]) if cxy else np.zeros((0, 2))
        points = np.concatenate([c_xy_all, pinch_all])

        # a triangulation only where obstacles went (the walks towards their places need one);
        # after additions the corners alone are the vertices
        t1 = time.perf_counter()
        keys: list[tuple] = []
        fallback = False
        if removed:
            keys = self._tile_keys(present)
            try:
                tri = assemble([self._tile_mesh(k, free.region) for k in keys], self.grid)
                ids = vertex_ids(tri, points)
                if np.any(ids < 0):  # a kept tile from another history: triangulate anew
                    for k in keys:
                        self._tile_cache.pop(k, None)
                    tri = assemble([self._tile_mesh(k, free.region) for k in keys], self.grid)
                    ids = vertex_ids(tri, points)
            except (shapely.errors.GEOSException, TileMismatch):
                tri, ids = triangulate(free.region, points)
                fallback = True
                self.stats["fallback_triangulations"] += 1
                for k in keys:
                    self._tile_cache.pop(k, None)
        else:
            tri, ids = _points_only(points)
        timing["triangulate"] = time.perf_counter() - t1

        corner_vertex, pinch_vertex = ids[: len(c_xy_all)], ids[len(c_xy_all):]
        pinch_vertex = pinch_vertex[pinch_vertex >= 0]
        is_pinch = np.zeros(len(tri.xy), dtype=bool)
        is_pinch[pinch_vertex] = True
        placed = (corner_vertex >= 0) & ~is_pinch[np.maximum(corner_vertex, 0)]
        c_vertex = corner_vertex[placed]
        c_xy, c_prev, c_next = c_xy_all[placed], c_prev_all[placed], c_next_all[placed]
        order = np.argsort(c_vertex, kind="stable")
        c_vertex, c_xy, c_prev, c_next = c_vertex[order], c_xy[order], c_prev[order], c_next[order]
        corner_ptr = np.zeros(len(tri.xy) + 1, dtype=np.int64)
        np.cumsum(np.bincount(c_vertex, minlength=len(tri.xy)), out=corner_ptr[1:])
        node_vertex = np.unique(np.concatenate([c_vertex, pinch_vertex]))
        # nodes in (x, y) order, as build_roadmap's (its vertex ids follow that order)
        node_vertex = node_vertex[np.lexsort((tri.xy[node_vertex, 1], tri.xy[node_vertex, 0]))]
        vertex_node = np.full(len(tri.xy), -1, dtype=np.int64)
        vertex_node[node_vertex] = np.arange(len(node_vertex))
        nodes = tri.xy[node_vertex]
        n = len(nodes)
        shrunk_parts = [p for c in clusters for p in shapely.get_parts(c.shrunk)
                        if not p.is_empty]
        shrunk = (shapely.multipolygons(shrunk_parts) if len(shrunk_parts) > 1
                  else shrunk_parts[0] if shrunk_parts else shapely.Polygon())
        if not shrunk.is_empty:
            shapely.prepare(shrunk)
        # disks for the cheap occlusion filter: each present piece's inscribed disk, less eps
        # and a little, lies inside `blocked` shrunk by eps
        disk_xy, disk_r = self._disks(sorted(present))
        occ_node = vertex_node[c_vertex]
        roadmap = assemble_roadmap(
            free, nodes, tri=tri, shrunk=shrunk, tol=self.tol, vertex_node=vertex_node,
            corner_ptr=corner_ptr, corner_prev=c_prev, corner_next=c_next, corner_xy=c_xy,
            corner_vertex=c_vertex, pinch=is_pinch, pinch_vertex=pinch_vertex,
            disk_xy=disk_xy, disk_r=disk_r,
        )

        # which nodes a change may concern, and the parent's edges that still hold
        t1 = time.perf_counter()
        # a corner changed when it is new, or lies on an added or removed obstacle's grown
        # shape (within the pad); any other keeps its place and its tangent directions (an
        # edge of its ring may have been cut short, never turned)
        changed_boxes = _expand(self._bounds[added + removed], self.pad)
        touched = np.ones(n, dtype=bool)
        child_of_parent = _match(parent.roadmap.nodes, nodes)
        touched[child_of_parent[child_of_parent >= 0]] = False
        near = np.flatnonzero(_in_boxes(nodes, changed_boxes) & ~touched)
        if len(near):
            grown = np.array([self.grown(i) for i in added + removed], dtype=object)
            close = shapely.dwithin(shapely.points(nodes[near])[:, None], grown[None, :],
                                    self.pad).any(axis=1)
            touched[near[close]] = True
        if removed:
            touched[vertex_node[pinch_vertex]] = True  # pinch points look every way
        ok_parent = child_of_parent >= 0
        ok_parent[ok_parent] = ~touched[child_of_parent[ok_parent]]
        child_of_parent[~ok_parent] = -1
        pe = parent.edges
        cu, cv = child_of_parent[pe[:, 0]], child_of_parent[pe[:, 1]]
        both = (cu >= 0) & (cv >= 0)
        kept_edges = np.stack([np.minimum(cu[both], cv[both]), np.maximum(cu[both], cv[both])],
                              axis=1)
        if added and len(kept_edges):
            near = np.flatnonzero(_segments_near(
                nodes[kept_edges[:, 0]], nodes[kept_edges[:, 1]],
                _expand(self._bounds[added], self.pad)))
            if len(near):
                ok = np.ones(len(kept_edges), dtype=bool)
                ok[near] = roadmap.visible(nodes[kept_edges[near, 0]],
                                           nodes[kept_edges[near, 1]])
                kept_edges = kept_edges[ok]
        timing["keep"] = time.perf_counter() - t1

        # new edges: every way from the nodes a change concerns; where obstacles went, the
        # others look towards those places only
        t1 = time.perf_counter()
        if removed:  # corners inside a removed obstacle's box look every way as well
            removed_boxes = _expand(self._bounds[removed], self.pad)
            full = touched | _in_boxes(nodes, removed_boxes)
            pairs = [self._walk_all(roadmap, tri, c_vertex, c_xy, c_prev, c_next,
                                    pinch_vertex, full),
                     self._walk_towards(roadmap, tri, c_vertex, c_xy, c_prev, c_next,
                                        ~full, removed_boxes)]
        else:
            pairs = [self._tangent_pairs(c_xy, c_prev, c_next, occ_node,
                                         vertex_node[pinch_vertex], nodes, touched, disk_xy,
                                         disk_r)]
        timing["candidates"] = time.perf_counter() - t1
        t1 = time.perf_counter()
        cand = _unique_pairs(np.concatenate(pairs), n)
        if len(cand) and len(kept_edges):
            known = np.isin(cand[:, 0] * n + cand[:, 1], kept_edges[:, 0] * n + kept_edges[:, 1])
            cand = cand[~known]
        ok = roadmap.visible(nodes[cand[:, 0]], nodes[cand[:, 1]]) if len(cand) else np.zeros(
            0, bool)
        edges = np.concatenate([kept_edges, cand[ok]]) if len(cand) else kept_edges
        edges = _unique_pairs(edges, n)
        roadmap.graph = _graph(nodes, edges)
        timing["exact-visibility"] = time.perf_counter() - t1
        timing["total"] = time.perf_counter() - t0
        roadmap.stats = {
            "corners": int(len(c_xy_all)),
            "corners-unplaced": int((corner_vertex < 0).sum()),
            "pinch-points": int(len(pinch_vertex)),
            "nodes": int(n),
            "triangles": int(len(tri.tri)),
            "touched": int(touched.sum()),
            "kept-edges": int(len(kept_edges)),
            "edges": int(len(edges)),
            "derived": True,
            "fallback-triangulation": fallback,
            "seconds": timing,
        }
        return StateSpace(present=present, clusters=clusters, free=free, roadmap=roadmap,
                          edges=edges, tiles=tuple(keys), stats=roadmap.stats)

    def _whole(self, present: frozenset[int], clusters: tuple[_Cluster, ...], free: FreeSpace
               ) -> StateSpace:
        """A state built whole by build_roadmap (its edges kept for the states derived next)."""
        whole = build_roadmap(free)
        g = whole.graph.tocoo()
        up = g.row < g.col
        edges = np.stack([g.row[up], g.col[up]], axis=1).astype(np.int64)
        order = np.lexsort((edges[:, 1], edges[:, 0])) if len(edges) else np.zeros(0, int)
        return StateSpace(present=present, clusters=clusters, free=free, roadmap=whole,
                          edges=edges[order], tiles=(), stats={**whole.stats, "derived": False})

    def _tangent_pairs(self, c_xy, c_prev, c_next, occ_node, pinch_nodes, nodes, touched,
                       disk_xy, disk_r) -> np.ndarray:
        """Candidate pairs from the touched nodes to every node: lines tangent at both ends
        (pinch points need no tangent), less those a disk inside `blocked` certainly hides.

        The tangent test at the far end goes first, over every corner, as two affine maps of
        the source position with a slack wider than their rounding error (a corner on a finely
        curved outline looks along a narrow double cone, so few are left); the exact test at
        both ends then decides on those few."""
        up, un = _unit(c_prev - c_xy), _unit(c_next - c_xy)
        tol2 = self.tol ** 2
        # sp[s, v] = cross(u_s - v, up_v) = u_s . (up_v.y, -up_v.x) - cross(v, up_v)
        lift_p = np.stack([up[:, 1], -up[:, 0], -(c_xy[:, 0] * up[:, 1] - c_xy[:, 1] * up[:, 0])])
        lift_n = np.stack([un[:, 1], -un[:, 0], -(c_xy[:, 0] * un[:, 1] - c_xy[:, 1] * un[:, 0])])
        scale = 1.0 + (float(np.abs(c_xy).max()) if len(c_xy) else 0.0)
        loose = self.tol * self.diameter + 64.0 * np.finfo(float).eps * scale
        out = []
        src_occ = np.flatnonzero(touched[occ_node]) if len(occ_node) else np.zeros(0, int)
        for a in range(0, len(src_occ), _PAIR_CHUNK):
            s = src_occ[a:a + _PAIR_CHUNK]
            sp = _affine(c_xy[s], lift_p)
            sn = _affine(c_xy[s], lift_n)
            # superset of (sp sn >= 0 or min(|sp|, |sn|) <= loose): |sp|, |sn| <= diameter
            np.multiply(sp, sn, out=sp)
            r, c = np.nonzero(sp >= -loose * self.diameter)
            ex = c_xy[c, 0] - c_xy[s[r], 0]  # from the source to the target
            ey = c_xy[c, 1] - c_xy[s[r], 1]
            ok = (_tangent_sq(-ex, -ey, up[c], un[c], tol2)
                  & _tangent_sq(ex, ey, up[s[r]], un[s[r]], tol2))
            out.append(np.stack([occ_node[s[r[ok]]], occ_node[c[ok]]], axis=1))
            if len(pinch_nodes):  # a line to a pinch point needs a tangent at the source only
                ex = nodes[None, pinch_nodes, 0] - c_xy[s, 0:1]
                ey = nodes[None, pinch_nodes, 1] - c_xy[s, 1:2]
                r, c = np.nonzero(_tangent_sq(ex, ey, up[s, None, :], un[s, None, :], tol2))
                out.append(np.stack([occ_node[s[r]], pinch_nodes[c]], axis=1))
        src_pinch = pinch_nodes[touched[pinch_nodes]] if len(pinch_nodes) else pinch_nodes
        for a in range(0, len(src_pinch), _PAIR_CHUNK):
            s = src_pinch[a:a + _PAIR_CHUNK]
            dx = nodes[s, 0:1] - c_xy[None, :, 0]  # from each corner back to the pinch point
            dy = nodes[s, 1:2] - c_xy[None, :, 1]
            r, c = np.nonzero(_tangent_sq(dx, dy, up[None, :, :], un[None, :, :], tol2))
            out.append(np.stack([s[r], occ_node[c]], axis=1))
            out.append(np.stack(np.meshgrid(s, pinch_nodes, indexing="ij"), axis=-1
                                ).reshape(-1, 2))
        pairs = _unique_pairs(_pairs(out), len(nodes))
        if len(pairs):
            pairs = pairs[~segments_occluded(nodes[pairs[:, 0]], nodes[pairs[:, 1]], disk_xy,
                                            disk_r)]
        return pairs

    def _walk_all(self, roadmap: Roadmap, tri, c_vertex, c_xy, c_prev, c_next, pinch_vertex,
                  touched: np.ndarray) -> np.ndarray:
        """Candidate pairs (u < v, node indices) seen from the touched nodes, every way they
        look: corners along their tangent lines, pinch points all round."""
        vn = roadmap._vertex_node
        sel = touched[vn[c_vertex]] if len(c_vertex) else np.zeros(0, bool)
        cv, cxy = c_vertex[sel], c_xy[sel]
        out = []
        if len(cv):
            lo = _unit(c_next[sel] - cxy)
            hi = _unit(cxy - c_prev[sel])
            windows, seen_src, seen_v = node_windows(
                tri, cv, np.stack([lo, -lo], axis=1), np.stack([hi, -hi], axis=1), self.tol)
            w_src, w_v = walk(tri, cxy, windows, self.tol)
            src, vert = roadmap._tangent_at_node(cxy, np.concatenate([seen_src, w_src]),
                                                 np.concatenate([seen_v, w_v]))
            out.append(np.stack([vn[cv[src]], vn[vert]], axis=1))
        pv = pinch_vertex[touched[vn[pinch_vertex]]] if len(pinch_vertex) else pinch_vertex
        if len(pv):
            p_xy = tri.xy[pv]
            fans = [tri.fan_tri[tri.fan_ptr[v]:tri.fan_ptr[v + 1]] for v in pv]
            windows, p_src, p_v = point_windows(tri, p_xy, fans, self.tol)
            w_src, w_v = walk(tri, p_xy, windows, self.tol)
            src, vert = roadmap._tangent_at_node(p_xy, np.concatenate([p_src, w_src]),
                                                 np.concatenate([p_v, w_v]))
            out.append(np.stack([vn[pv[src]], vn[vert]], axis=1))
        return _pairs(out)

    def _walk_towards(self, roadmap: Roadmap, tri, c_vertex, c_xy, c_prev, c_next,
                      kept: np.ndarray, boxes: np.ndarray) -> np.ndarray:
        """Candidate pairs seen from the kept corners, looking only at the boxes where
        obstacles went (their tangent cones cut down to the directions of each box)."""
        vn = roadmap._vertex_node
        sel = kept[vn[c_vertex]] if len(c_vertex) else np.zeros(0, bool)
        cv, cxy = c_vertex[sel], c_xy[sel]
        if len(cv) == 0 or len(boxes) == 0:
            return np.zeros((0, 2), dtype=np.int64)
        lo = _unit(c_next[sel] - cxy)
        hi = _unit(cxy - c_prev[sel])
        s_lo, s_hi = _sectors(cxy, boxes)  # (P, B, 2)
        out = []
        for a0, a1 in ((lo, hi), (-lo, -hi)):
            w_lo, w_hi, ok = _arc_and(a0[:, None, :], a1[:, None, :], s_lo, s_hi, self.tol)
            rows, b = np.nonzero(ok)
            if len(rows) == 0:
                continue
            windows, seen_src, seen_v = node_windows(
                tri, cv[rows], w_lo[rows, b][:, None, :], w_hi[rows, b][:, None, :], self.tol)
            w_src, w_v = walk(tri, cxy[rows], windows, self.tol)
            src, vert = roadmap._tangent_at_node(cxy[rows], np.concatenate([seen_src, w_src]),
                                                 np.concatenate([seen_v, w_v]))
            out.append(np.stack([vn[cv[rows][src]], vn[vert]], axis=1))
        return _pairs(out)


def _inscribed_disks(pieces: np.ndarray, eps: float, scale: float
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Per piece, the centre and radius of a disk inside it shrunk by eps (radius <= 0
    where the piece is too thin): the largest inscribed circle, less 4 eps and a little."""
    if len(pieces) == 0:
        return np.empty((0, 2)), np.empty(0)
    x0, y0, x1, y1 = shapely.bounds(pieces).T
    lines = shapely.maximum_inscribed_circle(pieces, tolerance=np.maximum(x1 - x0, y1 - y0) / 50)
    centres = shapely.get_point(lines, 0)
    radius = shapely.distance(centres, shapely.boundary(pieces)) - 4.0 * eps - 1e-9 * scale
    radius = np.where(shapely.contains(pieces, centres), radius, 0.0)
    return shapely.get_coordinates(centres), radius


def _affine(xy: np.ndarray, lift: np.ndarray) -> np.ndarray:
    """(S, T) array of x * lift[0] + y * lift[1] + lift[2] for each point (x, y) of xy (S, 2):
    elementwise, not a matrix product (a threaded BLAS call costs more at these sizes)."""
    out = np.multiply.outer(xy[:, 0], lift[0])
    out += np.multiply.outer(xy[:, 1], lift[1])
    out += lift[2]
    return out


def _tangent_sq(dx, dy, up, un, tol2: float) -> np.ndarray:
    """A line in direction (dx, dy) from the other end leaves both ring neighbours (unit
    vectors up, un from the corner) on one closed side, within tol radians: it is tangent
    there. (dx, dy) has the shape of the result; the slack is compared squared."""
    sp = dx * up[..., 1]
    sp -= dy * up[..., 0]
    sn = dx * un[..., 1]
    sn -= dy * un[..., 0]
    ok = sp * sn >= 0
    bad = ~ok
    if bad.any():
        m = np.minimum(np.abs(sp[bad]), np.abs(sn[bad]))
        ok[bad] = m * m <= tol2 * (dx[bad] ** 2 + dy[bad] ** 2)
    return ok


def _points_only(points: np.ndarray):
    """A triangulation with no triangles whose vertices are the given points ((x, y) order),
    and each point's vertex id: all a road map needs when nothing will walk it."""
    key = points[:, 0] + 1j * points[:, 1] if len(points) else np.zeros(0, complex)
    uniq, inv = np.unique(key, return_inverse=True)
    xy = np.stack([uniq.real, uniq.imag], axis=1) if len(uniq) else np.zeros((0, 2))
    z = np.zeros((0, 3), dtype=np.int64)
    tri = Triangulation(xy=xy, tri=z, nbr=z, nbr_k=z,
                        fan_ptr=np.zeros(len(xy) + 1, dtype=np.int64),
                        fan_tri=np.zeros(0, dtype=np.int64), fan_j=np.zeros(0, dtype=np.int64),
                        polygons=np.empty(0, dtype=object))
    return tri, inv.reshape(-1).astype(np.int64)


def _graph(nodes: np.ndarray, edges: np.ndarray) -> csr_matrix:
    n = len(nodes)
    w = np.hypot(*(nodes[edges[:, 0]] - nodes[edges[:, 1]]).T)
    return csr_matrix((np.concatenate([w, w]), (np.concatenate([edges[:, 0], edges[:, 1]]),
                                                np.concatenate([edges[:, 1], edges[:, 0]]))),
                      shape=(n, n))


def _unique_pairs(pairs: np.ndarray, n: int) -> np.ndarray:
    """Distinct rows of an (m, 2) array of node indices below n, in (first, second) order."""
    if len(pairs) == 0:
        return np.zeros((0, 2), dtype=np.int64)
    key = np.unique(pairs[:, 0].astype(np.int64) * n + pairs[:, 1])
    return np.stack([key // n, key % n], axis=1)


def _pairs(parts: list[np.ndarray]) -> np.ndarray:
    """Node pairs as (min, max) rows, self pairs dropped."""
    if not parts:
        return np.zeros((0, 2), dtype=np.int64)
    p = np.concatenate(parts)
    p = p[(p[:, 0] >= 0) & (p[:, 1] >= 0) & (p[:, 0] != p[:, 1])]
    return np.stack([p.min(axis=1), p.max(axis=1)], axis=1) if len(p) else np.zeros(
        (0, 2), dtype=np.int64)


def _footprint_key(footprint: Ring | shapely.Geometry) -> bytes:
    geom = footprint if isinstance(footprint, shapely.Geometry) else shapely.Polygon(footprint)
    return shapely.to_wkb(shapely.normalize(geom))


class StateSpaces:
    """Free space and road map for every state of one job's scene, one FootprintSpace per
    distinct footprint (the head alone, or with each carried outline).

    With `incremental=False` every state is built from scratch (build_free_space and
    build_roadmap), the reference the incremental one is tested against.
    """

    def __init__(self, scene: Scene, settings: Settings, *, incremental: bool = True,
                 keep: int = 3) -> None:
        self.scene = scene
        self.settings = settings
        self.incremental = incremental
        self.keep = keep
        self._avoided = tuple(o for o in scene.obstacles
                              if o.is_avoided(scene.head.ride_height))
        self._index = {o.id: i for i, o in enumerate(self._avoided)}
        self._spaces: dict[bytes, FootprintSpace] = {}
        self._static: OrderedDict[tuple, LegSpace] = OrderedDict()

    def footprint_spaces(self) -> list[FootprintSpace]:
        return list(self._spaces.values())

    def get(self, state: State) -> LegSpace:
        """The free space and road map a leg in `state` is planned in."""
        footprint = footprint_of(self.scene, state)
        obstacles = present_obstacles(self.scene, state)
        if not self.incremental:
            key = (state.present, _footprint_key(footprint))
            hit = self._static.get(key)
            if hit is None:
                free = build_free_space(self.scene, self.settings, obstacles=obstacles,
                                        footprint=footprint)
                hit = LegSpace(state, free, build_roadmap(free), obstacles, footprint)
                self._static[key] = hit
                while len(self._static) > self.keep:
                    self._static.popitem(last=False)
            self._static.move_to_end(key)
            return LegSpace(state, hit.free, hit.roadmap, obstacles, footprint)
        st = self._space(state).state(self._present(state))
        return LegSpace(state, st.free, st.roadmap, obstacles, footprint)

    def _space(self, state: State) -> FootprintSpace:
        footprint = footprint_of(self.scene, state)
        fkey = _footprint_key(footprint)
        space = self._spaces.get(fkey)
        if space is None:
            space = self._spaces[fkey] = FootprintSpace(self.scene, self.settings, footprint,
                                                        self._avoided, keep=self.keep)
        return space

    def _present(self, state: State) -> frozenset[int]:
        return frozenset(self._index[i] for i in state.present if i in self._index)

    def path(self, state: State, a, b, cost=None) -> tuple[np.ndarray, float]:
        """The cheapest collision-free path of a leg in `state` (Roadmap.path's answer, NoPath
        included), from a kept state's road map where that answer provably holds."""
        if not self.incremental:
            return self.get(state).roadmap.path(a, b, cost)
        return self._space(state).path(self._present(state), a, b, cost)

    def bound_distances(self, state: State, a, targets: np.ndarray, cost=None) -> np.ndarray:
        """Lower bounds on the least costs from a to every target in `state`, cheap: from a
        kept state with fewer obstacles where there is one (for guiding a search only)."""
        if not self.incremental:
            return self.get(state).roadmap.distances_from(a, targets, cost)
        return self._space(state).bound_distances(self._present(state), a, targets, cost)

    def distances(self, state: State, a, targets: np.ndarray, cost=None) -> np.ndarray:
        """Least costs from a to every target in `state` (Roadmap.distances_from's answer)."""
        if not self.incremental:
            return self.get(state).roadmap.distances_from(a, targets, cost)
        return self._space(state).distances(self._present(state), a, targets, cost)
