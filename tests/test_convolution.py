"""Sums of simple polygons with a convex one by convolution, and the outward dent filling.

Each sum is compared with a reference built from shapely alone: GEOS's constrained Delaunay
triangles of P, each summed with Q as the convex hull of all pairwise vertex sums, and the
union of those (a Minkowski sum distributes over a union).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.cspace import c_obstacle_pieces
from planner.geometry import (
    Rings,
    bisect_polygons,
    canonical_convex,
    convolution_cycles,
    drop_collinear,
    fill_shallow_dents,
    orient_ccw,
    polygon_sums,
    winding_numbers,
)
from planner.geometry import convolution as convolution_module
from planner.model import Obstacle

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def reference_sum(p: shapely.Polygon, q: shapely.Polygon) -> shapely.Geometry:
    """P + Q from shapely only: union over P's CDT triangles of hull(triangle + Q)."""
    qc = np.asarray(q.exterior.coords)[:-1]
    triangles = shapely.get_parts(shapely.constrained_delaunay_triangles(p))
    tc = shapely.get_coordinates(triangles).reshape(len(triangles), 4, 2)[:, :3]
    sums = (tc[:, :, None, :] + qc[None, None, :, :]).reshape(len(triangles), -1, 2)
    return shapely.union_all(shapely.convex_hull(shapely.multipoints(sums)))


def as_rings(p: shapely.Polygon) -> Rings:
    return drop_collinear(orient_ccw(Rings.from_list([np.asarray(p.exterior.coords)[:-1]])))


def canonical(q: shapely.Polygon) -> np.ndarray:
    rings, _ = canonical_convex(np.array([q], dtype=object))
    return rings.ring(0)


def comb(teeth: int, gap: float, width: float = 3.0, height: float = 40.0) -> shapely.Polygon:
    """Teeth on a bar; gaps narrower than the head close up in the sum."""
    pts = [(0.0, 0.0), (teeth * (width + gap), 0.0)]
    for k in range(teeth - 1, -1, -1):
        x = k * (width + gap)
        pts += [(x + width, height), (x, height), (x, 5.0), (x - gap, 5.0)] if k else [
            (x + width, height), (x, height)]
    return shapely.Polygon(pts[:2] + [(teeth * (width + gap), 5.0)] + pts[2:])


def c_shape(radius: float, gap: float) -> shapely.Polygon:
    """A thick ring cut open by a slot: the sum has a hole when the slot is wide, none when the
    head closes it."""
    ring = shapely.Point(0, 0).buffer(radius, 16).difference(
        shapely.Point(0, 0).buffer(0.6 * radius, 16))
    return ring.difference(shapely.box(-gap / 2, 0, gap / 2, 2 * radius))


def spiral(turns: float, width: float) -> shapely.Polygon:
    t = np.linspace(0, turns * 2 * np.pi, 240)
    r = 5 + 3 * t
    return shapely.LineString(np.column_stack([r * np.cos(t), r * np.sin(t)])).buffer(
        width / 2, quad_segs=3)


def octagon(w: float, h: float) -> shapely.Polygon:
    c = min(w, h) / 4
    return shapely.Polygon([(-w / 2 + c, -h / 2), (w / 2 - c, -h / 2), (w / 2, -h / 2 + c),
                            (w / 2, h / 2 - c), (w / 2 - c, h / 2), (-w / 2 + c, h / 2),
                            (-w / 2, h / 2 - c), (-w / 2, -h / 2 + c)])


SHAPES = [comb(6, 1.0), comb(6, 30.0), c_shape(30, 2.0), c_shape(30, 40.0), spiral(2.5, 2.0),
          spiral(1.5, 8.0)]
HEADS = [octagon(20, 12), octagon(4, 3), shapely.Polygon([(0, 0), (9, 2), (3, 7)])]


def assert_same_area(got: shapely.Geometry, want: shapely.Geometry) -> None:
    assert shapely.area(shapely.symmetric_difference(got, want)) <= 1e-9 * want.area


@pytest.mark.parametrize("p", SHAPES)
@pytest.mark.parametrize("q", HEADS)
def test_sums_of_hard_shapes_equal_the_triangle_reference(p, q):
    got, ok = polygon_sums(as_rings(p), canonical(q), 1e-9)
    assert ok.all()
    # Reference: shapely CDT triangles, convex hull of pairwise sums, GEOS union.
    assert_same_area(got[0], reference_sum(p, q))


def test_the_sum_keeps_the_hole_a_wide_slot_leaves_and_fills_a_narrow_one():
    q = canonical(octagon(10, 10))
    wide, ok_w = polygon_sums(as_rings(c_shape(30, 20.0)), q, 1e-9)
    narrow, ok_n = polygon_sums(as_rings(c_shape(30, 1.0)), q, 1e-9)
    assert ok_w.all() and ok_n.all()
    # Worked example: the ring's inner radius is 18 and the head is 10 across. A 20 mm slot
    # narrows to 10 and stays open, so the inside stays joined to the outside: no hole.
    assert shapely.get_num_interior_rings(wide[0]) == 0
    # A 1 mm slot closes; the inside shrinks to a radius of about 13 and is left as a hole.
    assert shapely.get_num_interior_rings(narrow[0]) == 1
    assert_same_area(narrow[0], reference_sum(c_shape(30, 1.0), octagon(10, 10)))


@FAST
@given(st.integers(0, 2**31), st.integers(5, 80), st.integers(3, 10))
def test_random_star_polygons_with_random_convex_heads(seed, n, m):
    rng = np.random.default_rng(seed)
    a = np.sort(rng.uniform(0, 2 * np.pi, n))
    r = rng.uniform(2, 60, n)
    p = shapely.Polygon(np.column_stack([r * np.cos(a), r * np.sin(a)]))
    if not p.is_valid or p.area <= 1e-6:
        return
    q = shapely.MultiPoint(rng.uniform(-15, 15, (m, 2))).convex_hull
    if q.geom_type != "Polygon" or q.area < 1.0:
        return
    got, ok = polygon_sums(as_rings(p), canonical(q), 1e-9)
    assert ok.all()
    # Reference: shapely CDT triangles, convex hull of pairwise sums, GEOS union.
    want = reference_sum(p, q)
    assert shapely.area(shapely.symmetric_difference(got[0], want)) <= 1e-8 * want.area


def test_winding_numbers_of_a_square_traversed_twice_and_reversed():
    square = np.array([[0, 0], [4, 0], [4, 4], [0, 4]], dtype=float)
    twice = np.vstack([square, square])
    pts = np.array([[2.0, 2.0], [5.0, 2.0]])
    # Definition of the winding number: +1 per counter-clockwise turn about the point.
    assert winding_numbers(square, pts).tolist() == [1, 0]
    assert winding_numbers(twice, pts).tolist() == [2, 0]
    assert winding_numbers(square[::-1], pts).tolist() == [-1, 0]


def test_the_cycle_of_a_convex_polygon_is_its_edge_merge_sum():
    p = octagon(30, 20)
    q = canonical(octagon(6, 4))
    cycle = convolution_cycles(as_rings(p), q)
    # For convex P the cycle is already the boundary of P + Q: its signed area is the area of
    # the reference sum (shoelace formula against GEOS).
    x, y = cycle.ring(0).T
    shoelace = 0.5 * float(np.sum(x * np.roll(y, -1) - np.roll(x, -1) * y))
    assert shoelace == pytest.approx(reference_sum(p, octagon(6, 4)).area, rel=1e-12)


def test_a_broken_buffer_result_is_caught_and_not_used(monkeypatch):
    """If GEOS returned a sum missing a part, the checks refuse it (the caller falls back)."""
    real = shapely.buffer

    def lossy(geom, distance, **kw):
        out = real(geom, distance, **kw)
        return shapely.difference(out, shapely.box(-1e9, -1e9, 0, 1e9))  # drop the left half

    monkeypatch.setattr(convolution_module.shapely, "buffer", lossy)
    _, ok = polygon_sums(as_rings(comb(6, 1.0)), canonical(octagon(20, 12)), 1e-9)
    assert not ok.any()


def test_outside_the_preconditions_the_sum_is_refused():
    flat = Rings.from_list([[(0, 0), (10, 0)]])
    _, ok = polygon_sums(flat, canonical(octagon(4, 4)), 1e-9)
    assert not ok.any()


def test_c_obstacle_pieces_match_the_reference_for_a_non_convex_footprint():
    """A U-shaped head is cut into convex pieces; every (outline, piece) pair is convolved."""
    u_head = [(-20, -10), (20, -10), (20, 15), (12, 15), (12, 0), (-12, 0), (-12, 15), (-20, 15)]
    outline = comb(5, 6.0)
    ob = Obstacle("comb", polygon=tuple(map(tuple, np.asarray(outline.exterior.coords)[:-1])))
    pieces, owner = c_obstacle_pieces([ob], u_head, 0.0, 0.05)
    got = shapely.union_all(pieces)
    reflected = shapely.Polygon(-np.asarray(u_head, dtype=float))
    # Reference: the sum distributes over unions, so P + (-F) is the union of the triangle
    # references over -F's CDT triangles (shapely).
    tri = shapely.get_parts(shapely.constrained_delaunay_triangles(reflected))
    want = shapely.union_all([reference_sum(outline, t) for t in tri])
    assert_same_area(got, want)
    assert set(owner.tolist()) == {0}


# ---------------------------------------------------------------- dents


def zigzag_arc(n: int, radius: float, step: float) -> shapely.Polygon:
    """A disk sampled at n points with coordinates rounded to `step`: a hair-thin zig-zag."""
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    pts = np.round(np.column_stack([radius * np.cos(t), radius * np.sin(t)]) / step) * step
    return shapely.Polygon(pts)


def test_filling_dents_removes_rounding_zigzag_and_only_grows_the_outline():
    p = zigzag_arc(4000, 40.0, 0.001)
    rings = as_rings(p)
    reflex_before = _reflex(rings)
    assert reflex_before > 100  # the rounding really does zig-zag
    depth = 0.005
    filled = fill_shallow_dents(rings, depth)
    out = filled.to_polygons()[0]
    assert _reflex(filled) < reflex_before // 10
    # shapely as the reference: the filled outline is valid, leaves nothing of the input out
    # (GEOS difference; `covers` is thrown by the input's rounding-repeated vertices) and lies
    # within `depth` of it (Hausdorff distance).
    assert out.is_valid
    assert shapely.area(shapely.difference(p, out)) <= 1e-12 * p.area
    assert shapely.hausdorff_distance(out, p) <= depth


def test_a_dent_deeper_than_the_allowance_is_kept():
    # Worked example: the notch vertex lies 0.1 below the chord y = 10 between its neighbours;
    # with an allowance of 0.05 it stays (GEOS equals), with 0.2 the square comes back.
    notch = shapely.Polygon([(0, 0), (10, 0), (10, 10), (5, 9.9), (0, 10)])
    out = fill_shallow_dents(as_rings(notch), 0.05).to_polygons()[0]
    assert out.equals(notch)
    filled = fill_shallow_dents(as_rings(notch), 0.2).to_polygons()[0]
    assert filled.equals(shapely.box(0, 0, 10, 10))


def test_a_dent_whose_filling_would_cross_another_edge_is_kept():
    # A shallow notch (0.01 deep) with the tip of a hooked arm hanging into it, clear of the
    # outline: filling the notch would run through the arm, so the notch must stay.
    base = shapely.Polygon([(0, 0), (10, 0), (10, 10), (5, 9.99), (0, 10)])
    arm = shapely.union_all([shapely.box(-1, 5, 0.5, 13), shapely.box(-1, 12, 5.01, 13),
                             shapely.box(4.99, 9.995, 5.01, 13)])
    hooked = shapely.union(base, arm)
    assert hooked.geom_type == "Polygon" and hooked.is_valid
    out = fill_shallow_dents(as_rings(hooked), 0.05)
    assert out.to_polygons()[0].is_valid
    assert np.any(np.all(out.coords == [5.0, 9.99], axis=1))  # the notch is still there


def _reflex(rings: Rings) -> int:
    p = rings.coords
    e_in = p - p[rings.prev_index()]
    e_out = p[rings.next_index()] - p
    return int(np.sum(e_in[:, 0] * e_out[:, 1] - e_in[:, 1] * e_out[:, 0] < 0))


# ---------------------------------------------------------------- bisection


def test_bisected_parts_cover_the_polygon_and_stay_small():
    p = comb(400, 2.0)
    parts, owner = bisect_polygons(np.array([p, octagon(30, 20)], dtype=object), 64)
    assert set(owner.tolist()) == {0, 1}
    mine = parts[owner == 0]
    assert len(mine) > 1
    assert all(shapely.get_num_coordinates(g) - 1 <= 64 for g in mine)
    # GEOS as the reference: the parts' union is the polygon, and their areas add up to its
    # area (they do not overlap).
    assert_same_area(shapely.union_all(mine), p)
    assert sum(g.area for g in mine) == pytest.approx(p.area, rel=1e-12)
    assert parts[owner == 1][0].equals(octagon(30, 20))  # small enough: left whole


def test_a_long_comb_is_summed_in_parts_and_still_equals_the_reference():
    outline = comb(300, 1.0)
    ob = Obstacle("comb", polygon=tuple(map(tuple, np.asarray(outline.exterior.coords)[:-1])))
    head = octagon(40, 30)
    pieces, owner = c_obstacle_pieces([ob], np.asarray(head.exterior.coords)[:-1], 0.0, 0.05)
    assert len(pieces) > 1 and set(owner.tolist()) == {0}
    reflected = shapely.Polygon(-np.asarray(head.exterior.coords)[:-1])
    # Reference: shapely CDT triangles, convex hull of pairwise sums, GEOS union.
    assert_same_area(shapely.union_all(pieces), reference_sum(outline, reflected))
