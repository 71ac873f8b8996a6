"""Minkowski sums of convex polygons by merging their edges in angle order, many pairs at once.

For convex P and Q the boundary of P + Q is the edges of both, sorted by direction, laid end to
end from the sum of their lowest vertices; it has at most |P| + |Q| vertices. All requested pairs
are merged in one lexsort over the concatenated edges (keyed by pair, then angle), so the cost is
a few numpy passes, not a Python loop per pair.
"""

from __future__ import annotations

import numpy as np
import shapely

from .polygons import REL_NOISE, Rings, canonical_convex, ragged_positions

__all__ = ["edge_angles", "convex_sums", "convex_sum"]

_TWO_PI = 2.0 * np.pi


def edge_angles(rings: Rings) -> tuple[np.ndarray, np.ndarray]:
    """Edge vectors (vertex to its successor) and their directions in [0, 2 pi)."""
    edges = rings.coords[rings.next_index()] - rings.coords
    angle = np.arctan2(edges[:, 1], edges[:, 0])
    angle = np.where(angle < 0.0, angle + _TWO_PI, angle)
    return edges, angle


def convex_sums(a: Rings, b: Rings, ia: np.ndarray, ib: np.ndarray) -> Rings:
    """Ring k of the result is the Minkowski sum of `a` ring `ia[k]` and `b` ring `ib[k]`.

    Both inputs must be canonical convex rings (see `polygons.canonical_convex`): counter-
    clockwise, strictly convex, starting at their lowest-then-leftmost vertex, so that each
    ring's edge directions rise monotonically from 0 to 2 pi. Every output vertex is computed
    as a sum of one vertex of each input (no running sum, so no drift along long rings), and
    vertices between parallel edges are dropped.
    """
    ia = np.asarray(ia, dtype=np.int64)
    ib = np.asarray(ib, dtype=np.int64)
    k = len(ia)
    if k == 0:
        return Rings(np.zeros((0, 2)), np.zeros(1, dtype=np.int64))
    na = a.sizes[ia]
    nb = b.sizes[ib]
    ea, anga = edge_angles(a)
    eb, angb = edge_angles(b)

    src_a = np.repeat(a.offsets[ia], na) + ragged_positions(na)
    src_b = np.repeat(b.offsets[ib], nb) + ragged_positions(nb)
    pair = np.concatenate([np.repeat(np.arange(k), na), np.repeat(np.arange(k), nb)])
    angle = np.concatenate([anga[src_a], angb[src_b]])
    from_b = np.concatenate([np.zeros(len(src_a), np.int64), np.ones(len(src_b), np.int64)])
    edges = np.concatenate([ea[src_a], eb[src_b]])

    order = np.lexsort((angle, pair))
    pair_s = pair[order]
    from_b_s = from_b[order]
    edges_s = edges[order]

    n = na + nb
    starts = np.cumsum(n) - n
    b_before = np.cumsum(from_b_s) - from_b_s  # b-edges taken before this position, all pairs
    cb = b_before - np.repeat(b_before[starts], n)  # ... within this pair
    ca = ragged_positions(n) - cb
    va = a.offsets[ia][pair_s] + ca % na[pair_s]
    vb = b.offsets[ib][pair_s] + cb % nb[pair_s]
    vertices = a.coords[va] + b.coords[vb]

    # The vertex at position t joins edge t-1 and edge t (cyclic within the pair).
    prev = np.arange(-1, len(order) - 1)
    prev[starts] = starts + n - 1
    e_in = edges_s[prev]
    cross = e_in[:, 0] * edges_s[:, 1] - e_in[:, 1] * edges_s[:, 0]
    noise = REL_NOISE * np.hypot(e_in[:, 0], e_in[:, 1]) * np.hypot(edges_s[:, 0], edges_s[:, 1])
    keep = np.abs(cross) > noise
    return Rings.from_index(vertices[keep], pair_s[keep], k)


def convex_sum(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Minkowski sum of two convex polygons given as (n, 2) vertex arrays, any orientation.

    Convenience for single pairs; the vertices come back counter-clockwise, not closed.
    """
    rings, kept = canonical_convex(
        np.array([shapely.Polygon(np.asarray(p)), shapely.Polygon(np.asarray(q))], dtype=object)
    )
    if len(kept) != 2:
        raise ValueError("convex_sum needs two polygons with positive area")
    return convex_sums(rings, rings, np.array([0]), np.array([1])).ring(0).copy()
