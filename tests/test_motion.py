"""The axis model and the trapezoidal time estimate, checked against constant-acceleration
kinematics worked by hand (s = v^2 / (2a) to reach speed v from rest, s = v t while cruising)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.motion import (
    Axis,
    AxisModel,
    AxisSpecError,
    axis_model_from_mapping,
    check_axes_override,
    merge_axes,
    path_time,
    profile_time,
    segment_limits,
    segment_times,
)

SAME = AxisModel(Axis(500.0, 2000.0), Axis(500.0, 2000.0))


# Worked by hand from constant-acceleration kinematics (textbook: s = v^2/(2a) per ramp):
# 1000 mm at 500 mm/s and 2000 mm/s^2: each ramp takes 500/2000 = 0.25 s over 62.5 mm, the
# remaining 875 mm cruise at 500 mm/s take 1.75 s: 0.25 + 1.75 + 0.25 = 2.25 s.
def test_long_move_is_trapezoidal():
    assert float(profile_time(1000.0, 500.0, 2000.0)) == pytest.approx(2.25, rel=1e-12)


# Worked by hand: 50 mm is shorter than the 125 mm (= v^2/a) needed to reach 500 mm/s and brake
# again, so the profile is a triangle: 25 mm accelerating at 2000 mm/s^2 take
# sqrt(2 * 25 / 2000) = 0.158113883 s, and as long braking; the peak, 316.2 mm/s, stays below 500.
def test_short_move_is_triangular():
    assert float(profile_time(50.0, 500.0, 2000.0)) == pytest.approx(2 * math.sqrt(0.025),
                                                                     rel=1e-12)


# Worked by hand: exactly v^2/a = 125 mm reaches 500 mm/s at half way and brakes at once:
# 2 * 0.25 s; the trapezoid and the triangle formulas meet there.
def test_profiles_meet_at_the_ramp_distance():
    assert float(profile_time(125.0, 500.0, 2000.0)) == pytest.approx(0.5, rel=1e-12)
    below = float(profile_time(125.0 * (1 - 1e-9), 500.0, 2000.0))
    assert below == pytest.approx(0.5, rel=1e-8)


def test_zero_move_takes_no_time():
    assert float(profile_time(0.0, 500.0, 2000.0)) == 0.0
    assert path_time(np.array([[3.0, 4.0], [3.0, 4.0]]), SAME) == 0.0
    assert path_time(np.array([[3.0, 4.0]]), SAME) == 0.0


# Worked by hand, coordinated linear move (300, 400), 500 mm long, direction (0.6, 0.8);
# x: 500 mm/s, 1000 mm/s^2; y: 250 mm/s, 1000 mm/s^2. Path speed min(500/0.6, 250/0.8) = 312.5,
# path acceleration min(1000/0.6, 1000/0.8) = 1250: y is at its limits (250 mm/s, 1000 mm/s^2),
# x below (187.5, 750). Ramp distance 312.5^2 / 1250 = 78.125 < 500, so trapezoidal:
# 500 / 312.5 + 312.5 / 1250 = 1.6 + 0.25 = 1.85 s.
def test_coordinated_move_is_limited_by_the_slower_axis():
    model = AxisModel(Axis(500.0, 1000.0), Axis(250.0, 1000.0), linear=True)
    v, a = segment_limits(np.array([[300.0, 400.0]]), model)
    assert float(v[0]) == pytest.approx(312.5)
    assert float(a[0]) == pytest.approx(1250.0)
    assert float(v[0]) * 0.6 <= 500.0 and float(v[0]) * 0.8 == pytest.approx(250.0)
    assert float(a[0]) * 0.6 <= 1000.0 and float(a[0]) * 0.8 == pytest.approx(1000.0)
    assert float(segment_times(np.array([[300.0, 400.0]]), model)[0]) == pytest.approx(1.85)
    # Independent axes (no linear interpolation), by hand: x alone 300 mm: ramp 250 mm < 300,
    # 300/500 + 500/1000 = 1.1 s; y alone 400 mm: 400/250 + 250/1000 = 1.85 s; the move ends
    # when y arrives.
    loose = AxisModel(Axis(500.0, 1000.0), Axis(250.0, 1000.0), linear=False)
    assert float(segment_times(np.array([[300.0, -400.0]]), loose)[0]) == pytest.approx(1.85)
    assert float(segment_times(np.array([[300.0, 0.0]]), loose)[0]) == pytest.approx(1.1)


# Worked by hand: a polyline stops at its corner, so its time is the sum of its straight moves:
# 1000 mm (2.25 s, above) then 50 mm (0.316227766 s, above).
def test_a_path_comes_to_rest_at_every_corner():
    pts = np.array([[0.0, 0.0], [1000.0, 0.0], [1000.0, 50.0]])
    assert path_time(pts, SAME) == pytest.approx(2.25 + 2 * math.sqrt(0.025))
    # A diagonal with equal axes: L-infinity rules (each axis at most 500 mm/s): a 45-degree
    # move of 1000 mm on each axis takes the same as 1000 mm on one axis.
    assert path_time(np.array([[0.0, 0.0], [1000.0, 1000.0]]), SAME) == pytest.approx(2.25)


# Constant-acceleration kinematics (textbook): with ramp time tr = min(v/a, t/2) the profile
# covers a*tr^2 while accelerating and braking and v_peak*(t - 2 tr) cruising; that must be the
# distance asked for, and the peak must respect the speed limit.
@settings(max_examples=200, deadline=None)
@given(
    d=st.floats(1e-6, 1e5),
    v=st.floats(1e-2, 1e4),
    a=st.floats(1e-2, 1e6),
)
def test_profile_time_covers_the_distance(d: float, v: float, a: float):
    t = float(profile_time(d, v, a))
    tr = min(v / a, t / 2)
    peak = a * tr
    covered = a * tr * tr + peak * (t - 2 * tr)
    assert peak <= v * (1 + 1e-9)
    assert covered == pytest.approx(d, rel=1e-9)
    # A longer move takes longer (rule of thumb, no source).
    assert float(profile_time(d * 1.01, v, a)) > t


def test_times_do_not_depend_on_the_length_unit():
    model_mm = AxisModel(Axis(500.0, 2000.0), Axis(300.0, 900.0), units="mm")
    model_in = model_mm.in_units("inch")
    assert model_in.x.speed == pytest.approx(500.0 / 25.4)
    pts_mm = np.array([[0.0, 0.0], [254.0, 127.0], [300.0, 500.0]])
    assert path_time(pts_mm / 25.4, model_in) == pytest.approx(path_time(pts_mm, model_mm))


# The direct coordinated move is never slower than going through a corner and stopping there
# (what lets a time search keep straight lines where they are free). Property over random
# limits, no outside source.
@settings(max_examples=200, deadline=None)
@given(
    limits=st.tuples(*[st.floats(1.0, 1e4)] * 4),
    linear=st.booleans(),
    p=st.tuples(*[st.floats(-1e3, 1e3)] * 4),
)
def test_direct_move_is_never_slower_than_a_detour(limits, linear, p):
    model = AxisModel(Axis(limits[0], limits[1]), Axis(limits[2], limits[3]), linear=linear)
    d1, d2 = np.array([p[:2]]), np.array([p[2:]])
    direct = float(segment_times(d1 + d2, model)[0])
    detour = float(segment_times(d1, model)[0] + segment_times(d2, model)[0])
    assert direct <= detour * (1 + 1e-9) + 1e-12


def test_axes_mapping_is_checked_and_merged_in_units():
    model = axis_model_from_mapping(
        {"x": {"speed": 500, "acceleration": 2000}, "y": {"speed": 400, "acceleration": 1500}},
        "mm",
    )
    assert model.linear is True and model.y == Axis(400.0, 1500.0)
    override = check_axes_override({"y": {"acceleration": 10}, "linear": False})
    merged = merge_axes(model, override, "inch")
    assert merged.y == Axis(400.0, 254.0) and merged.x == model.x and merged.linear is False
    with pytest.raises(AxisSpecError) as err:
        check_axes_override({"x": {"sped": 5}})
    assert err.value.path == "axes.x.sped"
    with pytest.raises(AxisSpecError) as err:
        check_axes_override({"y": {"speed": -1}})
    assert err.value.path == "axes.y.speed"
    with pytest.raises(AxisSpecError):
        check_axes_override({"linear": "yes"})
    with pytest.raises(AxisSpecError) as err:
        axis_model_from_mapping({"x": {"speed": 1, "acceleration": 1}}, "mm")
    assert err.value.path == "axes.y"


# ---- through the pipeline: road-map searches by time, estimates in routes, config and scene keys

def _scene(extra: dict | None = None, **overrides):
    import yaml

    from planner.config import load_settings
    from planner.scene import load_scene_bytes
    from tests.helpers import REPO_CONFIG

    data = {
        "scene": 1,
        "travel": {"x": [0, 1000], "y": [0, 600]},
        "head": {"footprint": [[-1, -1], [1, -1], [1, 1], [-1, 1]], "margin": 0.5},
        # an arrow pointing right: a flat back (two corners) and a single tip
        "obstacles": [{"id": "arrow", "polygon": [[300, 250], [600, 250], [800, 300],
                                                  [600, 350], [300, 350]]}],
        "start": [500, 100],
        "targets": [[500, 500]],
        **(extra or {}),
    }
    data.update(overrides)
    settings = load_settings(REPO_CONFIG)
    return load_scene_bytes(yaml.safe_dump(data).encode(), "arrow.yaml", settings), settings


# Worked example: round the flat back of the arrow is the shorter way (about 603 mm in three
# moves: 250, 100, 250 before the margin's chamfers) but round the tip is faster when the axes
# accelerate slowly (two moves of about 361 mm): with 100 mm/s^2 every move is triangular,
# 2 sqrt(L / a_path), i.e. about 2.83 + 2 + 2.83 = 7.66 s against 3.46 + 3.46 = 6.93 s by hand.
def test_time_optimal_path_differs_from_the_length_optimal_one():
    from planner.motion import TimeCost
    from planner.plan import free_space_and_roadmap

    scene, settings = _scene()
    _, roadmap = free_space_and_roadmap(scene, settings)
    slow = AxisModel(Axis(500.0, 100.0), Axis(500.0, 100.0))
    a, b = scene.start, scene.targets[0].at
    by_length, length_l = roadmap.path(a, b)
    by_time, length_t = roadmap.path(a, b, TimeCost(slow))
    assert np.all(by_length[1:-1, 0] < 300) and np.all(by_time[1:-1, 0] > 800)
    assert length_l == pytest.approx(603.4, abs=1.0) and length_t == pytest.approx(724.7, abs=1.0)
    assert path_time(by_time, slow) < path_time(by_length, slow) - 0.3
    assert path_time(by_time, slow) == pytest.approx(6.93 + 0.55, abs=0.1)  # + the chamfers
    # the search's own cost is the time of the path it found (before dropping straight-on
    # points, which can only make it faster)
    found = float(roadmap.distances_from(a, np.array([b]), TimeCost(slow))[0])
    assert path_time(by_time, slow) <= found + 1e-9
    assert found == pytest.approx(path_time(by_time, slow), rel=1e-6)


def test_routes_carry_leg_times_and_the_total():
    from planner.plan import plan_scene

    scene, settings = _scene({"cost": "time", "axes": {"x": {"acceleration": 100},
                                                       "y": {"acceleration": 100}}})
    result = plan_scene(scene, settings)
    route = result.route
    assert [leg.to_id for leg in route.legs] == ["t1"]
    leg = route.legs[0]
    assert max(x for x, _ in leg.points) > 800  # round the tip: cost is time
    model = AxisModel(Axis(500.0, 100.0), Axis(400.0, 100.0))  # config speeds, scene accels
    assert leg.extra["time"] == pytest.approx(path_time(np.array(leg.points), model), abs=1e-3)
    assert route.extra["time"] == pytest.approx(sum(lg.extra["time"] for lg in route.legs))

    scene, settings = _scene()  # cost: length (config default): round the back
    route = plan_scene(scene, settings).route
    assert max(x for x, _ in route.legs[0].points[1:-1]) < 300
    assert route.legs[0].extra["time"] > 0


def test_route_file_keeps_the_times():
    from planner.plan import plan_scene
    from planner.routefile import dump_route, load_route

    scene, settings = _scene()
    route = plan_scene(scene, settings).route
    text = dump_route(route, 0.001)
    assert f"time: {route.extra['time']:.3f}" in text
    back = load_route(text)
    assert back.extra["time"] == pytest.approx(route.extra["time"])
    assert back.legs[0].extra["time"] == pytest.approx(route.legs[0].extra["time"])


def test_bad_axes_in_a_scene_is_one_clear_error():
    from planner.errors import SceneError

    with pytest.raises(SceneError) as err:
        _scene({"axes": {"x": {"speed": -5}}})
    assert "axes" in str(err.value) and "speed" in str(err.value)
    with pytest.raises(SceneError) as err:
        _scene({"axes": {"z": {"speed": 5}}})
    assert "z" in str(err.value)
    with pytest.raises(SceneError):
        _scene({"cost": "money"})


def test_config_axes_are_checked_and_a_head_can_change_them(tmp_path):
    from planner.config import effective_config_sha256, load_settings
    from planner.errors import ConfigError
    from planner.motion import effective_axes
    from planner.scene import load_scene_bytes
    from tests.helpers import REPO_CONFIG

    (tmp_path / "planner.yaml").write_text(
        "units: inch\naxes:\n  x: {speed: 20, acceleration: 80}\n  y: {speed: 10}\n")
    with pytest.raises(ConfigError) as err:
        load_settings(tmp_path)
    assert "planner.yaml" in str(err.value) and "acceleration" in str(err.value)

    (tmp_path / "planner.yaml").write_text(
        "units: inch\naxes:\n  x: {speed: 20, acceleration: 80}\n"
        "  y: {speed: 10, acceleration: 40}\n")
    (tmp_path / "heads.yaml").write_text(
        "units: mm\nheads:\n  heavy:\n    footprint: [[-5, -5], [5, -5], [5, 5], [-5, 5]]\n"
        "    axes: {y: {acceleration: 254}, linear: false}\n")
    settings = load_settings(tmp_path)
    text = (b"scene: 1\ntravel: {x: [0, 100], y: [0, 100]}\nhead: heavy\n"
            b"start: [10, 10]\ntargets: [[90, 90]]\naxes: {x: {speed: 100}}\n")
    scene = load_scene_bytes(text, "s.yaml", settings)
    model = effective_axes(settings.in_units("mm"), scene)
    # inch config (20 in/s = 508 mm/s), mm head (254 mm/s^2), mm scene (100 mm/s)
    assert model.units == "mm" and model.linear is False
    assert model.x == Axis(100.0, pytest.approx(80 * 25.4))
    assert model.y == Axis(pytest.approx(254.0), pytest.approx(254.0))
    plain = load_settings(REPO_CONFIG)
    assert effective_config_sha256(settings, scene.head) != effective_config_sha256(
        plain, scene.head)
