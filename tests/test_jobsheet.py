"""The job sheet adapter: one self-contained HTML page that a real browser renders.

The browser check uses headless Chromium from Debian's packages (the CI script installs it):
it opens the page from a local file with networking features off and takes a screenshot, which
must not be blank and must show the route's colour.
"""

from __future__ import annotations

import html.parser
import io
import shutil
import subprocess
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import shapely
import yaml
from PIL import Image

from adapters import AdapterError, installed_adapters
from adapters.jobsheet import JobSheetAdapter
from planner.config import load_settings
from planner.jobs import run_job
from planner.model import Leg, Route, Unreachable
from planner.render import PALETTE
from planner.safety import CAUTIONS

REPO = Path(__file__).resolve().parent.parent
SCENE = REPO / "planner" / "demo" / "router-blocked-pocket.yaml"


class Tags(html.parser.HTMLParser):
    """Every start tag with its attributes, and the text."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def parse(page: str) -> Tags:
    p = Tags()
    p.feed(page)
    return p


@pytest.fixture(scope="module")
def planned(tmp_path_factory) -> tuple[Path, str]:
    """The blocked-pocket demo planned with the shipped config (the job sheet is on by default)."""
    out = tmp_path_factory.mktemp("sheet")
    settings = load_settings(REPO / "config")
    outcome = run_job(SCENE, out, settings)
    assert outcome.exit_code == 3, outcome.message
    sheet = out / "router-blocked-pocket.html"
    return sheet, sheet.read_text(encoding="utf-8")


def test_job_sheet_is_registered_and_on_by_default():
    assert "jobsheet" in installed_adapters()
    config = yaml.safe_load((REPO / "config" / "planner.yaml").read_text())
    assert "jobsheet" in config["adapters"]
    assert JobSheetAdapter.suffix == ".html"


def test_job_sheet_is_self_contained_and_has_everything(planned):
    _, page = planned
    tags = parse(page)
    names = [t for t, _ in tags.tags]
    assert "script" not in names and "link" not in names and "img" not in names
    assert "iframe" not in names and "object" not in names
    for _, attrs in tags.tags:  # nothing to fetch: no src, no external href
        assert "src" not in attrs
        assert not str(attrs.get("href", "")).startswith(("http:", "https:", "//", "file:"))
    assert "@import" not in page and "url(http" not in page
    assert "svg" in names  # the picture, inline
    text = " ".join(tags.text)
    route = yaml.safe_load((planned[0].parent / "router-blocked-pocket.route.yaml").read_text())
    assert route["scene_sha256"] in text and route["config_sha256"] in text
    for caution in CAUTIONS:
        assert caution in text
    # the legs table: one row per leg, from / to / length
    rows = [a for t, a in tags.tags if t == "tr"]
    assert len(rows) >= len(route["legs"]) + 2
    for leg in route["legs"]:
        assert f"{leg['length']:.1f} mm" in text
    for item in route["unreachable"]:
        assert item["id"] in text and item["reason"] in text


def test_time_column_appears_once_legs_have_times():
    legs = (Leg("start", "t1", ((0, 0), (100, 0)), 100.0, {"time": 2.5}),
            Leg("t1", "finish", ((100, 0), (0, 0)), 100.0, {"time": 75.0}))
    route = Route("x.yaml", "0" * 64, "1" * 64, "mm", legs, ())
    page = JobSheetAdapter().write(route, {})
    assert "<th>time</th>" in page and "2.5 s" in page and "1 min 15.0 s" in page
    untimed = Route("x.yaml", "0" * 64, "1" * 64, "mm",
                    tuple(Leg(g.from_id, g.to_id, g.points, g.length) for g in legs), ())
    assert "<th>time</th>" not in JobSheetAdapter().write(untimed, {})


def test_bad_settings_are_one_clear_error():
    route = Route("x.yaml", "0" * 64, "1" * 64, "mm", (), (Unreachable("t1", "why"),))
    with pytest.raises(AdapterError, match="unknown setting 'pictures'") as info:
        JobSheetAdapter().write(route, {"pictures": True})
    assert info.value.path == "adapter_settings.jobsheet.pictures"
    with pytest.raises(AdapterError, match="true or false"):
        JobSheetAdapter().check({"picture": "yes"})
    page = JobSheetAdapter().write(route, {"picture": False}, SimpleNamespace(scene=None))
    assert "<svg" not in page and "why" in page


def chromium() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(chromium() is None, reason="chromium is not installed (.ci/run installs it)")
def test_job_sheet_renders_in_headless_chromium(planned, tmp_path: Path):
    sheet, _ = planned
    shot = tmp_path / "shot.png"
    profile = tmp_path / "profile"
    profile.mkdir()
    run = subprocess.run(
        [chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
         "--no-first-run", "--disable-background-networking", "--disable-component-update",
         "--disable-sync", f"--user-data-dir={profile}", "--window-size=1400,1600",
         f"--screenshot={shot}", sheet.resolve().as_uri()],
        capture_output=True, text=True, timeout=120,
    )
    assert shot.exists(), run.stderr[-2000:]
    img = np.asarray(Image.open(io.BytesIO(shot.read_bytes())).convert("RGB"), dtype=int)
    # not blank: a good share of the page is not white and it has many colours
    not_white = (img < 245).any(axis=2).mean()
    assert not_white > 0.05, not_white
    assert len(np.unique(img.reshape(-1, 3), axis=0)) > 50
    # the route's colour is on the page (the picture rendered, not just the text)
    route = np.array([int(PALETTE["route"][i:i + 2], 16) for i in (1, 3, 5)])
    near = (np.abs(img - route).max(axis=2) <= 30).sum()
    assert near > 200, near


def test_a_changing_scene_draws_only_the_zones_that_hold_on_every_leg(tmp_path):
    """The magazines demo swings each empty magazine away (`until:`): the one picture must not
    show a no-go zone around it as if it stood there for the whole job."""
    from adapters.jobsheet import _zones_to_draw
    from planner.plan import plan_scene
    from planner.scene import load_scene

    settings = load_settings(REPO / "config")
    scene = load_scene(REPO / "planner" / "demo" / "pick-place-magazines.yaml", settings)
    result = plan_scene(scene, settings.in_units(scene.units))
    zone, label = _zones_to_draw(result)
    assert "every leg" in label
    gone = [o for o in scene.obstacles if o.until]
    assert gone
    clear = 0
    for o in gone:
        shape = shapely.Polygon(o.polygon) if o.polygon else shapely.Point(
            o.circle.center).buffer(o.circle.radius)
        inside = shapely.point_on_surface(shape)
        # shapely as the reference: the first leg's zone (magazine still there) covers the
        # magazine's own inside; the every-leg zone does not, where nothing that stays is
        # within the head's reach plus the margin of it.
        assert shapely.intersects(result.free.blocked, inside)
        staying = [p for p in scene.obstacles if not p.until and not p.after]
        reach = max(np.hypot(*np.asarray(scene.head.footprint, dtype=float).T)) \
            + scene.head.margin
        near = any(shapely.distance(shapely.Polygon(p.polygon) if p.polygon else shapely.Point(
            p.circle.center).buffer(p.circle.radius), inside) <= reach for p in staying)
        if not near:
            clear += 1
            assert not shapely.intersects(zone, inside)
    assert clear > 0  # at least one magazine stands clear of everything that stays
    out = tmp_path / "out"
    out.mkdir()
    outcome = run_job(REPO / "planner" / "demo" / "pick-place-magazines.yaml", out, settings)
    assert outcome.exit_code in (0, 3), outcome.message
    page = (out / "pick-place-magazines.html").read_text(encoding="utf-8")
    assert "no-go zone on every leg" in page
