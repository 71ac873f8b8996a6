"""Pure geometry: rings, convex Minkowski sums, convex decomposition, outer circle polygons.

Every check compares with something outside planner.geometry: shapely/GEOS constructions
(convex hulls, unions, areas, distances, buffers) or a textbook bound named above it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.geometry import (
    Rings,
    canonical_convex,
    circle_sides,
    circumscribed_polygon,
    circumscribed_polygons,
    convex_decomposition,
    convex_sum,
    convex_sums,
    drop_collinear,
    grow_convex,
    orient_ccw,
    reflect,
    signed_areas,
    start_lowest,
)

FAST = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# ---------------------------------------------------------------- strategies


@st.composite
def convex_polygons(draw, max_points: int = 24, scale: float = 100.0) -> np.ndarray:
    """A convex polygon: the convex hull of random points (shapely), as an (n, 2) array."""
    n = draw(st.integers(3, max_points))
    seed = draw(st.integers(0, 2**31))
    rng = np.random.default_rng(seed)
    cx, cy = draw(st.floats(-1000, 1000)), draw(st.floats(-1000, 1000))
    pts = rng.uniform(-scale, scale, (n, 2)) + [cx, cy]
    hull = shapely.MultiPoint(pts).convex_hull
    if hull.geom_type != "Polygon" or hull.area < 1e-3 * scale * scale:
        pts = np.array([[0, 0], [scale, 0], [0, scale]]) + [cx, cy]
        hull = shapely.Polygon(pts)
    ring = np.asarray(hull.exterior.coords)[:-1]
    if draw(st.booleans()):
        ring = ring[::-1]  # either orientation
    return np.roll(ring, draw(st.integers(0, len(ring) - 1)), axis=0)


@st.composite
def star_polygons(draw, max_points: int = 60) -> shapely.Polygon:
    """A simple star-shaped polygon: integer vertices at sorted angles, random radii."""
    n = draw(st.integers(3, max_points))
    rng = np.random.default_rng(draw(st.integers(0, 2**31)))
    angles = np.sort(rng.uniform(0, 2 * np.pi, n))
    radii = rng.uniform(20, 1000, n)
    pts = np.round(np.column_stack([radii * np.cos(angles), radii * np.sin(angles)]))
    poly = shapely.Polygon(pts)
    if not poly.is_valid or poly.area <= 0:
        poly = shapely.Polygon([(0, 0), (1000, 0), (0, 1000)])
    return poly


def reflex_count(poly: shapely.Polygon) -> int:
    """Reflex vertices of a simple polygon with integer coordinates (exact integer arithmetic)."""
    ring = np.asarray(shapely.orient_polygons(poly).exterior.coords)[:-1].astype(np.int64)
    e_in = ring - np.roll(ring, 1, axis=0)
    e_out = np.roll(ring, -1, axis=0) - ring
    cross = e_in[:, 0] * e_out[:, 1] - e_in[:, 1] * e_out[:, 0]
    return int((cross < 0).sum())


def comb(teeth: int) -> shapely.Polygon:
    """A comb: `teeth` teeth standing on a bar, two reflex vertices at the foot of each."""
    pts = [(0, 0), (10 * teeth, 0), (10 * teeth, 10)]
    for k in range(teeth - 1, -1, -1):
        x = 10 * k
        pts += [(x + 7, 10), (x + 7, 60), (x + 3, 60), (x + 3, 10)]
    return shapely.Polygon(pts + [(0, 10)])


def bite(m: int) -> shapely.Polygon:
    """A square with a quarter-disk bitten out of one corner: m reflex vertices in one run."""
    a = np.linspace(0, np.pi / 2, m + 2)[1:-1]
    arc = np.column_stack([900 * np.cos(a), 900 * np.sin(a)])
    return shapely.Polygon(np.vstack([[[900, 0], [1000, 0], [1000, 1000], [0, 1000], [0, 900]],
                                      arc[::-1]]))


def wavy_blob(m: int, lobes: int = 5) -> shapely.Polygon:
    """A smooth non-convex blob sampled at m points: long convex and concave arcs."""
    t = np.linspace(0, 2 * np.pi, m, endpoint=False)
    r = 500 * (1 + 0.25 * np.sin(lobes * t))
    return shapely.Polygon(np.column_stack([r * np.cos(t) + 1500, r * np.sin(t) + 700]))


# ---------------------------------------------------------------- rings


@FAST
@given(convex_polygons())
def test_orientation_and_start_vertex(ring: np.ndarray):
    rings = Rings.from_list([ring])
    ccw = orient_ccw(rings)
    # shapely (GEOS) as the reference for orientation and area.
    assert shapely.LinearRing(ccw.ring(0)).is_ccw
    assert signed_areas(ccw)[0] == pytest.approx(shapely.Polygon(ring).area, rel=1e-9)
    first = start_lowest(ccw).ring(0)[0]
    lowest = min(map(tuple, ring), key=lambda p: (p[1], p[0]))
    assert tuple(first) == lowest


def test_drop_collinear_matches_shapely_simplify_zero():
    ring = np.array([[0, 0], [5, 0], [10, 0], [10, 5], [10, 10], [10, 10], [0, 10], [0, 3]], float)
    got = drop_collinear(Rings.from_list([ring])).ring(0)
    # GEOS simplify with tolerance 0 removes exactly the collinear and repeated vertices.
    ref = shapely.simplify(shapely.Polygon(ring), 0.0)
    assert len(got) == len(ref.exterior.coords) - 1
    assert shapely.Polygon(got).symmetric_difference(ref).area == 0.0


def test_reflect_is_the_point_reflection_and_stays_ccw():
    ring = np.array([[1, 0], [4, 1], [2, 5]], float)
    out = reflect(Rings.from_list([ring])).ring(0)
    # shapely's affine scale by -1 about the origin is the point reflection.
    ref = shapely.affinity.scale(shapely.Polygon(ring), -1, -1, origin=(0, 0))
    assert shapely.Polygon(out).symmetric_difference(ref).area == pytest.approx(0, abs=1e-12)
    assert shapely.LinearRing(out).is_ccw


# ---------------------------------------------------------------- Minkowski sums


def hull_of_pairwise_sums(p: np.ndarray, q: np.ndarray) -> shapely.Polygon:
    """The reference sum of convex polygons: convex hull (shapely) of every vertex pair's sum."""
    sums = (p[:, None, :] + q[None, :, :]).reshape(-1, 2)
    return shapely.MultiPoint(sums).convex_hull


@FAST
@given(convex_polygons(), convex_polygons())
def test_convex_sum_equals_hull_of_pairwise_sums(p: np.ndarray, q: np.ndarray):
    got = convex_sum(p, q)
    ref = hull_of_pairwise_sums(p, q)
    poly = shapely.Polygon(got)
    assert poly.is_valid
    assert shapely.LinearRing(got).is_ccw
    # General-purpose reference: GEOS convex hull of all pairwise vertex sums.
    assert poly.symmetric_difference(ref).area <= 1e-9 * ref.area
    # Textbook fact: the sum of convex polygons with n and m vertices has at most n + m
    # vertices (de Berg, Cheong, van Kreveld, Overmars, Computational Geometry: Algorithms and
    # Applications, 3rd ed., ch. 13).
    assert len(got) <= len(p) + len(q)


@FAST
@given(st.lists(convex_polygons(max_points=12), min_size=1, max_size=6),
       st.lists(convex_polygons(max_points=12), min_size=1, max_size=3))
def test_vectorised_sums_equal_the_reference_for_every_pair(ps, qs):
    a, _ = canonical_convex(np.array([shapely.Polygon(p) for p in ps], dtype=object))
    b, _ = canonical_convex(np.array([shapely.Polygon(q) for q in qs], dtype=object))
    ia = np.repeat(np.arange(len(a)), len(b))
    ib = np.tile(np.arange(len(b)), len(a))
    sums = convex_sums(a, b, ia, ib)
    assert len(sums) == len(ia)
    for k in range(len(ia)):
        ref = hull_of_pairwise_sums(a.ring(ia[k]), b.ring(ib[k]))
        # GEOS convex hull of pairwise sums, pair by pair.
        assert shapely.Polygon(sums.ring(k)).symmetric_difference(ref).area <= 1e-9 * ref.area


def test_sum_of_axis_aligned_squares_keeps_no_collinear_vertex():
    sq = np.array([[0, 0], [1, 0], [1, 1], [0, 1]], float)
    got = convex_sum(sq, 2 * sq)
    # Worked example: unit square + 2-square = 3-square, exactly 4 corners.
    assert len(got) == 4
    assert shapely.Polygon(got).equals(shapely.box(0, 0, 3, 3))


# ---------------------------------------------------------------- decomposition


def check_decomposition(poly: shapely.Polygon) -> int:
    """Decompose `poly`; check pieces against shapely; return the number of pieces."""
    rings, owner = convex_decomposition([poly])
    assert (owner == 0).all()
    pieces = rings.to_polygons()
    assert shapely.is_valid(pieces).all()
    # Convex: GEOS convex hull of each piece adds no area.
    hull_area = shapely.area(shapely.convex_hull(pieces))
    assert np.allclose(hull_area, shapely.area(pieces), rtol=1e-9, atol=1e-9)
    # The union (GEOS) is the polygon, and the areas add up (no overlaps).
    union = shapely.union_all(pieces)
    assert union.symmetric_difference(poly).area <= 1e-9 * poly.area
    assert shapely.area(pieces).sum() == pytest.approx(poly.area, rel=1e-9)
    return len(pieces)


@FAST
@given(star_polygons())
def test_decomposition_of_star_polygons(poly: shapely.Polygon):
    n = check_decomposition(poly)
    # Hertel-Mehlhorn leaves only essential diagonals, at most two per reflex vertex, hence at
    # most 2r + 1 pieces (r reflex vertices), which is at most 4x optimal (from memory:
    # J. O'Rourke, Computational Geometry in C, 2nd ed., sec. 2.5, convex partitioning).
    assert n <= 2 * reflex_count(poly) + 1


@pytest.mark.parametrize("poly", [comb(12), bite(300), wavy_blob(900), wavy_blob(2600, lobes=9)],
                         ids=["comb", "bite", "blob", "big-blob"])
def test_decomposition_of_polygons_with_many_reflex_vertices(poly: shapely.Polygon):
    n = check_decomposition(poly)
    ring = np.asarray(shapely.orient_polygons(poly).exterior.coords)[:-1]
    e_in = ring - np.roll(ring, 1, axis=0)
    e_out = np.roll(ring, -1, axis=0) - ring
    r = int((e_in[:, 0] * e_out[:, 1] - e_in[:, 1] * e_out[:, 0] < 0).sum())
    # Hertel-Mehlhorn bound, as above (from memory: O'Rourke, sec. 2.5): at most 2r + 1 pieces.
    assert n <= 2 * r + 1


def test_convex_polygons_are_kept_whole_and_holes_are_decomposed():
    square = shapely.box(0, 0, 10, 10)
    framed = shapely.Polygon([(0, 0), (10, 0), (10, 10), (0, 10)],
                             [[(3, 3), (3, 6), (6, 6), (6, 3)]])
    rings, owner = convex_decomposition([square, framed])
    assert (owner == 0).sum() == 1
    pieces = rings.to_polygons()
    # shapely union and area of the framed square's pieces give back the frame.
    assert shapely.union_all(pieces[owner == 1]).symmetric_difference(framed).area < 1e-9
    assert shapely.area(pieces[owner == 1]).sum() == pytest.approx(framed.area)


# ---------------------------------------------------------------- circles and rounded offsets


@FAST
@given(st.floats(0.05, 500), st.floats(0.001, 1.0), st.floats(-3000, 3000), st.floats(-3000, 3000))
def test_circumscribed_polygon_contains_the_circle_within_tolerance(r, tol, cx, cy):
    ring = circumscribed_polygon((cx, cy), r, tol)
    poly = shapely.Polygon(ring)
    centre = shapely.Point(cx, cy)
    # shapely (GEOS) distances: every edge is at least r from the centre, so the disk is inside
    # (elementary geometry: a convex polygon whose edges all keep distance r contains the disk).
    assert shapely.distance(centre, poly.exterior) >= r * (1 - 1e-12)
    assert poly.contains(centre)
    # Points sampled finely on the true circle all lie in the polygon (shapely covers).
    t = np.linspace(0, 2 * np.pi, 4000, endpoint=False)
    circle_pts = shapely.points(np.column_stack([cx + r * np.cos(t), cy + r * np.sin(t)]))
    assert shapely.covers(poly, circle_pts).all()
    # Vertices stick out by at most the tolerance.
    dist = np.hypot(ring[:, 0] - cx, ring[:, 1] - cy)
    assert dist.max() - r <= tol * (1 + 1e-9) + 1e-12 * (abs(cx) + abs(cy) + r)
    assert shapely.LinearRing(ring).is_ccw


def test_circle_sides_is_the_smallest_multiple_of_four_within_tolerance():
    for r, tol in [(1.0, 0.05), (25.0, 0.05), (1000.0, 0.01), (2.0, 5.0)]:
        n = int(circle_sides(r, tol))
        assert n % 4 == 0
        # Elementary trigonometry: vertex radius of a circumscribed n-gon is r / cos(pi / n).
        assert r / math.cos(math.pi / n) - r <= tol
        if n > 4:
            assert r / math.cos(math.pi / (n - 4)) - r > tol


def test_circumscribed_polygons_vectorised_match_one_by_one():
    centers = np.array([[0, 0], [10, 5], [-3, 7]], float)
    radii = np.array([1.0, 4.0, 0.5])
    many = circumscribed_polygons(centers, radii, 0.01)
    for k in range(3):
        one = circumscribed_polygon(tuple(centers[k]), radii[k], 0.01)
        assert np.array_equal(many.ring(k), one)


@FAST
@given(convex_polygons(max_points=12), st.floats(0.1, 20), st.floats(0.005, 0.5))
def test_grow_convex_contains_the_true_offset_within_tolerance(ring, r, tol):
    canon, _ = canonical_convex(np.array([shapely.Polygon(ring)], dtype=object))
    grown = shapely.Polygon(grow_convex(canon, r, tol).ring(0))
    base = shapely.Polygon(ring)
    # shapely distance: the grown boundary keeps at least r from the polygon, so it contains the
    # whole true offset (the Minkowski sum with the disk of radius r) ...
    assert shapely.distance(grown.exterior, base) >= r * (1 - 1e-9)
    assert grown.contains(base)
    # ... and none of it is farther than r + tol (GEOS Hausdorff distance to the polygon).
    far = max(shapely.distance(shapely.Point(p), base) for p in grown.exterior.coords)
    assert far <= r + tol * (1 + 1e-9) + 1e-9
    # Shapely's own buffer puts its vertices ON the true offset: all inside ours.
    assert shapely.covers(grown, shapely.points(base.buffer(r, quad_segs=64).exterior.coords)).all()


# ---------------------------------------------------------------- cuts before triangulation


@pytest.mark.parametrize("poly", [wavy_blob(700), bite(200), comb(8)], ids=["blob", "bite", "comb"])
def test_caps_and_diagonal_splits_tile_the_polygon(poly: shapely.Polygon):
    from planner.geometry import cut_caps, split_by_diagonals

    rings = drop_collinear(orient_ccw(Rings.from_polygons([poly])))
    cores, caps, cap_of = cut_caps(rings)
    parts, part_of = split_by_diagonals(cores, limit=40)
    tiles = np.concatenate([caps.to_polygons(), parts.to_polygons()])
    # shapely: every tile valid, caps convex (hull adds no area), tiles' union is the polygon
    # and their areas add up to its area (no overlap).
    assert shapely.is_valid(tiles).all()
    cap_polys = caps.to_polygons()
    assert np.allclose(shapely.area(shapely.convex_hull(cap_polys)), shapely.area(cap_polys))
    assert shapely.union_all(tiles).symmetric_difference(poly).area <= 1e-9 * poly.area
    assert shapely.area(tiles).sum() == pytest.approx(poly.area, rel=1e-9)
    assert (cap_of == 0).all() and (part_of == 0).all()
