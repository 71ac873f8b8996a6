"""The route file: exact format, plain decimals, round trips, clear errors for malformed files."""

from __future__ import annotations

import math
from decimal import Decimal
from pathlib import Path

import numpy as np
import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.model import Leg, Route, Unreachable
from planner.routefile import (
    RouteFileError,
    decimals_for,
    dump_route,
    load_route,
    round_to_resolution,
)

HASH_A = "3f" * 32
HASH_B = "a0" * 32


def leg(frm, to, points, length=None, resolution=0.001, **extra) -> Leg:
    pts = round_to_resolution(np.asarray(points, dtype=float), resolution)
    if length is None:
        length = float(np.hypot(*np.diff(pts, axis=0).T).sum()) if len(pts) > 1 else 0.0
    return Leg(frm, to, tuple(map(tuple, pts.tolist())), length, extra)


def example_route() -> Route:
    return Route(
        scene_file="job-0412.yaml", scene_sha256=HASH_A, config_sha256=HASH_B, units="mm",
        legs=(
            leg("start", "t1", [(20, 20), (96.2, 63.0), (500, 200)], 612.0041),
            leg("t1", "finish", [(500, 200), (20, 20)], 512.6499, time=4.5, appeared=["part-7"],
                gone=[], carry=[(-30, -20), (30, -20), (30, 20), (-30, 20)]),
        ),
        unreachable=(Unreachable("t3", "no collision-free path from t2: inside clamp-1"),),
    )


DOC = Path(__file__).resolve().parents[1] / "docs" / "route-format.md"


def documented_example() -> str:
    """The first YAML example of docs/route-format.md."""
    return DOC.read_text(encoding="utf-8").split("```yaml\n", 1)[1].split("```", 1)[0]


EXAMPLE_TEXT = documented_example()


def test_the_documented_example_is_written_exactly():
    # The example in docs/route-format.md, character for character: docs and code agree.
    assert dump_route(example_route(), 0.001) == EXAMPLE_TEXT


def test_safe_load_gives_the_documented_structure():
    # Reference: PyYAML's safe_load, the reader machine-side scripts are told to use.
    data = yaml.safe_load(dump_route(example_route(), 0.001))
    assert list(data) == ["route", "scene", "scene_sha256", "config_sha256", "units", "status",
                          "length", "legs", "unreachable"]
    assert data["route"] == 1 and data["status"] == "incomplete" and data["units"] == "mm"
    assert data["scene_sha256"] == HASH_A
    assert list(data["legs"][0]) == ["from", "to", "length", "points"]
    assert list(data["legs"][1]) == ["from", "to", "length", "time", "appeared", "carry", "points"]
    assert data["legs"][0]["points"] == [[20.0, 20.0], [96.2, 63.0], [500.0, 200.0]]
    assert all(isinstance(c, float) for p in data["legs"][0]["points"] for c in p)
    assert data["length"] == pytest.approx(data["legs"][0]["length"] + data["legs"][1]["length"])
    assert data["unreachable"] == [
        {"id": "t3", "reason": "no collision-free path from t2: inside clamp-1"}]


def test_empty_lists_are_written_and_empty_appeared_gone_omitted():
    route = Route("s.yaml", HASH_A, HASH_B, "inch", (), ())
    data = yaml.safe_load(dump_route(route, 0.0001))
    assert data["legs"] == [] and data["unreachable"] == [] and data["status"] == "complete"
    assert data["length"] == 0.0
    one = Route("s.yaml", HASH_A, HASH_B, "mm", (leg("start", "t1", [(0, 0), (1, 0)],
                                                     appeared=[], gone=()),), ())
    assert "appeared" not in yaml.safe_load(dump_route(one, 0.001))["legs"][0]


@pytest.mark.parametrize("resolution, decimals", [
    (0.001, 3), (0.01, 2), (0.1, 1), (1, 0), (5, 0), (0.25, 2), (0.0005, 4), (0.0001, 4),
    (0.001 / 25.4, 5),  # 0.001 mm in inches: untidy, so the next finer power of ten
])
def test_decimals_for(resolution, decimals):
    assert decimals_for(resolution) == decimals


@pytest.mark.parametrize("bad", [0, -0.001, math.nan, math.inf, "0.001", True, 1e-15])
def test_bad_resolution_is_refused(bad):
    with pytest.raises(ValueError):
        decimals_for(bad)


@settings(max_examples=200, deadline=None)
@given(st.floats(-1e7, 1e7, allow_nan=False),
       st.sampled_from([0.001, 0.01, 0.25, 1.0, 0.0005, 0.001 / 25.4, 5.0]))
def test_numbers_are_plain_decimals_on_the_grid(value, resolution):
    d = decimals_for(resolution)
    route = Route("s.yaml", HASH_A, HASH_B, "mm",
                  (leg("start", "t1", [(value, 0.0)], 0.0, resolution=resolution),), ())
    text = dump_route(route, resolution)
    written = text.split("points: [[")[1].split(",")[0]
    assert "e" not in written.lower() and (d == 0) == ("." not in written)
    if d:
        assert len(written.split(".")[1]) == d
    # Reference: Python's decimal module (exact decimal arithmetic) for the rounding error, and
    # float() (correctly rounded, IEEE 754) for what the written decimal reads back as.
    # The grid step is never coarser than the resolution, so rounding moves at most half of it.
    assert abs(Decimal(written) - Decimal(value)) <= Decimal(resolution) / 2 + Decimal(1e-9)
    assert float(written) == round_to_resolution(np.array([value]), resolution)[0]


def test_rounding_removes_float_noise():
    pts = round_to_resolution(np.array([[0.1 + 0.2, -1e-7], [2.675, 1e6 + 0.0004]]), 0.001)
    route = Route("s.yaml", HASH_A, HASH_B, "mm", (Leg("start", "t1", tuple(map(tuple, pts)),
                                                       0.1 + 0.2),), ())
    text = dump_route(route, 0.001)
    assert "points: [[0.300, 0.000], [2.675, 1000000.000]]" in text
    assert "length: 0.300\n" in text


def test_points_off_the_grid_are_refused():
    route = Route("s.yaml", HASH_A, HASH_B, "mm",
                  (Leg("start", "t1", ((0.0, 0.0), (1.0004, 0.0)), 1.0004),), ())
    with pytest.raises(ValueError, match="not on the output grid"):
        dump_route(route, 0.001)


@pytest.mark.parametrize("bad_extra", [{"points": 1}, {"length": 2.0}, {"from": "x"}])
def test_extra_fields_cannot_shadow_route_keys(bad_extra):
    route = Route("s.yaml", HASH_A, HASH_B, "mm", (Leg("start", "t1", ((0.0, 0.0),), 0.0,
                                                       bad_extra),), ())
    with pytest.raises(ValueError, match="clashes"):
        dump_route(route, 0.001)


@pytest.mark.parametrize("ident", ["yes", "No", "null", "1", "0x1f", "a: b", "t#1", "[x]", "-",
                                   "", " lead", "ünï", "line\nbreak", "tab\there", '"q"', "\x85",
                                   "\u2028", "\ufeff", "~", "*star", "&a", "!tag", "%p", "@a"])
def test_awkward_ids_survive(ident):
    route = Route(ident + ".yaml", HASH_A, HASH_B, "mm",
                  (leg("start", ident, [(0, 0)]),), (Unreachable(ident, ident),))
    text = dump_route(route, 0.001)
    # Reference: PyYAML's safe_load reads back the same strings.
    data = yaml.safe_load(text)
    assert data["legs"][0]["to"] == ident and data["scene"] == ident + ".yaml"
    assert data["unreachable"][0] == {"id": ident, "reason": ident}
    assert dump_route(load_route(text), 0.001) == text


# ---- malformed files ------------------------------------------------------------------------


def break_example(old: str, new: str) -> str:
    text = EXAMPLE_TEXT
    assert old in text
    return text.replace(old, new, 1)


@pytest.mark.parametrize("text, path, line", [
    (break_example("    to: t1\n", ""), "legs[0]", 9),
    (break_example("units: mm", "units: furlong"), "units", 5),
    (break_example("route: 1", "route: 2"), "route", 1),
    (break_example("status: incomplete", "status: complete"), "status", 6),
    (break_example("length: 1124.654", "length: 1000"), "length", 7),
    (break_example("[96.200, 63.000]", "[96.200]"), "legs[0].points[1]", 12),
    (break_example("[96.200, 63.000]", "[96.200, .nan]"), "legs[0].points[1]", 12),
    (break_example("[96.200, 63.000]", '[96.200, "63"]'), "legs[0].points[1]", 12),
    (break_example("length: 612.004", "length: -612.004"), "legs[0].length", 11),
    (break_example("    to: t1\n", "    to: t1\n    to: t2\n"), "legs[0].to", 11),
    (break_example("appeared: [part-7]", "appeared: part-7"), "legs[1].appeared", 17),
    (break_example("unreachable:\n  - {id: t3, ", "unreachable:\n  - {"), "unreachable[0]", 21),
    ("- just\n- a list\n", "", 1),
])
def test_malformed_files_get_a_located_message(text, path, line):
    with pytest.raises(RouteFileError) as err:
        load_route(text, file="job.route.yaml")
    assert isinstance(err.value, ValueError)
    assert err.value.path == path and err.value.line == line
    assert str(err.value).startswith(f"job.route.yaml:{line}:")


@pytest.mark.parametrize("text", [
    "route: [1\n", "a: &x [1]\nb: *x\n", "", "\xff\xfe", b"\xff\xfe", "route: 1\n\tbad: tab\n"])
def test_unreadable_files_get_a_message(text):
    with pytest.raises(RouteFileError) as err:
        load_route(text, file="job.route.yaml")
    assert str(err.value).startswith("job.route.yaml")


# ---- round trips ----------------------------------------------------------------------------

RESOLUTIONS = [0.001, 0.01, 0.25, 1.0, 0.001 / 25.4]
ident = st.text(min_size=1, max_size=12)
coord = st.floats(-1e5, 1e5, allow_nan=False)
extra_value = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(-1e6, 1e6) | ident,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(ident, inner, max_size=3),
    max_leaves=6,
)


@st.composite
def routes(draw):
    resolution = draw(st.sampled_from(RESOLUTIONS))
    n = draw(st.integers(0, 4))
    ids = ["start"] + [draw(ident) for _ in range(n)]
    legs = []
    for i in range(n):
        pts = draw(st.lists(st.tuples(coord, coord), min_size=1, max_size=6))
        extra = {}
        if draw(st.booleans()):
            extra["time"] = draw(st.floats(0, 1e5))
        if draw(st.booleans()):
            extra["appeared"] = draw(st.lists(ident, max_size=3))
        if draw(st.booleans()):
            extra["carry"] = draw(st.lists(st.tuples(coord, coord), min_size=3, max_size=5))
        extra.update(draw(st.dictionaries(ident.filter(lambda k: k not in (
            "from", "to", "length", "points", "appeared", "gone", "carry")), extra_value,
            max_size=2)))
        legs.append(leg(ids[i], ids[i + 1], pts, draw(st.floats(0, 1e6)), resolution, **extra))
    gaps = tuple(Unreachable(draw(ident), draw(st.text(max_size=40)))
                 for _ in range(draw(st.integers(0, 2))))
    route = Route(draw(ident), draw(st.text(max_size=64)), draw(st.text(max_size=64)),
                  draw(st.sampled_from(["mm", "inch"])), tuple(legs), gaps)
    return route, resolution


@settings(max_examples=150, deadline=None)
@given(routes())
def test_dump_load_dump_is_identical(case):
    route, resolution = case
    text = dump_route(route, resolution)
    again = load_route(text)
    assert dump_route(again, resolution) == text
    assert [(lg.from_id, lg.to_id, lg.points) for lg in again.legs] == [
        (lg.from_id, lg.to_id, lg.points) for lg in route.legs]
    assert again.unreachable == route.unreachable and again.status == route.status
    for before, after in zip(route.legs, again.legs, strict=True):
        assert abs(after.length - before.length) <= resolution / 2 + 1e-9 * before.length
    # Reference: PyYAML's safe_load sees the documented top-level structure.
    data = yaml.safe_load(text)
    assert list(data)[:7] == ["route", "scene", "scene_sha256", "config_sha256", "units",
                              "status", "length"]
    assert list(data)[-2:] == ["legs", "unreachable"]
    for item in data["legs"]:
        keys = list(item)
        assert keys[:3] == ["from", "to", "length"] and keys[-1] == "points"
