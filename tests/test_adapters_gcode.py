"""The gcode adapter, read back by two independent general-purpose G-code parsers from PyPI.

pygcode replays each program and gcodeparser reads its moves a second way (_gcode_replay.py);
the rules checked are those of NISTIR 6556 (Kramer, Proctor and Messina, "The NIST RS274NGC
Interpreter - Version 3", 2000), named beside each check.
"""

from __future__ import annotations

import re

import pytest
from _adapter_routes import job_for, make_route, routes, sample_route
from _gcode_replay import check_program
from hypothesis import given, settings

from adapters import AdapterError, AdapterSettingsError
from adapters.gcode import GcodeMoves
from planner.errors import format_error
from planner.model import FINISH

ADAPTER = GcodeMoves()


@settings(max_examples=40, deadline=None)
@given(routes())
def test_every_program_replays_to_the_route_polyline(case):
    route, resolution = case
    text = ADAPTER.write(route, {}, job_for(route.units, resolution))
    check_program(text, route, resolution)


@settings(max_examples=20, deadline=None)
@given(routes())
def test_with_line_numbers_and_rapids_linear_the_moves_are_the_same(case):
    route, resolution = case
    text = ADAPTER.write(route, {"line_numbers": True, "rapids_linear": True,
                                 "line_number_step": 1}, job_for(route.units, resolution))
    check_program(text, route, resolution, rapids=True)
    numbers = [int(m.group(1)) for m in re.finditer(r"^N(\d+) ", text, re.M)]
    assert numbers == sorted(numbers) and len(set(numbers)) == len(numbers)


def test_header_names_the_scene_and_its_hash_and_exact_path_comes_first():
    route = sample_route()
    text = ADAPTER.write(route, {}, job_for("mm", 0.001))
    run = check_program(text, route, 0.001)
    comments = " ".join(run["comments"])
    assert "job-0412.yaml" in comments and route.scene_sha256 in comments
    assert "unreachable" in comments and "t3" in comments
    # NISTIR 6556, path control modes: G61 exact path before the first move, no G64 blending.
    assert "G61" in run["words_before_first_move"]
    assert "G64" not in text
    assert text.rstrip("\n").splitlines()[-1] == "M30"  # NISTIR 6556: M30 ends the program


def test_traverses_are_G1_at_the_configured_feed_converted_to_the_route_units():
    route = sample_route(units="inch", resolution=0.0001)
    text = ADAPTER.write(route, {"traverse_feed": 5080}, job_for("inch", 0.0001))
    run = check_program(text, route, 0.0001)
    # NISTIR 6556, G94 units-per-minute feed mode: 5080 mm/min is 200 inch/min.
    assert run["feed"] and all(f == pytest.approx(200.0) for f in run["feed"])
    assert "G20" in run["words_before_first_move"] and "G94" in run["words_before_first_move"]


def test_path_mode_and_unit_words_are_configurable():
    route = sample_route()
    run = check_program(ADAPTER.write(route, {"path_mode": "continuous"}), route, 0.001)
    assert "G64" in run["words_before_first_move"]
    text = ADAPTER.write(route, {"path_mode": "none"})
    assert not re.search(r"\bG6[14]\b", text.replace("G61.1", ""))
    assert "G61.1" in ADAPTER.write(route, {"path_mode": "exact_stop"})
    iso = ADAPTER.write(route, {"unit_words": "iso6983"})
    # ISO 6983-1 dialects (from memory): G71 millimetre, G70 inch; no RS-274 G21 then.
    assert re.search(r"^G71\b", iso, re.M) and "G21" not in iso
    inch = ADAPTER.write(sample_route(units="inch"), {"unit_words": "iso6983"})
    assert re.search(r"^G70\b", inch, re.M)


def test_blocks_fill_their_placeholders_and_the_modes_are_stated_again_after_them():
    route = sample_route()
    blocks = {
        "program_start": "G54\nT1 M6",
        "before_leg": "G1 Z15 F1000 (leg {leg}: {from} to {to} from {x} {y})",
        "after_leg": "G1 Z2 F500",
        "at_target": "G4 P0.5 (target {index} {id} at {x} {y})",
        "program_end": "G1 Z50 F1000\nM30",
    }
    text = ADAPTER.write(route, {"blocks": blocks, "traverse_feed": 4000}, job_for("mm", 0.001))
    run = check_program(text, route, 0.001)
    assert "(target 1 t1 at 500.000 200.000)" in text
    assert "(target 2 hole-7 at 1500.000 900.000)" in text
    assert "(leg 3: hole-7 to finish from 1500.000 900.000)" in text
    assert text.count("G4 P0.5") == 2  # at t1 and hole-7, not at the finish
    # NISTIR 6556, G94 and F: every XY move runs at the traverse feed even though the blocks
    # set their own F for Z moves (the adapter writes F again on the first move after a block).
    assert all(f == pytest.approx(4000.0) for f in run["feed"])
    lines = text.splitlines()
    for i, line in enumerate(lines):
        if line.startswith(("G1 Z15", "G4")):
            nxt = next((k for k in range(i + 1, len(lines)) if " X" in lines[k]), None)
            if nxt is not None:
                between = " ".join(lines[i + 1:nxt])
                # A subprogram called from a block may leave other modes behind: the units,
                # G90 and G61 are stated again before the next XY move.
                assert "G21" in between and "G90" in between and "G61" in between


def test_an_id_with_parentheses_stays_inside_one_comment():
    route = make_route([("clamp (left)", [(0, 0), (5, 5)]), (FINISH, [(0, 0)])])
    text = ADAPTER.write(route, {})
    check_program(text, route, 0.001)  # pygcode refuses nested comments
    assert "(target 1: clamp [left])" in text


@pytest.mark.parametrize("block,text,why", [
    ("before_leg", "G1 X0 Z15 F500", "X word"),
    ("after_leg", "Y5", "Y word"),
    ("at_target", "G0 Z5", "G0"),
    ("at_target", "M30", "program_end"),
    ("before_leg", "G28", "intermediate point"),
    ("before_leg", "G92 Z0", "G92"),
    ("at_target", "G41 D1", "compensation"),
    ("after_leg", "G55", "program_start only"),
    ("at_target", "N100 M98 P1", "line numbers"),
    ("at_target", "G2 I5", "arcs"),
    ("at_target", "C90", "turns the head"),
    ("at_target", "(one (two))", "nest"),
    ("at_target", "(open", "closing"),
    ("at_target", "M98 P{foo}", "unknown placeholder {foo}"),
    ("program_start", "(job {id})", "takes no placeholders"),
    ("at_target", "O100 CALL", "strict_words"),
    ("at_target", "M98 P1 {", "braces"),
    ("at_target", "M98 P1 (é)", "character"),
])
def test_a_block_that_would_break_the_program_is_a_located_settings_error(block, text, why):
    with pytest.raises(AdapterSettingsError) as info:
        ADAPTER.write(sample_route(), {"blocks": {block: text}})
    message = format_error(info.value)
    assert f"adapter_settings.gcode.blocks.{block}" in message
    assert why in message


def test_dialect_lines_pass_when_strict_words_is_off_but_axis_words_never_do():
    route = sample_route()
    text = ADAPTER.write(route, {"strict_words": False, "blocks": {"at_target": "O100 CALL"}})
    assert text.count("O100 CALL") == 2
    with pytest.raises(AdapterSettingsError):
        ADAPTER.write(route, {"strict_words": False, "blocks": {"at_target": "O100 CALL X5"}})
    # The X of the expression function FIX[] is not an axis word.
    ADAPTER.write(route, {"blocks": {"at_target": "#1=FIX[2.5]"}})
    # With rapids_linear, a Z rapid in a block is fine.
    ADAPTER.write(route, {"rapids_linear": True, "blocks": {"before_leg": "G0 Z15"}})
    # A coordinate system may be selected before the first move.
    ADAPTER.write(route, {"blocks": {"program_start": "G54"}})


def test_an_id_that_brings_a_forbidden_word_into_code_is_refused_when_written():
    route = make_route([("fix-1", [(0, 0), (5, 5)])])
    with pytest.raises(AdapterError) as info:
        ADAPTER.write(route, {"blocks": {"at_target": "M98 P{id}"}})
    assert "fix-1" in str(info.value) and "at_target" in str(info.value)
    numeric = make_route([("100", [(0, 0), (5, 5)])])
    assert "M98 P100" in ADAPTER.write(numeric, {"blocks": {"at_target": "M98 P{id}"}})


def test_decimals_may_be_finer_but_never_coarser_than_the_output_resolution():
    route = sample_route()
    text = ADAPTER.write(route, {"decimals": 4}, job_for("mm", 0.001))
    assert "X96.2000 Y63.0000" in text
    with pytest.raises(AdapterSettingsError) as info:
        ADAPTER.write(route, {"decimals": 2}, job_for("mm", 0.001))
    assert "adapter_settings.gcode.decimals" in format_error(info.value)
    assert "at least 3" in format_error(info.value)
    # 0.001 mm in inch is no decimal step: the planner's grid is 0.00001 inch, so auto writes 5
    # decimals and 4 would lose checked digits.
    res = 0.001 / 25.4
    inch = sample_route(units="inch", resolution=res)
    text = ADAPTER.write(inch, {}, job_for("inch", res))
    check_program(text, inch, res)
    assert re.search(r"^G1 X\d+\.\d{5} Y\d+\.\d{5}", text, re.M)
    with pytest.raises(AdapterSettingsError):
        ADAPTER.write(inch, {"decimals": 4}, job_for("inch", res))


def test_line_numbers_stop_at_five_digits_with_a_clear_message():
    route = sample_route()
    text = ADAPTER.write(route, {"line_numbers": True, "line_number_start": 99900,
                                 "line_number_step": 5})
    check_program(text, route, 0.001)
    with pytest.raises(AdapterError, match="N99999"):
        ADAPTER.write(route, {"line_numbers": True, "line_number_start": 99990,
                              "line_number_step": 10})


def test_long_comments_wrap_and_long_block_lines_are_refused():
    route = make_route([("t" * 300, [(0, 0), (5, 5)])], scene_file="s" * 200 + ".yaml")
    text = ADAPTER.write(route, {"max_line_length": 60})
    check_program(text, route, 0.001, max_len=60)
    with pytest.raises(AdapterSettingsError, match="max_line_length"):
        ADAPTER.write(route, {"max_line_length": 40,
                              "blocks": {"program_start": "M98 P1 (" + "x" * 40 + ")"}})
    long_number = make_route([("1" * 80, [(0, 0), (5, 5)])])
    with pytest.raises(AdapterError, match="max_line_length"):
        ADAPTER.write(long_number, {"max_line_length": 60, "blocks": {"at_target": "M0 P{id}"}})


def test_line_endings_percent_lines_and_an_empty_route():
    route = sample_route()
    text = ADAPTER.write(route, {"line_ending": "crlf", "percent": True})
    raw = text.encode()
    assert raw.count(b"\n") == raw.count(b"\r\n")
    lines = text.split("\r\n")
    assert lines[0] == "%" and lines[-2] == "%" and lines[-1] == ""
    empty = make_route([], unreachable=("t1",))
    run = check_program(ADAPTER.write(empty, {}), empty, 0.001)
    assert len(run["xy"]) == 0


def test_a_target_at_the_start_point_gets_its_block_but_no_zero_length_move():
    route = make_route([("t1", [(10, 10), (10, 10)]), ("t2", [(20, 10)])])
    text = ADAPTER.write(route, {})
    run = check_program(text, route, 0.001)
    assert len(run["xy"]) == 2
    assert "(target 1: t1)" in text and "(target 2: t2)" in text


@pytest.mark.parametrize("settings_,path", [
    ({"traverse_feed": 0}, "traverse_feed"),
    ({"traverse_feed": "fast"}, "traverse_feed"),
    ({"rapids_linear": "yes"}, "rapids_linear"),
    ({"path_mode": "blend"}, "path_mode"),
    ({"unit_words": "fanuc"}, "unit_words"),
    ({"max_line_length": 300}, "max_line_length"),
    ({"decimals": 12}, "decimals"),
    ({"units": "cm"}, "units"),
    ({"blocks": {"at_targets": "M0"}}, "blocks.at_targets"),
    ({"blocks": "M0"}, "blocks"),
    ({"feed": 100}, "feed"),
])
def test_bad_settings_are_located_config_errors(settings_, path):
    with pytest.raises(AdapterSettingsError) as info:
        ADAPTER.check(settings_)
    assert f"adapter_settings.gcode.{path}" in format_error(info.value)
