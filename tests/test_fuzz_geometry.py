"""Fuzzing the planner with degenerate geometry: every route it gives is safe, nothing hangs.

Scenes come from tests/fuzzkit.py `geometric_scene`: duplicate and collinear vertices, touching,
overlapping and near-touching obstacles, obstacles covering the whole table, passages exactly
as wide as the grown head, targets on grown-obstacle boundaries, start equal to a target,
features from 1e-9 to 1e4 and tables from the origin to 1e9. Properties: loading and planning
end in a route or one clear error; a route read back from its file passes an outside safety
check (shapely swept hulls, no planner code); no case runs past its time limit. Each failure
fuzzing found is pinned below with the scene it was found with.
"""

from __future__ import annotations

import json
import os
from dataclasses import replace

import numpy as np
import pytest
from fuzzkit import (
    GOOD_VERDICTS,
    Case,
    case,
    check_tolerance,
    fuzz_settings,
    outside_violations,
    run_case,
)
from hypothesis import HealthCheck, given
from hypothesis import settings as hsettings
from hypothesis import strategies as st

from planner.errors import TooComplexError, format_error
from planner.jobs import EXIT_FAILED, run_job
from planner.plan import plan_scene
from planner.routefile import dump_route, load_route
from planner.scene import load_scene_bytes

SETTINGS = fuzz_settings(time_budget_s=20.0)
LONG = os.environ.get("SIDESTEP_FUZZ_LONG") == "1"


@hsettings(max_examples=1500 if LONG else 40, deadline=None, derandomize=not LONG,
           suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 2**31))
def test_degenerate_scenes_plan_safely_or_are_refused_clearly(seed):
    outcome = run_case(case("geometry", seed), SETTINGS, hang_s=60)
    assert outcome.verdict in GOOD_VERDICTS, f"seed {seed}: {outcome.verdict}\n{outcome.message}"


def plan_json(scene: dict, settings=SETTINGS):
    """Load and plan a scene dict; the route as read back from its file, and the scene."""
    loaded = load_scene_bytes(json.dumps(scene).encode(), "found.json", settings)
    result = plan_scene(loaded, settings)
    return load_route(dump_route(result.route, result.settings.resolution)), loaded


def assert_safe(route, scene, settings=SETTINGS):
    assert outside_violations(route, scene, check_tolerance(scene, settings)) == []


SQUARE_40 = [[-20.0, -20.0], [0.0, -20.0], [20.0, -20.0], [20.0, 0.0], [20.0, 20.0],
             [0.0, 20.0], [-20.0, 20.0], [-20.0, 0.0]]


def test_a_sliver_obstacle_is_grown_not_dropped_and_does_not_crash():
    # Found by fuzzing (geometry seed 8, first generator): a triangle 1e-7 thick (at y = 1e7)
    # lost a vertex as "collinear", and the 2-vertex ring crashed the convex decomposition
    # (ValueError from shapely). Here the same shape nearer the origin: flat up to rounding
    # noise, yet a polygon with area. It must be grown whole, never dropped.
    scene = {"scene": 1, "travel": {"x": [0, 3000], "y": [0, 500]},
             "head": {"footprint": SQUARE_40, "margin": 1.0},
             "obstacles": [{"id": "sliver",
                            "polygon": [[500, 250], [1500, 250], [2500, 250 + 1e-11]]}],
             "start": [1500, 100], "targets": [[1500, 400], [200, 100]]}
    route, loaded = plan_json(scene)
    assert route.status == "complete"
    assert route.legs[0].length > 300 + 1.0  # it went around the sliver, not through it
    assert_safe(route, loaded)


def test_a_target_on_an_off_grid_travel_corner_is_reached():
    # Found by fuzzing (geometry seed 33, first generator): a target exactly on a travel corner
    # that is not on the 0.001 output grid was written at the nearest grid point inside travel,
    # 0.0009 away; the safety check allowed half a step and refused the route (exit 4).
    scene = {"scene": 1, "units": "mm",
             "travel": {"x": [0.0, 770753.1370298986], "y": [0.0, 966906.1118848495]},
             "head": {"footprint": [[-25000.0, -90000.0], [25000.0, -90000.0],
                                    [25000.0, 90000.0], [-25000.0, 90000.0]],
                      "margin": 30000.0},
             "obstacles": [], "start": [215429.52014970125, 920243.0700480307],
             "targets": [[770753.1370298986, 966906.1118848495],
                         [167854.68994558736, 810567.9687884444]]}
    route, loaded = plan_json(scene)
    assert route.status == "complete"
    corner = np.array(route.legs[0].points[-1])
    # the written point is inside travel and within one output step of the corner, per axis
    assert corner[0] <= 770753.1370298986 and corner[1] <= 966906.1118848495
    assert np.all(np.abs(corner - [770753.1370298986, 966906.1118848495]) < 0.001)
    assert_safe(route, loaded)


def test_inch_travel_limits_are_kept_on_the_grid_the_file_is_written_on():
    # Found by fuzzing (geometry seed 80, first generator): in inches the output grid is
    # 0.00001 (the next finer power of ten than 0.001 mm), but the clip to travel used steps
    # of 0.0000394; a point written at the corner came out 1e-6 outside travel.
    scene = {"scene": 1, "units": "inch",
             "travel": {"x": [1000000.0, 1000182.3756891934], "y": [0.0, 230.9295290371399]},
             "head": {"footprint": SQUARE_40, "margin": 0.1, "ride_height": 10.0},
             "obstacles": [{"rect": {"min": [1000091.3253472506, 157.74593396894704],
                                     "max": [1000121.0492988322, 163.18727819178548]}}],
             "start": [1000027.7598259918, 87.7816517588524],
             "targets": [[1000044.8362720249, 104.70051861812802],
                         [1000182.3756891934, 230.9295290371399],
                         [1000070.266950654, 11.84159738046692]]}
    route, loaded = plan_json(scene)
    pts = np.concatenate([np.asarray(leg.points) for leg in route.legs])
    t = loaded.travel
    assert pts[:, 0].min() >= t.xmin and pts[:, 0].max() <= t.xmax
    assert pts[:, 1].min() >= t.ymin and pts[:, 1].max() <= t.ymax
    assert_safe(route, loaded)


def _circle_scene(radius: float) -> dict:
    return {"scene": 1, "travel": {"x": [0, 4 * radius], "y": [0, 4 * radius]},
            "head": {"footprint": [[-5, -5], [5, -5], [5, 5], [-5, 5]], "margin": 1.0},
            "obstacles": [{"id": "tank", "circle": {"center": [2 * radius, 2 * radius],
                                                    "radius": radius}}],
            "start": [10, 10], "targets": [[4 * radius - 10, 4 * radius - 10]]}


def test_a_huge_circle_is_refused_before_its_outline_is_built():
    # Found by fuzzing (geometry seed 10, first generator): a circle of radius 5e8 at the
    # 0.05 arc tolerance asked for ~220,000 outline vertices, and triangulating the free space
    # around them did not end within minutes. Arc outlines are now counted first (sides n of
    # the circumscribed n-gon: r / cos(pi / n) - r <= tolerance, elementary trigonometry).
    settings = replace(SETTINGS, limits=replace(SETTINGS.limits, max_vertices=20_000))
    loaded = load_scene_bytes(json.dumps(_circle_scene(1e7)).encode(), "tank.json", settings)
    with pytest.raises(TooComplexError) as info:
        plan_scene(loaded, settings)
    text = format_error(info.value)
    assert "tank.json" in text and "circle tank" in text and "max_vertices" in text
    assert "\n" not in text


def test_a_circle_with_thousands_of_outline_vertices_still_plans():
    # 1.2e5 mm radius: about 4,900 outline vertices (common practice, no source: well past
    # what one ring should hold before the triangulation is cut into cells).
    route, loaded = plan_json(_circle_scene(1.2e5))
    assert route.status == "complete"
    assert_safe(route, loaded)


def test_past_the_time_budget_the_plan_stops_with_one_clear_message(tmp_path):
    scene = tmp_path / "slow.json"
    scene.write_text(json.dumps(_circle_scene(1000.0)))
    settings = replace(SETTINGS, limits=replace(SETTINGS.limits, time_budget_s=1e-9))
    outcome = run_job(scene, tmp_path / "out", settings)
    assert outcome.state == "failed" and outcome.exit_code == EXIT_FAILED
    assert outcome.message.startswith("slow.json: ") and "\n" not in outcome.message
    assert "time budget" in outcome.message and "limits.time_budget_s" in outcome.message
    assert not (tmp_path / "out").exists()  # nothing written


def test_a_regression_case_from_the_kit_reproduces_by_kind_and_seed():
    # the campaign's figures name cases by kind and seed: the same seed gives the same bytes
    a, b = case("geometry", 12345), case("geometry", 12345)
    assert isinstance(a, Case) and a == b


def test_the_outside_check_finds_an_unsafe_route():
    # The check must be able to fail: a straight move through a wall, and a carried bar
    # swept into a wall the bare head clears (the carry rule of docs/scene-format.md).
    from planner.model import Leg, Route

    wall = {"scene": 1, "travel": {"x": [0, 1000], "y": [0, 500]},
            "head": {"footprint": [[-10, -10], [10, -10], [10, 10], [-10, 10]], "margin": 1},
            "obstacles": [{"id": "wall", "rect": {"min": [400, 150], "max": [420, 500]}}],
            "start": [100, 100],
            "targets": [{"at": [100, 100],
                         "carry": [[-10, -10], [10, -10], [10, 200], [-10, 200]]}, [900, 100]]}
    loaded = load_scene_bytes(json.dumps(wall).encode(), "wall.json", SETTINGS)
    legs = (Leg("start", "t1", ((100.0, 100.0), (100.0, 100.0)), 0.0),
            Leg("t1", "t2", ((100.0, 100.0), (900.0, 100.0)), 800.0))
    route = Route("wall.json", loaded.sha256, "", "mm", legs, ())
    found = outside_violations(route, loaded, 1e-6)
    assert found and "wall" in found[0] and "t1 -> t2" in found[0]
    bare = dict(wall, targets=[[100, 100], [900, 100]])
    loaded = load_scene_bytes(json.dumps(bare).encode(), "bare.json", SETTINGS)
    assert outside_violations(route, loaded, 1e-6) == []  # without the bar it clears the wall
    through = Route("bare.json", loaded.sha256, "", "mm",
                    (Leg("start", "t1", ((100.0, 100.0), (100.0, 300.0), (900.0, 300.0)), 0.0),),
                    ())
    assert outside_violations(through, loaded, 1e-6)


def test_a_circle_too_small_to_draw_still_gets_its_job_sheet(tmp_path):
    # Found by the campaign (geometry seed 450, through `sidestep plan`): a circle of radius
    # 1e-11 at x = 1e6 buffers to an empty polygon in GEOS (its bounds are NaN), and the job
    # sheet's picture crashed on it ("internal error", exit 4). It is drawn a few doubles wide.
    scene = tmp_path / "speck.json"
    scene.write_text(json.dumps({
        "scene": 1, "travel": {"x": [1000000.0, 1000100.0], "y": [0, 100]},
        "head": {"footprint": [[-1, -1], [1, -1], [1, 1], [-1, 1]], "margin": 0.5},
        "obstacles": [{"circle": {"center": [1000050.0, 50.0], "radius": 1e-11}}],
        "start": [1000010.0, 10.0], "targets": [[1000090.0, 90.0]]}))
    settings = replace(SETTINGS, adapters=("csv", "gcode", "jobsheet"))
    outcome = run_job(scene, tmp_path / "out", settings)
    assert outcome.state == "planned", outcome.message
    assert (tmp_path / "out" / "speck.html").is_file()


# ------------------------------------------------- GEOS failures, where they occur

BLOCKS = {"scene": 1, "travel": {"x": [0, 1000], "y": [0, 500]},
          "head": {"footprint": [[-10, -10], [10, -10], [10, 10], [-10, 10]], "margin": 1},
          "obstacles": [{"rect": {"min": [400, 0], "max": [420, 300]}},
                        {"rect": {"min": [410, 250], "max": [600, 270]}}],
          "start": [100, 100], "targets": [[900, 100]]}


def _failing(real, times: int, when=lambda *a, **k: True):
    """`real`, except that its first `times` calls that match `when` raise GEOSException."""
    import shapely

    left = [times]

    def fake(*args, **kwargs):
        if left[0] > 0 and when(*args, **kwargs):
            left[0] -= 1
            raise shapely.errors.GEOSException("TopologyException: side location conflict")
        return real(*args, **kwargs)

    return fake


def test_a_topology_exception_in_the_union_is_repaired_conservatively(monkeypatch):
    # GEOS raises TopologyException on some nearly degenerate unions (a known GEOS failure
    # mode, e.g. "side location conflict"); the union is redone on make_valid pieces.
    import shapely

    import planner.cspace as cspace

    monkeypatch.setattr(cspace.shapely, "union_all", _failing(shapely.union_all, 1))
    route, loaded = plan_json(BLOCKS)
    assert route.status == "complete"
    assert_safe(route, loaded)


def test_a_union_that_keeps_failing_is_one_clear_error(monkeypatch, tmp_path):
    import shapely

    import planner.cspace as cspace

    monkeypatch.setattr(cspace.shapely, "union_all", _failing(shapely.union_all, 99))
    scene = tmp_path / "blocks.json"
    scene.write_text(json.dumps(BLOCKS))
    outcome = run_job(scene, tmp_path / "out", SETTINGS)
    assert outcome.state == "failed" and "GEOS failed" in outcome.message
    assert outcome.message.startswith("blocks.json: ") and "\n" not in outcome.message
    assert not (tmp_path / "out").exists()


def test_an_invalid_union_that_would_give_up_an_obstacle_is_refused(monkeypatch, tmp_path):
    # make_valid repairs a self-crossing result by keeping what it can; if the repair no longer
    # covers every grown piece the planner refuses rather than plan on a smaller obstacle.
    import shapely

    import planner.cspace as cspace

    bowtie = shapely.Polygon([(380, -20), (640, 290), (640, -20), (380, 290)])  # crosses itself
    real, calls = shapely.union_all, []

    def first_invalid(*args, **kwargs):
        calls.append(1)
        return bowtie if len(calls) == 1 else real(*args, **kwargs)

    monkeypatch.setattr(cspace.shapely, "union_all", first_invalid)
    scene = tmp_path / "blocks.json"
    scene.write_text(json.dumps(BLOCKS))
    outcome = run_job(scene, tmp_path / "out", SETTINGS)
    assert outcome.state == "failed" and "refusing to plan" in outcome.message


def test_a_failing_shrink_for_the_visibility_test_is_repaired_or_refused(monkeypatch):
    import shapely

    import planner.roadmap as roadmap
    from planner.cspace import build_free_space
    from planner.errors import PlanningError

    shrink = lambda geom, distance, **k: np.any(np.asarray(distance) < 0)  # noqa: E731
    monkeypatch.setattr(roadmap.shapely, "buffer", _failing(shapely.buffer, 1, shrink))
    route, loaded = plan_json(BLOCKS)
    assert_safe(route, loaded)
    monkeypatch.setattr(roadmap.shapely, "buffer", _failing(shapely.buffer, 99, shrink))
    settings = SETTINGS.in_units(loaded.units)
    with pytest.raises(PlanningError, match="GEOS failed"):
        roadmap.build_roadmap(build_free_space(loaded, settings))


def test_the_time_budget_is_checked_inside_the_road_map_build():
    # The cheap check sits in the visibility walk, the road map's longest loop: a plan that
    # runs out of time there stops at the next step instead of finishing the build.
    from planner.budget import time_budget
    from planner.cspace import build_free_space
    from planner.roadmap import build_roadmap

    loaded = load_scene_bytes(json.dumps(BLOCKS).encode(), "blocks.json", SETTINGS)
    free = build_free_space(loaded, SETTINGS.in_units(loaded.units))
    with time_budget(0.0, "blocks.json"), pytest.raises(TooComplexError) as info:
        build_roadmap(free)
    assert "looking for visible corners" in str(info.value)
    build_roadmap(free)  # outside a budget nothing stops it
