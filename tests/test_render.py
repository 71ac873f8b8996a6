"""Pictures: valid SVG, the right colours in the right places, readable palette, `sidestep show`.

The pixel checks rasterise the SVG with cairosvg and map scene points to pixels with their own
formula (from the travel rectangle's corners in the SVG, y flipped), so they catch a wrong flip
or scale; they sample colours, never compare whole images.
"""

from __future__ import annotations

import io
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import shapely
from PIL import Image

from planner.model import Circle, Head, Leg, Obstacle, Route, Scene, Target, Travel, Unreachable
from planner.render import PALETTE, render_svg, svg_to_png

REPO = Path(__file__).resolve().parent.parent
SVG_NS = "{http://www.w3.org/2000/svg}"


def rgb(hex_colour: str) -> np.ndarray:
    h = hex_colour.lstrip("#")
    return np.array([int(h[i:i + 2], 16) for i in (0, 2, 4)], dtype=float)


def scene_and_route():
    """A 1000 x 600 table: a clamp low on the table, a post high on it, a low burr passed over."""
    scene = Scene(
        file="picture-test.yaml", sha256="ab" * 32, units="mm",
        travel=Travel(0.0, 1000.0, 0.0, 600.0),
        head=Head(name=None, footprint=((-15, -15), (15, -15), (15, 15), (-15, 15)), margin=2.0,
                  ride_height=10.0),
        obstacles=(
            Obstacle(id="clamp", polygon=((200, 100), (300, 100), (300, 400), (200, 400)),
                     height=60),
            Obstacle(id="post", circle=Circle(center=(800.0, 450.0), radius=40.0), height=200),
            Obstacle(id="burr", polygon=((600, 60), (640, 60), (640, 300), (600, 300)),
                     height=5),
        ),
        start=(50.0, 50.0),
        targets=(Target(id="t1", at=(450.0, 520.0)), Target(id="t2", at=(950.0, 200.0)),
                 Target(id="t3", at=(280.0, 380.0))),
        finish=None,
    )
    legs = (
        Leg("start", "t1", ((50.0, 50.0), (450.0, 50.0), (450.0, 520.0)), 870.0),
        Leg("t1", "t2", ((450.0, 520.0), (950.0, 520.0), (950.0, 200.0)), 820.0),
    )
    unreachable = (Unreachable("t3", "no collision-free path from t2: the target lies inside "
                                     "obstacle clamp grown by the footprint and margin",
                               {"kind": "inside-obstacle", "point": [280.0, 380.0],
                                "nearest_free": [280.0, 417.0], "move": 37.0}),)
    route = Route("picture-test.yaml", "ab" * 32, "cd" * 32, "mm", legs, unreachable)
    grown = shapely.union_all([shapely.Polygon(scene.obstacles[0].polygon).buffer(17),
                               shapely.Point(800, 450).buffer(57)])
    return scene, route, grown


@pytest.fixture(scope="module")
def picture():
    scene, route, grown = scene_and_route()
    svg = render_svg(scene, route, grown)
    root = ET.fromstring(svg)
    travel = root.find(f".//{SVG_NS}rect[@id='travel']")
    png = Image.open(io.BytesIO(svg_to_png(svg))).convert("RGB")
    factor = png.width / float(root.get("width"))

    def at(x: float, y: float) -> tuple[int, int]:
        # y flipped: scene y grows upwards, image rows grow downwards
        px = float(travel.get("x")) + (x - 0.0) / 1000.0 * float(travel.get("width"))
        py = float(travel.get("y")) + (600.0 - y) / 600.0 * float(travel.get("height"))
        return int(round(px * factor)), int(round(py * factor))

    pixels = np.asarray(png, dtype=float)

    def colour(x: float, y: float) -> np.ndarray:
        c, r = at(x, y)
        return pixels[r, c]

    return {"svg": svg, "root": root, "at": at, "colour": colour, "pixels": pixels,
            "scene": scene}


def close(c: np.ndarray, hex_colour: str, tol: float = 30.0) -> bool:
    return float(np.abs(c - rgb(hex_colour)).max()) <= tol


def test_svg_parses_and_names_the_scene_and_its_hash(picture):
    root = picture["root"]
    assert root.tag == f"{SVG_NS}svg"
    text = " ".join(t.text or "" for t in root.iter(f"{SVG_NS}text"))
    assert "picture-test.yaml" in text
    assert "ab" * 32 in text  # the scene's sha256, in full
    assert "clamp" in text and "post" in text
    assert "5 mm high, passed over" in text  # the passed-over obstacle with its height
    assert "Cannot be reached" in text and "t3" in text
    assert root.find(f".//{SVG_NS}g[@id='scale-bar']") is not None


def test_route_colour_along_every_leg(picture):
    _, route, _ = scene_and_route()
    hits = total = 0
    for leg in route.legs:
        pts = np.asarray(leg.points)
        for a, b in zip(pts[:-1], pts[1:], strict=True):
            for f in (0.15, 0.3, 0.45, 0.6, 0.75, 0.9):
                p = a + (b - a) * f
                total += 1
                hits += close(picture["colour"](*p), PALETTE["route"], 40)
    # a label may sit on the line here and there; nearly all samples show the route's colour
    assert hits >= 0.8 * total, (hits, total)


def test_obstacle_fill_inside_obstacles_and_hatch_inside_the_passed_over_one(picture):
    colour = picture["colour"]
    for x, y in [(212, 115), (288, 115), (212, 200), (288, 200)]:  # clamp, clear of its label
        assert close(colour(x, y), PALETTE["obstacle"], 12), (x, y, colour(x, y))
    assert close(colour(800, 420), PALETTE["obstacle"], 12)  # post, below its label
    # the burr is hatched: yellow and dark stripes in a small window inside it
    c, r = picture["at"](620, 120)
    window = picture["pixels"][r - 6:r + 6, c - 6:c + 6].reshape(-1, 3)
    assert any(close(p, PALETTE["passed"], 25) for p in window)
    assert any(close(p, PALETTE["obstacle"], 60) for p in window)


def test_grown_zone_is_translucent_blue_around_the_obstacle(picture):
    c = picture["colour"](190, 250)  # 10 mm left of the clamp, inside its 17 mm grown zone
    assert c[2] > c[0] + 30 and c.min() > 120  # bluish, and light: the white shows through
    assert not close(c, PALETTE["grown"], 10)  # not opaque


def test_y_points_up_the_page(picture):
    at = picture["at"]
    # the post (y 450) is drawn above the clamp's bottom (y 100) on the page
    assert at(800, 450)[1] < at(250, 100)[1]
    root = picture["root"]
    post = root.find(f".//{SVG_NS}circle[@id='obstacle-post']")
    travel = root.find(f".//{SVG_NS}rect[@id='travel']")
    top, height = float(travel.get("y")), float(travel.get("height"))
    assert float(post.get("cy")) == pytest.approx(top + (600 - 450) / 600 * height, abs=0.01)


def test_markers_for_start_targets_and_the_unreachable_one(picture):
    def count(x: float, y: float, hex_colour: str) -> int:
        c, r = picture["at"](x, y)
        window = picture["pixels"][r - 8:r + 8, c - 8:c + 8].reshape(-1, 3)
        return sum(close(p, hex_colour, 30) for p in window)

    assert count(50, 50, PALETTE["start"]) > 40  # a filled square with a white letter
    assert count(280, 380, PALETTE["unreachable"]) > 40  # a filled diamond
    assert count(450, 520, PALETTE["target"]) > 20  # a ring with a number


def relative_luminance(hex_colour: str) -> float:
    # WCAG 2.1, definition of relative luminance (sRGB linearisation, Rec. 709 weights)
    c = rgb(hex_colour) / 255.0
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2])


def contrast(a: str, b: str) -> float:
    la, lb = sorted((relative_luminance(a), relative_luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def blend(hex_colour: str, alpha: float, under: str = "#FFFFFF") -> str:
    c = rgb(hex_colour) * alpha + rgb(under) * (1 - alpha)
    return "#" + "".join(f"{int(round(v)):02X}" for v in c)


def test_palette_is_okabe_ito_and_separates_in_greyscale():
    # Okabe & Ito (2008), "Color Universal Design", as listed by Wong (2011), Nature Methods 8:441
    okabe_ito = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    for role in ("route", "grown", "passed", "target", "unreachable", "start"):
        assert PALETTE[role] in okabe_ito, role
    # WCAG 2.1 success criterion 1.4.11: graphics need 3:1 against what is next to them
    assert contrast(PALETTE["route"], PALETTE["paper"]) >= 3.0
    assert contrast(PALETTE["obstacle"], PALETTE["paper"]) >= 3.0
    assert contrast(PALETTE["obstacle"], blend(PALETTE["grown"], 0.5)) >= 3.0
    assert contrast(PALETTE["target"], PALETTE["paper"]) >= 3.0
    # Common practice, no source: area fills should differ in luminance by at least 0.08 so
    # they stay apart when printed in grey.
    fills = [PALETTE["obstacle"], PALETTE["passed"], blend(PALETTE["grown"], 0.5),
             PALETTE["outside"], PALETTE["paper"]]
    lum = sorted(relative_luminance(f) for f in fills)
    assert min(np.diff(lum)) >= 0.08, lum


def test_scene_without_route_and_awkward_ids_still_gives_valid_svg():
    scene, _, _ = scene_and_route()
    odd = Obstacle(id='jig <"A"> & co', polygon=((500, 400), (560, 400), (560, 460)))
    scene = Scene(**{**scene.__dict__, "obstacles": scene.obstacles + (odd,)})
    svg = render_svg(scene)
    root = ET.fromstring(svg)
    text = " ".join(t.text or "" for t in root.iter(f"{SVG_NS}text"))
    assert 'jig <"A"> & co' in text
    assert "Not planned" in text
    assert svg_to_png(svg)[:8] == b"\x89PNG\r\n\x1a\n"


# -- sidestep show, end to end -----------------------------------------------------------------

def sidestep(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "planner.cli", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


@pytest.fixture
def scene_copy(tmp_path: Path) -> Path:
    src = REPO / "planner" / "demo" / "router-blocked-pocket.yaml"
    dst = tmp_path / "pocket job.yaml"
    shutil.copyfile(src, dst)
    return dst


def test_show_writes_svg_beside_the_scene_and_says_where(scene_copy: Path):
    run = sidestep("show", str(scene_copy), "--config", str(REPO / "config"), cwd=REPO)
    assert run.returncode == 0, run.stderr
    picture = scene_copy.parent / "pocket_job.svg"
    assert str(picture) in run.stdout
    assert "unreachable pocket-centre" in run.stdout
    assert "Dry-run every new or changed route" in run.stdout  # the safety cautions
    root = ET.parse(picture).getroot()
    assert root.tag == f"{SVG_NS}svg"
    text = " ".join(t.text or "" for t in root.iter(f"{SVG_NS}text"))
    assert "pocket job.yaml" in text


def test_show_writes_png_when_asked(scene_copy: Path, tmp_path: Path):
    out = tmp_path / "pic.png"
    run = sidestep("show", str(scene_copy), "-o", str(out), "--config", str(REPO / "config"),
                   cwd=REPO)
    assert run.returncode == 0, run.stderr
    img = Image.open(out)
    assert img.format == "PNG" and img.width > 800


def test_show_refuses_other_names_and_bad_scenes_and_writes_nothing(scene_copy: Path,
                                                                   tmp_path: Path):
    before = sorted(p.name for p in tmp_path.iterdir())
    run = sidestep("show", str(scene_copy), "-o", str(tmp_path / "pic.txt"), cwd=REPO)
    assert run.returncode == 2 and "must be named .svg or .png" in run.stderr
    bad = tmp_path / "broken.yaml"
    bad.write_text("scene: 1\ntravel: {x: [0, 100]}\n")
    run = sidestep("show", str(bad), "--config", str(REPO / "config"), cwd=REPO)
    assert run.returncode == 2
    assert "Traceback" not in run.stderr and "broken.yaml" in run.stderr
    after = sorted(p.name for p in tmp_path.iterdir())
    assert after == sorted(before + ["broken.yaml"])


def test_crowded_scene_leaves_small_ids_out_and_says_so():
    scene, _, _ = scene_and_route()
    many = tuple(Obstacle(id=f"chip-{i}", polygon=((x, 500), (x + 1, 500), (x + 1, 501)))
                 for i, x in enumerate(np.linspace(5, 995, 400)))
    scene = Scene(**{**scene.__dict__, "obstacles": scene.obstacles + many})
    root = ET.fromstring(render_svg(scene))
    text = " ".join(t.text or "" for t in root.iter(f"{SVG_NS}text"))
    assert "clamp" in text and "post" in text  # the big ones keep their ids
    assert "of the smallest obstacles are drawn without their ids" in text
    assert len(root.findall(f".//{SVG_NS}path[@id]")) >= 400  # every obstacle is still drawn
