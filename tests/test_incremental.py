"""Incremental configuration spaces against from-scratch builds, after every change.

On hypothesis-generated sequences of obstacle insertions and removals, the state a
FootprintSpace derives must hold the same free space as build_free_space from scratch (the
symmetric difference, measured by GEOS, has no area beyond floating-point noise) and the same
road map as build_roadmap (the same corners and edges, and shortest paths of the same length),
and its triangulation must tile the free space exactly (triangle areas summing to the region's).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from planner.config import load_settings
from planner.cspace import build_free_space
from planner.incremental import FootprintSpace
from planner.model import Circle, Head, Obstacle, Scene, Target, Travel
from planner.roadmap import NoPath, build_roadmap
from planner.tiles import TileGrid, TileMismatch, assemble, tile_mesh
from tests.helpers import REPO_CONFIG

SETTINGS = load_settings(REPO_CONFIG)
FOOTPRINTS = {
    "square": ((-3.0, -3.0), (3.0, -3.0), (3.0, 3.0), (-3.0, 3.0)),
    "u-shape": ((-4.0, -3.0), (4.0, -3.0), (4.0, 3.0), (2.0, 3.0), (2.0, -1.0), (-2.0, -1.0),
                (-2.0, 3.0), (-4.0, 3.0)),
}

coord = st.floats(8.0, 192.0, allow_nan=False).map(lambda v: round(v, 3))


@st.composite
def obstacles(draw, k: int):
    kind = draw(st.sampled_from(["rect", "rect", "star", "circle"]))
    cx, cy = draw(coord), draw(coord)
    size = draw(st.floats(3.0, 25.0))
    if kind == "circle":
        return Obstacle(f"o{k}", circle=Circle((cx, cy), round(size / 2, 3)))
    if kind == "rect":
        w, h = size, draw(st.floats(3.0, 25.0))
        ring = ((cx, cy), (cx + w, cy), (cx + w, cy + h), (cx, cy + h))
        return Obstacle(f"o{k}", polygon=tuple((round(x, 3), round(y, 3)) for x, y in ring))
    n = draw(st.integers(5, 9))
    radii = np.array(draw(st.lists(st.floats(0.35, 1.0), min_size=n, max_size=n))) * size
    angles = 2 * np.pi * np.arange(n) / n + draw(st.floats(0, 1))
    ring = np.round(np.c_[cx + radii * np.cos(angles), cy + radii * np.sin(angles)], 3)
    poly = shapely.Polygon(ring)
    if not poly.is_valid or poly.area < 1.0:
        ring = np.round(shapely.get_coordinates(shapely.convex_hull(shapely.MultiPoint(ring))
                                                )[:-1], 3)
    return Obstacle(f"o{k}", polygon=tuple(map(tuple, ring.tolist())))


@st.composite
def change_sequences(draw):
    n = draw(st.integers(3, 9))
    obs = [draw(obstacles(k + 1)) for k in range(n)]
    present = set(draw(st.sets(st.integers(0, n - 1), max_size=n)))
    steps = []
    for _ in range(draw(st.integers(2, 7))):
        if present and draw(st.booleans()):
            present = present - set(draw(st.sets(st.sampled_from(sorted(present)), min_size=1,
                                                 max_size=2)))
        else:
            present = present | set(draw(st.sets(st.integers(0, n - 1), min_size=1, max_size=2)))
        steps.append(frozenset(present))
    points = draw(st.lists(st.tuples(coord, coord), min_size=4, max_size=4))
    return obs, steps, points, draw(st.sampled_from(sorted(FOOTPRINTS)))


def scene_of(obs, footprint) -> Scene:
    return Scene(file="s.yaml", sha256="0" * 64, units="mm", travel=Travel(0, 200, 0, 200),
                 head=Head(None, footprint, 1.0), obstacles=tuple(obs), start=(1.0, 1.0),
                 targets=(Target("t1", (2.0, 2.0)),))


def length_or_kind(roadmap, a, b):
    try:
        return roadmap.path(a, b)[1]
    except NoPath as err:
        return err.kind


def assert_same_as_from_scratch(space: FootprintSpace, present: frozenset, scene, points):
    st_ = space.state(present)
    obs = [space.obstacles[i] for i in sorted(present)]
    free = build_free_space(scene, SETTINGS, obstacles=obs)
    roadmap = build_roadmap(free)
    # GEOS: the two free spaces cover the same ground (area of the symmetric difference ~ 0)
    assert shapely.symmetric_difference(free.blocked, st_.free.blocked).area <= 1e-9
    assert shapely.symmetric_difference(free.region, st_.free.region).area <= 1e-9
    # where the state has a triangulation (after a removal), it tiles the free region: its
    # triangles' areas add up to the region's
    tri = st_.roadmap._tri
    if len(tri.tri):
        assert math.isclose(float(shapely.area(tri.polygons).sum()), st_.free.region.area,
                            rel_tol=1e-9, abs_tol=1e-9)
    # the same corners, up to floating-point noise: GEOS may keep or drop a vertex that is all
    # but straight depending on what else it unites, so each road map's nodes lie on the other
    # free space's boundary and most of them coincide
    a, b = st_.roadmap.nodes, roadmap.nodes
    for mine, other in ((a, free.region), (b, st_.free.region)):
        if len(mine):
            assert shapely.distance(other.boundary, shapely.points(mine)).max() <= 1e-9
    if len(a) and len(b):
        assert np.mean(cKDTree(b).query(a)[0] <= 1e-9) >= 0.9
    for a in points:
        for b in points:
            la, lb = length_or_kind(st_.roadmap, a, b), length_or_kind(roadmap, a, b)
            if isinstance(la, str) or isinstance(lb, str):
                assert la == lb
            else:
                assert la == pytest.approx(lb, rel=1e-9, abs=1e-9)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(change_sequences(), st.integers(1, 30))
def test_every_insertion_and_removal_matches_a_build_from_scratch(case, tiles):
    obs, steps, points, fp_name = case
    scene = scene_of(obs, FOOTPRINTS[fp_name])
    space = FootprintSpace(scene, SETTINGS, scene.head.footprint, obs, keep=2)
    # many small tiles, as a large scene would have (the triangulation after a removal)
    space.grid = TileGrid.over(space.box.bounds, tiles, 64)
    space.tile_bounds = space.grid.bounds
    for present in steps:
        assert_same_as_from_scratch(space, present, scene, points)
        if len(space.state(present).roadmap._tri.tri):
            event("a removal state, triangulated in tiles")
    if space.stats["fallback_triangulations"]:
        event("tiles did not meet; triangulated whole")
    assert space.stats["derived"] >= 1 or len(set(steps)) == 1


def test_a_removal_opens_sight_lines_far_from_the_obstacle_that_went():
    # two walls with a post between their ends: with the post, the corners at the far ends do
    # not see each other; without it, a straight line joins them across the post's place
    obs = [
        Obstacle("wall-a", polygon=((20, 90), (90, 90), (90, 110), (20, 110))),
        Obstacle("wall-b", polygon=((110, 90), (180, 90), (180, 110), (110, 110))),
        Obstacle("post", polygon=((95, 95), (105, 95), (105, 105), (95, 105))),
    ]
    scene = scene_of(obs, FOOTPRINTS["square"])
    space = FootprintSpace(scene, SETTINGS, scene.head.footprint, obs, keep=2)
    points = [(100.0, 60.0), (100.0, 140.0), (10.0, 100.0), (190.0, 100.0)]
    assert_same_as_from_scratch(space, frozenset({0, 1, 2}), scene, points)
    assert_same_as_from_scratch(space, frozenset({0, 1}), scene, points)
    assert space.stats["derived"] == 1


def test_a_derived_state_sees_what_a_fresh_road_map_sees():
    # the corners, tangent directions and occlusion disks a derived state hands to Roadmap give
    # end points the same sight as a road map built from scratch
    obs = [Obstacle(f"p{k}", polygon=((20 + 30 * k, 80), (40 + 30 * k, 80), (40 + 30 * k, 120),
                                      (20 + 30 * k, 120))) for k in range(5)]
    scene = scene_of(obs, FOOTPRINTS["u-shape"])
    space = FootprintSpace(scene, SETTINGS, scene.head.footprint, obs, keep=2)
    pts = np.array([[10.0, 10.0], [190.0, 190.0], [100.0, 60.0], [75.0, 150.0]])
    space.state(frozenset({0, 1}))
    second = space.state(frozenset({0, 1, 2}))  # one part added: derived
    assert second.stats["derived"]
    fresh = build_roadmap(build_free_space(scene, SETTINGS, obstacles=obs[:3]))
    for (dn, dd), (fn, fd) in zip(second.roadmap._sight(pts), fresh._sight(pts), strict=True):
        a = sorted(map(tuple, second.roadmap.nodes[dn]))
        b = sorted(map(tuple, fresh.nodes[fn]))
        assert a == b
        assert sorted(dd) == pytest.approx(sorted(fd))


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(obstacles(0), min_size=1, max_size=12), st.integers(1, 40))
def test_tiles_put_together_tile_the_region_edge_to_edge(obs, tiles):
    scene = scene_of(obs, FOOTPRINTS["square"])
    region = build_free_space(scene, SETTINGS).region
    grid = TileGrid.over((0, 0, 200, 200), tiles, 64)
    try:
        t = assemble([tile_mesh(region, b, grid) for b in grid.bounds], grid)
    except TileMismatch:  # allowed: the caller then triangulates the region whole
        event("tiles did not meet edge to edge")
        return
    # GEOS: the triangles cover the region, without overlap (areas add up, union equals it)
    assert math.isclose(float(shapely.area(t.polygons).sum()), region.area, rel_tol=1e-9)
    assert shapely.symmetric_difference(shapely.union_all(t.polygons), region).area <= 1e-6
    # every link is mutual and the two triangles share the edge's two vertices
    tt, jj = np.nonzero(t.nbr >= 0)
    other, kk = t.nbr[tt, jj], t.nbr_k[tt, jj]
    assert np.array_equal(t.nbr[other, kk], tt)
    edge = np.sort(np.stack([t.tri[tt, (jj + 1) % 3], t.tri[tt, (jj + 2) % 3]], 1), axis=1)
    back = np.sort(np.stack([t.tri[other, (kk + 1) % 3], t.tri[other, (kk + 2) % 3]], 1), axis=1)
    assert np.array_equal(edge, back)
    # an open edge lies on the region's boundary (GEOS: the boundary covers it)
    to, jo = np.nonzero(t.nbr < 0)
    a, b = t.xy[t.tri[to, (jo + 1) % 3]], t.xy[t.tri[to, (jo + 2) % 3]]
    mid = shapely.points((a + b) / 2)
    assert np.all(shapely.distance(region.boundary, mid) <= 1e-9)
