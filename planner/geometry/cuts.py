"""Cut simple polygons along interior chords into smaller parts, adding no vertex.

Both cuts exist to keep GEOS's constrained Delaunay triangulation fast: its time grows with the
square of the length of a run of reflex vertices (measured: ~2 us per vertex on a 64-vertex
concave arc, ~57 us per vertex on a 4000-vertex one).
- `cut_caps` replaces each stretch of a convex run (turning less than a quarter turn) by its
  chord, when the chord runs through the polygon's interior; the cut-off cap is a convex piece
  already, so the finely sampled convex arcs never reach the triangulator.
- `split_by_diagonals` halves rings that are still very long along interior diagonals.
Parts share their cut edges exactly, so Hertel-Mehlhorn can later merge across the cuts.
"""

from __future__ import annotations

import numpy as np
import shapely

from .polygons import REL_NOISE, Rings, convex_mask, ragged_positions, turns

__all__ = [
    "cut_caps",
    "split_by_diagonals",
    "interior_chords",
    "long_diagonals",
    "TRIANGULATE_AT_MOST",
]

# Rings longer than this are halved along diagonals before triangulation (a guard against the
# quadratic case; below it the triangulation of the whole ring gives fewer merged pieces).
TRIANGULATE_AT_MOST = 512

# A cap's chain turns by less than this (radians): then cap + chord is convex by construction.
_CAP_TURN = np.pi / 2

# Where to try a splitting diagonal in a ring of n vertices with c convex corners: from convex
# corner number floor(a c) to the vertex floor(b n) further on, for these (a, b); the first
# valid one wins. (From a convex corner, since chords between two points of one concave run
# lie outside.)
_SPLIT_TRIES = tuple((a / 8, b) for b in (1 / 2, 1 / 3, 2 / 3) for a in range(8))


def interior_chords(rings: Rings, ring: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """True where the chord from vertex a[k] to vertex b[k] (indices into rings.coords) of ring
    ring[k] runs through the ring's interior, touching its boundary only at its two ends.

    A chord that meets no edge of its ring other than the edges at its own two ends has its
    relative interior wholly inside or wholly outside the polygon; its midpoint tells which.
    Edge hits use GEOS's exact segment predicates through an STRtree.
    """
    if len(ring) == 0:
        return np.zeros(0, dtype=bool)
    p = rings.coords
    nxt = rings.next_index()
    edges = shapely.linestrings(np.stack([p, p[nxt]], axis=1))
    chords = shapely.linestrings(np.stack([p[a], p[b]], axis=1))
    ci, ei = shapely.STRtree(edges).query(chords, predicate="intersects")
    own = rings.ring_of()[ei] == ring[ci]
    at_end = (ei == a[ci]) | (nxt[ei] == a[ci]) | (ei == b[ci]) | (nxt[ei] == b[ci])
    hit = np.zeros(len(ring), dtype=bool)
    hit[ci[own & ~at_end]] = True
    ok = ~hit
    check = np.flatnonzero(ok)
    polys = rings.to_polygons()
    shapely.prepare(polys)
    mid = shapely.points(0.5 * (p[a[check]] + p[b[check]]))
    ok[check] = shapely.contains_properly(polys[ring[check]], mid)
    return ok


def long_diagonals(rings: Rings, ring: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """As `interior_chords`, for chords that span much of their ring: each chord is tested
    against every edge of its own ring in numpy (an STRtree gains nothing on chords whose box
    covers the ring). Touching within rounding noise counts as a hit, so a doubtful chord is
    refused, never accepted.
    """
    if len(ring) == 0:
        return np.zeros(0, dtype=bool)
    p = rings.coords
    nxt = rings.next_index()
    n = rings.sizes[ring]
    chord = np.repeat(np.arange(len(ring)), n)
    edge = np.repeat(rings.offsets[:-1][ring], n) + ragged_positions(n)
    pa, pb = p[a[chord]], p[b[chord]]
    e0, e1 = p[edge], p[nxt[edge]]
    scale = np.abs(np.concatenate([pa, pb, e0, e1], axis=1)).max(axis=1)

    def side(o, d, q):  # orientation of q against o->d, and its noise bound
        u, v = d - o, q - o
        cross = u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0]
        lu, lv = np.hypot(u[:, 0], u[:, 1]), np.hypot(v[:, 0], v[:, 1])
        return cross, REL_NOISE * (lu * lv + (lu + lv) * scale)

    def sign(pair):
        cross, noise = pair
        return np.where(cross > noise, 1, np.where(cross < -noise, -1, 0))

    s1, s2 = sign(side(pa, pb, e0)), sign(side(pa, pb, e1))
    s3, s4 = sign(side(e0, e1, pa)), sign(side(e0, e1, pb))
    meets = (s1 * s2 <= 0) & (s3 * s4 <= 0)
    lo = np.minimum(pa, pb)
    hi = np.maximum(pa, pb)
    overlap_box = np.all((np.minimum(e0, e1) <= hi) & (np.maximum(e0, e1) >= lo), axis=1)
    collinear = (s1 == 0) & (s2 == 0)
    meets &= ~collinear | overlap_box
    at_end = (edge == a[chord]) | (nxt[edge] == a[chord]) | (edge == b[chord]) | (
        nxt[edge] == b[chord])
    hit = np.zeros(len(ring), dtype=bool)
    hit[chord[meets & ~at_end]] = True
    ok = ~hit
    check = np.flatnonzero(ok)
    if len(check):
        polys = rings.to_polygons()
        shapely.prepare(polys)
        mid = shapely.points(0.5 * (p[a[check]] + p[b[check]]))
        ok[check] = shapely.contains_properly(polys[ring[check]], mid)
    return ok


def _segmented_cumsum(values: np.ndarray, rings: Rings) -> np.ndarray:
    total = np.cumsum(values)
    before = np.concatenate([[0.0], total])[rings.offsets[:-1]]
    return total - np.repeat(before, rings.sizes)


def cut_caps(rings: Rings) -> tuple[Rings, Rings, np.ndarray]:
    """Cut convex caps off counter-clockwise simple rings.

    Returns (cores, caps, cap_of): `cores` has one ring per input ring (the input ring where no
    cap could be cut), `caps` are convex counter-clockwise rings, `cap_of` the input ring of each.
    Every input ring is the union of its core and its caps, with disjoint interiors.
    """
    empty = Rings(np.zeros((0, 2)), np.zeros(1, dtype=np.int64))
    if len(rings) == 0:
        return rings, empty, np.zeros(0, dtype=np.int64)
    p = rings.coords
    prv, nxt = rings.prev_index(), rings.next_index()
    cross, noise = turns(rings)
    e_in, e_out = p - p[prv], p[nxt] - p
    convex = cross > noise
    theta = np.where(convex, np.arctan2(cross, np.einsum("ij,ij->i", e_in, e_out)), 0.0)
    band = np.floor(_segmented_cumsum(theta, rings) / _CAP_TURN)
    pos = ragged_positions(rings.sizes)
    ring = rings.ring_of()
    brk = ~convex | (pos == 0) | (band != band[prv])

    # Chains run from each break vertex to the next one in the same ring (cyclically).
    bidx = np.flatnonzero(brk)
    bring = ring[bidx]
    nb = np.roll(bidx, -1)
    last = np.flatnonzero(np.r_[bring[1:] != bring[:-1], True])
    firsts = np.r_[0, last[:-1] + 1]
    nb[last] = bidx[firsts]
    size = rings.sizes[bring]
    length = (pos[nb] - pos[bidx]) % size + 1  # vertices of the chain, both ends included
    length[nb == bidx] = 1
    cand = np.flatnonzero(length >= 3)

    accepted = np.zeros(len(bidx), dtype=bool)
    if len(cand):
        lc = length[cand]
        start = rings.offsets[:-1][bring[cand]]
        vert = np.repeat(start, lc) + (np.repeat(pos[bidx[cand]], lc) + ragged_positions(lc)) % \
            np.repeat(size[cand], lc)
        caps_all = Rings.from_index(p[vert], np.repeat(np.arange(len(cand)), lc), len(cand))
        ok = convex_mask(caps_all)
        ok &= interior_chords(rings, bring[cand], bidx[cand], nb[cand])
        accepted[cand[ok]] = True

    chain_of = np.cumsum(brk) - 1  # the chain each vertex is in (pos 0 is always a break)
    keep = brk | ~accepted[chain_of]
    cores = rings.keep_vertices(keep)
    good = (cores.sizes >= 3) & shapely.is_valid(cores.to_polygons())
    if not good.all():  # give those rings back whole, without caps
        keep |= ~good[ring]
        accepted &= good[bring]
        cores = rings.keep_vertices(keep)
    if not accepted.any():
        return cores, empty, np.zeros(0, dtype=np.int64)
    pick = np.flatnonzero(accepted[cand])
    return cores, caps_all.select(pick), bring[cand[pick]]


def split_by_diagonals(rings: Rings, limit: int = TRIANGULATE_AT_MOST) -> tuple[Rings, np.ndarray]:
    """Cut counter-clockwise simple rings along interior diagonals until no part has more than
    `limit` vertices (or no tried diagonal is valid). Returns the parts and, per part, the ring
    it came from.
    """
    parts, part_of = rings, np.arange(len(rings), dtype=np.int64)
    frozen = np.zeros(len(rings), dtype=bool)
    while True:
        big = np.flatnonzero((parts.sizes > limit) & ~frozen)
        if len(big) == 0:
            return parts, part_of
        sub = parts.select(big)
        n = sub.sizes
        cross, noise = turns(sub)
        corner = np.flatnonzero(cross > noise)  # convex corners, grouped by ring
        n_corner = np.bincount(sub.ring_of()[corner], minlength=len(sub))
        corner_start = np.cumsum(n_corner) - n_corner
        tries = np.array(_SPLIT_TRIES)
        ring = np.repeat(np.arange(len(sub)), len(tries))  # ring-major: ring k's tries together
        fa, fb = np.tile(tries[:, 0], len(sub)), np.tile(tries[:, 1], len(sub))
        has = n_corner[ring] > 0
        ring, fa, fb = ring[has], fa[has], fb[has]
        i = corner[corner_start[ring] + np.floor(fa * n_corner[ring]).astype(np.int64)]
        pos_i = i - sub.offsets[ring]
        pos_j = (pos_i + np.maximum(2, np.floor(fb * n[ring]).astype(np.int64))) % n[ring]
        gap = np.abs(pos_j - pos_i)
        fine = (gap >= 2) & (gap <= n[ring] - 2)
        ok = np.zeros(len(ring), dtype=bool)
        undecided = np.ones(len(sub), dtype=bool)
        for t in range(len(tries)):  # try t of every ring still without a diagonal
            now = np.flatnonzero(fine & (np.tile(np.arange(len(tries)), len(sub))[has] == t)
                                 & undecided[ring])
            if len(now) == 0:
                continue
            ok[now] = long_diagonals(sub, ring[now], i[now], sub.offsets[ring[now]] + pos_j[now])
            undecided[ring[now[ok[now]]]] = False
            if not undecided.any():
                break
        # First valid try per ring.
        good = np.flatnonzero(ok)
        chosen_ring, at = np.unique(ring[good], return_index=True)
        frozen[big[np.setdiff1d(np.arange(len(sub)), chosen_ring)]] = True
        if len(chosen_ring) == 0:
            continue
        pick = good[at]
        lo = np.minimum(pos_i[pick], pos_j[pick])
        hi = np.maximum(pos_i[pick], pos_j[pick])
        nn, f = n[chosen_ring], sub.offsets[chosen_ring]
        # Half one: vertices lo..hi; half two: hi..n-1, 0..lo (both keep the diagonal's ends).
        size1, size2 = hi - lo + 1, nn - (hi - lo) + 1
        h1 = np.repeat(f + lo, size1) + ragged_positions(size1)
        h2 = np.repeat(f, size2) + (np.repeat(hi, size2) + ragged_positions(size2)) % np.repeat(
            nn, size2)
        sizes = np.column_stack([size1, size2]).reshape(-1)
        src = np.column_stack([np.cumsum(size1) - size1,
                               len(h1) + np.cumsum(size2) - size2]).reshape(-1)
        order = np.concatenate([h1, h2])[np.repeat(src, sizes) + ragged_positions(sizes)]
        halves = Rings.from_index(sub.coords[order], np.repeat(np.arange(len(sizes)), sizes),
                                  len(sizes))
        split = big[chosen_ring]
        keep = np.ones(len(parts), dtype=bool)
        keep[split] = False
        parts = Rings.concat([parts.select(keep), halves])
        part_of = np.concatenate([part_of[keep], np.repeat(part_of[split], 2)])
        frozen = np.concatenate([frozen[keep], np.zeros(len(halves), dtype=bool)])
