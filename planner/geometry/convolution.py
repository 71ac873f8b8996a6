"""Minkowski sums of simple polygons with a convex polygon by the convolution method.

For a simple polygon P and a convex polygon Q, the convolution cycle of P and Q is the closed
curve that walks P's boundary translated by the vertex of Q extreme in each edge's outward
normal, and at every vertex of P turns through Q's vertices: forwards at a left turn, backwards
at a right turn. P + Q is exactly the set of points around which that cycle winds a positive
number of times. GEOS's zero-distance buffer keeps the faces of positive winding depth of a
self-crossing ring, so the sum of a whole outline costs one buffer of a ring of about
|P| + (turning of P) * |Q| vertices, instead of a convex decomposition of P (one piece per
inward vertex along a concave arc) and a union of all the pieces' sums.

Every result is checked before it is used: it must be one valid polygon; every vertex of the
cycle (each a point of P + Q) must lie on it; it must cover P translated by a vertex of Q; and
its area must lie between the Brunn-Minkowski lower bound and the cycle's signed area (the
integral of the winding number). Holes the cycle winds around, which GEOS can leave as needles
where many cycle edges nearly overlap, are filled first. A sum that fails is reported, so the
caller can take the convex-piece route for it. (The routes themselves are checked again
against the true obstacles by the independent safety check.)
"""

from __future__ import annotations

import numpy as np
import shapely

from .polygons import Rings, ragged_positions, signed_areas

__all__ = ["convolution_cycles", "polygon_sums", "winding_numbers"]

_TWO_PI = 2.0 * np.pi


def _directions(edges: np.ndarray) -> np.ndarray:
    angle = np.arctan2(edges[:, 1], edges[:, 0])
    return np.where(angle < 0.0, angle + _TWO_PI, angle)


def convolution_cycles(rings: Rings, q: np.ndarray) -> Rings:
    """The convolution cycle of every ring with the convex polygon `q`.

    `rings`: counter-clockwise simple rings without repeated or flat vertices (see
    `polygons.drop_collinear`); `q`: one canonical convex ring (m, 2) (counter-clockwise,
    strictly convex, starting at its lowest vertex, see `polygons.canonical_convex`). Every
    vertex of a cycle is one vertex of the ring plus one vertex of q, computed directly.
    """
    m = len(q)
    beta = _directions(np.roll(q, -1, axis=0) - q)  # rising from [0, pi) to below 2 pi
    theta = _directions(rings.coords[rings.next_index()] - rings.coords)
    # The edge from vertex v is translated by q[j]: the vertex of q after every edge of q whose
    # direction is at most the edge's (the edge merge of two convex rings places it there).
    j_out = np.searchsorted(beta, theta, side="right") % m
    prev = rings.prev_index()
    j_in = j_out[prev]
    # Turn at each vertex from the same angles, so the walk through q is always consistent.
    turn = (theta - theta[prev] + np.pi) % _TWO_PI - np.pi
    forward = turn > 0.0
    steps = np.where(forward, (j_out - j_in) % m, (j_in - j_out) % m)
    count = steps + 1
    vertex = np.repeat(np.arange(len(rings.coords)), count)
    sign = np.where(forward, 1, -1)
    k = (np.repeat(j_in, count) + ragged_positions(count) * np.repeat(sign, count)) % m
    return Rings.from_index(rings.coords[vertex] + q[k], rings.ring_of()[vertex], len(rings))


def winding_numbers(ring: np.ndarray, points: np.ndarray) -> np.ndarray:
    """How many times the closed curve through `ring` (n, 2) winds around each point (k, 2)."""
    a = ring
    b = np.roll(ring, -1, axis=0)
    out = np.zeros(len(points), dtype=np.int64)
    for i, (x, y) in enumerate(points):
        side = (b[:, 0] - a[:, 0]) * (y - a[:, 1]) - (x - a[:, 0]) * (b[:, 1] - a[:, 1])
        up = (a[:, 1] <= y) & (b[:, 1] > y) & (side > 0)
        down = (a[:, 1] > y) & (b[:, 1] <= y) & (side < 0)
        out[i] = int(up.sum()) - int(down.sum())
    return out


def _on_result(results: np.ndarray, cycles: Rings, tol: float) -> np.ndarray:
    """Per cycle: every vertex (a point of P + Q) lies on its result, within tol."""
    shapely.prepare(results)
    ring = cycles.ring_of()
    hit = shapely.intersects_xy(results[ring], cycles.coords[:, 0], cycles.coords[:, 1])
    miss = np.flatnonzero(~hit)
    if len(miss):
        hit[miss] = shapely.dwithin(results[ring[miss]], shapely.points(cycles.coords[miss]), tol)
    return np.bincount(ring[~hit], minlength=len(cycles)) == 0


def _covers_translate(results: np.ndarray, rings: Rings, q0: np.ndarray, tol: float
                      ) -> np.ndarray:
    """Per ring: its result covers P translated by q0, a vertex of Q (so part of P + Q)."""
    moved = shapely.transform(rings.to_polygons(), lambda c: c + q0)
    inside = shapely.covers(results, moved)
    for r in np.flatnonzero(~inside):
        inside[r] = shapely.covers(shapely.buffer(results[r], tol, join_style="mitre"), moved[r])
    return inside


def _area_in_bounds(results: np.ndarray, rings: Rings, cycles: Rings, q: np.ndarray, tol: float
                    ) -> np.ndarray:
    """Per ring: area(P + Q) between the Brunn-Minkowski bound (sqrt|P| + sqrt|Q|)^2 and the
    cycle's signed area, the integral of its winding number (>= the area where it is > 0)."""
    area = shapely.area(results)
    slack = tol * shapely.length(results) + 1e-9 * area
    a_q = float(signed_areas(Rings.from_list([q]))[0])
    lower = (np.sqrt(signed_areas(rings)) + np.sqrt(a_q)) ** 2
    return (area >= lower - slack) & (area <= signed_areas(cycles) + slack)


def _fill_wound_holes(results: np.ndarray, cycles: Rings, tol: float) -> np.ndarray:
    """The results without the holes that belong to P + Q: those the cycle winds around (GEOS
    can leave needle-thin ones where many cycle edges nearly overlap) and those thinner than
    tol (filling is conservative: the shape only grows)."""
    out = results.copy()
    for r in np.flatnonzero(shapely.get_num_interior_rings(results) > 0):
        shell = shapely.get_exterior_ring(results[r])
        holes = shapely.get_interior_ring(results[r], range(
            shapely.get_num_interior_rings(results[r])))
        areas = shapely.polygons(holes)
        inside = shapely.get_coordinates(shapely.point_on_surface(areas))
        wound = winding_numbers(cycles.ring(r), inside) > 0
        thin = shapely.is_empty(shapely.buffer(areas, -tol, join_style="mitre"))
        keep = holes[~(wound | thin)]
        if len(keep) < len(holes):
            out[r] = shapely.Polygon(shell, list(keep))
    return out


def polygon_sums(rings: Rings, q: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    """P + q for every ring P (same preconditions as `convolution_cycles`), as shapely Polygons,
    and per ring whether the sum passed both checks (False: use another method for it).

    `tol` is how far from the result a vertex of the cycle may lie after GEOS's noding (it
    retries at a coarser precision when exact noding fails). Results that fail are still
    returned (as computed), never used silently: the caller decides.
    """
    empty = np.full(len(rings), shapely.Polygon(), dtype=object)
    if len(rings) == 0:
        return empty, np.zeros(0, dtype=bool)
    fit = (rings.sizes >= 3) & (signed_areas(rings) > 0)
    if not fit.all():  # outside the method's preconditions: leave these to the caller
        results, ok = empty.copy(), np.zeros(len(rings), dtype=bool)
        if fit.any():
            results[fit], ok[fit] = polygon_sums(rings.select(fit), q, tol)
        return results, ok
    cycles = convolution_cycles(rings, q)
    try:
        results = shapely.buffer(cycles.to_polygons(), 0.0)
    except shapely.errors.GEOSException:
        return empty, np.zeros(len(rings), dtype=bool)
    ok = (shapely.get_type_id(results) == shapely.GeometryType.POLYGON) & shapely.is_valid(results)
    results[ok] = _fill_wound_holes(results[ok], cycles.select(ok), tol)
    for check in (
        lambda k: _on_result(results[k], cycles.select(k), tol),
        lambda k: _covers_translate(results[k], rings.select(k), q[0], tol),
        lambda k: _area_in_bounds(results[k], rings.select(k), cycles.select(k), q, tol),
    ):
        k = np.flatnonzero(ok)
        ok[k] = check(k)
    return results, ok
