"""End to end through the command line: demo scenes, exit codes, nothing written on bad input."""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from planner.config import load_settings
from planner.demo import demo_scenes
from planner.routefile import load_route
from planner.scene import load_scene
from planner.verify import verify_route

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "config"


def sidestep(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "planner.cli", *args],
        capture_output=True, text=True, cwd=cwd or REPO, timeout=300,
    )


@pytest.mark.parametrize("scene", demo_scenes(), ids=lambda p: p.name)
def test_demo_scene_plans_and_its_route_file_passes_the_safety_check(scene: Path, tmp_path: Path):
    run = sidestep("plan", str(scene), "--out", str(tmp_path), "--config", str(CONFIG))
    assert run.returncode in (0, 3), run.stderr
    assert "Traceback" not in run.stderr
    route_path = tmp_path / (scene.stem + ".route.yaml")
    text = route_path.read_text()
    data = yaml.safe_load(text)
    # The contract's top-level keys, in its order (interface.md, "The route file").
    keys = list(data)
    assert keys[:7] == ["route", "scene", "scene_sha256", "config_sha256", "units", "status",
                        "length"]
    assert data["status"] == ("complete" if run.returncode == 0 else "incomplete")
    route = load_route(text)
    settings = load_settings(CONFIG)
    loaded = load_scene(scene, settings)
    assert route.scene_sha256 == loaded.sha256
    # Independent check of the file as written (not the in-memory route).
    assert verify_route(route, loaded, tolerance=1e-6, resolution=0.001) == []
    assert math.isclose(data["length"], sum(leg["length"] for leg in data["legs"]), abs_tol=0.01)


def test_blocked_pocket_demo_is_incomplete_and_names_the_clamps(tmp_path: Path):
    scene = next(p for p in demo_scenes() if p.name == "router-blocked-pocket.yaml")
    run = sidestep("plan", str(scene), "--out", str(tmp_path), "--config", str(CONFIG))
    assert run.returncode == 3, run.stderr
    data = yaml.safe_load((tmp_path / "router-blocked-pocket.route.yaml").read_text())
    reasons = {item["id"]: item["reason"] for item in data["unreachable"]}
    assert set(reasons) == {"drill-2", "pocket-centre"}
    assert "hold-down-1" in reasons["drill-2"]


def test_check_writes_nothing_and_prints_the_cautions(tmp_path: Path):
    scene = tmp_path / "job.yaml"
    scene.write_text((REPO / "planner/demo/pick-place-fixtures.yaml").read_text())
    run = sidestep("check", str(scene), "--config", str(CONFIG))
    assert run.returncode == 0, run.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["job.yaml"]
    assert "ISO 12100" in run.stdout


WORKED = """\
scene: 1
units: mm
travel: {x: [0, 200], y: [0, 200]}
head:
  footprint: [[-10, -10], [10, -10], [10, 10], [-10, 10]]
  margin: 0
obstacles:
  - rect: {min: [40, 40], max: [60, 60]}
start: [0, 50]
targets:
  - [100, 50]
"""


def test_worked_example_square_head_around_square_obstacle(tmp_path: Path):
    # Worked by hand: a 20 x 20 head around a 20 x 20 obstacle gives the C-obstacle
    # [30, 70] x [30, 70] (Minkowski sum of the square with the reflected square). From (0, 50)
    # to (100, 50) the shortest path bends at (30, 70) and (70, 70) (or the mirror below):
    # 2 * sqrt(30^2 + 20^2) + 40 = 112.1110255...
    scene = tmp_path / "worked.yaml"
    scene.write_text(WORKED)
    run = sidestep("plan", str(scene), "--out", str(tmp_path), "--config", str(CONFIG))
    assert run.returncode == 0, run.stderr
    data = yaml.safe_load((tmp_path / "worked.route.yaml").read_text())
    expected = 2 * math.hypot(30, 20) + 40
    # The planner pads the clearance by the output resolution (0.001): allow a few thousandths.
    assert data["legs"][0]["length"] == pytest.approx(expected, abs=0.01)
    assert data["legs"][0]["length"] >= expected - 1e-9


BAD_SCENES = {
    "unknown-key.yaml": WORKED.replace("obstacles:", "obstacle:"),
    "start-outside.yaml": WORKED.replace("start: [0, 50]", "start: [-5, 50]"),
    "not-a-mapping.yaml": "- 1\n- 2\n",
    "empty.yaml": "",
}


@pytest.mark.parametrize("name", sorted(BAD_SCENES))
def test_bad_scene_exits_2_with_one_message_and_writes_nothing(name: str, tmp_path: Path):
    scene = tmp_path / name
    scene.write_text(BAD_SCENES[name])
    out = tmp_path / "out"
    run = sidestep("plan", str(scene), "--out", str(out), "--config", str(CONFIG))
    assert run.returncode == 2
    assert "Traceback" not in run.stderr
    assert name in run.stderr
    assert len(run.stderr.strip().splitlines()) == 1
    assert not out.exists() or not any(out.iterdir())


def test_readme_walkthrough_shows_the_route_the_planner_writes(tmp_path: Path):
    # The README's example route must be what `sidestep plan` really writes for
    # docs/example/job.yaml (hashes are shortened there, so they are not compared).
    readme = (REPO / "README.md").read_text()
    block = readme.split("writes `routes/job.route.yaml`", 1)[1].split("```yaml\n", 1)[1]
    shown = yaml.safe_load(block.split("```", 1)[0])
    run = sidestep("plan", str(REPO / "docs/example/job.yaml"), "--out", str(tmp_path),
                   "--config", str(CONFIG))
    assert run.returncode == 0, run.stderr
    written = yaml.safe_load((tmp_path / "job.route.yaml").read_text())
    for key in ("status", "length", "time", "unreachable"):
        assert shown[key] == written[key], key
    assert [(leg["from"], leg["to"], leg["length"], leg["points"]) for leg in shown["legs"]] == [
        (leg["from"], leg["to"], leg["length"], leg["points"]) for leg in written["legs"]
    ]
    assert list(shown["files"]) == list(written["files"])
