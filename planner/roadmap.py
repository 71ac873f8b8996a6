"""Exact Euclidean shortest paths in the free space, on its tangent visibility graph.

A shortest path bends only at convex corners of the obstacles (reflex corners of the free space),
and only along lines tangent to the obstacle there, so the graph keeps just those corners and the
mutually visible, bitangent pairs of them. Queries join the two end points to the corners they
see and run one Dijkstra search. Visibility is always decided by one shapely test: the segment
must miss `blocked` shrunk inward by `eps` (touching and sliding along obstacle edges is fine).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import shapely
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import dijkstra

from ._visibility import Triangulation, node_windows, point_windows, triangulate, walk
from .cspace import FreeSpace
from .errors import PlanningError
from .model import Point

__all__ = ["EdgeCost", "NoPath", "Roadmap", "build_roadmap"]

# The cost of straight moves for a search: (k, 2) moves (dx, dy) -> (k,) costs > 0 for k nonzero
# moves. None means Euclidean length. A cost must satisfy the triangle inequality (a straight
# move never costs more than two moves via a corner): the search keeps free straight lines.
EdgeCost = Callable[[np.ndarray], np.ndarray]

# Relative size of floating-point noise in a cross product of two unit vectors: a turn smaller
# than this is a straight line (dimensionless, not a length tolerance).
_NOISE = 1e-12

# Query points handled per pass: a bound on the (points x corners) arrays, not on the result.
_SIGHT_CHUNK = 16
# A leg's search first goes this many times as far as the straight move (speed only).
_SEARCH_LIMITS = (1.5, 6.0, np.inf)
# The occlusion filter: disks centred on a grid of about this many points over the box, at most
# this many of them (speed only: the filter never decides that a segment is visible).
_DISK_GRID = 8192
_MAX_DISKS = 1024
_DISK_BLOCK = 64

_REASONS = {
    "start-blocked": "the start lies inside a grown obstacle",
    "end-blocked": "the end lies inside a grown obstacle",
    "outside-travel": "a point lies outside the travel limits",
    "disconnected": "no collision-free path joins the two points",
}


class NoPath(PlanningError):
    """No collision-free path from `a` to `b`; `kind` says why (one of NoPath.KINDS)."""

    KINDS = tuple(_REASONS)

    def __init__(self, kind: str, a: Point, b: Point | None) -> None:
        if kind not in _REASONS:
            raise ValueError(f"unknown NoPath kind {kind!r}")
        self.kind = kind
        self.a = a
        self.b = b
        to = "" if b is None else f" to ({b[0]:g}, {b[1]:g})"
        super().__init__(f"no collision-free path from ({a[0]:g}, {a[1]:g}){to}: {_REASONS[kind]}")


def _cross(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]


def _unit(v: np.ndarray) -> np.ndarray:
    n = np.hypot(v[..., 0], v[..., 1])
    return v / np.where(n > 0, n, 1.0)[..., None]


@dataclass(frozen=True, eq=False)
class _Corners:
    """Reflex corners of the free space, one row per occurrence on a ring (a point where two
    rings touch occurs twice), with the ring neighbours that define the obstacle's tangents;
    and the pinch points: vertices where the free space narrows to a point (a vertex met more
    than once on the rings), where a path may pass and turn whatever the corners' shapes."""

    xy: np.ndarray
    prev: np.ndarray
    next: np.ndarray
    pinch: np.ndarray


def reflex_corners(region: shapely.Geometry) -> _Corners:
    """Right turns of the region's rings with the free side on the left (collinear ones dropped)."""
    empty = _Corners(np.empty((0, 2)), np.empty((0, 2)), np.empty((0, 2)), np.empty((0, 2)))
    if region.is_empty:
        return empty
    rings = shapely.get_rings(shapely.get_parts(shapely.orient_polygons(region)))
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    if len(coords) == 0:
        return empty
    # drop each ring's closing vertex and any repeated consecutive vertex
    keep = np.ones(len(coords), dtype=bool)
    keep[:-1] = ~((ring[1:] == ring[:-1]) & np.all(coords[1:] == coords[:-1], axis=1))
    last = np.r_[ring[1:] != ring[:-1], True]
    keep &= ~last
    coords, ring = coords[keep], ring[keep]
    starts = np.r_[0, np.flatnonzero(ring[1:] != ring[:-1]) + 1]
    ends = np.r_[starts[1:], len(coords)]
    idx = np.arange(len(coords))
    nxt, prv = idx + 1, idx - 1
    nxt[ends - 1] = starts
    prv[starts] = ends - 1
    d_in = _unit(coords - coords[prv])
    d_out = _unit(coords[nxt] - coords)
    right = _cross(d_in, d_out) < -_NOISE
    z = np.ascontiguousarray(coords, dtype=np.float64).view(np.complex128).reshape(-1) + 0.0
    uniq_z, count = np.unique(z, return_counts=True)
    uniq = np.column_stack([uniq_z.real, uniq_z.imag])
    return _Corners(coords[right], coords[prv][right], coords[nxt][right], uniq[count > 1])


def _tangent(at: np.ndarray, prev: np.ndarray, nxt: np.ndarray, other: np.ndarray,
             tol: float) -> np.ndarray:
    """Line at-other leaves both ring neighbours of `at` on one closed side (within tol)."""
    d = _unit(other - at)
    sp = _cross(d, _unit(prev - at))
    sn = _cross(d, _unit(nxt - at))
    return (sp * sn >= 0) | (np.minimum(np.abs(sp), np.abs(sn)) <= tol)


@dataclass(eq=False)
class Roadmap:
    """Shortest-path queries in one free space; build it with `build_roadmap`."""

    free: FreeSpace
    nodes: np.ndarray  # (N, 2) corner positions
    graph: csr_matrix  # (N, N) symmetric, edge weight = Euclidean length
    stats: dict
    _tri: Triangulation
    _shrunk: shapely.Geometry
    _tol: float
    _vertex_node: np.ndarray  # triangulation vertex -> node index or -1
    _corner_ptr: np.ndarray  # triangulation vertex -> its corner occurrences (CSR)
    _corner_prev: np.ndarray
    _corner_next: np.ndarray
    _pinch: np.ndarray  # triangulation vertex -> is a pinch point
    _occ_xy: np.ndarray  # corner occurrences: position, unit vectors to the ring neighbours,
    _occ_up: np.ndarray  # and node index (the tangent test of query points)
    _occ_un: np.ndarray
    _occ_node: np.ndarray
    _pinch_nodes: np.ndarray
    _disk_xy: np.ndarray  # disks inside `blocked` shrunk by eps, largest first
    _disk_r: np.ndarray
    _sight_cache: dict = field(default_factory=dict)
    _cost_graphs: dict = field(default_factory=dict)  # EdgeCost -> graph weighted by it

    def clear_cache(self) -> None:
        """Forget what end points were seen from (memory; cold-query timings)."""
        self._sight_cache.clear()

    # -- visibility ---------------------------------------------------------------------------

    def visible(self, p: np.ndarray, q: np.ndarray) -> np.ndarray:
        """Segments p[i]-q[i] that miss the interior of `blocked` (shrunk by eps) and the box's
        outside: the one visibility test of the road map."""
        p = np.asarray(p, dtype=float).reshape(-1, 2)
        q = np.asarray(q, dtype=float).reshape(-1, 2)
        ok = np.ones(len(p), dtype=bool)
        if len(p) == 0:
            return ok
        box = self.free.box
        ok &= shapely.intersects_xy(box, p[:, 0], p[:, 1])
        ok &= shapely.intersects_xy(box, q[:, 0], q[:, 1])
        if not self._shrunk.is_empty:
            same = np.all(p == q, axis=1)
            lines = shapely.linestrings(np.stack([p, q], axis=1))
            hit = np.zeros(len(p), dtype=bool)
            hit[~same] = shapely.intersects(self._shrunk, lines[~same])
            hit[same] = shapely.intersects_xy(self._shrunk, p[same, 0], p[same, 1])
            ok &= ~hit
        return ok

    def _classify(self, pts: np.ndarray) -> np.ndarray:
        """Per point: "" when usable, else "outside-travel" or "blocked"."""
        out = np.full(len(pts), "", dtype=object)
        inside = shapely.intersects_xy(self.free.box, pts[:, 0], pts[:, 1])
        out[~inside] = "outside-travel"
        if not self._shrunk.is_empty and inside.any():
            hit = shapely.intersects_xy(self._shrunk, pts[inside, 0], pts[inside, 1])
            sub = out[inside]
            sub[hit] = "blocked"
            out[inside] = sub
        return out

    def _sight(self, pts: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
        """For each free point: the nodes it sees along a line tangent at the node, and the
        distances to them. Cached by position (tour costs ask for the same targets often).

        Every node is a candidate: the cheap tangent test at the node keeps a few per obstacle,
        disks inside `blocked` drop most of the hidden ones, and `visible` decides the rest.
        (A walk through the triangulation from one point costs hundreds of numpy steps; this
        costs a few array passes over the corners.)"""
        keys = [(float(x), float(y)) for x, y in pts]
        todo = list(dict.fromkeys(k for k in keys if k not in self._sight_cache))
        for start in range(0, len(todo), _SIGHT_CHUNK):
            sub = np.asarray(todo[start:start + _SIGHT_CHUNK], dtype=float).reshape(-1, 2)
            src, node = self._tangent_candidates(sub)
            keep = ~self._occluded(sub[src], self.nodes[node])
            src, node = src[keep], node[keep]
            ok = self.visible(sub[src], self.nodes[node])
            src, node = src[ok], node[ok]
            dist = np.hypot(*(self.nodes[node] - sub[src]).T)
            bounds = np.searchsorted(src, np.arange(len(sub) + 1))
            for j, key in enumerate(todo[start:start + _SIGHT_CHUNK]):
                s = slice(bounds[j], bounds[j + 1])
                self._sight_cache[key] = (node[s], dist[s])
        return [self._sight_cache[k] for k in keys]

    def _tangent_candidates(self, pts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(point index, node) pairs, sorted by point, whose line is tangent at the node (at
        any of its occurrences on the rings), and every pinch node for every point."""
        at, up, un = self._occ_xy, self._occ_up, self._occ_un
        dx = pts[:, 0:1] - at[None, :, 0]
        dy = pts[:, 1:2] - at[None, :, 1]
        sp = dx * up[None, :, 1] - dy * up[None, :, 0]
        sn = dx * un[None, :, 1] - dy * un[None, :, 0]
        slack = self._tol * np.hypot(dx, dy)
        ok = (sp * sn >= 0) | (np.minimum(np.abs(sp), np.abs(sn)) <= slack)
        src, occ = np.nonzero(ok)
        pair = np.unique(src * len(self.nodes) + self._occ_node[occ])
        src, node = pair // len(self.nodes), pair % len(self.nodes)
        if len(self._pinch_nodes):
            p_src = np.repeat(np.arange(len(pts)), len(self._pinch_nodes))
            p_node = np.tile(self._pinch_nodes, len(pts))
            pair = np.unique(np.concatenate([pair, p_src * len(self.nodes) + p_node]))
            src, node = pair // len(self.nodes), pair % len(self.nodes)
        return src, node

    def _occluded(self, p: np.ndarray, q: np.ndarray) -> np.ndarray:
        """Segments p[i]-q[i] certainly hidden by one of this road map's disks (a filter)."""
        return segments_occluded(p, q, self._disk_xy, self._disk_r)

    def _tangent_at_node(self, origin: np.ndarray, src: np.ndarray, vert: np.ndarray
                         ) -> tuple[np.ndarray, np.ndarray]:
        """Keep (source, vertex) pairs whose vertex is a node and whose line is tangent there
        (at any of the node's occurrences on the rings)."""
        is_node = self._vertex_node[vert] >= 0
        src, vert = src[is_node], vert[is_node]
        pinch = self._pinch[vert]
        keep_src, keep_vert = src[pinch], vert[pinch]
        src, vert = src[~pinch], vert[~pinch]
        start = self._corner_ptr[vert]
        count = self._corner_ptr[vert + 1] - start
        rec = np.repeat(np.arange(len(vert)), count)
        pos = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count) + start[rec]
        at = self._tri.xy[vert[rec]]
        ok_occ = _tangent(at, self._corner_prev[pos], self._corner_next[pos], origin[src[rec]],
                          self._tol)
        ok = np.zeros(len(vert), dtype=bool)
        ok[rec[ok_occ]] = True
        return np.concatenate([keep_src, src[ok]]), np.concatenate([keep_vert, vert[ok]])

    # -- searches -----------------------------------------------------------------------------

    def _check(self, p: np.ndarray, blocked_kind: str, a: Point, b: Point | None) -> None:
        kind = self._classify(p.reshape(1, 2))[0]
        if kind == "outside-travel":
            raise NoPath("outside-travel", a, b)
        if kind == "blocked":
            raise NoPath(blocked_kind, a, b)

    def _cost(self, moves: np.ndarray, lengths: np.ndarray, cost: EdgeCost | None) -> np.ndarray:
        return lengths if cost is None or len(moves) == 0 else np.asarray(cost(moves), float)

    def _graph_for(self, cost: EdgeCost | None) -> csr_matrix:
        """The graph with every edge weighted by `cost` (cached per cost)."""
        if cost is None:
            return self.graph
        if cost not in self._cost_graphs:
            g = self.graph.tocoo()
            w = self._cost(self.nodes[g.col] - self.nodes[g.row], g.data, cost)
            self._cost_graphs[cost] = csr_matrix((w, (g.row, g.col)), shape=g.shape)
        return self._cost_graphs[cost]

    def _search(self, a: np.ndarray, cost: EdgeCost | None = None, limit: float = np.inf
                ) -> tuple[np.ndarray, np.ndarray]:
        """Dijkstra from free point a over the graph plus a's own edges: distances and
        predecessors for every node (index N stands for a); nodes farther than `limit` are
        left at inf (exact for every node within it)."""
        (a_nodes, a_dist), = self._sight(a.reshape(1, 2))
        a_dist = self._cost(self.nodes[a_nodes] - a, a_dist, cost)
        g = self._graph_for(cost)
        n = g.shape[0]
        indptr = np.append(g.indptr, g.indptr[-1] + len(a_nodes))
        aug = csr_matrix(
            (np.concatenate([g.data, a_dist]), np.concatenate([g.indices, a_nodes]), indptr),
            shape=(n + 1, n + 1),
        )
        dist, pred = dijkstra(aug, directed=True, indices=n, return_predecessors=True,
                              limit=limit)
        return dist, pred

    def _finish(self, a: np.ndarray, targets: np.ndarray, dist: np.ndarray,
                cost: EdgeCost | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Best cost to each target and the node it arrives from (-1: straight from a)."""
        m = len(targets)
        best = np.full(m, np.inf)
        via = np.full(m, -1, dtype=np.int64)
        kinds = self._classify(targets)
        usable = np.flatnonzero(kinds == "")
        if len(usable) == 0:
            return best, via
        pts = targets[usable]
        direct = self.visible(np.repeat(a.reshape(1, 2), len(usable), axis=0), pts)
        best[usable[direct]] = self._cost(pts[direct] - a, np.hypot(*(pts[direct] - a).T), cost)
        sights = self._sight(pts[~direct])
        for i, (nodes, d) in zip(usable[~direct], sights, strict=True):
            if len(nodes) == 0:
                continue
            total = dist[nodes] + self._cost(targets[i] - self.nodes[nodes], d, cost)
            j = int(np.argmin(total))
            if np.isfinite(total[j]):
                best[i] = total[j]
                via[i] = nodes[j]
        return best, via

    def _polyline(self, a: np.ndarray, b: np.ndarray, via: int, pred: np.ndarray
                  ) -> tuple[np.ndarray, float]:
        chain = []
        n = self.graph.shape[0]
        v = via
        while v >= 0 and v != n:
            chain.append(v)
            v = pred[v]
        pts = np.vstack([a, self.nodes[chain[::-1]], b]) if chain else np.vstack([a, b])
        pts = _simplify(pts)
        length = float(np.hypot(*np.diff(pts, axis=0).T).sum())
        return pts, length

    def path(self, a: Point, b: Point, cost: EdgeCost | None = None
             ) -> tuple[np.ndarray, float]:
        """The shortest (or cheapest by `cost`) collision-free polyline from a to b ((k, 2)
        points, a first, b last) and its length; raises NoPath when there is none."""
        pa = np.asarray(a, dtype=float).reshape(2)
        pb = np.asarray(b, dtype=float).reshape(2)
        self._check(pa, "start-blocked", a, b)
        self._check(pb, "end-blocked", a, b)
        if np.array_equal(pa, pb):
            return np.vstack([pa, pb]), 0.0
        if self.visible(pa, pb)[0]:
            return np.vstack([pa, pb]), float(np.hypot(*(pb - pa)))
        self._sight(np.vstack([pa, pb]))  # both ends in one pass
        # Search only as far as a few times the straight move first: a best cost within the
        # limit is exact (every node on that path is within it); otherwise search further.
        straight = float(self._cost((pb - pa).reshape(1, 2), np.hypot(*(pb - pa)).reshape(1),
                                    cost)[0])
        for factor in _SEARCH_LIMITS:
            limit = straight * factor
            dist, pred = self._search(pa, cost, limit)
            best, via = self._finish(pa, pb.reshape(1, 2), dist, cost)
            if best[0] <= limit:
                break
        if not np.isfinite(best[0]):
            raise NoPath("disconnected", a, b)
        return self._polyline(pa, pb, int(via[0]), pred)

    def distances_from(self, a: Point, targets: np.ndarray, cost: EdgeCost | None = None
                       ) -> np.ndarray:
        """Shortest path lengths (or least costs by `cost`) from a to every target (inf where
        unreachable), one search.

        Raises NoPath when a itself is outside the travel limits or inside an obstacle."""
        pa = np.asarray(a, dtype=float).reshape(2)
        self._check(pa, "start-blocked", a, None)
        targets = np.asarray(targets, dtype=float).reshape(-1, 2)
        self._sight(np.vstack([pa, targets[self._classify(targets) == ""]]))
        dist, _ = self._search(pa, cost)
        best, _ = self._finish(pa, targets, dist, cost)
        return best

    def paths_from(self, a: Point, targets: np.ndarray, cost: EdgeCost | None = None
                   ) -> list[tuple[np.ndarray, float] | None]:
        """Shortest (or cheapest by `cost`) paths from a to every target (None where
        unreachable), one search."""
        pa = np.asarray(a, dtype=float).reshape(2)
        self._check(pa, "start-blocked", a, None)
        targets = np.asarray(targets, dtype=float).reshape(-1, 2)
        self._sight(np.vstack([pa, targets[self._classify(targets) == ""]]))
        dist, pred = self._search(pa, cost)
        best, via = self._finish(pa, targets, dist, cost)
        out: list[tuple[np.ndarray, float] | None] = []
        for i, tgt in enumerate(targets):
            if not np.isfinite(best[i]):
                out.append(None)
            elif np.array_equal(tgt, pa):
                out.append((np.vstack([pa, tgt]), 0.0))
            else:
                out.append(self._polyline(pa, tgt, int(via[i]), pred))
        return out


def _simplify(pts: np.ndarray) -> np.ndarray:
    """Drop repeated points and interior points where the polyline goes straight on."""
    keep = [0]
    for i in range(1, len(pts)):
        if np.array_equal(pts[i], pts[keep[-1]]):
            continue
        keep.append(i)
    pts = pts[keep]
    if len(pts) <= 2:
        return pts if len(pts) == 2 else np.vstack([pts, pts])
    out = [pts[0]]
    for i in range(1, len(pts) - 1):
        u = _unit(pts[i] - out[-1])
        v = _unit(pts[i + 1] - pts[i])
        if abs(_cross(u, v)) <= _NOISE and float(u @ v) > 0:
            continue
        out.append(pts[i])
    out.append(pts[-1])
    return np.asarray(out)


def inner_disks(shrunk: shapely.Geometry, box: shapely.Polygon, *, eps: float
                ) -> tuple[np.ndarray, np.ndarray]:
    """Centres (k, 2) and radii (k,) of disks inside `shrunk`, largest first, for the
    occlusion filter.

    Centres are the points of a grid over the box that lie inside `shrunk` and are farther from
    its boundary than their grid neighbours (a sampled medial axis); each radius is that
    distance less a little, so a segment passing closer to the centre certainly meets `shrunk`.
    """
    if shrunk.is_empty:
        return np.empty((0, 2)), np.empty(0)
    x0, y0, x1, y1 = box.bounds
    step = max(np.sqrt((x1 - x0) * (y1 - y0) / _DISK_GRID), eps)
    gx = np.arange(x0 + step / 2, x1, step)
    gy = np.arange(y0 + step / 2, y1, step)
    px, py = np.meshgrid(gx, gy)
    inside = shapely.contains_xy(shrunk, px, py)
    if not inside.any():
        return np.empty((0, 2)), np.empty(0)
    _, dist = shapely.STRtree(_boundary_pieces(shrunk)).query_nearest(
        shapely.points(px[inside], py[inside]), return_distance=True, all_matches=False)
    radius = np.zeros(px.shape)
    radius[inside] = dist - 4.0 * eps - 1e-9 * (abs(x1 - x0) + abs(y1 - y0))
    pad = np.pad(radius, 1)
    around = np.max([pad[1 + i:pad.shape[0] - 1 + i, 1 + j:pad.shape[1] - 1 + j]
                     for i in (-1, 0, 1) for j in (-1, 0, 1)], axis=0)
    peak = (radius >= around) & (radius > step / 2)
    order = np.argsort(-radius[peak], kind="stable")[:_MAX_DISKS]
    xy = np.column_stack([px[peak], py[peak]])[order]
    return xy, radius[peak][order]


def _boundary_pieces(geom: shapely.Geometry, size: int = 32) -> np.ndarray:
    """The rings of `geom` cut into linestrings of at most `size` edges (a tight index)."""
    rings = shapely.get_rings(shapely.get_parts(geom))
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    first = np.r_[0, np.flatnonzero(ring[1:] != ring[:-1]) + 1]
    pos = np.arange(len(coords)) - np.repeat(first, np.diff(np.r_[first, len(coords)]))
    piece = pos // size
    # each piece also takes the first vertex of the next one, so that no edge is lost
    joint = (pos % size == 0) & (pos > 0)
    pts = np.concatenate([coords, coords[joint]])
    ids = np.concatenate([ring * (len(coords) + 1) + piece,
                          ring[joint] * (len(coords) + 1) + piece[joint] - 1])
    order = np.lexsort((np.concatenate([pos, pos[joint]]), ids))
    pts, ids = pts[order], ids[order]
    _, ids, count = np.unique(ids, return_inverse=True, return_counts=True)
    ok = count[ids] >= 2
    pts, ids = pts[ok], ids[ok]
    _, ids = np.unique(ids, return_inverse=True)
    return shapely.linestrings(pts, indices=ids)


_DOWN = np.array([0.0, -1.0])
_UP = np.array([0.0, 1.0])


def _rightward_cones(lo: np.ndarray, hi: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each cone (counter-clockwise from unit vector lo[i] to hi[i], narrower than pi) cut to
    the closed right half-plane of directions (x >= 0): (index of the cone, lo, hi) for the
    cones that keep a part (two arcs, one narrower than pi, meet in one piece at most)."""
    lo_in = lo[:, 0] >= 0
    hi_in = hi[:, 0] >= 0
    keep = lo_in | hi_in
    new_lo = np.where(lo_in[:, None], lo, _DOWN)
    new_hi = np.where(hi_in[:, None], hi, _UP)
    idx = np.flatnonzero(keep)
    return idx, new_lo[idx], new_hi[idx]


def shrunk_blocked(free: FreeSpace) -> shapely.Geometry:
    """`blocked` shrunk by eps, the set visibility tests use, valid.

    A GEOS failure or an invalid result is repaired (make_valid) only when the repair still
    covers every C-obstacle piece shrunk by twice eps (far inside the resolution pad);
    otherwise PlanningError: no road map is built on a shape that gave up part of an obstacle.
    """
    blocked, eps = free.blocked, free.eps
    if blocked.is_empty:
        return blocked
    try:
        shrunk = shapely.buffer(blocked, -eps, join_style="mitre")
        if shapely.is_valid(shrunk):
            return shrunk
        shrunk = shapely.make_valid(shrunk)
    except shapely.errors.GEOSException:
        try:
            shrunk = shapely.make_valid(
                shapely.buffer(shapely.make_valid(blocked), -eps, join_style="mitre"))
        except shapely.errors.GEOSException as exc:
            raise PlanningError("could not shrink the grown obstacles for the visibility "
                                f"test: GEOS failed ({exc})") from exc
    inner = shapely.buffer(free.pieces, -2 * eps, join_style="mitre")
    if shapely.is_valid(shrunk) and np.all(shapely.covers(shrunk, inner)):
        return shrunk
    raise PlanningError("shrinking the grown obstacles for the visibility test would give up "
                        "part of an obstacle; refusing to plan on it")


def assemble_roadmap(
    free: FreeSpace, nodes: np.ndarray, *, tri, shrunk: shapely.Geometry, tol: float,
    vertex_node: np.ndarray, corner_ptr: np.ndarray, corner_prev: np.ndarray,
    corner_next: np.ndarray, corner_xy: np.ndarray, corner_vertex: np.ndarray,
    pinch: np.ndarray, pinch_vertex: np.ndarray, disk_xy: np.ndarray, disk_r: np.ndarray,
) -> Roadmap:
    """A Roadmap with no edges yet, from the triangulation and its corner tables: the one
    constructor that `build_roadmap` and the incremental updates (incremental.py) share.

    corner_* are per corner occurrence (a triangulation vertex where the free space's boundary
    turns, once per ring passing through it): its vertex, position and ring neighbours."""
    return Roadmap(
        free=free, nodes=nodes, graph=csr_matrix((len(nodes), len(nodes))), stats={},
        _tri=tri, _shrunk=shrunk, _tol=tol, _vertex_node=vertex_node, _corner_ptr=corner_ptr,
        _corner_prev=corner_prev, _corner_next=corner_next, _pinch=pinch,
        _occ_xy=corner_xy, _occ_up=_unit(corner_prev - corner_xy),
        _occ_un=_unit(corner_next - corner_xy), _occ_node=vertex_node[corner_vertex],
        _pinch_nodes=vertex_node[pinch_vertex], _disk_xy=disk_xy, _disk_r=disk_r,
    )


def build_roadmap(free: FreeSpace) -> Roadmap:
    """The tangent visibility graph of the free space (uses free.box, blocked, region, eps)."""
    t0 = time.perf_counter()
    timing: dict[str, float] = {}
    region = free.region
    corners = reflex_corners(region)
    shrunk = shrunk_blocked(free)
    shapely.prepare(shrunk)
    timing["corners"] = time.perf_counter() - t0

    t1 = time.perf_counter()
    tri, ids = triangulate(region, np.concatenate([corners.xy, corners.pinch]))
    corner_vertex, pinch_vertex = ids[: len(corners.xy)], ids[len(corners.xy):]
    pinch_vertex = pinch_vertex[pinch_vertex >= 0]
    is_pinch = np.zeros(len(tri.xy), dtype=bool)
    is_pinch[pinch_vertex] = True
    timing["triangulate"] = time.perf_counter() - t1
    xmin, ymin, xmax, ymax = free.box.bounds
    diameter = float(np.hypot(xmax - xmin, ymax - ymin)) or 1.0
    tol = max(free.eps / diameter, 1e-11)

    # corners the triangulation does not have cannot be reached by the walk: leave them out;
    # a pinch point is looked from in every direction, not as a corner
    placed = (corner_vertex >= 0) & ~is_pinch[np.maximum(corner_vertex, 0)]
    c_vertex = corner_vertex[placed]
    c_xy, c_prev, c_next = corners.xy[placed], corners.prev[placed], corners.next[placed]
    order = np.argsort(c_vertex, kind="stable")
    c_vertex, c_xy, c_prev, c_next = c_vertex[order], c_xy[order], c_prev[order], c_next[order]
    corner_ptr = np.zeros(len(tri.xy) + 1, dtype=np.int64)
    np.cumsum(np.bincount(c_vertex, minlength=len(tri.xy)), out=corner_ptr[1:])
    node_vertex = np.unique(np.concatenate([c_vertex, pinch_vertex]))
    vertex_node = np.full(len(tri.xy), -1, dtype=np.int64)
    vertex_node[node_vertex] = np.arange(len(node_vertex))
    nodes = tri.xy[node_vertex]

    # each corner looks only along its tangent lines: two cones between the extensions of its
    # two edges, forwards and backwards; and only to the right (x growing, or straight up or
    # down), since a bitangent pair is then found from its left end (a pinch point, which
    # looks every way, finds its pairs itself)
    t1 = time.perf_counter()
    lo = _unit(c_next - c_xy)
    hi = _unit(c_xy - c_prev)
    cone_src, cone_lo, cone_hi = _rightward_cones(np.concatenate([lo, -lo]),
                                                  np.concatenate([hi, -hi]))
    cone_src = cone_src % len(c_xy)
    windows, seen_src, seen_v = node_windows(tri, c_vertex[cone_src], cone_lo[:, None],
                                             cone_hi[:, None], tol)
    w_src, w_v = walk(tri, c_xy[cone_src], windows, tol)
    src = cone_src[np.concatenate([seen_src, w_src])]
    vert = np.concatenate([seen_v, w_v])
    p_xy = tri.xy[pinch_vertex]
    fans = [tri.fan_tri[tri.fan_ptr[v]:tri.fan_ptr[v + 1]] for v in pinch_vertex]
    p_windows, p_src, p_v = point_windows(tri, p_xy, fans, tol)
    pw_src, pw_v = walk(tri, p_xy, p_windows, tol)
    p_src, p_v = np.concatenate([p_src, pw_src]), np.concatenate([p_v, pw_v])
    timing["walk"] = time.perf_counter() - t1
    found = len(src) + len(p_src)

    t1 = time.perf_counter()
    disk_xy, disk_r = inner_disks(shrunk, free.box, eps=free.eps)
    timing["disks"] = time.perf_counter() - t1
    roadmap = assemble_roadmap(
        free, nodes, tri=tri, shrunk=shrunk, tol=tol, vertex_node=vertex_node,
        corner_ptr=corner_ptr, corner_prev=c_prev, corner_next=c_next, corner_xy=c_xy,
        corner_vertex=c_vertex, pinch=is_pinch, pinch_vertex=pinch_vertex,
        disk_xy=disk_xy, disk_r=disk_r,
    )
    t1 = time.perf_counter()
    src, vert = roadmap._tangent_at_node(c_xy, src, vert)
    p_src, p_v = roadmap._tangent_at_node(p_xy, p_src, p_v)
    u = np.concatenate([vertex_node[c_vertex[src]], vertex_node[pinch_vertex[p_src]]])
    v = np.concatenate([vertex_node[vert], vertex_node[p_v]])
    differ = u != v
    n_nodes = max(len(nodes), 1)
    key = np.unique(np.minimum(u, v)[differ] * n_nodes + np.maximum(u, v)[differ])
    pair = np.stack([key // n_nodes, key % n_nodes], axis=1)
    timing["bitangent"] = time.perf_counter() - t1
    t1 = time.perf_counter()
    ok = roadmap.visible(nodes[pair[:, 0]], nodes[pair[:, 1]]) if len(pair) else np.zeros(0, bool)
    timing["exact-visibility"] = time.perf_counter() - t1
    edges = pair[ok]
    w = np.hypot(*(nodes[edges[:, 0]] - nodes[edges[:, 1]]).T)
    n = len(nodes)
    roadmap.graph = csr_matrix(
        (np.concatenate([w, w]), (np.concatenate([edges[:, 0], edges[:, 1]]),
                                  np.concatenate([edges[:, 1], edges[:, 0]]))),
        shape=(n, n),
    )
    timing["total"] = time.perf_counter() - t0
    roadmap.stats = {
        "corners": int(len(corners.xy)),
        "corners-unplaced": int((corner_vertex < 0).sum()),
        "pinch-points": int(len(pinch_vertex)),
        "nodes": int(n),
        "triangles": int(len(tri.tri)),
        "walk-pairs": int(found),
        "candidates": int(len(pair)),
        "edges": int(len(edges)),
        "seconds": timing,
    }
    return roadmap


def segments_occluded(p: np.ndarray, q: np.ndarray, disk_xy: np.ndarray, disk_r: np.ndarray
                      ) -> np.ndarray:
    """Segments p[i]-q[i] that pass closer to a disk's centre than its radius, the disks
    lying inside `blocked` shrunk by eps: certainly not visible (a filter only; it never says
    a segment is visible). Largest disks first; culled segments drop out."""
    out = np.zeros(len(p), dtype=bool)
    live = np.arange(len(p))
    for s in range(0, len(disk_r), _DISK_BLOCK):
        if len(live) == 0:
            break
        c, r2 = disk_xy[s:s + _DISK_BLOCK], disk_r[s:s + _DISK_BLOCK] ** 2
        a = p[live]
        dx, dy = (q[live] - a).T
        ll = dx * dx + dy * dy
        ll[ll == 0] = 1.0
        cx = c[None, :, 0] - a[:, 0:1]
        cy = c[None, :, 1] - a[:, 1:2]
        t = np.clip((cx * dx[:, None] + cy * dy[:, None]) / ll[:, None], 0.0, 1.0)
        cx -= t * dx[:, None]
        cy -= t * dy[:, None]
        hit = np.any(cx * cx + cy * cy < r2[None, :], axis=1)
        out[live[hit]] = True
        live = live[~hit]
    return out
