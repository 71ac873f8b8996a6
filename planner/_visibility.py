"""Visibility candidates by sweeping windows of directions through a triangulation of free space.

From each source, a window of ray directions is carried triangle by triangle across shared edges
until it narrows to nothing or meets the boundary; every triangle vertex inside a live window is
seen from the source. The work follows what is actually visible, not the number of pairs, which
is what keeps the road map near-linear in cluttered scenes. The roadmap's shapely test has the
final word on every pair this proposes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from .budget import check_time
from .errors import PlanningError

__all__ = ["Triangulation", "triangulate", "Windows", "walk", "node_windows", "point_windows"]


@dataclass(frozen=True, eq=False)
class Triangulation:
    """A triangulation of the closed free space, its vertices exactly the region's vertices.

    `nbr[t, j]` is the triangle across the edge opposite local vertex j (-1: a boundary edge) and
    `nbr_k[t, j]` the local index, in that triangle, of its vertex opposite the shared edge.
    """

    xy: np.ndarray  # (V, 2) float
    tri: np.ndarray  # (T, 3) int vertex ids
    nbr: np.ndarray  # (T, 3) int
    nbr_k: np.ndarray  # (T, 3) int
    fan_ptr: np.ndarray  # (V + 1,) CSR offsets into fan_tri / fan_j
    fan_tri: np.ndarray  # triangles around each vertex
    fan_j: np.ndarray  # local index of the vertex in each of those triangles
    polygons: np.ndarray  # the triangles as shapely Polygons, for point location


def _key_ids(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unique rows of an (n, 2) float array and the id of every row (exact comparison)."""
    if len(points) == 0:
        return np.empty((0, 2)), np.empty(0, dtype=np.int64)
    # one complex number per row sorts as (x, y) and is several times faster than axis=0
    z = np.ascontiguousarray(points, dtype=np.float64).view(np.complex128).reshape(-1) + 0.0
    uniq, inv = np.unique(z, return_inverse=True)
    return np.column_stack([uniq.real, uniq.imag]), inv.reshape(-1).astype(np.int64)


# GEOS joins a polygon's holes to its shell before triangulating, at a cost that grows with
# holes times vertices; cutting a polygon with many holes into cells first keeps that low.
_HOLES_PER_CELL = 2
# Ear clipping and the joining also grow with the square of a part's vertex count (one finely
# drawn arc is enough): a part with many vertices is cut into cells of about this many.
# Speed only, measured (benchmarks/run.py, docs/performance.md): 128 rather than 4096 took the
# road map of the sparse 20k/100k/500k scenes from 0.39/1.02/2.10 s to 0.32/0.90/1.77 s CPU.
_VERTICES_PER_CELL = 128


def _cells(part: shapely.Polygon) -> tuple[list[shapely.Geometry], np.ndarray, np.ndarray]:
    """The part cut by a grid into cells holding a few holes (and not too many vertices) each,
    and the grid's cut lines."""
    holes = shapely.get_num_interior_rings(part)
    vertices = shapely.get_num_coordinates(part)
    x0, y0, x1, y1 = part.bounds
    n = max(-(-holes // _HOLES_PER_CELL), -(-vertices // _VERTICES_PER_CELL))
    light = holes <= 2 * _HOLES_PER_CELL and vertices <= 2 * _VERTICES_PER_CELL
    if light or x1 <= x0 or y1 <= y0:
        return [part], np.empty(0), np.empty(0)
    nx = max(1, round(np.sqrt(n * (x1 - x0) / (y1 - y0))))
    ny = max(1, -(-n // nx))
    # cut at odd fractions so that no cut line is likely to run along an obstacle edge
    xs = x0 + (x1 - x0) * (np.arange(1, nx) + 0.1180339887) / nx
    ys = y0 + (y1 - y0) * (np.arange(1, ny) + 0.1180339887) / ny
    ex = np.r_[x0, xs, x1]
    ey = np.r_[y0, ys, y1]
    out = []
    for i in range(nx):
        for j in range(ny):
            out.append(shapely.clip_by_rect(part, ex[i], ey[j], ex[i + 1], ey[j + 1]))
    return out, xs, ys


def _triangles(pieces: list[shapely.Geometry]) -> np.ndarray:
    polys = shapely.get_parts(np.asarray(pieces, dtype=object))
    polys = polys[(shapely.get_type_id(polys) == 3) & (shapely.area(polys) > 0.0)]
    if len(polys) == 0:
        return np.empty(0, dtype=object)
    tris = shapely.get_parts(shapely.constrained_delaunay_triangles(polys))
    return tris[shapely.area(tris) > 0.0]


def triangulate(region: shapely.Geometry, points: np.ndarray) -> tuple[Triangulation, np.ndarray]:
    """Constrained Delaunay triangulation of `region`; also the vertex id of each of `points`.

    A point that is no vertex of the triangulation gets -1. A part with many holes is cut into
    cells first; if the cells' triangles do not meet edge to edge along every cut (floating
    point), the whole part is triangulated at once instead.
    """
    parts = shapely.get_parts(region)
    parts = parts[shapely.get_type_id(parts) == 3] if len(parts) else parts
    pieces: list[shapely.Geometry] = []
    cuts_x: list[np.ndarray] = []
    cuts_y: list[np.ndarray] = []
    for part in parts:
        cells, xs, ys = _cells(part)
        pieces.extend(cells)
        cuts_x.append(xs)
        cuts_y.append(ys)
    cut_x = np.concatenate(cuts_x) if cuts_x else np.empty(0)
    cut_y = np.concatenate(cuts_y) if cuts_y else np.empty(0)
    try:
        tris = _triangles(pieces)
        result = _build(tris, points, cut_x, cut_y)
    except (shapely.errors.GEOSException, _CutMismatch):
        result = None
    if result is None:
        try:
            result = _build(_triangles(list(parts)), points, np.empty(0), np.empty(0))
        except shapely.errors.GEOSException as exc:
            raise PlanningError(f"could not triangulate the free space: GEOS failed ({exc})"
                                ) from exc
    return result


class _CutMismatch(Exception):
    """Triangles of neighbouring cells do not share their edges along a cut."""


def snap_cuts(c: np.ndarray, cut_x: np.ndarray, cut_y: np.ndarray) -> None:
    """Give vertices on a cut line that differ by a few ulps one value (the clipper computes
    a crossing separately for the two cells beside the cut)."""
    scale = float(np.abs(c).max()) if len(c) else 0.0
    tol = 1e-12 * (1.0 + scale)
    for axis, cuts in ((0, cut_x), (1, cut_y)):
        idx = np.flatnonzero(np.isin(c[:, axis], cuts)) if len(cuts) else np.empty(0, int)
        if len(idx) == 0:
            continue
        other = 1 - axis
        idx = idx[np.lexsort((c[idx, other], c[idx, axis]))]
        line, val = c[idx, axis], c[idx, other]
        new_run = np.r_[True, (line[1:] != line[:-1]) | (np.diff(val) > tol)]
        first = idx[new_run]
        c[idx, other] = c[first[np.cumsum(new_run) - 1], other]


def _build(tris: np.ndarray, points: np.ndarray, cut_x: np.ndarray, cut_y: np.ndarray
           ) -> tuple[Triangulation, np.ndarray]:
    tris = np.asarray(tris, dtype=object)
    corners = shapely.get_coordinates(tris).reshape(-1, 4, 2)[:, :3] if len(tris) else np.empty(
        (0, 3, 2))
    points = np.asarray(points, dtype=float).reshape(-1, 2)
    flat_corners = corners.reshape(-1, 2).copy()
    snap_cuts(flat_corners, cut_x, cut_y)
    xy, ids = _key_ids(np.concatenate([flat_corners, points]))
    n_tri = len(corners)
    tri = ids[: 3 * n_tri].reshape(-1, 3)
    point_ids = ids[3 * n_tri:]
    used = np.zeros(len(xy), dtype=bool)
    used[tri.ravel()] = True
    point_ids = np.where(used[point_ids], point_ids, -1) if len(point_ids) else point_ids

    # Edge opposite local vertex j joins the other two; pair up edges seen twice.
    nv = max(len(xy), 1)
    a = tri[:, [1, 2, 0]]
    b = tri[:, [2, 0, 1]]
    nbr, nbr_k = pair_edges(tri, nv)
    nbr, nbr_k = nbr.ravel(), nbr_k.ravel()
    if len(cut_x) or len(cut_y):
        # a boundary edge lying on a cut line means the cells did not meet edge to edge
        open_edge = nbr < 0
        pa, pb = xy[a.ravel()[open_edge]], xy[b.ravel()[open_edge]]
        on_cut = ((pa[:, 0] == pb[:, 0]) & np.isin(pa[:, 0], cut_x)) | (
            (pa[:, 1] == pb[:, 1]) & np.isin(pa[:, 1], cut_y))
        if on_cut.any():
            raise _CutMismatch
    nbr = nbr.reshape(-1, 3)
    nbr_k = nbr_k.reshape(-1, 3)

    flat_v = tri.ravel()
    fan_order = np.argsort(flat_v, kind="stable")
    fan_ptr = np.zeros(len(xy) + 1, dtype=np.int64)
    np.cumsum(np.bincount(flat_v, minlength=len(xy)), out=fan_ptr[1:])
    triangulation = Triangulation(
        xy=xy, tri=tri, nbr=nbr, nbr_k=nbr_k, fan_ptr=fan_ptr,
        fan_tri=fan_order // 3, fan_j=fan_order % 3, polygons=tris,
    )
    return triangulation, point_ids


@dataclass
class Windows:
    """Walk states: source `src` looks into triangle `tri` (entered across the edge opposite its
    local vertex `k`, whose clockwise end seen from the source is vertex `cw`) through the
    directions from unit vector `lo` counter-clockwise to unit vector `hi`."""

    src: np.ndarray
    tri: np.ndarray
    k: np.ndarray
    cw: np.ndarray
    lo: np.ndarray
    hi: np.ndarray

    @staticmethod
    def empty() -> Windows:
        z = np.empty(0, dtype=np.int64)
        return Windows(z, z.copy(), z.copy(), z.copy(), np.empty((0, 2)), np.empty((0, 2)))

    @staticmethod
    def concat(parts: list[Windows]) -> Windows:
        if not parts:
            return Windows.empty()
        return Windows(*(np.concatenate([getattr(p, f) for p in parts])
                         for f in ("src", "tri", "k", "cw", "lo", "hi")))


def _cross(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    return u[..., 0] * v[..., 1] - u[..., 1] * v[..., 0]


def _unit(v: np.ndarray) -> np.ndarray:
    n = np.hypot(v[..., 0], v[..., 1])
    return v / np.where(n > 0, n, 1.0)[..., None]


_NEXT = np.array([1, 2, 0])
_PREV = np.array([2, 0, 1])


def walk(
    t: Triangulation, origin: np.ndarray, states: Windows, tol: float
) -> tuple[np.ndarray, np.ndarray]:
    """Carry every window across the triangulation; (source, vertex) pairs seen on the way.

    `origin[s]` is where source s looks from; `tol` (radians) widens every window a little, so
    rays that graze a vertex or run along an edge are kept (the exact test comes later).
    """
    found_src: list[np.ndarray] = []
    found_v: list[np.ndarray] = []
    tri_flat = t.tri.ravel()
    nbr_flat = t.nbr.ravel()
    nbr_k_flat = t.nbr_k.ravel()
    vx, vy = np.ascontiguousarray(t.xy[:, 0]), np.ascontiguousarray(t.xy[:, 1])
    src, tri, k, cw = states.src, states.tri, states.k, states.cw
    sx, sy = origin[src, 0], origin[src, 1]
    lox, loy = states.lo[:, 0].copy(), states.lo[:, 1].copy()
    hix, hiy = states.hi[:, 0].copy(), states.hi[:, 1].copy()
    limit = 4 * len(t.tri) + 16  # windows only move away from their source: a safety net only
    steps = 0
    while len(src) and steps < limit:
        steps += 1
        check_time("looking for visible corners")
        base = 3 * tri
        w = tri_flat[base + k]
        k1 = _NEXT[k]
        k2 = _PREV[k]
        a_is_cw = tri_flat[base + k1] == cw
        dx = vx[w] - sx
        dy = vy[w] - sy
        dn = np.hypot(dx, dy)
        slack = tol * dn
        c_lo = lox * dy - loy * dx  # > 0: w is counter-clockwise of lo
        c_hi = dx * hiy - dy * hix  # > 0: w is clockwise of hi
        seen = (c_lo >= -slack) & (c_hi >= -slack) & (dn > 0)
        found_src.append(src[seen])
        found_v.append(w[seen])
        inv = 1.0 / np.where(dn > 0, dn, 1.0)
        ux, uy = dx * inv, dy * inv
        # clockwise part [lo, min(hi, w)] leaves across edge (cw end, w), opposite the ccw end
        ok_cw = (c_hi <= 0) | (c_lo >= -slack)
        ok_ccw = (c_lo <= 0) | (c_hi >= -slack)
        j_cw = np.where(a_is_cw, k2, k1)
        j_ccw = np.where(a_is_cw, k1, k2)
        e_cw = base + j_cw
        e_ccw = base + j_ccw
        n_cw = nbr_flat[e_cw]
        n_ccw = nbr_flat[e_ccw]
        i_cw = np.flatnonzero(ok_cw & (n_cw >= 0))
        i_ccw = np.flatnonzero(ok_ccw & (n_ccw >= 0))
        cut_hi = c_hi > 0  # w inside on the hi side: the clockwise part ends at w
        cut_lo = c_lo > 0  # the counter-clockwise part starts at w
        src = np.concatenate([src[i_cw], src[i_ccw]])
        tri = np.concatenate([n_cw[i_cw], n_ccw[i_ccw]])
        k = np.concatenate([nbr_k_flat[e_cw[i_cw]], nbr_k_flat[e_ccw[i_ccw]]])
        cw = np.concatenate([cw[i_cw], w[i_ccw]])
        sx = np.concatenate([sx[i_cw], sx[i_ccw]])
        sy = np.concatenate([sy[i_cw], sy[i_ccw]])
        lox, loy = (np.concatenate([lox[i_cw], np.where(cut_lo, ux, lox)[i_ccw]]),
                    np.concatenate([loy[i_cw], np.where(cut_lo, uy, loy)[i_ccw]]))
        hix, hiy = (np.concatenate([np.where(cut_hi, ux, hix)[i_cw], hix[i_ccw]]),
                    np.concatenate([np.where(cut_hi, uy, hiy)[i_cw], hiy[i_ccw]]))
    if not found_src:
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=np.int64)
    return np.concatenate(found_src), np.concatenate(found_v)


def _in_window(lo: np.ndarray, hi: np.ndarray, d: np.ndarray, tol: float) -> np.ndarray:
    dn = np.hypot(d[:, 0], d[:, 1])
    return (_cross(lo, d) >= -tol * dn) & (_cross(d, hi) >= -tol * dn) & (dn > 0)


def _fan(t: Triangulation, vertex: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(owner index, triangle, local index) for every triangle around each given vertex."""
    vertex = np.asarray(vertex, dtype=np.int64)
    start = t.fan_ptr[vertex]
    count = t.fan_ptr[vertex + 1] - start
    owner = np.repeat(np.arange(len(vertex)), count)
    pos = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count) + start[owner]
    return owner, t.fan_tri[pos], t.fan_j[pos]


def _opposite_edges(t: Triangulation, tri: np.ndarray, j: np.ndarray, s_xy: np.ndarray):
    """The edge opposite local vertex j, as (cw end, ccw end) seen from s, and their cross."""
    verts = t.tri[tri]
    va = np.take_along_axis(verts, ((j + 1) % 3)[:, None], 1)[:, 0]
    vb = np.take_along_axis(verts, ((j + 2) % 3)[:, None], 1)[:, 0]
    da, db = t.xy[va] - s_xy, t.xy[vb] - s_xy
    c = _cross(da, db)
    swap = c < 0
    cw = np.where(swap, vb, va)
    ccw = np.where(swap, va, vb)
    return cw, ccw, c


def node_windows(
    t: Triangulation, vertex: np.ndarray, cones_lo: np.ndarray, cones_hi: np.ndarray, tol: float
) -> tuple[Windows, np.ndarray, np.ndarray]:
    """Start windows for sources sitting on triangulation vertices, each limited to cones.

    cones_lo/hi have shape (S, C, 2): C cones per source (each narrower than pi). Returns the
    windows and the (source, vertex) pairs seen directly along the fan's own edges.
    """
    origin = t.xy[vertex]
    owner, tri, j = _fan(t, vertex)
    s_xy = origin[owner]
    cw, ccw, _ = _opposite_edges(t, tri, j, s_xy)
    da, db = _unit(t.xy[cw] - s_xy), _unit(t.xy[ccw] - s_xy)
    parts: list[Windows] = []
    seen_src: list[np.ndarray] = []
    seen_v: list[np.ndarray] = []
    nxt = t.nbr[tri, j]
    nxt_k = t.nbr_k[tri, j]
    for c in range(cones_lo.shape[1]):
        clo, chi = cones_lo[owner, c], cones_hi[owner, c]
        for v, dv in ((cw, t.xy[cw] - s_xy), (ccw, t.xy[ccw] - s_xy)):
            m = _in_window(clo, chi, dv, tol)
            seen_src.append(owner[m])
            seen_v.append(v[m])
        lo = np.where((_cross(clo, da) > 0)[:, None], da, clo)
        hi = np.where((_cross(db, chi) > 0)[:, None], db, chi)
        ok = (
            _in_window(clo, chi, lo, tol) & _in_window(da, db, lo, tol)
            & _in_window(clo, chi, hi, tol) & _in_window(da, db, hi, tol)
            & (_cross(lo, hi) >= -tol) & (nxt >= 0)
        )
        parts.append(Windows(owner[ok], nxt[ok], nxt_k[ok], cw[ok], lo[ok], hi[ok]))
    return Windows.concat(parts), np.concatenate(seen_src), np.concatenate(seen_v)


def point_windows(
    t: Triangulation, origin: np.ndarray, located: list[np.ndarray], tol: float
) -> tuple[Windows, np.ndarray, np.ndarray]:
    """Start windows for free points (all directions) from the triangles that hold each point.

    An edge that passes through the point (within tol) is not looked through; the triangle on
    its other side is added as a start instead, so no direction is lost.
    """
    owners, tris = [], []
    for i, tri_ids in enumerate(located):
        owners.append(np.full(len(tri_ids), i, dtype=np.int64))
        tris.append(np.asarray(tri_ids, dtype=np.int64))
    owner = np.concatenate(owners) if owners else np.empty(0, dtype=np.int64)
    tri = np.concatenate(tris) if tris else np.empty(0, dtype=np.int64)
    # close the start set over edges that pass through the point
    for _ in range(8):
        o3 = np.repeat(owner, 3)
        t3 = np.repeat(tri, 3)
        j3 = np.tile(np.arange(3), len(tri))
        cw, ccw, c = _opposite_edges(t, t3, j3, origin[o3])
        da, db = t.xy[cw] - origin[o3], t.xy[ccw] - origin[o3]
        flat = np.abs(c) <= tol * np.hypot(*da.T) * np.hypot(*db.T)
        extra_t = t.nbr[t3[flat], j3[flat]]
        extra_o = o3[flat][extra_t >= 0]
        extra_t = extra_t[extra_t >= 0]
        pairs = np.unique(np.stack([np.concatenate([owner, extra_o]),
                                    np.concatenate([tri, extra_t])], 1), axis=0)
        if len(pairs) == len(owner):
            break
        owner, tri = pairs[:, 0], pairs[:, 1]
    o3 = np.repeat(owner, 3)
    t3 = np.repeat(tri, 3)
    j3 = np.tile(np.arange(3), len(tri))
    s_xy = origin[o3]
    cw, ccw, c = _opposite_edges(t, t3, j3, s_xy)
    da, db = t.xy[cw] - s_xy, t.xy[ccw] - s_xy
    flat = np.abs(c) <= tol * np.hypot(*da.T) * np.hypot(*db.T)
    nxt = t.nbr[t3, j3]
    ok = ~flat & (nxt >= 0)
    windows = Windows(o3[ok], nxt[ok], t.nbr_k[t3[ok], j3[ok]], cw[ok], _unit(da[ok]),
                      _unit(db[ok]))
    v = t.tri[t3, j3]
    dv = t.xy[v] - s_xy
    m = np.hypot(dv[:, 0], dv[:, 1]) > 0
    return windows, o3[m], v[m]


def pair_edges(tri: np.ndarray, nv: int) -> tuple[np.ndarray, np.ndarray]:
    """Neighbour links of a triangle list: the edge opposite local vertex j joins the other two."""
    n_tri = len(tri)
    a, b = tri[:, [1, 2, 0]], tri[:, [2, 0, 1]]
    flat = (np.minimum(a, b) * nv + np.maximum(a, b)).ravel()
    order = np.argsort(flat, kind="stable")
    sk = flat[order]
    nbr = np.full(3 * n_tri, -1, dtype=np.int64)
    nbr_k = np.full(3 * n_tri, -1, dtype=np.int64)
    if len(sk) > 1:
        same = sk[1:] == sk[:-1]
        # an edge seen more than twice is not manifold: leave it closed (conservative)
        triple = np.zeros(len(sk), dtype=bool)
        if len(sk) > 2:
            triple[1:-1] = same[1:] & same[:-1]
        first = np.flatnonzero(same & ~triple[:-1] & ~triple[1:])
        i0, i1 = order[first], order[first + 1]
        nbr[i0], nbr[i1] = i1 // 3, i0 // 3
        nbr_k[i0], nbr_k[i1] = i1 % 3, i0 % 3
    return nbr.reshape(-1, 3), nbr_k.reshape(-1, 3)
