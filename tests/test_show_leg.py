"""Per-leg explanations of scenes that change as the job runs: `check`, `show --leg N`, job sheet.

What each leg must see comes from the contract (interface.md, "Scenes that change as the job
runs"): an obstacle with `after: X` is present from the leg leaving X on, one with `until: X` is
gone after the leg arriving at X, a `carry` on X widens the footprint from the leg leaving X on.
The pictures are checked by rasterising them with cairosvg and reading pixels with our own
y-flipped mapping from the travel rectangle, not render.py's Frame.
"""

from __future__ import annotations

import io
import re
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import shapely
import yaml
from PIL import Image

from adapters.jobsheet import JobSheetAdapter
from planner.config import load_settings
from planner.jobs import run_job
from planner.render import PALETTE, svg_to_png
from tests.helpers import REPO_CONFIG, make_scene_dict, write_scene

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "planner" / "demo" / "plasma-nest-tipping-parts.yaml"
SVG_NS = "{http://www.w3.org/2000/svg}"
LEG_LINE = re.compile(r"^  leg (\d+): (\S+) -> (\S+)\s.*$", re.M)


def sidestep(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "planner.cli", *args, "--config",
                           str(REPO_CONFIG)], capture_output=True, text=True, cwd=REPO,
                          timeout=120)


def leg_lines(stdout: str) -> list[tuple[int, str, str, str]]:
    return [(int(m[1]), m[2], m[3], m[0]) for m in LEG_LINE.finditer(stdout)]


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    dst = tmp_path_factory.mktemp("demo") / DEMO.name
    shutil.copyfile(DEMO, dst)
    return dst


@pytest.fixture(scope="module")
def demo_check(demo: Path) -> list[tuple[int, str, str, str]]:
    run = sidestep("check", str(demo))
    assert run.returncode == 0, run.stderr
    return leg_lines(run.stdout)


def _parts(scene_file: Path) -> dict[str, dict]:
    return {o["id"]: o for o in yaml.safe_load(scene_file.read_text())["obstacles"]
            if "id" in o}


def test_check_names_the_part_that_appeared_on_the_leg_after_its_exit_point(demo, demo_check):
    parts = _parts(demo)
    appearing = {o["after"]: pid for pid, o in parts.items() if o.get("after")}
    seen = 0
    for _, from_id, _, line in demo_check:
        # contract: present on every leg that starts at X or later, so new on the leg leaving X
        if from_id in appearing:
            assert f"+{appearing[from_id]} appeared" in line, line
            seen += 1
        else:
            assert "appeared" not in line, line
    assert seen == len(appearing)


def _picture(svg_text: str):
    """The PNG of an SVG and a scene (x, y) -> RGB lookup by our own y-flipped formula."""
    root = ET.fromstring(svg_text)
    travel = root.find(f".//{SVG_NS}rect[@id='travel']")
    x0, x1 = float(travel.get("data-xmin")), float(travel.get("data-xmax"))
    y0, y1 = float(travel.get("data-ymin")), float(travel.get("data-ymax"))
    png = Image.open(io.BytesIO(svg_to_png(svg_text))).convert("RGB")
    pixels = np.asarray(png, dtype=float)
    factor = png.width / float(root.get("width"))

    def colour(x: float, y: float) -> np.ndarray:
        px = float(travel.get("x")) + (x - x0) / (x1 - x0) * float(travel.get("width"))
        py = float(travel.get("y")) + (y1 - y) / (y1 - y0) * float(travel.get("height"))
        return pixels[int(round(py * factor)), int(round(px * factor))]

    return root, colour


def _obstacle_share(colour, polygon) -> float:
    """Share of sample points well inside `polygon` (its centre and a grid) drawn in the
    obstacle fill; labels cover a few of them, hence a share and not every pixel."""
    inner = shapely.Polygon(polygon).buffer(-4)
    minx, miny, maxx, maxy = inner.bounds
    pts = [inner.representative_point()]
    pts += [shapely.Point(x, y) for x in np.linspace(minx, maxx, 9)
            for y in np.linspace(miny, maxy, 9)]
    pts = [p for p in pts if inner.contains(p)]
    fill = np.array([int(PALETTE["obstacle"][i:i + 2], 16) for i in (1, 3, 5)], dtype=float)
    hits = [float(np.abs(colour(p.x, p.y) - fill).max()) <= 30 for p in pts]
    return sum(hits) / len(hits)


def test_show_leg_draws_present_parts_filled_and_later_parts_not(demo, demo_check):
    parts = _parts(demo)
    visited = [from_id for _, from_id, _, _ in demo_check]
    n = len(demo_check) // 2 + 1  # a leg in the middle of the job
    from_id = demo_check[n - 1][1]
    before = set(visited[:n])  # points reached before leg n leaves (its own start included)
    present = [pid for pid, o in parts.items() if o.get("after") in before]
    later = [pid for pid, o in parts.items() if o.get("after") and o["after"] not in before]
    assert present and later, (from_id, present, later)

    run = sidestep("show", str(demo), "--leg", str(n))
    assert run.returncode == 0, run.stderr
    picture = demo.parent / f"{demo.stem}.leg{n}.svg"
    assert str(picture) in run.stdout
    svg = picture.read_text()
    root, colour = _picture(svg)  # parses as XML
    assert root.find(f".//{SVG_NS}polyline[@id='leg-{n}']") is not None
    for pid in present:
        assert _obstacle_share(colour, parts[pid]["polygon"]) > 0.6, pid
    for pid in later:
        assert _obstacle_share(colour, parts[pid]["polygon"]) < 0.15, pid
        shape = root.find(f".//{SVG_NS}*[@id='obstacle-{pid}']")
        assert shape.get("data-absent") == "true"
    text = " ".join(t.text or "" for t in root.iter(f"{SVG_NS}text"))
    assert "not yet present" in text


def test_show_leg_out_of_range_is_a_clear_error_and_writes_nothing(demo, demo_check):
    for bad in (len(demo_check) + 1, 0):
        run = sidestep("show", str(demo), "--leg", str(bad))
        assert run.returncode == 2
        assert "Traceback" not in run.stderr
        assert not (demo.parent / f"{demo.stem}.leg{bad}.svg").exists()
    run = sidestep("show", str(demo), "--leg", str(len(demo_check) + 1))
    assert f"has {len(demo_check)} legs" in run.stderr


CARRY = [[-30, -20], [30, -20], [30, 20], [-30, 20]]


@pytest.fixture(scope="module")
def pick_place(tmp_path_factory) -> Path:
    """A tray that empties at the pick and a 60 x 40 part carried from the pick to the place."""
    data = make_scene_dict(
        obstacles=[{"id": "block", "rect": {"min": [400, 100], "max": [600, 300]}},
                   {"id": "tray", "rect": {"min": [150, 330], "max": [250, 450]},
                    "until": "pick"}],
        targets=[{"id": "pick", "at": [100, 250], "carry": CARRY},
                 {"id": "place", "at": [900, 400], "carry": "none"}],
    )
    return write_scene(tmp_path_factory.mktemp("pp"), data)


def test_check_says_what_went_and_what_is_carried(pick_place):
    run = sidestep("check", str(pick_place))
    assert run.returncode == 0, run.stderr
    lines = {from_id: line for _, from_id, _, line in leg_lines(run.stdout)}
    # contract: `until: pick` is gone after the leg arriving at pick; the carry holds from the
    # leg leaving pick until place sets `none`
    assert "-tray gone" in lines["pick"]
    assert "carrying a 60 x 40 mm outline" in lines["pick"]
    assert "carrying" not in lines["start"] and "carrying" not in lines["place"]
    assert "gone" not in lines["start"]


def test_show_leg_draws_the_tray_before_and_not_after_it_empties(pick_place, tmp_path):
    tray = [[150, 330], [250, 330], [250, 450], [150, 450]]
    first = tmp_path / "leg1.svg"
    second = tmp_path / "leg2.svg"
    assert sidestep("show", str(pick_place), "--leg", "1", "-o", str(first)).returncode == 0
    run = sidestep("show", str(pick_place), "--leg", "2", "-o", str(second))
    assert run.returncode == 0, run.stderr
    _, colour1 = _picture(first.read_text())
    root2, colour2 = _picture(second.read_text())
    assert _obstacle_share(colour1, tray) > 0.6
    assert _obstacle_share(colour2, tray) < 0.15
    text = " ".join(t.text or "" for t in root2.iter(f"{SVG_NS}text"))
    assert "already gone" in text
    # the leg's footprint at its start (the pick) holds the head and the carried outline
    path = root2.find(f".//{SVG_NS}path[@id='leg-footprint']")
    assert path is not None


def _sheet(scene_path: Path) -> str:
    outcome = run_job(scene_path, None, load_settings(REPO_CONFIG), write=False)
    assert outcome.result is not None, outcome.message
    return JobSheetAdapter().write(outcome.result.route, {"picture": False}, outcome.result)


def test_job_sheet_has_the_state_column_only_when_the_scene_changes(pick_place, tmp_path):
    page = _sheet(pick_place)
    assert "<th>state changes</th>" in page
    assert "-tray gone; carrying a 60 x 40 mm outline" in page
    static = write_scene(tmp_path, make_scene_dict(), "static.yaml")
    assert "state changes" not in _sheet(static)
