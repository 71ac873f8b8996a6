"""`sidestep plan` writes the adapters' files; they agree with the route file it wrote.

The .nc files are replayed by pygcode and read by gcodeparser (general-purpose G-code parsers
from PyPI), the .csv files by Python's csv module and numpy.genfromtxt; the rules checked are
NISTIR 6556's (Kramer, Proctor and Messina, 2000), as in test_adapters_gcode.py.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml
from _adapter_routes import distinct, polyline
from _gcode_replay import check_program

from planner.demo import demo_scenes
from planner.routefile import load_route

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "config"
RESOLUTION_MM = yaml.safe_load((CONFIG / "planner.yaml").read_text())["resolution"]

INCH_SCENE = """\
scene: 1
units: inch
travel: {x: [0, 40], y: [0, 30]}
head:
  footprint: [[-1, -1], [1, -1], [1, 1], [-1, 1]]
  margin: 0.1
obstacles:
  - id: fixture
    rect: {min: [15, 5], max: [25, 25]}
start: [2, 15]
targets:
  - {id: bore-1, at: [35, 15]}
  - [35, 28]
finish: [2, 15]
"""


def sidestep(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "planner.cli", *args], capture_output=True,
                          text=True, cwd=REPO, timeout=300)


def check_files(out: Path, stem: str, resolution: float) -> None:
    route_text = (out / f"{stem}.route.yaml").read_text()
    route = load_route(route_text)
    nc = (out / f"{stem}.nc").read_text()
    check_program(nc, route, resolution)
    assert route.scene_file in nc and route.scene_sha256 in nc

    text = (out / f"{stem}.csv").read_text()
    unit = {"mm": "mm", "inch": "in"}[route.units]
    rows = list(csv.DictReader(io.StringIO(text)))
    got = np.array([[float(r[f"x_{unit}"]), float(r[f"y_{unit}"])] for r in rows]).reshape(-1, 2)
    expected = polyline(route)
    # Python's csv module and numpy.genfromtxt read back the route file's points.
    assert got.shape == expected.shape
    assert np.all(np.abs(got - expected) <= resolution * 1e-3)
    table = np.atleast_1d(np.genfromtxt(io.StringIO(text), delimiter=",", names=True,
                                        dtype=None, encoding="utf-8"))
    xy = np.column_stack([table[f"x_{unit}"], table[f"y_{unit}"]]).astype(float)
    assert np.all(np.abs(xy - expected) <= resolution * 1e-3)
    assert [r["target"] for r in rows if r["kind"] == "target"] == [
        leg.to_id for leg in route.legs if leg.to_id != "finish"]
    assert len(distinct(expected)) >= 2

    # The route file names its companions with their sha256 (hashlib), as the files on disk are.
    files = yaml.safe_load(route_text)["files"]
    for suffix in (".csv", ".nc"):
        data = (out / f"{stem}{suffix}").read_bytes()
        assert files[f"{stem}{suffix}"] == hashlib.sha256(data).hexdigest()


@pytest.mark.parametrize("scene", demo_scenes(), ids=lambda p: p.name)
def test_plan_writes_csv_and_nc_that_match_the_route_file(scene: Path, tmp_path: Path):
    run = sidestep("plan", str(scene), "--out", str(tmp_path), "--config", str(CONFIG))
    assert run.returncode in (0, 3), run.stderr
    check_files(tmp_path, scene.stem, RESOLUTION_MM)


def test_an_inch_scene_gets_G20_and_inch_columns(tmp_path: Path):
    scene = tmp_path / "bores.yaml"
    scene.write_text(INCH_SCENE)
    out = tmp_path / "out"
    run = sidestep("plan", str(scene), "--out", str(out), "--config", str(CONFIG))
    assert run.returncode == 0, run.stderr
    check_files(out, "bores", RESOLUTION_MM / 25.4)
    assert (out / "bores.csv").read_text().startswith("seq,leg,kind,target,x_in,y_in")


def _config_with(tmp_path: Path, pattern: str, new: str) -> Path:
    """A copy of the shipped config folder with one regex replacement in planner.yaml."""
    config = tmp_path / "config"
    config.mkdir()
    (config / "heads.yaml").write_text((CONFIG / "heads.yaml").read_text())
    text, n = re.subn(pattern, new, (CONFIG / "planner.yaml").read_text(), count=1, flags=re.M)
    assert n == 1, pattern
    (config / "planner.yaml").write_text(text)
    return config


def test_an_unknown_adapter_is_a_config_error_and_nothing_is_written(tmp_path: Path):
    config = _config_with(tmp_path, r"^adapters: \[", "adapters: [plc, ")
    scene = tmp_path / "job.yaml"
    scene.write_text(INCH_SCENE)
    run = sidestep("plan", str(scene), "--config", str(config))
    assert run.returncode == 2, run.stderr
    assert "unknown adapter 'plc'" in run.stderr and "installed adapters: " in run.stderr
    assert "Traceback" not in run.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["config", "job.yaml"]


def test_a_bad_adapter_setting_names_it_and_no_file_of_the_scene_is_written(tmp_path: Path):
    config = _config_with(tmp_path, r"path_mode: exact_path", "path_mode: blended")
    scene = tmp_path / "job.yaml"
    scene.write_text(INCH_SCENE)
    run = sidestep("plan", str(scene), "--config", str(config))
    assert run.returncode != 0
    assert "adapter_settings.gcode.path_mode" in run.stderr and "exact_path" in run.stderr
    assert "Traceback" not in run.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["config", "job.yaml"]
