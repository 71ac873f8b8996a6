"""Fuzzing the loaders: whatever bytes or structures come in, one clear error or a valid result.

Three levels (tests/fuzzkit.py makes the inputs): raw bytes (valid scenes mutated byte by byte:
truncation, bit flips, YAML-hostile tokens), YAML structures of the right shape with wrong types
and values, and breaches of each configured limit. Properties: `load_scene_bytes` returns a Scene
or raises SceneError (nothing else escapes), the message is one line naming the file, and the
config loader does the same with ConfigError. The default run keeps the example counts modest;
`tests/fuzz_campaign.py` runs the same cases by the thousand.
"""

from __future__ import annotations

import math
import os
import random
from dataclasses import replace
from pathlib import Path

import pytest
import yaml
from fuzzkit import CONFIG, case, clear_message, fuzz_settings, mutate_structure
from hypothesis import HealthCheck, given
from hypothesis import settings as hsettings
from hypothesis import strategies as st

from planner.config import Limits, load_settings
from planner.errors import ConfigError, SceneError, format_error
from planner.model import Scene
from planner.scene import load_scene_bytes
from planner.watchopts import watch_options

SETTINGS = fuzz_settings()
LONG = os.environ.get("SIDESTEP_FUZZ_LONG") == "1"
EXAMPLES = 2000 if LONG else 150
FAST = hsettings(max_examples=EXAMPLES, deadline=None, derandomize=not LONG,
                 suppress_health_check=[HealthCheck.too_slow])


def load_or_error(data: bytes, name: str, settings=SETTINGS) -> Scene | SceneError:
    try:
        return load_scene_bytes(data, name, settings)
    except SceneError as err:
        return err


def assert_clear(err: SceneError | ConfigError, name: str) -> None:
    text = format_error(err)
    assert err.message and clear_message(text, name), text


@pytest.mark.parametrize("kind", ["bytes", "structure"])
@FAST
@given(seed=st.integers(0, 2**31))
def test_mutated_input_gives_a_scene_or_one_clear_scene_error(kind, seed):
    c = case(kind, seed)
    result = load_or_error(c.data, c.name)
    if isinstance(result, SceneError):
        assert_clear(result, c.name)
    else:
        assert isinstance(result, Scene)


@FAST
@given(st.integers(0, 2**31))
def test_every_limit_breach_is_refused_with_the_limit_named(seed):
    c = case("limits", seed)
    result = load_or_error(c.data, c.name, replace(SETTINGS, limits=c.limits))
    assert isinstance(result, SceneError), "a scene over a limit was accepted"
    assert_clear(result, c.name)


# ------------------------------------------------------------- limits, one by one, by hand

SMALL = Limits(max_file_bytes=4000, max_vertices=10, max_obstacles=2, max_targets=2,
               max_depth=8, max_aliases=0, max_abs_coordinate=1e6)
BASE = """scene: 1
travel: {x: [0, 1000], y: [0, 500]}
head: {footprint: [[-10, -10], [10, -10], [10, 10], [-10, 10]], margin: 1}
start: [5, 5]
"""


@pytest.mark.parametrize("text, words", [
    (BASE + "targets: [[1, 1]]\n" + "#" * 4000, "more than the limit of 4,000 bytes"),
    (BASE + "targets: [[1, 1]]\nobstacles: [" + ", ".join(["{circle: {center: [9, 9], "
                                                         "radius: 1}}"] * 3) + "]\n",
     "3 obstacles are more than the limit of 2"),
    (BASE + "targets: [[1, 1], [2, 2], [3, 3]]\n", "3 targets are more than the limit of 2"),
    # 11 vertices of the obstacle and 4 of the head
    (BASE + "targets: [[1, 1]]\nobstacles: [{polygon: [" + ", ".join(
        f"[{100 + 10 * math.cos(k / 11 * 6.283):.3f}, {100 + 10 * math.sin(k / 11 * 6.283):.3f}]"
        for k in range(11)) + "]}]\n", "15 polygon vertices, more than the limit of 10"),
    (BASE + "targets: [[1, 1]]\nfinish: [[[[[[[[[[1]]]]]]]]]]\n", "deeper than 8"),
    (BASE + "targets: [&a [1, 1], *a]\n", "aliases"),
    (BASE + "targets: [[1, .nan]]\n", "not a finite number"),
    (BASE + "targets: [[1, -.inf]]\n", "not a finite number"),
    (BASE + "targets: [[1, 1e7]]\n", "out of range"),
    (BASE.replace("margin: 1", "margin: .inf") + "targets: [[1, 1]]\n", "not a finite number"),
])
def test_each_limit_has_a_clear_message(text, words):
    err = load_or_error(text.encode(), "job.yaml", replace(SETTINGS, limits=SMALL))
    assert isinstance(err, SceneError)
    assert words in err.message, err.message
    assert_clear(err, "job.yaml")


def test_an_alias_bomb_is_refused_before_it_is_expanded():
    # The "billion laughs" document: nine levels of ten aliases each would expand to 10**9
    # leaves (a well-known YAML/XML entity attack); it must be refused at its first alias.
    lines = ["a0: &a0 [lol, lol, lol, lol, lol, lol, lol, lol, lol, lol]"]
    lines += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]" for i in range(1, 10)]
    text = (BASE + "targets: [[1, 1]]\n" + "\n".join(lines) + "\n").encode()
    for limits in (SETTINGS.limits, replace(SETTINGS.limits, max_aliases=1000)):
        err = load_or_error(text, "job.yaml", replace(SETTINGS, limits=limits))
        assert isinstance(err, SceneError)
        assert "alias" in err.message and err.line is not None


def test_numbers_past_what_the_output_resolution_keeps_exact_are_refused():
    # Found by fuzzing (geometry seed 0, first generator): a table at 1e9 with features of
    # 1e-5 passed the loader, and the planner's 1e-6 tolerance was below a double's spacing
    # there (1.2e-7, IEEE 754): its route missed the margin by 2e-6 and was stopped by the
    # safety check. Numbers are now bounded by the resolution (0.001 mm -> 7e7 mm).
    text = BASE.replace("x: [0, 1000]", "x: [99999000, 100000000]").replace(
        "start: [5, 5]", "start: [99999005, 5]") + "targets: [[99999010, 10]]\n"
    err = load_or_error(text.encode(), "job.yaml")
    assert isinstance(err, SceneError) and "out of range" in err.message
    assert "resolution" in err.hint and err.line is not None
    assert err.path in ("travel.x[0]", "travel.x[1]", "start[0]", "targets[0][0]")


def test_travel_narrower_than_the_output_resolution_is_refused():
    # Found by fuzzing (geometry seed 277, first generator): a table 1e-7 wide holds no point
    # of the 0.001 grid the route is written on; the planner's rounded points fell outside it.
    text = BASE.replace("x: [0, 1000]", "x: [0.0002, 0.0004]").replace(
        "start: [5, 5]", "start: [0.0003, 5]") + "targets: [[0.0003, 10]]\n"
    err = load_or_error(text.encode(), "job.yaml")
    assert isinstance(err, SceneError) and err.path == "travel"
    assert "output resolution" in err.message


# ------------------------------------------------------------------------- the config


def _load_config(folder: Path) -> None:
    try:
        settings = load_settings(folder)
        watch_options(settings)
    except ConfigError as err:
        assert err.message and "\n" not in format_error(err), format_error(err)
        assert str(folder) in err.file


@hsettings(max_examples=40 if not LONG else 1000, deadline=None, derandomize=not LONG,
           suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.integers(0, 2**31), st.sampled_from(["planner.yaml", "heads.yaml"]), st.booleans())
def test_mutated_config_gives_settings_or_one_clear_config_error(tmp_path, seed, name, as_bytes):
    from fuzzkit import mutate_bytes

    folder = tmp_path / f"c{seed}-{name}-{as_bytes}"
    folder.mkdir(exist_ok=True)
    for other in ("planner.yaml", "heads.yaml"):
        (folder / other).write_bytes((CONFIG / other).read_bytes())
    rnd = random.Random(f"config:{seed}")
    original = (CONFIG / name).read_bytes()
    if as_bytes:
        data = mutate_bytes(rnd, original)
    else:
        data = yaml.safe_dump(mutate_structure(rnd, yaml.safe_load(original)),
                              allow_unicode=True).encode("utf-8", "surrogatepass")
    (folder / name).write_bytes(data)
    _load_config(folder)
