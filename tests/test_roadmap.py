"""Shortest paths of the road map against outside references: a brute-force visibility graph
searched with networkx, a worked example, a fine grid searched by scikit-image, and properties."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st

from planner.cspace import FreeSpace
from planner.errors import PlanningError
from planner.model import Travel
from planner.roadmap import NoPath, Roadmap, build_roadmap
from tests.helpers import reference_length

EPS = 1e-7  # in the tests' length unit; a scene here is about 100 long


def free_space(blocked: shapely.Geometry, box: shapely.Polygon | None = None,
               eps: float = EPS) -> FreeSpace:
    """A FreeSpace made directly (no cspace builder): only box, blocked, region, eps matter."""
    box = shapely.box(0, 0, 100, 100) if box is None else box
    x0, y0, x1, y1 = box.bounds
    return FreeSpace(
        units="mm", travel=Travel(x0, x1, y0, y1), box=box, clearance=0.0, eps=eps,
        blocked=blocked, region=box.difference(blocked), obstacle_ids=(),
        pieces=np.empty(0, dtype=object), piece_owner=np.empty(0, dtype=np.int64), key="test",
    )


def leg_or_inf(roadmap: Roadmap, a, b) -> float:
    try:
        return roadmap.path(a, b)[1]
    except NoPath as err:
        assert err.kind == "disconnected"
        return math.inf


# -- random scenes ----------------------------------------------------------------------------

coord = st.floats(5.0, 95.0, allow_nan=False, allow_infinity=False)


@st.composite
def polygons(draw):
    """A convex polygon (hull of random points) or a non-convex star-shaped one."""
    cx, cy = draw(st.floats(20.0, 80.0)), draw(coord)
    size = draw(st.floats(6.0, 30.0))
    k = draw(st.integers(3, 9))
    jitter = np.array(draw(st.lists(st.floats(0.0, 0.9), min_size=k, max_size=k)))
    angles = 2 * np.pi * (np.arange(k) + jitter) / k + draw(st.floats(0, 2 * np.pi))
    if draw(st.booleans()):
        radii = np.full(k, size)
    else:
        radii = np.array(draw(st.lists(st.floats(0.3, 1.0), min_size=k, max_size=k))) * size
    pts = np.c_[cx + radii * np.cos(angles), cy + radii * np.sin(angles)]
    poly = shapely.Polygon(pts)
    if not poly.is_valid or poly.area < 1.0:
        poly = shapely.MultiPoint(pts).convex_hull
    assume(poly.geom_type == "Polygon" and poly.area > 1.0)
    return poly


@st.composite
def scenes(draw):
    blocked = shapely.union_all(draw(st.lists(polygons(), min_size=2, max_size=6)))
    assume(not blocked.is_empty)
    # a on the left, b on the right, obstacles mostly between them; c anywhere
    pts = [np.array([draw(st.floats(1.0, 30.0)), draw(coord)]),
           np.array([draw(st.floats(70.0, 99.0)), draw(coord)]),
           np.array([draw(coord), draw(coord)])]
    for p in pts:
        # keep end points clearly on one side of the boundary (exactly on it is tested apart)
        assume(blocked.boundary.distance(shapely.Point(p)) > 1e-4)
    return blocked, pts


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.filter_too_much])
@given(scenes())
def test_lengths_match_a_brute_force_visibility_graph(scene):
    blocked, (a, b, c) = scene
    free = free_space(blocked)
    roadmap = build_roadmap(free)
    inside = [blocked.contains(shapely.Point(p)) for p in (a, b, c)]
    if inside[0] or inside[1]:
        event("an end is blocked")
    if inside[0]:
        with pytest.raises(NoPath) as err:
            roadmap.path(a, b)
        assert err.value.kind == "start-blocked"
        return
    if inside[1]:
        with pytest.raises(NoPath) as err:
            roadmap.path(a, b)
        assert err.value.kind == "end-blocked"
        return
    ours = leg_or_inf(roadmap, a, b)
    event("disconnected" if math.isinf(ours) else
          "straight" if ours == pytest.approx(math.dist(a, b), rel=1e-12) else "bends")
    # networkx Dijkstra on an unpruned GEOS visibility graph (independent reference)
    ref = reference_length(free.region, a, b)
    if math.isinf(ref):
        assert math.isinf(ours)
    else:
        assert ours == pytest.approx(ref, rel=1e-9)
    # one search to several targets gives the same lengths as separate references
    targets = np.array([b, c])
    many = roadmap.distances_from(a, targets)
    assert many[0] == pytest.approx(ours, rel=1e-9) if np.isfinite(ours) else np.isinf(many[0])
    ref_c = math.inf if inside[2] else reference_length(free.region, a, c)
    assert many[1] == pytest.approx(ref_c, rel=1e-9) if np.isfinite(ref_c) else np.isinf(many[1])


# -- a worked example --------------------------------------------------------------------------

def test_square_between_two_points_worked_example():
    # Worked by hand: square [4, 6] x [4, 6] in a 10 x 10 box, a = (2, 5), b = (8, 5). The
    # straight line crosses the square; the path goes over (or under) it through two corners:
    # (2,5)-(4,6) and (6,6)-(8,5) are each sqrt(2^2 + 1^2) = sqrt(5) (Pythagoras), (4,6)-(6,6)
    # is 2, so the length is 2 + 2 sqrt(5) = 6.47213595...
    box = shapely.box(0, 0, 10, 10)
    free = free_space(shapely.box(4, 4, 6, 6), box)
    pts, length = build_roadmap(free).path((2, 5), (8, 5))
    assert length == pytest.approx(2 + 2 * math.sqrt(5), rel=1e-12)
    assert pts.tolist() in ([[2, 5], [4, 6], [6, 6], [8, 5]], [[2, 5], [4, 4], [6, 4], [8, 5]])


def test_diagonal_past_a_square_worked_example():
    # Worked by hand: same square, a = (2, 2), b = (8, 8). The diagonal runs through the square;
    # the shortest path bends once at (4, 6) (or (6, 4)): (2,2)-(4,6) = sqrt(2^2 + 4^2) = sqrt(20)
    # and (4,6)-(8,8) = sqrt(4^2 + 2^2) = sqrt(20), so the length is 2 sqrt(20) = 8.94427191...
    # Going round two corners, (2,2)-(4,6)-(6,6)-(8,8), is sqrt(20) + 2 + sqrt(8) = 9.30 (longer).
    free = free_space(shapely.box(4, 4, 6, 6), shapely.box(0, 0, 10, 10))
    pts, length = build_roadmap(free).path((2, 2), (8, 8))
    assert length == pytest.approx(2 * math.sqrt(20), rel=1e-12)
    assert pts.tolist() in ([[2, 2], [4, 6], [8, 8]], [[2, 2], [6, 4], [8, 8]])


def test_path_slides_along_an_edge_through_a_vertex_where_it_does_not_bend():
    # Worked by hand: obstacles [2, 4] x [4, 5] and [6, 8] x [4, 5] have their top edges on the
    # line y = 5; from a = (1, 6) to b = (9, 6) the straight line y = 6 is free, length 8. From
    # a = (1, 5) to b = (9, 5) the straight segment runs along both top edges and through their
    # corners without bending: it touches the obstacles only on their boundary, length 8.
    blocked = shapely.union(shapely.box(2, 4, 4, 5), shapely.box(6, 4, 8, 5))
    roadmap = build_roadmap(free_space(blocked, shapely.box(0, 0, 10, 10)))
    pts, length = roadmap.path((1, 5), (9, 5))
    assert length == pytest.approx(8.0, rel=1e-12)
    assert pts.tolist() == [[1, 5], [9, 5]]
    # Worked by hand: from (1, 4.5) to (9, 5.5) the straight line enters the left obstacle
    # (y = 4.625 at x = 2); the path climbs to its top-left corner (2, 5) and goes straight on to
    # (9, 5.5): that segment has slope 0.5 / 7, so y > 5 for every x > 2 and it clears both
    # obstacles. Length sqrt(1^2 + 0.5^2) + sqrt(7^2 + 0.5^2) (Pythagoras).
    pts, length = roadmap.path((1, 4.5), (9, 5.5))
    assert length == pytest.approx(math.hypot(1, 0.5) + math.hypot(7, 0.5), rel=1e-12)
    assert pts.tolist() == [[1, 4.5], [2, 5], [9, 5.5]]


def test_two_squares_touching_at_a_corner_let_the_path_bend_there():
    # Worked by hand: squares [3, 5] x [3, 5] and [5, 7] x [5, 7] touch at (5, 5). From
    # a = (4, 6) to b = (7, 4.5) the straight line enters the upper square; the path bends at
    # the shared corner: sqrt(1^2 + 1^2) + sqrt(2^2 + 0.5^2) = 3.47634...
    blocked = shapely.union(shapely.box(3, 3, 5, 5), shapely.box(5, 5, 7, 7))
    free = free_space(blocked, shapely.box(0, 0, 10, 10))
    roadmap = build_roadmap(free)
    pts, length = roadmap.path((4, 6), (7, 4.5))
    assert length == pytest.approx(math.sqrt(2) + math.hypot(2, 0.5), rel=1e-12)
    # networkx Dijkstra on an unpruned GEOS visibility graph agrees (independent reference)
    assert length == pytest.approx(reference_length(free.region, (4, 6), (7, 4.5)), rel=1e-12)


def test_a_path_through_a_point_where_an_obstacle_pinches_the_box():
    # Worked by hand: the triangle (14, 14), (20, 14), (14, 20) cuts off the box's corner; the
    # cut-off corner meets the rest of the free space only at (20, 14) and (14, 20). From
    # a = (15, 19) on the hypotenuse to b = (0, 0): along the hypotenuse to (14, 20), sqrt(2),
    # then straight to (0, 0), sqrt(14^2 + 20^2) = sqrt(596); total 25.8273...
    box = shapely.box(0, 0, 20, 20)
    free = free_space(shapely.Polygon([(14, 14), (20, 14), (14, 20)]), box)
    pts, length = build_roadmap(free).path((15, 19), (0, 0))
    assert length == pytest.approx(math.sqrt(2) + math.sqrt(596), rel=1e-12)
    assert pts.tolist() == [[15, 19], [14, 20], [0, 0]]


# -- a crude independent cross-check on a fine grid ---------------------------------------------

@pytest.mark.parametrize("seed", [3, 11])
def test_a_fine_grid_path_is_never_shorter_and_close(seed):
    skimage_graph = pytest.importorskip("skimage.graph")
    rng = np.random.default_rng(seed)
    polys = []
    for _ in range(6):
        c = rng.uniform(15, 85, 2)
        polys.append(shapely.MultiPoint(c + rng.normal(size=(7, 2)) * 7).convex_hull)
    blocked = shapely.union_all(polys)
    free = free_space(blocked)
    roadmap = build_roadmap(free)
    h = 0.25
    n = int(100 / h)
    xs = (np.arange(n) + 0.5) * h
    gx, gy = np.meshgrid(xs, xs, indexing="ij")
    cells = shapely.box(gx - h / 2, gy - h / 2, gx + h / 2, gy + h / 2)
    shapely.prepare(free.region)
    # a cell is free only if all of it is: then every 8-connected move between free cells,
    # diagonal ones included, stays in the free space, so the grid path is a feasible path
    costs = np.where(free.region.covers(cells), 1.0, np.inf)
    free_cells = np.argwhere(np.isfinite(costs))
    for _ in range(4):
        i, j = free_cells[rng.integers(len(free_cells), size=2)]
        a, b = xs[i], xs[j]  # cell centres
        ours = leg_or_inf(roadmap, a, b)
        # scikit-image minimum-cost path (MCP) on the 8-connected grid of free cells
        path, cost = skimage_graph.route_through_array(
            costs, tuple(i), tuple(j), fully_connected=True, geometric=True)
        grid = cost * h
        if math.isinf(ours):
            continue  # the grid cannot join what the free space does not
        assert grid >= ours * (1 - 1e-9)
        # 8-connected moves overestimate a straight run by at most 1 / cos(22.5 deg) = 1.0824
        # (octile distance, textbook bound); the grid also loses up to a cell beside obstacles
        assert grid <= ours / math.cos(math.pi / 8) + 4 * h


# -- properties ----------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def clutter() -> tuple[FreeSpace, Roadmap]:
    rng = np.random.default_rng(5)
    polys = [shapely.MultiPoint(rng.uniform(10, 90, 2) + rng.normal(size=(6, 2)) * 5).convex_hull
             for _ in range(12)]
    polys.append(shapely.Point(50, 50).buffer(8, quad_segs=32))  # a finely sampled curve
    free = free_space(shapely.union_all(polys))
    return free, build_roadmap(free)


def _free_points(free: FreeSpace, rng, k: int) -> np.ndarray:
    out = []
    while len(out) < k:
        p = rng.uniform(0, 100, 2)
        if free.region.contains(shapely.Point(p)):
            out.append(p)
    return np.array(out)


def test_legs_are_symmetric_at_least_straight_and_made_of_visible_segments(clutter):
    free, roadmap = clutter
    rng = np.random.default_rng(9)
    pts = _free_points(free, rng, 16)
    grown = free.region.buffer(1e-6)
    for a, b in zip(pts[::2], pts[1::2], strict=True):
        path_ab, ab = roadmap.path(a, b)
        _, ba = roadmap.path(b, a)
        assert ab == pytest.approx(ba, rel=1e-9)
        # triangle inequality (Euclidean geometry): no path is shorter than the straight line
        assert ab >= math.dist(a, b) * (1 - 1e-12)
        assert path_ab[0].tolist() == a.tolist() and path_ab[-1].tolist() == b.tolist()
        assert ab == pytest.approx(np.hypot(*np.diff(path_ab, axis=0).T).sum(), rel=1e-12)
        seg = np.diff(path_ab, axis=0)
        assert np.all(np.hypot(*seg.T) > 0)
        turns = seg[:-1, 0] * seg[1:, 1] - seg[:-1, 1] * seg[1:, 0]
        assert np.all(np.abs(turns) > 0)
        # GEOS covers, with a tolerance of 1e-6 (common practice, no source): each segment in
        # the closed free space
        lines = shapely.linestrings(np.stack([path_ab[:-1], path_ab[1:]], axis=1))
        assert np.all(grown.covers(lines))


def test_distances_from_and_paths_from_agree_with_single_paths(clutter):
    free, roadmap = clutter
    rng = np.random.default_rng(2)
    pts = _free_points(free, rng, 8)
    inside = np.array([[50.0, 50.0]])  # the centre of the circle: blocked
    targets = np.vstack([pts[1:], inside])
    d = roadmap.distances_from(pts[0], targets)
    paths = roadmap.paths_from(pts[0], targets)
    assert np.isinf(d[-1]) and paths[-1] is None
    for t, dist, got in zip(targets[:-1], d[:-1], paths[:-1], strict=True):
        assert dist == pytest.approx(roadmap.path(pts[0], t)[1], rel=1e-9)
        assert got is not None and got[1] == pytest.approx(dist, rel=1e-9)
        # networkx Dijkstra on an unpruned GEOS visibility graph (independent reference)
        assert dist == pytest.approx(reference_length(free.region, pts[0], t), rel=1e-9)


def test_points_on_the_obstacle_boundary_are_valid_ends():
    box = shapely.box(0, 0, 10, 10)
    roadmap = build_roadmap(free_space(shapely.box(4, 4, 6, 6), box))
    # Worked by hand: from the middle of the left edge (4, 5) to the middle of the right edge
    # (6, 5): up to (4, 6), across to (6, 6), down to (6, 5): 1 + 2 + 1 = 4.
    _, length = roadmap.path((4, 5), (6, 5))
    assert length == pytest.approx(4.0, rel=1e-12)
    _, length = roadmap.path((4, 4), (6, 6))  # corner to opposite corner: 2 + 2
    assert length == pytest.approx(4.0, rel=1e-12)


def test_no_path_kinds():
    box = shapely.box(0, 0, 10, 10)
    # a wall from bottom to top splits the box in two
    roadmap = build_roadmap(free_space(shapely.union(shapely.box(4, -1, 5, 11),
                                                     shapely.box(7, 7, 9, 9)), box))
    cases = [
        ((8, 8), (1, 1), "start-blocked"),
        ((1, 1), (8, 8), "end-blocked"),
        ((1, 1), (8, 2), "disconnected"),
        ((-1, 1), (2, 2), "outside-travel"),
        ((1, 1), (2, 12), "outside-travel"),
    ]
    for a, b, kind in cases:
        with pytest.raises(NoPath) as err:
            roadmap.path(a, b)
        assert err.value.kind == kind
        assert err.value.a == a and err.value.b == b
        assert isinstance(err.value, PlanningError)
    assert roadmap.path((1, 1), (3, 9))[1] == pytest.approx(math.dist((1, 1), (3, 9)))
    with pytest.raises(NoPath) as err:
        roadmap.distances_from((8, 8), np.array([[1.0, 1.0]]))
    assert err.value.kind == "start-blocked"
    d = roadmap.distances_from((1, 1), np.array([[8.0, 2.0], [8.0, 8.0], [2.0, 1.0]]))
    assert np.isinf(d[0]) and np.isinf(d[1]) and d[2] == pytest.approx(1.0)


def test_empty_obstacles_and_fully_blocked_box():
    box = shapely.box(0, 0, 10, 10)
    roadmap = build_roadmap(free_space(shapely.Polygon(), box))
    pts, length = roadmap.path((1, 1), (9, 4))
    assert pts.tolist() == [[1, 1], [9, 4]] and length == pytest.approx(math.hypot(8, 3))
    roadmap = build_roadmap(free_space(shapely.box(-1, -1, 11, 11), box))
    with pytest.raises(NoPath) as err:
        roadmap.path((1, 1), (9, 4))
    assert err.value.kind == "start-blocked"
