"""Convex decomposition of polygons: constrained Delaunay triangles merged into larger convex
pieces (Hertel-Mehlhorn).

Polygons that are already convex are kept whole (one vectorised turn test). The others lose
their convex caps first (cuts.py), are triangulated by GEOS (shapely.constrained_delaunay_-
triangles, no new vertices), and then diagonals are removed while both of their endpoints stay
convex in the merged piece. Fewer, larger pieces make the later union of C-obstacles much
cheaper than raw triangles do.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import shapely

from .cuts import cut_caps, split_by_diagonals
from .polygons import (
    REL_NOISE,
    Rings,
    canonical_convex,
    convex_mask,
    drop_collinear,
    orient_ccw,
)

__all__ = ["convex_decomposition", "triangulate", "merge_faces"]

# Below this many diagonals a vectorised round costs more than trying them one by one.
_ROUND_AT_LEAST = 32


def _cleaned(polygons: np.ndarray, exteriors: Rings, which: np.ndarray) -> np.ndarray:
    """Polygons `which` rebuilt from their cleaned exteriors, holes kept as given."""
    return np.array([shapely.Polygon(exteriors.ring(i), [r.coords for r in polygons[i].interiors])
                     for i in which], dtype=object)


def triangulate(polygons: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Constrained Delaunay triangles of polygons: (T, 3, 2) counter-clockwise vertices and the
    index of the polygon each triangle came from. Zero-area triangles are left out."""
    tri = shapely.constrained_delaunay_triangles(np.asarray(polygons, dtype=object))
    parts, owner = shapely.get_parts(tri, return_index=True)
    if len(parts) == 0:
        return np.zeros((0, 3, 2)), np.zeros(0, dtype=np.int64)
    coords = shapely.get_coordinates(parts).reshape(len(parts), 4, 2)[:, :3, :] + 0.0
    d1 = coords[:, 1] - coords[:, 0]
    d2 = coords[:, 2] - coords[:, 0]
    cross = d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0]
    flip = cross < 0
    coords[flip] = coords[flip][:, ::-1]
    keep = cross != 0
    return coords[keep], owner[keep]


def merge_faces(faces: Rings, owner: np.ndarray) -> tuple[Rings, np.ndarray]:
    """Hertel-Mehlhorn: remove each shared edge of a convex subdivision whose endpoints stay
    convex.

    `faces` are counter-clockwise convex rings (triangles, caps) that tile each polygon, `owner`
    the polygon of each. Returns the merged pieces as counter-clockwise rings and each piece's
    owner. One pass suffices: a diagonal that cannot be removed now never can later, since
    merging only widens the angles at its ends. Diagonals between two convex corners of the
    polygon always go (all at once, vectorised); the rest are tried in priority order, in
    vectorised rounds of diagonals that share no end point and then one by one.
    """
    if len(faces) == 0:
        return faces, np.zeros(0, dtype=np.int64)
    # Vertex ids: equal coordinates within one polygon are one vertex.
    flat = faces.coords + 0.0  # no negative zeros
    he_owner = np.asarray(owner, dtype=np.int64)[faces.ring_of()]
    order = np.lexsort((flat[:, 1], flat[:, 0], he_owner))
    s = flat[order]
    so = he_owner[order]
    new = np.ones(len(order), dtype=bool)
    new[1:] = (s[1:, 0] != s[:-1, 0]) | (s[1:, 1] != s[:-1, 1]) | (so[1:] != so[:-1])
    vid = np.empty(len(order), dtype=np.int64)
    vid[order] = np.cumsum(new) - 1
    vxy = s[new]

    # Half-edge k runs from vertex k of its face to the next one.
    n_he = len(flat)
    nxt = faces.next_index()
    prv = faces.prev_index()
    org = vid
    dst = vid[nxt]
    lo, hi = np.minimum(org, dst), np.maximum(org, dst)
    eo = np.lexsort((hi, lo))
    same = (lo[eo][1:] == lo[eo][:-1]) & (hi[eo][1:] == hi[eo][:-1])
    first, second = eo[:-1][same], eo[1:][same]
    twin = np.full(n_he, -1, dtype=np.int64)
    twin[first], twin[second] = second, first

    # Corner angles summed per vertex give the polygon's interior angle there.
    to_next = flat[nxt] - flat
    to_prev = flat[prv] - flat
    angle = np.arctan2(np.abs(to_next[:, 0] * to_prev[:, 1] - to_next[:, 1] * to_prev[:, 0]),
                       np.einsum("ij,ij->i", to_next, to_prev))
    reflex = np.bincount(vid, weights=angle, minlength=len(vxy)) > np.pi * (1.0 + REL_NOISE)
    n_reflex = reflex[org[first]].astype(np.int64) + reflex[org[second]]

    # Phase 1: drop every diagonal between convex corners; the next half-edge of a face then is
    # found by turning around the end vertex past dropped diagonals.
    dead = np.zeros(n_he, dtype=bool)
    easy = n_reflex == 0
    dead[first[easy]] = dead[second[easy]] = True
    nxt = nxt.copy()
    todo = np.flatnonzero(~dead & dead[nxt])
    while len(todo):
        nxt[todo] = nxt[twin[nxt[todo]]]
        todo = todo[dead[nxt[todo]]]
    alive_idx = np.flatnonzero(~dead)
    prv = np.full(n_he, -1, dtype=np.int64)
    prv[nxt[alive_idx]] = alive_idx

    # Phase 2: the diagonals at reflex corners in priority order (one reflex end before two,
    # shorter first). Diagonals sharing no end point do not affect each other's test or update,
    # so each round takes, vectorised, every diagonal that comes first at both of its ends;
    # when rounds get small (fans around one vertex) the rest go one by one.
    rest = np.flatnonzero(~easy)
    length = np.hypot(*(vxy[org[first[rest]]] - vxy[org[second[rest]]]).T)
    rest = rest[np.lexsort((length, n_reflex[rest]))]
    rank = np.arange(len(rest))
    best = np.empty(len(vxy), dtype=np.int64)
    while len(rest) >= _ROUND_AT_LEAST:
        h, g = first[rest], second[rest]
        u, v = org[h], org[g]
        best[u] = len(vxy)
        best[v] = len(vxy)
        np.minimum.at(best, u, rank)
        np.minimum.at(best, v, rank)
        now = (best[u] == rank) & (best[v] == rank)
        if now.sum() < _ROUND_AT_LEAST:
            break
        h, g = h[now], g[now]
        ph, nh, pg, ng = prv[h], nxt[h], prv[g], nxt[g]
        ok = _left_turns(vxy, org[ph], org[h], org[nxt[ng]])
        ok &= _left_turns(vxy, org[pg], org[g], org[nxt[nh]])
        ph, nh, pg, ng = ph[ok], nh[ok], pg[ok], ng[ok]
        nxt[ph], prv[ng], nxt[pg], prv[nh] = ng, ph, nh, pg
        dead[h[ok]] = dead[g[ok]] = True
        rest, rank = rest[~now], rank[~now]

    nxt_l, prv_l, org_l = nxt.tolist(), prv.tolist(), org.tolist()
    xs, ys = vxy[:, 0].tolist(), vxy[:, 1].tolist()
    removed: list[int] = []

    def convex_at(p: int, q: int, r: int) -> bool:
        # Left turn at q, up to rounding noise (the same bound as polygons.turns).
        ux, uy = xs[q] - xs[p], ys[q] - ys[p]
        vx, vy = xs[r] - xs[q], ys[r] - ys[q]
        lu, lv = (ux * ux + uy * uy) ** 0.5, (vx * vx + vy * vy) ** 0.5
        scale = max(abs(xs[q]), abs(ys[q]))
        return ux * vy - uy * vx >= -REL_NOISE * (lu * lv + (lu + lv) * scale)

    for h, g in zip(first[rest].tolist(), second[rest].tolist(), strict=True):  # one by one
        # h runs u -> v in one piece, g runs v -> u in the other.
        ph, nh, pg, ng = prv_l[h], nxt_l[h], prv_l[g], nxt_l[g]
        if not convex_at(org_l[ph], org_l[h], org_l[nxt_l[ng]]):
            continue
        if not convex_at(org_l[pg], org_l[g], org_l[nxt_l[nh]]):
            continue
        nxt_l[ph], prv_l[ng], nxt_l[pg], prv_l[nh] = ng, ph, nh, pg
        removed += (h, g)
    dead[removed] = True
    nxt = np.asarray(nxt_l, dtype=np.int64)
    return _faces(nxt, np.flatnonzero(~dead), vxy[org], he_owner)


def _left_turns(xy: np.ndarray, p: np.ndarray, q: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Left turn (or straight) at q on the way p -> q -> r, up to rounding noise."""
    u = xy[q] - xy[p]
    w = xy[r] - xy[q]
    cross = u[:, 0] * w[:, 1] - u[:, 1] * w[:, 0]
    lu, lw = np.hypot(u[:, 0], u[:, 1]), np.hypot(w[:, 0], w[:, 1])
    scale = np.abs(xy[q]).max(axis=1)
    return cross >= -REL_NOISE * (lu * lw + (lu + lw) * scale)


def _faces(nxt: np.ndarray, alive: np.ndarray, start_xy: np.ndarray, he_owner: np.ndarray
           ) -> tuple[Rings, np.ndarray]:
    """The cycles of the permutation `nxt` over the `alive` half-edges, as rings in cycle order.

    Pointer jumping: each half-edge learns the smallest index on its cycle (the cycle's head)
    and its distance to it, in log2(longest cycle) vectorised rounds.
    """
    head = np.arange(len(nxt))
    jump = nxt.copy()
    while True:
        new_head = np.minimum(head[alive], head[jump[alive]])
        changed = np.any(new_head != head[alive])
        head[alive] = new_head
        jump[alive] = jump[jump[alive]]
        if not changed:
            break
    is_head = np.zeros(len(nxt), dtype=bool)
    is_head[alive] = head[alive] == alive
    succ = np.where(is_head, np.arange(len(nxt)), nxt)
    dist = np.where(is_head, 0, 1)
    while True:
        busy = alive[~is_head[succ[alive]]]
        if len(busy) == 0:
            break
        dist[busy] += dist[succ[busy]]
        succ[busy] = succ[succ[busy]]
    # dist = steps forward to the head; the position from the head is (cycle length - dist).
    h = head[alive]
    length = np.bincount(h, minlength=len(nxt))[h]
    position = (length - dist[alive]) % length
    order = np.lexsort((position, h))
    ring_heads, ring = np.unique(h[order], return_inverse=True)
    rings = Rings.from_index(start_xy[alive[order]], ring, len(ring_heads))
    return rings, he_owner[ring_heads]


def convex_decomposition(
    polygons: np.ndarray | Sequence[shapely.Polygon],
) -> tuple[Rings, np.ndarray]:
    """Convex pieces of shapely Polygons whose union is each polygon.

    Returns canonical convex rings (counter-clockwise, starting at the lowest vertex, ready for
    the edge merge) and, per piece, the index of the polygon it belongs to. Each piece is the
    convex hull of what was merged, so a piece convex only up to rounding is widened, never cut.
    """
    polys = np.asarray(polygons, dtype=object)
    exteriors = drop_collinear(orient_ccw(Rings.from_polygons(polys)))
    has_holes = shapely.get_num_interior_rings(polys) > 0
    # a sliver whose ring is flat up to rounding noise (fewer than 3 vertices left) is taken
    # whole: its hull contains it, so it is grown as a thin convex piece, never dropped
    convex = (convex_mask(exteriors) | (exteriors.sizes < 3)) & ~has_holes

    whole, kept = canonical_convex(polys[convex])
    parts = [whole]
    owners = [np.flatnonzero(convex)[kept]]

    simple = np.flatnonzero(~convex & ~has_holes)
    holed = np.flatnonzero(has_holes)
    if len(simple) or len(holed):
        cores, caps, cap_of = cut_caps(exteriors.select(simple))
        chunks, chunk_of = split_by_diagonals(cores)
        outlines = np.concatenate([chunks.to_polygons(), _cleaned(polys, exteriors, holed)])
        outline_of = np.concatenate([simple[chunk_of], holed])
        triangles, tri_of = triangulate(outlines)
        faces = Rings.concat([caps, Rings(triangles.reshape(-1, 2),
                                          np.arange(len(triangles) + 1, dtype=np.int64) * 3)])
        face_of = np.concatenate([simple[cap_of], outline_of[tri_of]])
        pieces, piece_of = merge_faces(faces, face_of)
        merged, kept = canonical_convex(pieces.to_polygons())
        parts.append(merged)
        owners.append(piece_of[kept])
    return Rings.concat(parts), np.concatenate(owners).astype(np.int64)
