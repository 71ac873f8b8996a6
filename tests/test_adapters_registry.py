"""The adapter registry: entry points read through importlib.metadata, clear config errors."""

from __future__ import annotations

import re
from importlib.metadata import entry_points
from pathlib import Path

import pytest
import yaml

from adapters import AdapterSettingsError, enabled_adapters, installed_adapters
from adapters.registry import GROUP
from planner.errors import ConfigError, format_error

REPO = Path(__file__).resolve().parent.parent


def test_built_ins_register_through_the_same_entry_point_group_as_plugins():
    # importlib.metadata reads the installed project's own entry_points.txt (package metadata,
    # not this project's code): the built-ins are ordinary plugins of the group.
    found = {ep.name: ep.value for ep in entry_points(group=GROUP)}
    assert found["csv"] == "adapters.csv_waypoints:CsvWaypoints"
    assert found["gcode"] == "adapters.gcode:GcodeMoves"
    adapters = installed_adapters()
    assert adapters["csv"].suffix == ".csv" and adapters["gcode"].suffix == ".nc"


def test_an_unknown_adapter_name_is_a_config_error_listing_the_installed_ones():
    with pytest.raises(ConfigError) as info:
        enabled_adapters(["csv", "gcod"], config_file="config/planner.yaml")
    text = format_error(info.value)
    assert text.startswith("config/planner.yaml: adapters[1]: unknown adapter 'gcod'")
    installed = re.search(r"installed adapters: ([^)]*)", text).group(1).split(", ")
    assert {"csv", "gcode"} <= set(installed)


def test_enabled_adapters_keep_the_configured_order_and_refuse_repeats():
    assert [a.name for a in enabled_adapters(["gcode", "csv"])] == ["gcode", "csv"]
    with pytest.raises(ConfigError, match="listed twice"):
        enabled_adapters(["csv", "csv"])


def test_settings_sections_are_checked_before_anything_is_planned():
    with pytest.raises(AdapterSettingsError) as info:
        enabled_adapters(["gcode"], config_file="cfg/planner.yaml",
                         adapter_settings={"gcode": {"path_mode": "blend"}})
    text = format_error(info.value)
    assert text.startswith("cfg/planner.yaml: adapter_settings.gcode.path_mode:")
    assert "exact_path" in text
    # A section for a name no adapter has would silently drop its settings: refused.
    with pytest.raises(ConfigError, match="no installed adapter is called 'gcod'"):
        enabled_adapters(["gcode"], adapter_settings={"gcod": {"decimals": 4}})
    # A disabled adapter's section is still checked for its name only.
    enabled_adapters(["csv"], adapter_settings={"gcode": {"path_mode": "blend"}})


def test_the_shipped_config_enables_csv_and_gcode_with_valid_settings():
    data = yaml.safe_load((REPO / "config" / "planner.yaml").read_text())
    assert {"csv", "gcode"} <= set(data["adapters"])
    chosen = enabled_adapters(data["adapters"], adapter_settings=data["adapter_settings"])
    assert [a.name for a in chosen] == data["adapters"]


def _yaml_examples(markdown: str) -> list[dict]:
    blocks = re.findall(r"```yaml\n(.*?)```", markdown, re.S)
    return [yaml.safe_load(b) for b in blocks]


def test_every_settings_example_in_the_docs_is_valid():
    examples = [d for d in _yaml_examples((REPO / "docs" / "adapters.md").read_text())
                if isinstance(d, dict) and "adapter_settings" in d]
    assert len(examples) >= 2
    for data in examples:
        enabled_adapters(data.get("adapters", list(data["adapter_settings"])),
                         adapter_settings=data["adapter_settings"])
