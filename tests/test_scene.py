"""Scene loading and validation: good scenes load right; a bad one gives one located SceneError."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import replace
from pathlib import Path

import pytest
import shapely
import yaml
from helpers import OMIT, REPO_CONFIG, make_scene_dict, write_scene
from hypothesis import HealthCheck, given
from hypothesis import settings as hsettings
from hypothesis import strategies as st

from planner.config import Limits, Settings, load_settings
from planner.errors import SceneError, format_error
from planner.scene import load_scene, load_scene_bytes
from planner.yamlparse import plain_scalar

SETTINGS = load_settings(REPO_CONFIG)

GOOD = """\
scene: 1
units: mm
travel:
  x: [0, 1000]
  y: [0, 500]
head: laser-slim
obstacles:
  - id: clamp-1
    polygon: [[100, 0], [180, 0], [180, 60], [100, 60]]
    height: 40
  - circle: {center: [300, 300], radius: 25}
  - rect: {min: [500, 100], max: [600, 140]}
start: [20, 20]
targets:
  - [400, 200]
  - {id: hole-7, at: [700, 300]}
  - [800, 400]
finish: [20, 20]
"""


def bad(text: str | bytes, name: str = "job.yaml", settings: Settings = SETTINGS) -> SceneError:
    """The one SceneError a scene raises (anything else escaping fails the test)."""
    data = text.encode() if isinstance(text, str) else text
    with pytest.raises(SceneError) as info:
        load_scene_bytes(data, name, settings)
    return info.value


# ----------------------------------------------------------------------------- good scenes


def test_good_scene_loads_with_ids_by_position():
    scene = load_scene_bytes(GOOD.encode(), "job.yaml", SETTINGS)
    assert [o.id for o in scene.obstacles] == ["clamp-1", "o2", "o3"]
    # t3 is the third target even though the second has its own id (the contract's rule)
    assert [t.id for t in scene.targets] == ["t1", "hole-7", "t3"]
    assert [o.source for o in scene.obstacles] == ["obstacles[0]", "obstacles[1]", "obstacles[2]"]
    assert scene.units == "mm" and scene.sequence == "given"
    assert scene.start == (20.0, 20.0) and scene.finish == (20.0, 20.0)
    assert scene.travel.xmax == 1000.0 and scene.travel.ymax == 500.0
    assert scene.obstacles[0].height == 40.0 and scene.obstacles[1].circle.radius == 25.0
    assert scene.head.name == "laser-slim" and scene.head == SETTINGS.heads["laser-slim"]
    # sha256 of the file's bytes, computed by the standard library
    assert scene.sha256 == hashlib.sha256(GOOD.encode()).hexdigest()
    assert scene.file == "job.yaml"


def test_rect_becomes_a_counter_clockwise_polygon():
    scene = load_scene_bytes(GOOD.encode(), "job.yaml", SETTINGS)
    rect = scene.obstacles[2]
    assert rect.circle is None
    assert set(rect.polygon) == {(500.0, 100.0), (600.0, 100.0), (600.0, 140.0), (500.0, 140.0)}
    assert len(rect.polygon) == 4
    # orientation checked by GEOS (shapely's LinearRing.is_ccw)
    assert shapely.LinearRing(rect.polygon).is_ccw


def test_inch_scene_converts_a_named_mm_head():
    text = GOOD.replace("units: mm", "units: inch").replace("x: [0, 1000]", "x: [0, 1200]")
    scene = load_scene_bytes(text.encode(), "job.yaml", SETTINGS)
    mm = SETTINGS.heads["laser-slim"]
    # the international inch is exactly 25.4 mm (1959 agreement); laser-slim is 50 x 90 mm
    assert scene.head.footprint[0] == pytest.approx((-25 / 25.4, -45 / 25.4))
    assert scene.head.footprint[0][0] == pytest.approx(-0.984252, abs=1e-6)
    assert scene.head.margin == pytest.approx(mm.margin / 25.4)
    assert scene.head.ride_height == pytest.approx(mm.ride_height / 25.4)
    assert scene.obstacles[0].polygon[1] == (180.0, 0.0)  # the scene's own numbers stay as given


def test_inline_head_without_margin_takes_the_config_margin_in_scene_units(tmp_path):
    head = {"footprint": [[-1, -1], [1, -1], [1, 1], [-1, 1]], "ride_height": 0.5}
    data = make_scene_dict(units="inch", head=head, obstacles=[], targets=[[10, 10]],
                           travel={"x": [0, 40], "y": [0, 20]}, start=[1, 1], finish=OMIT)
    scene = load_scene(write_scene(tmp_path, data), SETTINGS)
    assert scene.head.name is None
    assert scene.head.footprint == ((-1.0, -1.0), (1.0, -1.0), (1.0, 1.0), (-1.0, 1.0))
    # 25.4 mm per inch (exact by definition)
    assert scene.head.margin == pytest.approx(SETTINGS.margin / 25.4)
    assert scene.head.ride_height == 0.5
    assert scene.finish is None


def test_json_scene_is_accepted_and_matches_yaml(tmp_path):
    data = make_scene_dict()
    from_json = load_scene(write_scene(tmp_path, data, "job.json"), SETTINGS)
    from_yaml = load_scene(write_scene(tmp_path, data, "job.yaml"), SETTINGS)
    assert from_json.obstacles == from_yaml.obstacles
    assert from_json.targets == from_yaml.targets
    assert from_json.head == from_yaml.head and from_json.travel == from_yaml.travel


def test_point_on_the_travel_boundary_is_inside():
    scene = load_scene_bytes(GOOD.replace("start: [20, 20]", "start: [0, 500]").encode(),
                             "job.yaml", SETTINGS)
    assert scene.start == (0.0, 500.0)


def test_sequence_defaults_to_the_config():
    scene = load_scene_bytes(GOOD.encode(), "job.yaml", replace(SETTINGS, sequence="shortest"))
    assert scene.sequence == "shortest"


def test_changing_scene_keys_and_carry():
    data = make_scene_dict(
        sequence="shortest",
        obstacles=[
            {"id": "part-7", "rect": {"min": [600, 300], "max": [700, 380]}, "after": "exit-7"},
            {"id": "stack", "circle": {"center": [200, 200], "radius": 10}, "until": "start"},
        ],
        targets=[
            {"id": "exit-7", "at": [500, 200]},
            {"id": "pick-1", "at": [400, 100], "carry": [[-3, -2], [3, -2], [3, 2], [-3, 2]]},
            {"id": "place-1", "at": [800, 400], "carry": "none", "after": "pick-1", "last": True},
        ],
    )
    scene = load_scene_bytes(yaml.safe_dump(data).encode(), "job.yaml", SETTINGS)
    assert scene.obstacles[0].after == "exit-7" and scene.obstacles[1].until == "start"
    assert scene.targets[1].carry == ((-3.0, -2.0), (3.0, -2.0), (3.0, 2.0), (-3.0, 2.0))
    assert scene.targets[2].carry == "none" and scene.targets[2].after == "pick-1"
    assert scene.targets[2].last and not scene.targets[0].last


def test_flow_lists_in_comments_strings_and_block_text_are_left_alone():
    text = GOOD.replace("  - id: clamp-1\n", "  - id: '[1, 2]'  # [[5, 6], [7, 8]]\n")
    text += "# [[1, 2],\n#  [3, 4]]\n"
    scene = load_scene_bytes(text.encode(), "job.yaml", SETTINGS)
    assert scene.obstacles[0].id == "[1, 2]"
    assert scene.obstacles[0].polygon[0] == (100.0, 0.0)


def test_block_and_flow_vertex_lists_give_the_same_scene():
    block = GOOD.replace(
        "    polygon: [[100, 0], [180, 0], [180, 60], [100, 60]]\n",
        "    polygon:\n      - [100, 0]\n      - - 180\n        - 0\n      - [180, 60]\n"
        "      - [100,\n         60]\n",
    )
    assert block != GOOD
    a = load_scene_bytes(GOOD.encode(), "job.yaml", SETTINGS)
    b = load_scene_bytes(block.encode(), "job.yaml", SETTINGS)
    assert a.obstacles == b.obstacles and a.targets == b.targets


def test_large_scene_matches_pyyaml():
    rings = [[[i * 10 + 0.5 * k, 300 + (k % 2) * 7.25] for k in range(50)] for i in range(20)]
    for r in rings:
        r.append([r[-1][0], 200.0])
        r.append([r[0][0], 200.0])
    obstacles = "\n".join(
        "  - polygon: [" + ", ".join(f"[{x}, {y}]" for x, y in r) + "]" for r in rings)
    text = GOOD.replace("x: [0, 1000]", "x: [0, 1000]").split("obstacles:")[0]
    text += "obstacles:\n" + obstacles + "\nstart: [20, 20]\ntargets: [[400, 100]]\n"
    scene = load_scene_bytes(text.encode(), "job.yaml", SETTINGS)
    # PyYAML's own SafeLoader reads these plain decimals the same way (YAML 1.1 and 1.2 agree)
    expected = yaml.load(text, Loader=yaml.SafeLoader)["obstacles"]
    assert [list(map(list, o.polygon)) for o in scene.obstacles] == [o["polygon"] for o in expected]


@pytest.mark.parametrize("flow", [False, None, True])
def test_pyyaml_dump_styles_load_as_pyyaml_reads_them(flow):
    rings = [[[i * 40 + 10 * math.cos(k / 3), 200 + 10 * math.sin(k / 3) - i] for k in range(19)]
             for i in range(12)]
    data = make_scene_dict(obstacles=[{"polygon": r} for r in rings],
                           targets=[[900, 400], [-0.0, 0.5], [1e-3, 2.5e2]])
    text = yaml.safe_dump(data, default_flow_style=flow)
    scene = load_scene_bytes(text.encode(), "job.yaml", SETTINGS)
    # PyYAML's own loader is the reference for what its dumper wrote
    expected = yaml.load(text, Loader=yaml.SafeLoader)
    assert [list(map(list, o.polygon)) for o in scene.obstacles] == [
        o["polygon"] for o in expected["obstacles"]]
    assert [list(t.at) for t in scene.targets] == expected["targets"]


def test_the_bad_one_among_many_alike_is_named():
    obstacles = [{"circle": {"center": [10.0 * i, 20.0], "radius": 3.0}} for i in range(60)]
    obstacles[37]["circle"]["radius"] = -3.0
    obstacles[45]["circle"]["radius"] = -1.0
    err = bad(yaml.safe_dump(make_scene_dict(obstacles=obstacles)))
    assert err.path == "obstacles[37].circle.radius"
    obstacles[37]["circle"]["radius"] = 3.0
    err = bad(json.dumps(make_scene_dict(obstacles=obstacles)), "job.json")
    assert err.path == "obstacles[45].circle.radius"


def test_the_examples_in_the_format_doc_load():
    import re

    doc = (REPO_CONFIG.parent / "docs" / "scene-format.md").read_text(encoding="utf-8")
    yaml_block, json_block = (re.search(rf"```{kind}\n(.*?)```", doc, re.S).group(1)
                              for kind in ("yaml", "json"))
    scene = load_scene_bytes(yaml_block.encode(), "example.yaml", SETTINGS)
    assert [o.id for o in scene.obstacles] == ["clamp-left", "o2", "o3"]
    assert [t.id for t in scene.targets] == ["t1", "hole-9", "t3"]
    assert load_scene_bytes(json_block.encode(), "example.json", SETTINGS).head.name == "torch-80"
    # UTF-16 with a byte-order mark is YAML too (YAML 1.2.2 spec, section 5.2)
    utf16 = load_scene_bytes(yaml_block.encode("utf-16"), "example.yaml", SETTINGS)
    assert utf16.obstacles == scene.obstacles


# YAML 1.2.2 spec, section 10.3.2 (core schema tag resolution): these plain scalars resolve so.
@pytest.mark.parametrize(
    "text, value",
    [
        ("12", 12), ("012", 12), ("-3", -3), ("+5", 5), ("0o14", 12), ("0x1F", 31),
        ("1.5", 1.5), (".5", 0.5), ("1e3", 1000.0), ("-2.5E-1", -0.25), ("6.", 6.0),
        ("null", None), ("~", None), ("", None), ("true", True), ("False", False),
        ("yes", "yes"), ("on", "on"), ("1_000", "1_000"), ("1:20", "1:20"),
        ("torch-80", "torch-80"),
    ],
)
def test_plain_scalars_follow_the_yaml_1_2_core_schema(text, value):
    got = plain_scalar(text)
    assert got == value and type(got) is type(value)


def test_core_schema_special_floats():
    # YAML 1.2.2 spec, section 10.2.1.4: .inf, -.inf and .nan
    assert plain_scalar(".inf") == math.inf and plain_scalar("-.Inf") == -math.inf
    assert math.isnan(plain_scalar(".NaN"))


# ------------------------------------------------------------------------------ bad scenes

BOWTIE = GOOD.replace("polygon: [[100, 0], [180, 0], [180, 60], [100, 60]]",
                      "polygon: [[100, 0], [180, 60], [180, 0], [100, 60]]")


def test_self_intersecting_polygon():
    err = bad(BOWTIE)
    assert err.path == "obstacles[0].polygon" and err.line == 9
    # edges (100,0)-(180,60) and (180,0)-(100,60) cross at their common midpoint (140, 30):
    # worked by hand from the two-segment intersection formula
    assert "crosses" in err.message and "(140, 30)" in err.message


def test_unknown_key_typo():
    err = bad(GOOD.replace("obstacles:", "obstacle:"))
    assert err.path == "obstacle" and err.line == 7 and err.column == 1
    assert "unknown key 'obstacle'" in err.message and "did you mean 'obstacles'" in err.hint


def test_unknown_key_deep_inside():
    err = bad(GOOD.replace("height: 40", "hieght: 40"))
    assert err.path == "obstacles[0].hieght" and err.line == 10
    assert "'height'" in err.hint and "polygon" in err.hint


def test_missing_travel():
    err = bad(GOOD.replace("travel:\n  x: [0, 1000]\n  y: [0, 500]\n", ""))
    assert err.path == "travel" and err.line == 1 and "missing" in err.message
    assert "travel:" in err.hint


def test_start_outside_travel():
    err = bad(GOOD.replace("start: [20, 20]", "start: [5000, 20]"))
    assert err.path == "start" and err.line == 13
    assert "[5000, 20]" in err.message and "x 0 to 1000" in err.message


def test_target_outside_travel_names_the_target():
    err = bad(GOOD.replace("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 900]}"))
    assert err.path == "targets[1].at" and err.line == 16 and "hole-7" in err.message


def test_non_numeric_coordinate():
    err = bad(GOOD.replace("[180, 60]", "[180, sixty]"))
    assert err.path == "obstacles[0].polygon[2][1]" and err.line == 9
    assert "number" in err.message and "sixty" in err.message


def test_quoted_number_is_not_a_number():
    err = bad(GOOD.replace("start: [20, 20]", "start: [20, '20']"))
    assert err.path == "start[1]" and err.line == 13


def test_duplicate_id():
    err = bad(GOOD.replace("  - circle:", "  - id: clamp-1\n    circle:"))
    assert err.path == "obstacles[1].id" and err.line == 11 and "twice" in err.message


def test_explicit_id_clashing_with_a_default_id():
    err = bad(GOOD.replace("{id: hole-7,", "{id: t3,"))
    assert err.path == "targets[2]" and err.line == 17
    assert "default id" in err.hint


def test_negative_radius():
    err = bad(GOOD.replace("radius: 25", "radius: -25"))
    assert err.path == "obstacles[1].circle.radius" and err.line == 11
    assert "more than 0" in err.message


def test_empty_file():
    err = bad(b"")
    assert err.path == "" and err.line == 1 and "empty" in err.message


def test_only_comments_is_empty():
    err = bad(b"# nothing here\n\n")
    assert "empty" in err.message and err.line == 1


def test_not_yaml_binary_garbage():
    err = bad(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\xff\xd8\xff")
    assert err.line == 1 and err.path == "" and "UTF-8" in err.message


def test_not_yaml_syntax_error():
    err = bad(GOOD.replace("x: [0, 1000]", "x: [0, 1000"))
    assert err.line == 5 and "not valid YAML" in err.message


def test_yaml_list_instead_of_mapping():
    err = bad("- scene: 1\n- travel: {x: [0, 1], y: [0, 1]}\n")
    assert err.path == "" and err.line == 1 and "mapping" in err.message and "list" in err.message


def test_200_mb_file_is_refused_before_reading(tmp_path, monkeypatch):
    path = tmp_path / "huge.yaml"
    with open(path, "wb") as fh:
        fh.truncate(200 * 1024 * 1024)  # sparse: takes no disk space
    import planner.document as document

    def no_open(*args, **kwargs):
        raise AssertionError("the file was opened: the size must be checked first")

    monkeypatch.setattr(document, "open", no_open, raising=False)
    with pytest.raises(SceneError) as info:
        load_scene(path, SETTINGS)
    err = info.value
    assert "209,715,200 bytes" in err.message and "limit" in err.message
    assert err.file == "huge.yaml" and err.line is None and err.path == ""
    assert "max_file_bytes" in err.hint


def test_bytes_over_the_limit_are_refused():
    small = replace(SETTINGS, limits=Limits(max_file_bytes=100))
    err = bad(GOOD, settings=small)
    assert "limit of 100 bytes" in err.message


# The "billion laughs" pattern (CWE-776: unrestricted recursive entity references): nine levels of
# ten aliases each would expand to 10**9 items.
ALIAS_BOMB = "scene: 1\na: &a [x, x, x, x, x, x, x, x, x, x]\n" + "".join(
    f"{b}: &{b} [" + ", ".join([f"*{a}"] * 10) + "]\n"
    for a, b in zip("abcdefgh", "bcdefghi", strict=True)
)


def test_alias_bomb_is_refused_at_the_first_alias():
    err = bad(ALIAS_BOMB)
    assert "alias" in err.message and err.line == 3 and err.column == 8
    assert len(ALIAS_BOMB) < 500


def test_alias_bomb_is_refused_even_when_aliases_are_allowed():
    lenient = replace(SETTINGS, limits=Limits(max_aliases=1000))
    err = bad(ALIAS_BOMB, settings=lenient)
    assert "expand" in err.message


def test_allowed_aliases_are_expanded():
    text = GOOD.replace("start: [20, 20]", "start: &home [20, 20]").replace(
        "finish: [20, 20]", "finish: *home")
    scene = load_scene_bytes(text.encode(), "job.yaml", replace(SETTINGS, limits=Limits(
        max_aliases=1)))
    assert scene.finish == (20.0, 20.0)
    err = bad(text)  # by default: refused where the alias is written
    assert err.line == 18 and "alias" in err.message


def test_an_aliased_number_list_does_not_hide_one_in_a_string():
    from planner.yamlparse import parse_yaml as _parse_yaml

    text = "a: &x [1, 2]\nb: *x\nc: \"[3, 4]\"\n"
    # PyYAML's SafeLoader as the reference
    assert _parse_yaml(text, Limits(max_aliases=5)) == yaml.safe_load(text)


def test_duplicate_key():
    err = bad(GOOD + "obstacles: []\n")
    # YAML 1.2.2 spec, section 3.2.1.1: the keys of a mapping are unique
    assert err.line == 19 and "'obstacles' appears twice" in err.message and "line 7" in err.message


def test_duplicate_key_in_json():
    text = '{\n  "scene": 1,\n  "units": "mm",\n  "units": "inch"\n}\n'
    err = bad(text, "job.json")
    # RFC 8259, section 4: names within an object SHOULD be unique; we require it
    assert err.line == 4 and "'units' appears twice" in err.message


def test_nan_coordinate():
    err = bad(GOOD.replace("start: [20, 20]", "start: [.nan, 20]"))
    assert err.path == "start[0]" and err.line == 13 and "not a finite number" in err.message


def test_nan_in_a_polygon_and_in_json():
    err = bad(GOOD.replace("[180, 60]", "[180, .inf]"))
    assert err.path == "obstacles[0].polygon[2][1]" and err.line == 9
    data = make_scene_dict()
    text = json.dumps(data).replace("[50, 50]", "[NaN, 50]", 1)
    err = bad(text, "job.json")
    assert err.path == "start[0]" and err.line == 1


def test_closed_polygon_ring():
    err = bad(GOOD.replace("[100, 60]]", "[100, 60], [100, 0]]"))
    assert err.path == "obstacles[0].polygon[4]" and err.line == 9
    assert "closed" in err.message and "drop the last vertex" in err.hint


def test_repeated_vertex():
    err = bad(GOOD.replace("[180, 0], [180, 60]", "[180, 0], [180, 0], [180, 60]"))
    assert err.path == "obstacles[0].polygon[2]" and "repeats" in err.message


def test_unknown_head_name():
    err = bad(GOOD.replace("head: laser-slim", "head: laser-slmi"))
    assert err.path == "head" and err.line == 6
    assert "laser-slim" in err.hint and "torch-80" in err.hint


@pytest.mark.parametrize(
    "old, new, path, words",
    [
        ("scene: 1", "scene: 2", "scene", "format version 1"),
        ("units: mm", "units: cm", "units", "not one of"),
        ("x: [0, 1000]", "x: [1000, 0]", "travel.x", "min < max"),
        ("x: [0, 1000]", "x: [0, 1000, 2]", "travel.x", "[min, max]"),
        ("radius: 25", "radius: 0", "obstacles[1].circle.radius", "more than 0"),
        ("height: 40", "height: -1", "obstacles[0].height", "at least 0"),
        ("max: [600, 140]", "max: [600, 100]", "obstacles[2].rect", "below and left"),
        ("  - circle: {center: [300, 300], radius: 25}", "  - {id: x}", "obstacles[1]",
         "needs one"),
        ("    height: 40", "    height: 40\n    circle: {center: [1, 1], radius: 1}",
         "obstacles[0]", "both polygon and circle"),
        ("[[100, 0], [180, 0], [180, 60], [100, 60]]", "[[100, 0], [180, 0]]",
         "obstacles[0].polygon", "at least 3"),
        ("[[100, 0], [180, 0], [180, 60], [100, 60]]", "[[100, 0], [140, 0], [180, 0]]",
         "obstacles[0].polygon", "no area"),
        ("    height: 40", "    height: 40\n    after: finish", "obstacles[0].after", "finish"),
        ("    height: 40", "    height: 40\n    until: hole7", "obstacles[0].until", "no target"),
        ("{id: hole-7, at: [700, 300]}", "{id: start, at: [700, 300]}", "targets[1].id",
         "cannot be called"),
        ("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 300], after: t3}",
         "targets[1].after", "listed before"),
        ("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 300], after: t9}",
         "targets[1].after", "names no target"),
        ("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 300], carry: nothing}",
         "targets[1].carry", "none"),
        ("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 300], first: yes}",
         "targets[1].first", "true or false"),
        ("head: laser-slim", "head: {footprint: [[0, 0], [1, 1], [1, 0], [0, 1]]}",
         "head.footprint", "crosses"),
        ("head: laser-slim", "head: {footprint: [[0, 0], [1, 0], [0, 1]], margin: -1}",
         "head.margin", "at least 0"),
        ("finish: [20, 20]", "finish: [20, 20]\nsequence: fastest", "sequence", "not one of"),
        ("start: [20, 20]", "start: [20, 1e12]", "start[1]", "out of range"),
    ],
)
def test_rule_violations(old, new, path, words):
    text = GOOD.replace(old, new)
    assert text != GOOD
    err = bad(text)
    assert err.path == path and words in err.message + " " + (err.hint or "")
    assert err.line is not None and err.line >= 1


@pytest.mark.parametrize(
    "obstacle, path",
    [
        ({"polygon": ""}, "obstacles[0].polygon"),  # found by fuzzing: a polygon given as text
        ({"polygon": None}, "obstacles[0].polygon"),
        ({"polygon": {"x": 1}}, "obstacles[0].polygon"),
        ({"polygon": [[0, 0], [1, 0], [True, 1]]}, "obstacles[0].polygon[2][0]"),
        ({"polygon": [[0, 0], [1, 0], [0, 1, 2]]}, "obstacles[0].polygon[2]"),
        ({"polygon": [[0, 0], [1, 0], [0, 10**400]]}, "obstacles[0].polygon[2][1]"),
    ],
)
def test_malformed_vertex_lists(obstacle, path):
    data = make_scene_dict(obstacles=[obstacle])
    for text, name in ((yaml.safe_dump(data), "job.yaml"), (json.dumps(data), "job.json")):
        err = bad(text, name)
        assert err.path == path and err.line is not None


def test_cycle_in_target_after_names_the_cycle():
    text = GOOD.replace("  - [400, 200]", "  - {id: a, at: [400, 200], after: c}").replace(
        "{id: hole-7, at: [700, 300]}", "{id: b, at: [700, 300], after: a}").replace(
        "  - [800, 400]", "  - {id: c, at: [800, 400], after: b}") + "sequence: shortest\n"
    err = bad(text)
    assert err.path == "targets[0].after" and "cycle" in err.message
    assert "a -> c -> b -> a" in err.message


def test_first_and_last_contradictions():
    text = GOOD.replace("{id: hole-7, at: [700, 300]}", "{id: hole-7, at: [700, 300], first: true}")
    err = bad(text)  # given order: a target marked first listed after one that is not
    assert err.path == "targets[1].first"
    ok = load_scene_bytes((text + "sequence: shortest\n").encode(), "job.yaml", SETTINGS)
    assert ok.targets[1].first


@pytest.mark.parametrize(
    "limits, words",
    [
        (Limits(max_obstacles=2), "3 obstacles are more than the limit of 2"),
        (Limits(max_targets=2), "3 targets are more than the limit of 2"),
        (Limits(max_vertices=3), "4 polygon vertices, more than the limit of 3"),
        (Limits(max_depth=3), "deeper than 3"),
    ],
)
def test_size_limits_have_clear_messages(limits, words):
    err = bad(GOOD, settings=replace(SETTINGS, limits=limits))
    assert words in err.message and err.hint


def test_python_tags_are_refused_not_run():
    err = bad("scene: !!python/object/apply:os.system ['echo hacked']\n")
    assert "tag" in err.message and err.line == 1


def test_two_documents_are_refused():
    err = bad(GOOD + "---\nscene: 1\n")
    assert "single document" in err.message and "---" in err.hint


def test_message_is_one_line_with_file_place_and_fix():
    err = bad(BOWTIE)
    text = format_error(err)
    assert text.startswith("job.yaml:9:") and "obstacles[0].polygon" in text and "(fix: " in text
    assert "\n" not in text


def test_missing_file():
    with pytest.raises(SceneError) as info:
        load_scene(Path("/nonexistent/dir/job.yaml"), SETTINGS)
    assert "cannot read" in info.value.message


# ------------------------------------------------------- the fast path reads what is written

_NUMBER = st.one_of(st.integers(-10**6, 10**6), st.floats(-1e6, 1e6, allow_nan=False))
_NUMBER_TREES = st.recursive(
    _NUMBER,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(
        st.text("abcxyz_", min_size=1, max_size=4), inner, max_size=3),
    max_leaves=30,
)
_COMMENTS = st.sampled_from(["", "# [[1, 2], [3, 4]]", "  # - - 1", "# - [5, 6]"])


def _with_comment(text: str, at: int, comment: str) -> str:
    lines = text.split("\n")
    lines.insert(at % len(lines), comment)
    return "\n".join(lines)


@hsettings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_NUMBER_TREES, st.sampled_from([False, None, True]), st.integers(0, 40), _COMMENTS)
def test_fast_path_reads_numbers_as_pyyaml_does(value, flow, at, comment):
    from planner.yamlparse import parse_yaml as _parse_yaml

    text = _with_comment(yaml.safe_dump({"v": value}, default_flow_style=flow), at, comment)
    # PyYAML's SafeLoader is the reference: for plain decimals YAML 1.1 and 1.2 agree
    assert _parse_yaml(text, Limits(max_depth=64)) == yaml.load(text, Loader=yaml.SafeLoader)


_ATOMS = st.sampled_from(["[", "]", ",", " ", "\n", "- ", "  ", "1", "-2.5", ".5", "7.", "+3",
                          "1e3", "#", "a: ", "'", '"', "|", "&a ", "*a", "{", "}", ":", "x"])


@hsettings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(_ATOMS, max_size=40))
def test_fast_path_agrees_with_reading_the_text_as_written(parts):
    from planner.problem import Problem
    from planner.yamlparse import _Builder
    from planner.yamlparse import parse_yaml as _parse_yaml

    text = "".join(parts)
    results = []
    for read in (lambda: _Builder(Limits()).run(text), lambda: _parse_yaml(text, Limits())):
        try:
            results.append(("value", read()))
        except Problem as problem:
            results.append(("problem", problem.message, problem.line, problem.column))
    assert results[0] == results[1]


# ------------------------------------------------------------------ only SceneError escapes

_SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(-10**30, 10**30), st.floats(allow_nan=True),
    st.text(max_size=12),
    st.sampled_from(["start", "finish", "none", "mm", "inch", "t1", "o1", "torch-80", "shortest"]),
)
_KEYS = st.sampled_from([
    "scene", "units", "travel", "head", "obstacles", "start", "targets", "finish", "sequence",
    "x", "y", "id", "polygon", "circle", "rect", "center", "radius", "min", "max", "height",
    "after", "until", "at", "carry", "first", "last", "footprint", "margin", "ride_height",
])
_VALUES = st.recursive(
    _SCALARS,
    lambda inner: st.lists(inner, max_size=5) | st.dictionaries(_KEYS, inner, max_size=5),
    max_leaves=25,
)


def _mutate(data: dict, path: list, value: object) -> dict:
    """Replace (or add) the value at a path of keys/indices chosen from the scene's own shape."""
    node: object = data
    for step in path[:-1]:
        if isinstance(node, dict) and node:
            node = node[sorted(node)[step % len(node)]]
        elif isinstance(node, list) and node:
            node = node[step % len(node)]
    last = path[-1] if path else 0
    if isinstance(node, dict) and node:
        node[sorted(node)[last % len(node)]] = value
    elif isinstance(node, list) and node:
        node[last % len(node)] = value
    return data


@hsettings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=300))
def test_random_bytes_only_raise_scene_error(data):
    for name in ("job.yaml", "job.json"):
        try:
            load_scene_bytes(data, name, SETTINGS)
        except SceneError as err:
            assert err.message and isinstance(format_error(err), str)


@hsettings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.integers(0, 50), min_size=1, max_size=5), _VALUES, st.booleans())
def test_random_yaml_structures_only_raise_scene_error(path, value, as_json):
    data = _mutate(make_scene_dict(), path, value)
    if as_json:
        text, name = json.dumps(data, allow_nan=True), "job.json"
    else:
        text, name = yaml.safe_dump(data, allow_unicode=True), "job.yaml"
    try:
        load_scene_bytes(text.encode("utf-8", "surrogatepass"), name, SETTINGS)
    except SceneError as err:
        assert err.message and isinstance(format_error(err), str)


@hsettings(max_examples=100, deadline=None)
@given(_VALUES)
def test_random_whole_documents_only_raise_scene_error(value):
    for text, name in ((yaml.safe_dump(value), "job.yaml"), (json.dumps(value), "job.json")):
        try:
            load_scene_bytes(text.encode("utf-8", "surrogatepass"), name, SETTINGS)
        except SceneError:
            pass


def test_default_settings_have_no_heads():
    err = bad(GOOD, settings=Settings())
    assert err.path == "head" and "names no heads" in err.hint
