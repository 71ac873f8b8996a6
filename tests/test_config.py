"""Config loading (planner.yaml, heads.yaml): units, heads, limits, located errors, config hash."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest
import yaml
from helpers import REPO_CONFIG

import planner
from planner.config import (
    Limits,
    Settings,
    effective_config_sha256,
    find_config_dir,
    load_settings,
)
from planner.errors import ConfigError, format_error
from planner.model import Head

PLANNER = """\
units: mm
margin: 2.0
arc_tolerance: 0.05
resolution: 0.001
sequence: given
adapters: [csv]
adapter_settings:
  csv: {delimiter: semicolon}
watch:
  settle_s: 1.5
limits:
  max_vertices: 5000
  max_aliases: 2
"""

HEADS = """\
units: mm
heads:
  slim:
    footprint: [[-25, -45], [25, -45], [25, 45], [-25, 45]]
    margin: 3.0
    ride_height: 6
  bare:
    footprint: [[-10, -10], [10, -10], [0, 10]]
"""


def make_config(tmp_path: Path, planner_text: str | None = PLANNER,
                heads_text: str | None = HEADS) -> Path:
    folder = tmp_path / "config"
    folder.mkdir(parents=True, exist_ok=True)
    if planner_text is not None:
        (folder / "planner.yaml").write_text(planner_text)
    if heads_text is not None:
        (folder / "heads.yaml").write_text(heads_text)
    return folder


def config_error(tmp_path: Path, planner_text: str | None = PLANNER,
                 heads_text: str | None = HEADS) -> ConfigError:
    with pytest.raises(ConfigError) as info:
        load_settings(make_config(tmp_path, planner_text, heads_text))
    return info.value


def test_repo_config_loads():
    settings = load_settings(REPO_CONFIG)
    assert settings.units == "mm" and settings.margin > 0 and settings.resolution > 0
    assert "torch-80" in settings.heads and settings.heads["torch-80"].name == "torch-80"
    head = settings.heads["torch-80"]
    assert len(head.footprint) >= 3 and head.margin > 0 and head.ride_height is not None
    assert settings.raw["units"] == "mm" and settings.config_dir == REPO_CONFIG


def test_settings_fields(tmp_path):
    settings = load_settings(make_config(tmp_path))
    assert settings.adapters == ("csv",)
    assert settings.adapter_settings == {"csv": {"delimiter": "semicolon"}}
    assert settings.watch == {"settle_s": 1.5}
    assert settings.limits == Limits(max_vertices=5000, max_aliases=2)
    assert settings.raw == yaml.safe_load(PLANNER)
    slim = settings.heads["slim"]
    assert slim == Head("slim", ((-25.0, -45.0), (25.0, -45.0), (25.0, 45.0), (-25.0, 45.0)),
                        3.0, 6.0)
    bare = settings.heads["bare"]
    assert bare.margin == settings.margin and bare.ride_height is None


def test_heads_in_inch_are_converted_to_the_planner_units(tmp_path):
    heads = HEADS.replace("units: mm", "units: inch")
    settings = load_settings(make_config(tmp_path, heads_text=heads))
    slim = settings.heads["slim"]
    # 1 inch = 25.4 mm exactly (international inch)
    assert slim.footprint[0] == pytest.approx((-25 * 25.4, -45 * 25.4))
    assert slim.margin == pytest.approx(3.0 * 25.4) and slim.ride_height == pytest.approx(152.4)
    # a head without margin takes planner.yaml's margin, already in planner.yaml's units
    assert settings.heads["bare"].margin == 2.0


def test_inch_planner_converts_to_a_mm_scene(tmp_path):
    planner_text = PLANNER.replace("units: mm", "units: inch").replace("margin: 2.0", "margin: 0.1")
    settings = load_settings(make_config(tmp_path, planner_text=planner_text))
    assert settings.units == "inch" and settings.heads["slim"].margin == pytest.approx(3.0 / 25.4)
    mm = settings.in_units("mm")
    # 25.4 mm per inch
    assert mm.margin == pytest.approx(2.54) and mm.heads["slim"].margin == pytest.approx(3.0)


def test_either_file_may_be_missing(tmp_path):
    only_heads = load_settings(make_config(tmp_path / "a", planner_text=None))
    assert only_heads.margin == Settings().margin and "slim" in only_heads.heads
    only_planner = load_settings(make_config(tmp_path / "b", heads_text=None))
    assert only_planner.heads == {} and only_planner.adapters == ("csv",)


def test_empty_planner_file_means_defaults(tmp_path):
    settings = load_settings(make_config(tmp_path, planner_text="# nothing set yet\n"))
    assert settings.margin == Settings().margin and settings.limits == Limits()


@pytest.mark.parametrize(
    "old, new, path, line, words",
    [
        ("margin: 2.0", "margn: 2.0", "margn", 2, "did you mean 'margin'"),
        ("margin: 2.0", "margin: two", "margin", 2, "expected a number"),
        ("margin: 2.0", "margin: -2.0", "margin", 2, "at least 0"),
        ("units: mm", "units: cm", "units", 1, "not one of: mm, inch"),
        ("resolution: 0.001", "resolution: 0", "resolution", 4, "more than 0"),
        ("arc_tolerance: 0.05", "arc_tolerance: -0.05", "arc_tolerance", 3, "more than 0"),
        ("sequence: given", "sequence: random", "sequence", 5, "not one of"),
        ("adapters: [csv]", "adapters: csv", "adapters", 6, "expected"),
        ("  csv: {delimiter: semicolon}", "  csv: semicolon", "adapter_settings.csv", 8,
         "a mapping"),
        ("watch:\n  settle_s: 1.5", "watch: 5", "watch", 9, "mapping"),
        ("  max_vertices: 5000", "  max_vertex: 5000", "limits.max_vertex", 12, "max_vertices"),
        ("  max_vertices: 5000", "  max_vertices: 0", "limits.max_vertices", 12, "at least 1"),
        ("  max_vertices: 5000", "  max_vertices: 1.5", "limits.max_vertices", 12, "whole number"),
        ("  max_aliases: 2", "  max_aliases: -1", "limits.max_aliases", 13, "at least 0"),
        ("margin: 2.0", "margin: .nan", "margin", 2, "not a usable number"),
        ("units: mm", "units: mm\nextra_section: {}", "extra_section", 2, "unknown key"),
    ],
)
def test_planner_yaml_errors(tmp_path, old, new, path, line, words):
    text = PLANNER.replace(old, new)
    assert text != PLANNER
    err = config_error(tmp_path, planner_text=text)
    assert err.path == path and err.line == line
    assert words in err.message + " " + (err.hint or "")
    assert err.file.endswith("planner.yaml")


@pytest.mark.parametrize(
    "old, new, path, line, words",
    [
        ("[[-25, -45], [25, -45], [25, 45], [-25, 45]]",
         "[[-25, -45], [25, 45], [25, -45], [-25, 45]]", "heads.slim.footprint", 4, "crosses"),
        ("[[-25, -45], [25, -45], [25, 45], [-25, 45]]", "[[-25, -45], [25, -45]]",
         "heads.slim.footprint", 4, "at least 3"),
        ("[[-25, -45], [25, -45], [25, 45], [-25, 45]]",
         "[[-25, -45], [25, -45], [25, 45], [-25, 45], [-25, -45]]",
         "heads.slim.footprint[4]", 4, "closed"),
        ("    margin: 3.0\n", "    margin: -3.0\n", "heads.slim.margin", 5, "at least 0"),
        ("    ride_height: 6\n", "    ride-height: 6\n", "heads.slim.ride-height", 6,
         "did you mean 'ride_height'"),
        ("units: mm", "units: inches", "units", 1, "did you mean 'inch'"),
        ("    footprint: [[-10, -10], [10, -10], [0, 10]]\n", "    margin: 1\n",
         "heads.bare.footprint", 7, "missing"),  # the line of `bare:`
        ("heads:\n", "head:\n", "head", 2, "unknown key"),
    ],
)
def test_heads_yaml_errors(tmp_path, old, new, path, line, words):
    text = HEADS.replace(old, new)
    assert text != HEADS
    err = config_error(tmp_path, heads_text=text)
    assert err.path == path and err.line == line
    assert words in err.message + " " + (err.hint or "")
    assert err.file.endswith("heads.yaml")


def test_duplicate_key_and_alias_in_config(tmp_path):
    err = config_error(tmp_path, planner_text=PLANNER + "margin: 5\n")
    assert err.line == 14 and "appears twice" in err.message
    err = config_error(tmp_path, heads_text=HEADS.replace(
        "    footprint: [[-10, -10], [10, -10], [0, 10]]",
        "    footprint: &f [[-10, -10], [10, -10], [0, 10]]\n  other:\n    footprint: *f"))
    assert "alias" in err.message and err.line == 10


def test_not_a_mapping(tmp_path):
    err = config_error(tmp_path, planner_text="- margin: 2\n")
    assert err.line == 1 and "mapping" in err.message


def test_error_message_names_the_file_and_place(tmp_path):
    err = config_error(tmp_path, planner_text=PLANNER.replace("margin: 2.0", "margn: 2.0"))
    text = format_error(err)
    assert "planner.yaml:2:1: margn: unknown key 'margn'" in text and "(fix: " in text


def test_missing_folder_and_empty_folder(tmp_path):
    with pytest.raises(ConfigError) as info:
        load_settings(tmp_path / "nope")
    assert "does not exist" in info.value.message
    (tmp_path / "empty").mkdir()
    with pytest.raises(ConfigError) as info:
        load_settings(tmp_path / "empty")
    assert "neither" in info.value.message


def test_default_folder_search(tmp_path, monkeypatch):
    env_dir = make_config(tmp_path / "env")
    local = tmp_path / "work"
    make_config(local)
    monkeypatch.setenv("SIDESTEP_CONFIG", str(env_dir))
    monkeypatch.chdir(local)
    assert find_config_dir() == env_dir
    monkeypatch.delenv("SIDESTEP_CONFIG")
    assert find_config_dir() == Path.cwd() / "config"
    assert load_settings().config_dir == Path.cwd() / "config"
    monkeypatch.chdir(tmp_path)
    bundled = Path(planner.__file__).resolve().parent.parent / "config"
    assert find_config_dir() == bundled
    assert find_config_dir(env_dir) == env_dir


def test_config_hash_follows_the_head_used(tmp_path):
    settings = load_settings(make_config(tmp_path / "a"))
    base = effective_config_sha256(settings, settings.heads["slim"])
    assert len(base) == 64 and int(base, 16) >= 0
    assert base == effective_config_sha256(settings, settings.heads["slim"])
    retuned = load_settings(make_config(tmp_path / "b", heads_text=HEADS.replace(
        "margin: 3.0", "margin: 3.5")))
    assert effective_config_sha256(retuned, retuned.heads["slim"]) != base
    other = load_settings(make_config(tmp_path / "c", heads_text=HEADS.replace(
        "[[-10, -10], [10, -10], [0, 10]]", "[[-12, -10], [10, -10], [0, 10]]")))
    assert effective_config_sha256(other, other.heads["slim"]) == base
    assert effective_config_sha256(replace(settings, margin=2.5), settings.heads["slim"]) != base
    assert effective_config_sha256(settings.in_units("inch"),
                                   settings.in_units("inch").heads["slim"]) != base
    watch_only = replace(settings, watch={"settle_s": 9})
    assert effective_config_sha256(watch_only, settings.heads["slim"]) == base
