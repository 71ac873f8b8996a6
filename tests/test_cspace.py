"""The configuration space: grown obstacles, their union, heights, explanations.

Scenes are built as model.Scene objects directly. Every check compares with a reference computed
by shapely/GEOS without planner.geometry (hulls of pairwise vertex sums, distances, buffers), a
hand-worked value, or a textbook theorem named above it.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import shapely
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.config import Settings
from planner.cspace import (
    build_free_space,
    c_obstacle_pieces,
    checked_union,
    free_space_key,
    repair_union,
)
from planner.errors import PlanningError
from planner.model import Circle, Head, Obstacle, Scene, Target, Travel

HEADS = Path(__file__).resolve().parent.parent / "config" / "heads.yaml"
SQUARE20 = ((-10.0, -10.0), (10.0, -10.0), (10.0, 10.0), (-10.0, 10.0))
SETTINGS = Settings()  # mm, arc tolerance 0.05, resolution 0.001


def make_scene(obstacles, footprint=SQUARE20, margin=2.0, ride_height=None,
               travel=(0.0, 1000.0, 0.0, 600.0), units="mm") -> Scene:
    return Scene(
        file="test.yaml", sha256="0" * 64, units=units, travel=Travel(*travel),
        head=Head(None, tuple(footprint), margin, ride_height), obstacles=tuple(obstacles),
        start=(5.0, 5.0), targets=(Target("t1", (900.0, 500.0)),),
    )


def rect(oid, x0, y0, x1, y1, height=None) -> Obstacle:
    return Obstacle(oid, polygon=((x0, y0), (x1, y0), (x1, y1), (x0, y1)), height=height)


def exact_c_obstacle(obstacle: shapely.Polygon, footprint: shapely.Polygon) -> shapely.Polygon:
    """Reference obstacle + (-footprint) by brute force: GEOS triangulates both, every triangle
    pair's sum is the convex hull of its 9 vertex sums, and GEOS unites them all."""
    neg = shapely.affinity.scale(footprint, -1, -1, origin=(0, 0))
    ta = shapely.get_parts(shapely.constrained_delaunay_triangles(obstacle))
    tb = shapely.get_parts(shapely.constrained_delaunay_triangles(neg))
    hulls = []
    for a in ta:
        pa = np.asarray(a.exterior.coords)[:3]
        for b in tb:
            pb = np.asarray(b.exterior.coords)[:3]
            hulls.append(shapely.MultiPoint((pa[:, None] + pb[None]).reshape(-1, 2)).convex_hull)
    return shapely.union_all(hulls)


# ---------------------------------------------------------------- margin, by hand


def test_a_point_exactly_margin_away_lies_on_the_boundary_within_the_pad():
    scene = make_scene([rect("block", 100, 100, 200, 200)])
    free = build_free_space(scene, SETTINGS)
    pad = SETTINGS.resolution
    tol = SETTINGS.arc_tolerance
    # By hand: with the 20 x 20 head at x = 212 its left side is at x = 202, exactly the 2 mm
    # margin from the block's right side (x = 200).
    side = shapely.Point(212.0, 150.0)
    assert free.blocked.covers(side)
    assert free.blocked.boundary.distance(side) <= pad + 1e-9
    # By hand: a tool point 2 mm diagonally off the grown corner (210, 210) puts the head's
    # corner exactly 2 mm from the block's corner; the outer arc polygon may reach tol past it.
    corner = shapely.Point(210 + 2 / math.sqrt(2), 210 + 2 / math.sqrt(2))
    assert free.blocked.covers(corner)
    assert free.blocked.boundary.distance(corner) <= pad + tol + 1e-9
    # Just past the margin, the pad and the arc tolerance, the point is free.
    assert not free.blocked.intersects(shapely.Point(212 + pad + 1e-6, 150.0))
    away = 2 + pad + tol + 1e-6
    assert not free.blocked.intersects(
        shapely.Point(210 + away / math.sqrt(2), 210 + away / math.sqrt(2)))
    assert free.clearance == pytest.approx(2.0 + pad)
    assert 0 < free.eps < pad


def test_grown_polygon_keeps_margin_and_stays_within_the_arc_tolerance():
    block = shapely.Polygon([(300, 100), (420, 130), (380, 260), (330, 180), (280, 230)])
    scene = make_scene([Obstacle("arrow", polygon=tuple(block.exterior.coords)[:-1])],
                       footprint=((-15, -5), (20, -8), (5, 12)))
    free = build_free_space(scene, SETTINGS)
    exact = exact_c_obstacle(block, shapely.Polygon(scene.head.footprint))
    c = free.clearance
    # shapely distance to the exact sum (brute force, above): the grown boundary keeps at least
    # the clearance (conservative) and is nowhere farther than clearance + arc tolerance.
    assert shapely.distance(free.blocked.exterior, exact) >= c * (1 - 1e-9)
    assert free.blocked.contains(exact)
    far = max(shapely.distance(shapely.Point(p), exact) for p in free.blocked.exterior.coords)
    assert far <= c + SETTINGS.arc_tolerance + 1e-9


def test_circle_obstacle_is_grown_from_outside():
    scene = make_scene([Obstacle("peg", circle=Circle((500.0, 300.0), 25.0))],
                       footprint=((-30, -10), (25, -20), (35, 15), (-10, 25)))
    free = build_free_space(scene, SETTINGS)
    neg = shapely.affinity.translate(
        shapely.affinity.scale(shapely.Polygon(scene.head.footprint), -1, -1, origin=(0, 0)),
        500, 300)
    reach = 25.0 + free.clearance
    # True C-obstacle = points within 25 + clearance of the reflected footprint at the centre
    # (shapely distance): our boundary keeps at least that distance, so it contains all of it,
    # and no vertex is farther than reach + arc tolerance.
    assert shapely.distance(free.blocked.exterior, neg) >= reach * (1 - 1e-12)
    assert free.blocked.contains(neg)
    far = max(shapely.distance(shapely.Point(p), neg) for p in free.blocked.exterior.coords)
    assert far <= reach + SETTINGS.arc_tolerance + 1e-9


# ---------------------------------------------------------------- heights, names, components


def test_passed_over_obstacles_are_not_grown_and_equal_height_ones_are():
    scene = make_scene([rect("low", 100, 100, 150, 150, height=9.9),
                        rect("level", 300, 100, 350, 150, height=10.0),
                        rect("tall", 500, 100, 550, 150, height=50.0),
                        rect("unknown", 700, 100, 750, 150)], ride_height=10.0)
    free = build_free_space(scene, SETTINGS)
    # Contract (interface.md): lower than ride_height is passed over; exactly as high is avoided;
    # no height is always avoided.
    assert free.obstacle_ids == ("level", "tall", "unknown")
    assert not free.blocked.intersects(shapely.Point(125, 125))
    for x in (325, 525, 725):
        assert free.blocked.contains(shapely.Point(x, 125))
    with pytest.raises(KeyError, match="low"):
        free.grown("low")


def test_blocking_names_the_obstacles_that_contain_the_point():
    u_shape = ((100, 100), (300, 100), (300, 300), (250, 300), (250, 150), (150, 150),
               (150, 300), (100, 300))
    scene = make_scene([Obstacle("u", polygon=u_shape), rect("a", 600, 100, 700, 200),
                        rect("b", 690, 100, 800, 200)])
    free = build_free_space(scene, SETTINGS)
    assert free.blocking((125.0, 250.0)) == ["u"]
    assert free.blocking((650.0, 150.0)) == ["a"]
    assert free.blocking((695.0, 150.0)) == ["a", "b"]  # grown shapes overlap here
    assert free.blocking((450.0, 450.0)) == []
    # Every vertex of the U's own pieces lies on a seam or the boundary; points just inside the
    # U's true shape (checked with shapely) are always named, seams included.
    u_poly = shapely.Polygon(u_shape)
    for piece in free.pieces[free.piece_owner == free.obstacle_ids.index("u")]:
        for x, y in np.asarray(piece.exterior.coords)[:-1]:
            if u_poly.contains(shapely.Point(x, y)):
                assert "u" in free.blocking((x, y))
    # Near, not inside: within 20 mm of b's grown shape.
    assert free.blocking((830.0, 150.0)) == []
    assert free.blocking((830.0, 150.0), distance=20.0) == ["b"]
    # The grown shape of one obstacle is its pieces' union (shapely), cached.
    assert free.grown("u").equals(shapely.union_all(free.pieces[free.piece_owner == 0]))
    assert free.grown("u") is free.grown("u")


def test_component_of_tells_separated_free_regions_apart():
    wall = rect("wall", 480, -50, 520, 650)  # reaches past the travel box: splits it in two
    free = build_free_space(make_scene([wall]), SETTINGS)
    left, right = free.component_of((100.0, 300.0)), free.component_of((900.0, 300.0))
    assert left is not None and right is not None and left != right
    assert free.component_of((500.0, 300.0)) is None
    # shapely: the component index is that of the region part containing the point.
    assert free.components()[left].covers(shapely.Point(100, 300))
    assert len(free.components()) == 2


def test_blocked_and_region_are_valid_and_region_is_box_minus_blocked():
    obstacles = [rect("r1", 100, 100, 200, 150), Obstacle("c1", circle=Circle((400, 300), 40)),
                 Obstacle("tri", polygon=((600, 100), (700, 120), (640, 220)))]
    free = build_free_space(make_scene(obstacles), SETTINGS)
    assert shapely.is_valid(free.blocked) and shapely.is_valid(free.region)
    # shapely difference as the reference for the free region.
    ref = free.box.difference(free.blocked)
    assert free.region.symmetric_difference(ref).area < 1e-9


# ---------------------------------------------------------------- the U-shaped gripper


def gripper_footprint() -> tuple:
    heads = yaml.safe_load(HEADS.read_text())
    return tuple(tuple(map(float, p)) for p in heads["heads"]["gripper-twin"]["footprint"])


def test_non_convex_footprint_matches_brute_force_triangle_pairs():
    footprint = gripper_footprint()
    obstacles = [Obstacle("ell", polygon=((100, 100), (260, 100), (260, 140), (140, 140),
                                          (140, 260), (100, 260))),
                 rect("bar", 500, 200, 520, 400)]
    pieces, owner = c_obstacle_pieces(obstacles, footprint, 0.0, SETTINGS.arc_tolerance)
    fp = shapely.Polygon(footprint)
    for k, o in enumerate(obstacles):
        ref = exact_c_obstacle(shapely.Polygon(o.polygon), fp)
        got = shapely.union_all(pieces[owner == k])
        # Brute-force reference (shapely hulls of triangle pairs' vertex sums, GEOS union).
        assert got.symmetric_difference(ref).area <= 1e-9 * ref.area
    # With the margin: the result holds the exact sum grown by the clearance and stays within
    # clearance + arc tolerance of it (shapely distances).
    scene = make_scene(obstacles, footprint=footprint, margin=2.5)
    free = build_free_space(scene, SETTINGS)
    for o in obstacles:
        ref = exact_c_obstacle(shapely.Polygon(o.polygon), fp)
        grown = free.grown(o.id)
        assert shapely.distance(grown.exterior, ref) >= free.clearance * (1 - 1e-9)
        assert grown.contains(ref)
        far = max(shapely.distance(shapely.Point(p), ref) for p in grown.exterior.coords)
        assert far <= free.clearance + SETTINGS.arc_tolerance + 1e-9


# ---------------------------------------------------------------- union complexity


@st.composite
def disjoint_convex_scenes(draw):
    """Up to 12 convex obstacles in separate cells of a grid (so pairwise disjoint), integer
    vertices, and a convex integer head around the tool point."""
    rng = np.random.default_rng(draw(st.integers(0, 2**31)))
    n = draw(st.integers(2, 12))
    cells = rng.choice(16, size=n, replace=False)
    obstacles = []
    for k, cell in enumerate(cells):
        x0, y0 = 100 * (cell % 4), 100 * (cell // 4)
        pts = np.round(rng.uniform([x0 + 5, y0 + 5], [x0 + 95, y0 + 95], (rng.integers(3, 9), 2)))
        hull = shapely.MultiPoint(pts).convex_hull
        if hull.geom_type != "Polygon":
            hull = shapely.box(x0 + 10, y0 + 10, x0 + 60, y0 + 40)
        obstacles.append(Obstacle(f"o{k}", polygon=tuple(hull.exterior.coords)[:-1]))
    head = shapely.MultiPoint(np.round(rng.uniform(-60, 60, (rng.integers(3, 9), 2)))).convex_hull
    if head.geom_type != "Polygon":
        head = shapely.box(-20, -10, 20, 10)
    return obstacles, tuple(head.exterior.coords)[:-1]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(disjoint_convex_scenes())
def test_union_of_c_obstacles_of_disjoint_convex_obstacles_is_linear(scene):
    obstacles, footprint = scene
    pieces, owner = c_obstacle_pieces(obstacles, footprint, 0.0, SETTINGS.arc_tolerance)
    assert len(pieces) == len(obstacles)  # convex head, convex obstacles: one piece each
    n = int(sum(len(p.exterior.coords) - 1 for p in pieces))
    union = checked_union(pieces, 1e-6)
    rings = [r for poly in shapely.get_parts(union) for r in [poly.exterior, *poly.interiors]]
    union_vertices = sum(len(r.coords) - 1 for r in rings)
    # de Berg, Cheong, van Kreveld, Overmars, Computational Geometry (3rd ed.), ch. 13: the
    # C-obstacles of pairwise disjoint convex obstacles for a convex translating robot are
    # pseudodiscs, and the union of polygonal pseudodiscs with n vertices in total has at most
    # 2n vertices (theorem numbers from memory: Thm 13.8 / 13.9).
    assert union_vertices <= 2 * n


# ---------------------------------------------------------------- key, units, repair


def test_free_space_key_follows_what_the_free_space_depends_on():
    base = [rect("a", 100, 100, 200, 200), rect("low", 300, 300, 320, 320, height=1.0)]
    scene = make_scene(base, ride_height=5.0)
    key = free_space_key(scene, SETTINGS)
    assert key == build_free_space(scene, SETTINGS).key
    assert key == free_space_key(make_scene(base, ride_height=5.0), SETTINGS)
    # Passed-over obstacles do not matter; margin, geometry, footprint, travel and tolerance do.
    assert key == free_space_key(make_scene(base[:1], ride_height=5.0), SETTINGS)
    assert key != free_space_key(make_scene(base, ride_height=5.0, margin=2.5), SETTINGS)
    assert key != free_space_key(make_scene([rect("a", 100, 100, 200, 201)], ride_height=5.0),
                                 SETTINGS)
    assert key != free_space_key(scene, SETTINGS, footprint=((-5, -5), (5, -5), (0, 5)))
    assert key != free_space_key(make_scene(base, ride_height=5.0, travel=(0, 999, 0, 600)),
                                 SETTINGS)
    assert key != free_space_key(scene, Settings(arc_tolerance=0.01))
    assert key != free_space_key(scene, SETTINGS, obstacles=base[:1] + [rect("b", 0, 0, 9, 9)])


def test_settings_in_other_units_are_refused():
    scene = make_scene([rect("a", 1, 1, 2, 2)], footprint=((-0.5, -0.5), (0.5, -0.5), (0, 0.5)),
                       margin=0.05, units="inch")
    with pytest.raises(PlanningError, match="in_units"):
        build_free_space(scene, SETTINGS)
    free = build_free_space(scene, SETTINGS.in_units("inch"))
    assert free.units == "inch"
    assert free.clearance == pytest.approx(0.05 + 0.001 / 25.4)


def test_a_footprint_override_can_be_a_shapely_union():
    scene = make_scene([rect("a", 400, 200, 500, 300)])
    carried = shapely.union_all([shapely.Polygon(SQUARE20), shapely.box(5, -5, 60, 5)])
    free = build_free_space(scene, SETTINGS, footprint=carried)
    # The carried part sticks out 60 mm to +x, so the head cannot come within 60 + margin of
    # the block's left side (x = 400) from the left: x = 400 - 61 is blocked, 400 - 63 is free.
    assert free.blocked.contains(shapely.Point(339.0, 250.0))
    assert not free.blocked.intersects(shapely.Point(337.9, 250.0))


def test_repair_accepts_only_a_union_that_still_holds_every_piece():
    left = shapely.box(0, 0, 1, 1)
    right = shapely.box(1, 0, 2, 1)
    pieces = np.array([left, right], dtype=object)
    bowtie = shapely.Polygon([(0, 0), (2, 1), (2, 0), (0, 1)])  # self-crossing: invalid
    assert not bowtie.is_valid
    with pytest.raises(PlanningError, match="give up"):
        repair_union(bowtie, pieces, 1e-6)
    fixed = repair_union(shapely.Polygon([(0, 0), (2, 0), (2, 1), (1, 1), (1, 1), (0, 1)]),
                         pieces, 1e-6)
    # shapely: the repaired union is valid and covers both pieces.
    assert fixed.is_valid and fixed.covers(left) and fixed.covers(right)
    assert repair_union(None, pieces, 1e-6).equals(shapely.box(0, 0, 2, 1))
