"""A real third-party adapter: a tiny distribution built and installed with pip into a temp folder.

Its entry points are package metadata (a .dist-info folder written by pip and setuptools), read
through importlib.metadata exactly as the built-ins' are; nothing in this repository knows it.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from importlib.metadata import distribution
from pathlib import Path

import pytest
from _adapter_routes import polyline, sample_route

from adapters import adapter_entries, enabled_adapters, installed_adapters
from planner.errors import ConfigError
from planner.routefile import load_route

REPO = Path(__file__).resolve().parent.parent

PYPROJECT = """\
[build-system]
requires = ["setuptools"]
build-backend = "setuptools.build_meta"

[project]
name = "plant-plc-points"
version = "1.0"

[project.entry-points."sidestep.adapters"]
plc = "plant_plc_points:PlcPoints"
plc_broken = "plant_plc_points.broken:Broken"
plc_sneaky = "plant_plc_points:Sneaky"
"""

MODULE = '''\
"""A plant's own point list for its PLC: `P<n> x y` per line."""


class PlcPoints:
    name = "plc"
    suffix = ".plc.txt"
    summary = "point list for the press line PLC"

    def write(self, route, settings, job=None):
        sep = settings.get("separator", " ")
        points = [route.legs[0].points[0]] if route.legs else []
        for leg in route.legs:
            points.extend(leg.points[1:])
        return "".join(f"P{i}{sep}{x:.3f}{sep}{y:.3f}\\n" for i, (x, y) in enumerate(points, 1))


class Sneaky:
    name = "plc_sneaky"
    suffix = ".yaml"
    summary = "would write <stem>.yaml, i.e. over the scene"

    def write(self, route, settings, job=None):
        return ""
'''

BROKEN = 'raise ImportError("the vendor library plant_fieldbus is not installed")\n'


@pytest.fixture(scope="module")
def plugin_dir(tmp_path_factory) -> Path:
    """pip builds and installs the distribution into a temp target (no index, no network)."""
    src = tmp_path_factory.mktemp("plugin-src")
    (src / "pyproject.toml").write_text(PYPROJECT)
    pkg = src / "plant_plc_points"
    pkg.mkdir()
    (pkg / "__init__.py").write_text(MODULE)
    (pkg / "broken.py").write_text(BROKEN)
    target = tmp_path_factory.mktemp("plugin-site")
    run = subprocess.run(
        [sys.executable, "-m", "pip", "install", "--quiet", "--no-build-isolation", "--no-deps",
         "--no-index", "--target", str(target), str(src)],
        capture_output=True, text=True, timeout=120,
    )
    assert run.returncode == 0, run.stderr
    return target


def test_the_plugin_is_found_through_its_package_metadata(plugin_dir, monkeypatch):
    monkeypatch.syspath_prepend(str(plugin_dir))
    dist = distribution("plant-plc-points")
    assert {ep.name for ep in dist.entry_points if ep.group == "sidestep.adapters"} == {
        "plc", "plc_broken", "plc_sneaky"}

    entries = {e.name: e for e in adapter_entries()}
    assert entries["plc"].distribution == "plant-plc-points" and entries["plc"].problem is None
    assert "plant_fieldbus" in entries["plc_broken"].problem  # a broken plugin says why
    assert "scene" in entries["plc_sneaky"].problem  # a scene's suffix is refused
    assert {"csv", "gcode", "plc"} <= set(installed_adapters())

    chosen = enabled_adapters(["csv", "plc"])
    assert [a.name for a in chosen] == ["csv", "plc"]
    route = sample_route()
    text = chosen[1].write(route, {"separator": ";"})
    assert text.splitlines()[0] == "P1;20.000;20.000"
    assert len(text.splitlines()) == len(polyline(route))

    with pytest.raises(ConfigError, match="cannot be used: it could not be loaded"):
        enabled_adapters(["plc_broken"])
    with pytest.raises(ConfigError, match="could replace a scene"):
        enabled_adapters(["plc_sneaky"])


def test_without_the_plugin_on_the_path_its_name_is_unknown():
    with pytest.raises(ConfigError, match="unknown adapter 'plc'"):
        enabled_adapters(["plc"])


def _cli(*args: str, plugin_dir: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(plugin_dir), str(REPO)])}
    return subprocess.run([sys.executable, "-m", "planner.cli", *args], capture_output=True,
                          text=True, cwd=REPO, env=env, timeout=300)


def test_sidestep_adapters_lists_the_plugin_one_line_each(plugin_dir):
    run = _cli("adapters", plugin_dir=plugin_dir)
    assert run.returncode == 0, run.stderr
    lines = {line.split()[0]: line for line in run.stdout.splitlines()}
    assert ".plc.txt" in lines["plc"] and "press line PLC" in lines["plc"]
    assert "cannot be used" in lines["plc_broken"] and "plant-plc-points" in lines["plc_broken"]
    assert ".csv" in lines["csv"] and ".nc" in lines["gcode"]


def test_plan_writes_the_plugin_file_beside_the_route(plugin_dir, tmp_path):
    config = tmp_path / "config"
    config.mkdir()
    (config / "heads.yaml").write_text((REPO / "config" / "heads.yaml").read_text())
    text = (REPO / "config" / "planner.yaml").read_text()
    text, n = re.subn(r"^adapters: \[", "adapters: [plc, ", text, count=1, flags=re.M)
    text, m = re.subn(r"^adapter_settings:.*$", "adapter_settings:\n  plc:\n    separator: \";\"",
                      text, count=1, flags=re.M)
    assert n == m == 1
    (config / "planner.yaml").write_text(text)
    scene = REPO / "planner" / "demo" / "pick-place-fixtures.yaml"
    out = tmp_path / "out"
    run = _cli("plan", str(scene), "--out", str(out), "--config", str(config),
               plugin_dir=plugin_dir)
    assert run.returncode in (0, 3), run.stderr
    route = load_route((out / "pick-place-fixtures.route.yaml").read_text())
    lines = (out / "pick-place-fixtures.plc.txt").read_text().splitlines()
    expected = polyline(route)
    assert len(lines) == len(expected)
    for line, (x, y) in zip(lines, expected, strict=True):
        _, xs, ys = line.split(";")
        assert abs(float(xs) - x) <= 5e-4 and abs(float(ys) - y) <= 5e-4
    assert (out / "pick-place-fixtures.csv").exists() and (out / "pick-place-fixtures.nc").exists()
