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
