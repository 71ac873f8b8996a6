"""The csv adapter, read back the way controller-side scripts read it: csv module and numpy."""

from __future__ import annotations

import csv
import io
import re

import numpy as np
import pytest
from _adapter_routes import job_for, make_route, polyline, routes, sample_route
from hypothesis import given, settings

from adapters import AdapterError, AdapterSettingsError
from adapters.csv_waypoints import CsvWaypoints
from planner.errors import format_error
from planner.model import FINISH

ADAPTER = CsvWaypoints()


def rows_of(text: str, delimiter: str = ",") -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text, newline=""), delimiter=delimiter))


def test_header_and_rows_follow_the_route_in_travel_order():
    route = sample_route()
    text = ADAPTER.write(route, {}, job_for("mm", 0.001))
    lines = text.split("\n")
    assert lines[0] == "seq,leg,kind,target,x_mm,y_mm"
    assert lines[-1] == ""  # the file ends with one line ending, no blank row
    rows = rows_of(text)
    assert [r["kind"] for r in rows] == ["start", "via", "target", "via", "target", "finish"]
    assert [r["target"] for r in rows] == ["", "", "t1", "", "hole-7", ""]
    assert [int(r["leg"]) for r in rows] == [0, 1, 1, 2, 2, 3]
    assert [int(r["seq"]) for r in rows] == list(range(1, 7))
    assert rows[1]["x_mm"] == "96.200" and rows[1]["y_mm"] == "63.000"


# Python's csv module (a reader independent of this project) and numpy.genfromtxt, the way a
# simple controller script reads a flat table, must both give back the route's points.
@settings(max_examples=60, deadline=None)
@given(routes())
def test_csv_and_genfromtxt_read_back_the_route_points(case):
    route, resolution = case
    text = ADAPTER.write(route, {}, job_for(route.units, resolution))
    unit = "mm" if route.units == "mm" else "in"
    expected = polyline(route)

    assert text.splitlines()[0] == f"seq,leg,kind,target,x_{unit},y_{unit}"
    rows = rows_of(text)
    got = np.array([[float(r[f"x_{unit}"]), float(r[f"y_{unit}"])] for r in rows]).reshape(-1, 2)
    assert got.shape == expected.shape  # a waypoint shared by two legs appears once
    # Written values lose at most 0.0005 of a resolution step (decimals from the resolution).
    assert np.all(np.abs(got - expected) <= resolution * 1e-3)

    if len(expected):
        table = np.genfromtxt(io.StringIO(text), delimiter=",", names=True, dtype=None,
                              encoding="utf-8")
        table = np.atleast_1d(table)
        xy = np.column_stack([table[f"x_{unit}"], table[f"y_{unit}"]]).astype(float)
        assert np.all(np.abs(xy - expected) <= resolution * 1e-3)
        assert list(table["seq"]) == list(range(1, len(expected) + 1))


def test_fixed_decimals_dot_mark_and_no_comment_lines():
    route = make_route([("t1", [(0, 0), (1.5, -2.25)]), (FINISH, [(10, 10)])],
                       units="mm", resolution=0.01)
    text = ADAPTER.write(route, {}, job_for("mm", 0.01))
    body = text.splitlines()[1:]
    for line in body:
        assert not line.startswith("#")
        fields = line.split(",")
        assert len(fields) == 6
        for value in fields[4:]:
            assert re.fullmatch(r"-?\d+\.\d{2}", value), value
    assert body[1].endswith(",1.50,-2.25")


def test_inch_routes_name_the_unit_in_the_columns_and_use_the_route_files_grid():
    # 0.001 mm expressed in inch is no decimal step: the planner's grid is 0.00001 inch.
    resolution = 0.001 / 25.4
    route = make_route([("t1", [(1, 1), (2.000039370, 3)])], units="inch", resolution=resolution)
    text = ADAPTER.write(route, {}, job_for("inch", resolution))
    assert text.splitlines()[0] == "seq,leg,kind,target,x_in,y_in"
    rows = rows_of(text)
    assert rows[1]["x_in"] == "2.00004"
    assert float(rows[1]["x_in"]) == route.legs[0].points[1][0]


def test_a_point_off_the_output_grid_is_refused_not_moved():
    route = make_route([("t1", [(0, 0), (5, 5)])])
    leg = route.legs[0]
    off = leg.__class__(from_id="start", to_id="t1", points=((0, 0), (5.0004, 5)), length=7.1)
    route = route.__class__(**{**route.__dict__, "legs": (off,)})
    with pytest.raises(AdapterError, match="not on the output grid"):
        ADAPTER.write(route, {}, job_for("mm", 0.001))
    from adapters.gcode import GcodeMoves

    with pytest.raises(AdapterError, match="not on the output grid"):
        GcodeMoves().write(route, {}, job_for("mm", 0.001))


def test_semicolon_and_crlf_for_controllers_that_need_them():
    route = sample_route()
    text = ADAPTER.write(route, {"delimiter": "semicolon", "line_ending": "crlf"},
                         job_for("mm", 0.001))
    raw = text.encode()
    assert raw.count(b"\r\n") == raw.count(b"\n") == 7
    rows = rows_of(text, delimiter=";")
    assert [r["target"] for r in rows if r["kind"] == "target"] == ["t1", "hole-7"]
    table = np.genfromtxt(io.StringIO(text), delimiter=";", names=True, dtype=None,
                          encoding="utf-8")
    assert np.allclose(np.column_stack([table["x_mm"], table["y_mm"]]), polyline(route))


def test_tab_delimiter_by_name_or_character():
    route = sample_route()
    by_name = ADAPTER.write(route, {"delimiter": "tab"})
    assert by_name == ADAPTER.write(route, {"delimiter": "\t"})
    assert by_name.splitlines()[0] == "seq\tleg\tkind\ttarget\tx_mm\ty_mm"


def test_a_route_without_legs_is_the_header_alone():
    route = make_route([], unreachable=("t1",))
    assert ADAPTER.write(route, {}) == "seq,leg,kind,target,x_mm,y_mm\n"


def test_an_id_that_would_need_quoting_is_refused_with_the_fix():
    route = make_route([("a,b", [(0, 0), (5, 5)])])
    with pytest.raises(AdapterError) as info:
        ADAPTER.write(route, {})
    assert "'a,b'" in str(info.value) and "delimiter" in str(info.value)
    # The same id is fine with another delimiter.
    assert "a,b" in ADAPTER.write(route, {"delimiter": ";"})


def test_unknown_settings_and_values_are_located_config_errors():
    with pytest.raises(AdapterSettingsError) as info:
        ADAPTER.write(sample_route(), {"delimeter": ";"})
    text = format_error(info.value)
    assert "adapter_settings.csv.delimeter" in text and "unknown setting" in text
    assert "delimiter" in text  # the hint names the known settings

    with pytest.raises(AdapterSettingsError) as info:
        ADAPTER.write(sample_route(), {"delimiter": "."})
    text = format_error(info.value)
    assert "adapter_settings.csv.delimiter" in text and "comma" in text

    with pytest.raises(AdapterSettingsError):
        ADAPTER.check({"line_ending": "cr"})


def test_a_gap_between_legs_is_refused():
    route = make_route([("t1", [(0, 0), (5, 5)]), ("t2", [(9, 9)])])
    broken = route.legs[1].__class__(from_id="t1", to_id="t2", points=((6, 6), (9, 9)),
                                     length=4.2)
    route = route.__class__(**{**route.__dict__, "legs": (route.legs[0], broken)})
    with pytest.raises(AdapterError, match="does not start where leg 1 ended"):
        ADAPTER.write(route, {})
