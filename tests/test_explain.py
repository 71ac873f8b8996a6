"""Explanations of unreachable targets, checked on scenes built so the answer is known.

Every scene here is made of axis-aligned rectangles (and one circle) around a square head, so the
blocking obstacle, the head's clearance, the gap between two obstacles and the width the head
needs there can be worked out by hand; those hand-worked numbers are the reference. Margins that
an explanation says would make a target reachable are re-checked by planning the leg again with
that margin (and shown to fail just above it).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
import shapely

from planner.config import Settings
from planner.cspace import build_free_space
from planner.explain import Explainer, head_clearances
from planner.model import Circle, Head, Obstacle, Scene, Target, Travel
from planner.roadmap import NoPath, build_roadmap

SETTINGS = Settings()  # mm, resolution 0.001, arc tolerance 0.05
PAD = SETTINGS.resolution  # the planner grows obstacles by margin + resolution
STEP = 0.01  # explanations round lengths to 0.01 mm (outwards for moves, inwards for margins)
# What the planner adds to a gap's need: its pad and the round corners' outer approximation, on
# each of the two sides of a gap between obstacles, on one side for a gap to a travel limit.
PAIR_ALLOWANCE = 2 * (PAD + SETTINGS.arc_tolerance)
LIMIT_ALLOWANCE = PAD + SETTINGS.arc_tolerance


def square(half: float):
    return ((-half, -half), (half, -half), (half, half), (-half, half))


def rect(oid: str, x0: float, y0: float, x1: float, y1: float) -> Obstacle:
    return Obstacle(id=oid, polygon=((x0, y0), (x1, y0), (x1, y1), (x0, y1)))


def make_scene(obstacles, *, half: float, margin: float, start, targets,
               travel=(0.0, 1000.0, 0.0, 1000.0)) -> Scene:
    return Scene(
        file="built.yaml", sha256="0" * 64, units="mm", travel=Travel(*travel),
        head=Head(name=None, footprint=square(half), margin=margin),
        obstacles=tuple(obstacles), start=tuple(start),
        targets=tuple(Target(id=f"t{i + 1}", at=tuple(t)) for i, t in enumerate(targets)),
    )


def explain_leg(scene: Scene, a, b, from_id="start", to_id="t1"):
    free = build_free_space(scene, SETTINGS)
    with pytest.raises(NoPath) as info:
        build_roadmap(free).path(tuple(a), tuple(b))
    return Explainer(scene, SETTINGS).unreachable(info.value, from_id, to_id, free)


def reachable(scene: Scene, margin: float, a, b) -> bool:
    """Plan the leg again with another margin (free space and road map built from scratch)."""
    changed = replace(scene, head=replace(scene.head, margin=margin))
    try:
        build_roadmap(build_free_space(changed, SETTINGS)).path(tuple(a), tuple(b))
    except NoPath:
        return False
    return True


# -- the target lies inside a grown obstacle ----------------------------------------------------

def test_target_overlapping_a_block_names_it_and_the_move_to_the_nearest_free_point():
    # By construction: block x 500..600; head 40 wide (half 20), margin 3. A target at x = 485
    # puts the head's right edge at 505: it overlaps the block. Free again at
    # x <= 500 - 20 - 3 - pad, so the target must move 8 mm (+ pad) to the left; every other
    # way out is over 100 mm.
    scene = make_scene([rect("block", 500, 400, 600, 600)], half=20, margin=3,
                       start=(100, 100), targets=[(485, 500)])
    u = explain_leg(scene, scene.start, (485, 500))
    assert u.id == "t1"
    assert "block" in u.reason and "overlap" in u.reason
    assert u.extra["kind"] == "inside-obstacle"
    assert [b["id"] for b in u.extra["blocking"]] == ["block"]
    assert u.extra["blocking"][0]["overlaps"] is True
    assert 8.0 + PAD <= u.extra["move"] <= 8.0 + PAD + STEP
    assert u.extra["nearest_free"] == pytest.approx([477.0 - PAD, 500.0], abs=1e-6)
    assert u.extra["margin_to_clear"] is None  # no margin helps while the head overlaps


def test_target_too_close_gives_the_clearance_and_a_margin_that_is_checked_to_work():
    # By construction: head half 20, margin 10; target at x = 474 leaves the head's right edge
    # at 494, 6 mm from the block (x 500). Free at x <= 470 - pad: move 4 mm (+ pad). The
    # target is clear with any margin below 6 - pad - arc tolerance.
    scene = make_scene([rect("block", 500, 400, 600, 600)], half=20, margin=10,
                       start=(100, 100), targets=[(474, 500)])
    u = explain_leg(scene, scene.start, (474, 500))
    assert u.extra["blocking"] == [{"id": "block", "clearance": pytest.approx(6.0, abs=1e-9),
                                    "overlaps": False}]
    assert "within 6 mm of block" in u.reason
    assert 4.0 + PAD <= u.extra["move"] <= 4.0 + PAD + STEP
    limit = 6.0 - PAD - SETTINGS.arc_tolerance
    assert limit - STEP <= u.extra["margin_to_clear"] <= limit
    assert u.extra["reachable_with_margin"] == u.extra["margin_to_clear"]
    assert reachable(scene, u.extra["reachable_with_margin"], scene.start, (474, 500))
    assert not reachable(scene, 6.0, scene.start, (474, 500))


def test_clearance_to_a_circle_is_exact():
    # By construction: circle centre (500, 500), radius 50; head half 20 at (425, 500) has its
    # right edge at 445: 55 from the centre, 5 from the circle. Reference: shapely distance
    # between the footprint and a finely buffered circle (GEOS), which may differ by the buffer's
    # chord error only.
    pin = Obstacle(id="pin", circle=Circle(center=(500.0, 500.0), radius=50.0))
    got = head_clearances((425.0, 500.0), square(20), [pin])
    assert got[0] == pytest.approx(5.0, abs=1e-12)
    fp = shapely.Polygon(np.asarray(square(20)) + (425.0, 500.0))
    ref = fp.distance(shapely.Point(500, 500).buffer(50, quad_segs=4096))
    assert got[0] == pytest.approx(ref, abs=1e-3)

    scene = make_scene([pin], half=20, margin=8, start=(100, 100), targets=[(425, 500)])
    u = explain_leg(scene, scene.start, (425, 500))
    assert [b["id"] for b in u.extra["blocking"]] == ["pin"]
    assert u.extra["blocking"][0]["clearance"] == pytest.approx(5.0, abs=1e-9)


def test_start_inside_an_obstacle_is_named_as_the_start():
    scene = make_scene([rect("clamp", 0, 0, 100, 100)], half=20, margin=3,
                       start=(50, 50), targets=[(800, 800)])
    u = explain_leg(scene, scene.start, (800, 800))
    assert u.extra["kind"] == "start-inside-obstacle"
    assert "the start lies inside obstacle clamp" in u.reason
    # By construction: the nearest free point is above or right of the clamp, at 100 + 20 + 3
    # (+ pad) in x or y: 73 mm away.
    assert 73.0 + PAD <= u.extra["move"] <= 73.0 + PAD + STEP


# -- the target is cut off -----------------------------------------------------------------------

def pocket_with_slot(gap: float):
    """A closed pocket x 320..680, y 300..700 whose only opening is a slot of width `gap` in the
    top wall, between top-left (ends at x = 480) and top-right (starts at x = 480 + gap)."""
    return [
        rect("left", 300, 300, 320, 700),
        rect("right", 680, 300, 700, 700),
        rect("bottom", 300, 280, 700, 300),
        rect("top-left", 300, 700, 480, 720),
        rect("top-right", 480 + gap, 700, 700, 720),
    ]


def test_slot_narrower_than_the_head_names_the_pair_and_the_width_needed():
    # By construction: slot 50 wide; head 60 wide (half 30) + 2 x margin 2 needs 64 there: it
    # is 14 short. The head alone (no margin) is already wider than the slot, so no margin opens
    # it. The other contacts of the pocket's wall are corners where walls touch.
    scene = make_scene(pocket_with_slot(50), half=30, margin=2, start=(100, 900),
                       targets=[(500, 500)])
    u = explain_leg(scene, scene.start, (500, 500))
    assert u.extra["kind"] == "cut-off"
    assert u.extra["single_gap_opens"] is True
    first = u.extra["pairs"][0]
    assert set(first["between"]) == {"top-left", "top-right"}
    assert first["gap"] == pytest.approx(50.0, abs=1e-9)
    assert first["head_width"] == pytest.approx(60.0, abs=1e-9)
    assert first["need"] == pytest.approx(64.0, abs=1e-9)
    assert 14.0 < first["narrower_by"] <= 14.0 + PAIR_ALLOWANCE + 1e-9
    assert first["margin_to_open"] is None
    assert first["opens_alone"] is True
    assert "top-left and top-right are 50 mm apart" in u.reason
    assert "needs 64 mm" in u.reason
    touching = {frozenset(p["between"]) for p in u.extra["pairs"][1:]}
    assert touching <= {frozenset(p) for p in [("left", "top-left"), ("left", "bottom"),
                                               ("right", "bottom"), ("right", "top-right")]}
    assert all(p["gap"] == 0 for p in u.extra["pairs"][1:])


def test_slot_that_a_smaller_margin_opens_gives_that_margin_and_it_works():
    # By construction: slot 50, head 40 wide, margin 8: needs 56, 6 short. The obstacles grown
    # by the head alone are 50 - 40 = 10 apart, so any margin below 5 (less the planner's pad and
    # arc tolerance) opens the slot.
    scene = make_scene(pocket_with_slot(50), half=20, margin=8, start=(100, 900),
                       targets=[(500, 500)])
    u = explain_leg(scene, scene.start, (500, 500))
    first = u.extra["pairs"][0]
    assert set(first["between"]) == {"top-left", "top-right"}
    assert first["need"] == pytest.approx(56.0, abs=1e-9)
    assert 6.0 < first["narrower_by"] <= 6.0 + PAIR_ALLOWANCE + 1e-9
    limit = 5.0 - PAD - SETTINGS.arc_tolerance
    assert limit - STEP <= first["margin_to_open"] < limit
    assert u.extra["reachable_with_margin"] == first["margin_to_open"]
    assert reachable(scene, first["margin_to_open"], scene.start, (500, 500))
    assert not reachable(scene, 5.0, scene.start, (500, 500))
    assert "a margin of 4.94 mm or less opens it" in u.reason


def test_gap_to_a_travel_limit_gives_the_reach_needed():
    # By construction: a pocket against the x-min travel limit (x = 0): bottom wall from the
    # limit, right wall, and a top wall starting 15 from the limit. The tool point may go to
    # x = 0 (the head overhangs), so the way out needs 15 >= reach 20 + margin 3: 8 short.
    walls = [rect("bottom", 0, 380, 400, 400), rect("right", 400, 380, 420, 820),
             rect("top", 15, 800, 420, 820)]
    scene = make_scene(walls, half=20, margin=3, start=(800, 100), targets=[(200, 600)])
    u = explain_leg(scene, scene.start, (200, 600))
    first = u.extra["pairs"][0]
    assert first["between"] == ["top", "travel x-min"]
    assert first["gap"] == pytest.approx(15.0, abs=1e-9)
    assert first["head_width"] == pytest.approx(20.0, abs=1e-9)
    assert first["need"] == pytest.approx(23.0, abs=1e-9)
    assert 8.0 < first["narrower_by"] <= 8.0 + LIMIT_ALLOWANCE + 1e-9
    assert first["margin_to_open"] is None
    assert "top stands 15 mm from the x-min travel limit" in u.reason


def test_gap_to_a_travel_limit_that_a_smaller_margin_opens():
    # By construction: gap 30 to the limit, reach 20, margin 12: needs 32. Opens below
    # 30 - 20 = 10 (less pad and arc tolerance).
    walls = [rect("bottom", 0, 380, 400, 400), rect("right", 400, 380, 420, 820),
             rect("top", 30, 800, 420, 820)]
    scene = make_scene(walls, half=20, margin=12, start=(800, 100), targets=[(200, 600)])
    u = explain_leg(scene, scene.start, (200, 600))
    first = u.extra["pairs"][0]
    assert first["between"] == ["top", "travel x-min"]
    limit = 10.0 - PAD - SETTINGS.arc_tolerance
    assert limit - STEP <= first["margin_to_open"] < limit
    assert reachable(scene, first["margin_to_open"], scene.start, (200, 600))
    assert not reachable(scene, 10.0, scene.start, (200, 600))
    assert u.extra["reachable_with_margin"] == first["margin_to_open"]


def test_two_nested_walls_say_no_single_gap_opens_the_way():
    # By construction: the target sits in an inner pocket inside an outer pocket, each closed by
    # its own too-narrow slot; opening the inner slot alone only leads into the outer pocket.
    inner = pocket_with_slot(50)
    outer = [rect("o-left", 100, 100, 120, 900), rect("o-right", 880, 100, 900, 900),
             rect("o-bottom", 100, 80, 900, 100), rect("o-top-left", 100, 900, 480, 920),
             rect("o-top-right", 530, 900, 900, 920)]
    scene = make_scene(inner + outer, half=30, margin=2, start=(50, 50), targets=[(500, 500)],
                       travel=(0.0, 1000.0, 0.0, 1000.0))
    u = explain_leg(scene, scene.start, (500, 500))
    assert u.extra["single_gap_opens"] is False
    assert "No single gap opens the way; these 2 must all open" in u.reason
    assert "reachable_with_margin" not in u.extra  # the head is wider than either slot
    assert u.extra["gaps_to_open"] == 2
    chain = [frozenset(p["between"]) for p in u.extra["pairs"][:2]]
    assert chain == [frozenset({"top-left", "top-right"}), frozenset({"o-top-left", "o-top-right"})]
    assert not any(p["opens_alone"] for p in u.extra["pairs"])
    # widening both slots (and only both) makes it reachable
    both = make_scene(pocket_with_slot(80) + [replace(o, polygon=((560, 900), (900, 900),
                      (900, 920), (560, 920))) if o.id == "o-top-right" else o for o in outer],
                      half=30, margin=2, start=(50, 50), targets=[(500, 500)])
    assert reachable(both, 2.0, both.start, (500, 500))
    one = make_scene(pocket_with_slot(80) + outer, half=30, margin=2, start=(50, 50),
                     targets=[(500, 500)])
    assert not reachable(one, 2.0, one.start, (500, 500))


def test_explanations_agree_with_the_planner_on_which_gap_matters():
    # The same pocket with a slot 70 wide: a 60-wide head with margin 2 needs 64, so the slot
    # is open and the target is reachable: no explanation is asked for.
    scene = make_scene(pocket_with_slot(70), half=30, margin=2, start=(100, 900),
                       targets=[(500, 500)])
    assert reachable(scene, 2.0, scene.start, (500, 500))
    # ...and a slot of exactly 64 is closed (touching grown shapes close the way, with the pad).
    scene = make_scene(pocket_with_slot(64), half=30, margin=2, start=(100, 900),
                       targets=[(500, 500)])
    u = explain_leg(scene, scene.start, (500, 500))
    first = u.extra["pairs"][0]
    assert first["gap"] == pytest.approx(64.0) and first["need"] == pytest.approx(64.0)
    assert 0.0 < first["narrower_by"] <= PAIR_ALLOWANCE + 1e-9
    # widening the slot by that much opens it
    wider = make_scene(pocket_with_slot(64 + first["narrower_by"] + STEP), half=30, margin=2,
                       start=(100, 900), targets=[(500, 500)])
    assert reachable(wider, 2.0, wider.start, (500, 500))


def test_blocked_pocket_demo_names_the_clamps_and_the_gap():
    # By construction of the demo scene: the back clamp ends at x = 2270, the right clamp starts
    # at x = 2340 (70 mm); the router's dust shoe is an octagon 100 mm across, margin 5: it
    # needs 110 mm. drill-2 sits on hold-down-1 (x 600..700): the nearest free point to its
    # right is 700 + 50 + 5 (+ pad), 105 mm away.
    from pathlib import Path

    from planner.config import load_settings
    from planner.plan import plan_scene
    from planner.scene import load_scene

    repo = Path(__file__).resolve().parent.parent
    settings = load_settings(repo / "config")
    scene = load_scene(repo / "planner" / "demo" / "router-blocked-pocket.yaml", settings)
    found = {u.id: u for u in plan_scene(scene, settings).route.unreachable}
    pocket = found["pocket-centre"].extra
    first = pocket["pairs"][0]
    assert set(first["between"]) == {"pocket-clamp-back", "pocket-clamp-right"}
    assert first["gap"] == pytest.approx(70.0) and first["need"] == pytest.approx(110.0)
    assert first["margin_to_open"] is None and pocket["single_gap_opens"] is True
    drill = found["drill-2"].extra
    assert [b["id"] for b in drill["blocking"]] == ["hold-down-1"]
    assert 105.0 + PAD <= drill["move"] <= 105.0 + PAD + STEP


def test_inch_scene_speaks_inches():
    scene = replace(make_scene(pocket_with_slot(50), half=30, margin=2, start=(100, 900),
                               targets=[(500, 500)]), units="inch")
    settings = SETTINGS.in_units("inch")
    free = build_free_space(scene, settings)
    with pytest.raises(NoPath) as info:
        build_roadmap(free).path(scene.start, (500.0, 500.0))
    u = Explainer(scene, settings).unreachable(info.value, "start", "t1", free)
    assert "top-left and top-right are 50 in apart, the head needs 64 in there" in u.reason
    assert " mm" not in u.reason


def test_lengths_too_small_to_show_are_not_written_as_zero():
    # Worked examples of the message format: a real but tiny gap must not read "0 mm".
    from planner.explain import _num

    assert _num(0.0004, "mm") == "less than 0.01 mm"
    assert _num(0.00004, "inch", 0.0001) == "less than 0.0001 in"
    assert _num(-0.0001, "mm") == "0 mm"
    assert _num(12.5, "mm") == "12.5 mm"
