"""The independent safety check: broken routes are caught, safe ones pass, distances are right.

The reference for clearances is general-purpose and shares nothing with verify's method: shapely
(GEOS) distance between the whole footprint polygon, translated to densely sampled positions along
the move, and the obstacle (a circle measured as distance to its centre minus the radius).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from planner.errors import UnsafeRouteError
from planner.model import Circle, Head, Leg, Obstacle, Route, Scene, Target, Travel
from planner.verify import Violation, verify_or_raise, verify_route

SQUARE = ((-10.0, -10.0), (10.0, -10.0), (10.0, 10.0), (-10.0, 10.0))
U_GRIPPER = ((-35, -25), (35, -25), (35, 25), (20, 25), (20, -10), (-20, -10), (-20, 25),
             (-35, 25))
TOL = 1e-9


def make_scene(obstacles=(), *, footprint=SQUARE, margin=2.0, ride_height=None, start=(0.0, 0.0),
               targets=(), finish=None, travel=(-1000.0, 1000.0, -1000.0, 1000.0)) -> Scene:
    return Scene(
        file="test.yaml", sha256="0" * 64, units="mm", travel=Travel(*travel),
        head=Head(name=None, footprint=tuple(map(tuple, footprint)), margin=margin,
                  ride_height=ride_height),
        obstacles=tuple(obstacles), start=tuple(start),
        targets=tuple(t if isinstance(t, Target) else Target(id=f"t{i + 1}", at=tuple(t))
                      for i, t in enumerate(targets)),
        finish=finish,
    )


def polyline_length(points) -> float:
    pts = np.asarray(points, dtype=float)
    return float(np.hypot(*np.diff(pts, axis=0).T).sum()) if len(pts) > 1 else 0.0


def make_route(*legs, unreachable=()) -> Route:
    """Legs given as (from_id, to_id, points[, stated length])."""
    built = []
    for leg in legs:
        frm, to, pts = leg[:3]
        length = leg[3] if len(leg) > 3 else polyline_length(pts)
        built.append(Leg(frm, to, tuple(map(tuple, pts)), length))
    return Route("test.yaml", "0" * 64, "0" * 64, "mm", tuple(built), tuple(unreachable))


def one_move(points, obstacles=(), **head):
    """A scene with start = points[0] and one target t1 = points[-1], and its one-leg route."""
    scene = make_scene(obstacles, start=points[0], targets=[points[-1]], **head)
    return scene, make_route(("start", "t1", points))


def poly(id_, ring, **kw) -> Obstacle:
    return Obstacle(id=id_, polygon=tuple(map(tuple, ring)), **kw)


def rect(id_, x0, y0, x1, y1, **kw) -> Obstacle:
    return poly(id_, [(x0, y0), (x1, y0), (x1, y1), (x0, y1)], **kw)


def reference_min_distance(footprint, p, q, obstacle: Obstacle, samples: int = 2001):
    """Min over densely sampled positions of shapely.distance(translated footprint, obstacle).

    Returns (min distance, error bound): the distance is 1-Lipschitz in the translation, so the
    true minimum along the segment lies in [min - bound, min] with bound = L / (2 (samples - 1)).
    """
    p, q = np.asarray(p, float), np.asarray(q, float)
    fp = np.asarray(footprint, float)
    t = np.linspace(0.0, 1.0, samples)
    offsets = p + t[:, None] * (q - p)
    moved = shapely.polygons(fp[None, :, :] + offsets[:, None, :])
    if obstacle.circle is not None:
        c = obstacle.circle
        d = shapely.distance(moved, shapely.Point(c.center)) - c.radius
    else:
        d = shapely.distance(moved, shapely.Polygon(obstacle.polygon))
    return float(d.min()), float(np.hypot(*(q - p))) / (2 * (samples - 1))


def kinds(violations: list[Violation]) -> set[str]:
    return {v.kind for v in violations}


# ---- deliberately broken routes are caught ------------------------------------------------------


def test_segment_straight_through_an_obstacle_is_caught():
    scene, route = one_move([(0, 0), (300, 0)], [rect("wall", 100, -50, 120, 50)])
    found = verify_route(route, scene, tolerance=TOL)
    assert [(v.kind, v.obstacle, v.leg, v.segment) for v in found] == [
        ("clearance", "wall", 0, 0)]
    assert found[0].distance == 0.0 and found[0].required == 2.0
    assert "wall" in found[0].message


def test_segment_passing_at_half_the_margin_is_caught_with_the_right_distance():
    # footprint top edge at y = 10; the obstacle's bottom at 10 + margin / 2
    obstacle = rect("bar", 100, 11.0, 140, 60)
    scene, route = one_move([(0, 0), (300, 0)], [obstacle])
    found = verify_route(route, scene, tolerance=TOL)
    assert kinds(found) == {"clearance"}
    # Reference: shapely distance of the sampled, translated footprint polygon (see module doc).
    ref, bound = reference_min_distance(SQUARE, (0, 0), (300, 0), obstacle)
    assert ref - bound - 1e-9 <= found[0].distance <= ref + 1e-9
    assert found[0].distance == pytest.approx(1.0, abs=1e-12)


def test_point_outside_travel_is_caught():
    scene = make_scene(start=(0, 0), targets=[(50, 0)], travel=(-100, 100, -100, 100))
    route = make_route(("start", "t1", [(0, 0), (0, 120), (50, 0)]))
    found = verify_route(route, scene, tolerance=TOL)
    assert [(v.kind, v.segment) for v in found] == [("travel", 1)]
    assert found[0].distance == pytest.approx(-20.0)


def test_travel_is_closed():
    scene = make_scene(start=(-100, -100), targets=[(100, 100)], travel=(-100, 100, -100, 100))
    route = make_route(("start", "t1", [(-100, -100), (-100, 100), (100, 100)]))
    assert verify_route(route, scene, tolerance=TOL) == []


def test_leg_with_a_wrong_length_is_caught():
    scene = make_scene(start=(0, 0), targets=[(30, 40)])
    route = make_route(("start", "t1", [(0, 0), (30, 40)], 49.0))
    found = verify_route(route, scene, tolerance=TOL)
    assert [(v.kind, v.distance, v.required) for v in found] == [("length", 49.0, 50.0)]


def test_discontinuous_route_is_caught():
    scene = make_scene(start=(0, 0), targets=[(100, 0), (100, 100)])
    route = make_route(
        ("start", "t1", [(0, 0), (100, 0)]),
        ("t1", "t2", [(100, 5), (100, 100)]),
    )
    found = verify_route(route, scene, tolerance=TOL)
    assert ("continuity", 1) in {(v.kind, v.leg) for v in found}
    assert next(v for v in found if v.kind == "continuity").distance == pytest.approx(5.0)


def test_leg_ids_must_chain_and_start_at_start():
    scene = make_scene(start=(0, 0), targets=[(100, 0), (100, 100)])
    route = make_route(("t1", "t2", [(100, 0), (100, 100)]))
    assert kinds(verify_route(route, scene, tolerance=TOL)) == {"order"}
    route = make_route(("start", "t1", [(0, 0), (100, 0)]), ("t2", "t2", [(100, 0), (100, 0)]))
    assert "order" in kinds(verify_route(route, scene, tolerance=TOL))


def test_endpoints_must_be_the_scene_points():
    scene = make_scene(start=(0, 0), targets=[(100, 0)], finish=(0, 10))
    route = make_route(("start", "t1", [(0, 0), (100, 1)]), ("t1", "finish", [(100, 1), (0, 10)]))
    found = verify_route(route, scene, tolerance=TOL)
    assert [(v.kind, v.leg) for v in found] == [("endpoint", 0), ("endpoint", 1)]
    unknown = make_route(("start", "nowhere", [(0, 0), (100, 0)]))
    assert kinds(verify_route(unknown, scene, tolerance=TOL)) == {"endpoint"}


def test_output_rounding_is_allowed_only_when_a_resolution_is_given():
    scene = make_scene(start=(0.00004, 0.0), targets=[(100.00049, 0.0)])
    route = make_route(("start", "t1", [(0.0, 0.0), (100.0, 0.0)], 100.0004))
    assert kinds(verify_route(route, scene, tolerance=TOL)) == {"endpoint", "length"}
    assert verify_route(route, scene, tolerance=TOL, resolution=0.001) == []


def test_non_finite_points_are_caught():
    scene = make_scene(start=(0, 0), targets=[(100, 0)])
    route = make_route(("start", "t1", [(0, 0), (math.nan, 0), (100, 0)], 100.0))
    assert "point" in kinds(verify_route(route, scene, tolerance=TOL))


def test_verify_or_raise_lists_the_first_violations():
    scene, route = one_move([(0, 0), (300, 0)], [rect("wall", 100, -50, 120, 50)])
    with pytest.raises(UnsafeRouteError) as err:
        verify_or_raise(route, scene, TOL)
    assert "wall" in str(err.value) and "nothing was written" in str(err.value)
    assert len(err.value.violations) == 1
    safe_scene, safe_route = one_move([(0, 0), (300, 0)])
    assert verify_or_raise(safe_route, safe_scene, TOL) is None


def test_bad_tolerance_is_refused():
    scene, route = one_move([(0, 0), (300, 0)])
    with pytest.raises(ValueError):
        verify_route(route, scene, tolerance=-1.0)


# ---- a correct hand-made route passes -----------------------------------------------------------


@pytest.mark.parametrize("extra, safe", [(0.01, True), (-0.01, False)])
def test_route_around_a_square_at_the_margin(extra, safe):
    block = rect("block", 100, 100, 200, 200)
    # the footprint reaches 10 from the tool point; the margin is 2
    y = 100 - 10 - 2 - extra
    x = 200 + 10 + 2 + extra
    points = [(50, 50), (50, y), (x, y), (x, 250), (250, 250)]
    scene, route = one_move(points, [block])
    found = verify_route(route, scene, tolerance=TOL)
    assert (found == []) is safe
    for v in found:
        # Reference: shapely distance of the sampled, translated footprint polygon.
        ref, bound = reference_min_distance(SQUARE, points[v.segment], points[v.segment + 1],
                                            block)
        assert ref - bound - 1e-9 <= v.distance <= ref + 1e-9


# ---- a non-convex footprint -------------------------------------------------------------------


POST = rect("post", -2, -2, 2, 2)


@pytest.mark.parametrize(
    "p, q, safe",
    [
        ((0, -60), (0, -5), True),  # the post slides into the notch through its open end
        ((0, -5), (0, 5), True),  # and towards the base, stopping 3 short of it
        ((0, -5), (15, -5), True),  # sideways: 3 from the inner side of a finger
        ((0, -5), (16, -5), False),  # sideways: 2 from the finger, margin 2.5
        ((0, -5), (60, -5), False),  # dragged through the left finger, both ends clear
        ((0, -5), (0, 40), False),  # pushed through the base
    ],
)
def test_u_gripper_around_a_thin_post(p, q, safe):
    scene, route = one_move([p, q], [POST], footprint=U_GRIPPER, margin=2.5)
    found = verify_route(route, scene, tolerance=TOL)
    # Reference: shapely distance of the whole (non-convex) footprint polygon, densely sampled.
    ref, bound = reference_min_distance(U_GRIPPER, p, q, POST)
    if safe:
        assert found == [] and ref - bound > 2.5
    else:
        assert kinds(found) == {"clearance"} and ref < 2.5
        assert ref - bound - 1e-9 <= found[0].distance <= ref + 1e-9


def test_u_gripper_notch_is_not_filled_in():
    # The convex hull of the footprint would hit the post on this move; the real U does not.
    p, q = (0, -60), (0, -5)
    hull = shapely.convex_hull(shapely.Polygon(U_GRIPPER))
    hull_ring = np.asarray(hull.exterior.coords)[:-1]
    ref_hull, _ = reference_min_distance(hull_ring, p, q, POST)
    assert ref_hull == 0.0
    scene, route = one_move([p, q], [POST], footprint=U_GRIPPER, margin=2.5)
    assert verify_route(route, scene, tolerance=TOL) == []


# ---- heights, circles, scenes that change ------------------------------------------------------


def test_passed_over_obstacles_are_ignored_and_equal_height_is_avoided():
    low = rect("low", 100, -50, 120, 50, height=9.99)
    level = rect("level", 200, -50, 220, 50, height=10.0)
    tall = rect("tall", 300, -50, 320, 50)  # no height: always avoided
    scene, route = one_move([(0, 0), (400, 0)], [low, level, tall], ride_height=10.0)
    assert {v.obstacle for v in verify_route(route, scene, tolerance=TOL)} == {"level", "tall"}


def regular_polygon(center, radius, n, phase):
    a = phase + 2 * np.pi * np.arange(n) / n
    return np.c_[center[0] + radius * np.cos(a), center[1] + radius * np.sin(a)]


@pytest.mark.parametrize("gap", [1e-6, -1e-6, 0.1, -0.1])
def test_circles_are_measured_as_true_circles(gap):
    r, margin = 50.0, 2.0
    disc = Obstacle(id="pin", circle=Circle((500.0, 0.0), r))
    y = -(r + margin + gap + 10.0)  # the footprint's top edge passes under the centre
    scene, route = one_move([(300.0, y), (700.0, y)], [disc], margin=margin)
    found = verify_route(route, scene, tolerance=TOL)
    assert (found == []) is (gap > 0)
    # Textbook: the distance from a set to a disc is the distance to its centre minus the radius;
    # here the footprint's top edge passes straight under the centre, so it is margin + gap.
    if found:
        assert found[0].distance == pytest.approx(margin + gap, abs=1e-9)
    # A 32-gon would not give that verdict at gap = +-0.1: inscribed with an edge facing the path
    # it sits r (1 - cos(pi/32)) ~ 0.24 inside the circle; circumscribed with a vertex there, 0.24
    # outside it (shapely distance to each polygon, for contrast).
    half = np.pi / 32
    inscribed = shapely.Polygon(regular_polygon((500, 0), r, 32, -np.pi / 2 + half))
    outside = shapely.Polygon(regular_polygon((500, 0), r / np.cos(half), 32, -np.pi / 2))
    path = shapely.LineString([(300.0, y + 10.0), (700.0, y + 10.0)])  # the top edge's sweep
    if gap == -0.1:
        assert shapely.distance(path, inscribed) > margin
    if gap == 0.1:
        assert shapely.distance(path, outside) < margin


def test_obstacles_that_appear_and_go_and_carried_parts():
    # start (0,0) -> t1 (200,0) -> t2 (200,200); a part appears when leaving t1 right on the
    # first leg's path, a stack is gone after t1 though the second leg crosses where it was.
    part = rect("part", 90, -30, 110, 30, after="t1")
    stack = rect("stack", 170, 60, 230, 120, until="t1")
    scene = make_scene([part, stack], start=(0, 0), targets=[(200, 0), (200, 200)])
    route = make_route(("start", "t1", [(0, 0), (200, 0)]),
                       ("t1", "t2", [(200, 0), (200, 200)]))
    assert verify_route(route, scene, tolerance=TOL) == []
    # the same obstacles present on every leg would block both legs
    static = make_scene([rect("part", 90, -30, 110, 30), rect("stack", 170, 60, 230, 120)],
                        start=(0, 0), targets=[(200, 0), (200, 200)])
    assert {(v.leg, v.obstacle) for v in verify_route(route, static, tolerance=TOL)} == {
        (0, "part"), (1, "stack")}
    # a part carried from t1 on widens the footprint to the right by 40 on the second leg
    carry = ((0, -10), (50, -10), (50, 10), (0, 10))
    post = rect("post", 245, 80, 260, 100)  # 35 right of the path: clear of the head alone
    targets = [Target("t1", (200, 0), carry=carry), Target("t2", (200, 200), carry="none"),
               Target("t3", (250, 300))]
    scene = make_scene([post], start=(0, 0), targets=targets)
    route = make_route(("start", "t1", [(0, 0), (200, 0)]),
                       ("t1", "t2", [(200, 0), (200, 200)]),
                       ("t2", "t3", [(200, 200), (200, 300), (250, 300)]))
    assert [(v.leg, v.obstacle) for v in verify_route(route, scene, tolerance=TOL)] == [
        (1, "post")]


def test_zero_length_leg_still_checks_the_footprint_where_it_stands():
    scene = make_scene([rect("b", 5, 5, 50, 50)], start=(0, 0), targets=[(0, 0)])
    route = make_route(("start", "t1", [(0, 0)]))
    assert kinds(verify_route(route, scene, tolerance=TOL)) == {"clearance"}


# ---- property: verify agrees with the dense-sampling reference ---------------------------------


def star(draw, center, rmin, rmax, convex) -> np.ndarray:
    k = draw(st.integers(3, 9))
    jitter = draw(st.lists(st.floats(0, 0.8), min_size=k, max_size=k))
    radii = draw(st.lists(st.floats(rmin, rmax), min_size=k, max_size=k))
    a = 2 * np.pi * (np.arange(k) + np.array(jitter)) / k
    ring = np.c_[center[0] + np.array(radii) * np.cos(a), center[1] + np.array(radii) * np.sin(a)]
    if convex:
        ring = np.asarray(shapely.convex_hull(shapely.MultiPoint(ring)).exterior.coords)[:-1]
    return ring


@st.composite
def move_case(draw):
    footprint = star(draw, (0, 0), 3.0, 25.0, convex=draw(st.booleans()))
    cx, cy = draw(st.floats(-60, 60)), draw(st.floats(-60, 60))
    if draw(st.booleans()):
        obstacle = Obstacle(id="o", circle=Circle((cx, cy), draw(st.floats(0.5, 20))))
    else:
        obstacle = Obstacle(id="o", polygon=tuple(map(tuple, star(
            draw, (cx, cy), 1.0, 30.0, convex=draw(st.booleans())))))
    p = (draw(st.floats(-80, 80)), draw(st.floats(-80, 80)))
    q = (draw(st.floats(-80, 80)), draw(st.floats(-80, 80)))
    margin = draw(st.floats(0.5, 8.0))
    return footprint, obstacle, p, q, margin


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(move_case())
def test_verdict_agrees_with_dense_sampling(case):
    footprint, obstacle, p, q, margin = case
    assume(shapely.Polygon(footprint).is_valid and shapely.Polygon(footprint).area > 1.0)
    if obstacle.polygon is not None:
        assume(shapely.Polygon(obstacle.polygon).is_valid)
    scene, route = one_move([p, q], [obstacle], footprint=footprint, margin=margin)
    found = [v for v in verify_route(route, scene, tolerance=TOL) if v.kind == "clearance"]
    # Reference: shapely distance of the whole footprint polygon at 2001 sampled positions.
    ref, bound = reference_min_distance(footprint, p, q, obstacle)
    assume(ref - bound > margin + 1e-7 or ref < margin - 1e-7)  # clear verdict only
    if ref - bound > margin:
        assert found == []
    else:
        assert len(found) == 1
        assert ref - bound - 1e-7 <= found[0].distance <= ref + 1e-7


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(-50, 50), st.floats(-50, 50)), min_size=3, max_size=8),
       st.tuples(st.floats(-100, 100), st.floats(-100, 100)),
       st.tuples(st.floats(-100, 100), st.floats(-100, 100)))
def test_swept_piece_is_the_hull_of_both_copies(cloud, p, q):
    from planner.verify import _counter_clockwise, _swept

    hull = shapely.convex_hull(shapely.MultiPoint(cloud))
    assume(hull.geom_type == "Polygon" and hull.area > 1e-3)
    piece = _counter_clockwise(np.asarray(hull.exterior.coords)[None, :-1])
    got = _swept(np.array([p], float), np.array([q], float), piece)[0]
    # Reference: shapely/GEOS convex hull of the piece placed at p and at q.
    want = shapely.convex_hull(shapely.MultiPoint(np.concatenate([piece[0] + p, piece[0] + q])))
    assert got.is_valid
    assert shapely.symmetric_difference(got, want).area <= 1e-9 * max(want.area, 1.0)


def test_zero_margin_allows_touching_but_not_overlapping():
    # footprint top edge at y = 10 slides along the bottom of a block at y = 10
    touching = rect("block", 100, 10, 140, 60)
    scene, route = one_move([(0, 0), (300, 0)], [touching], margin=0.0)
    assert verify_route(route, scene, tolerance=TOL) == []
    overlapping = rect("block", 100, 9.999, 140, 60)
    scene, route = one_move([(0, 0), (300, 0)], [overlapping], margin=0.0)
    assert kinds(verify_route(route, scene, tolerance=TOL)) == {"clearance"}
