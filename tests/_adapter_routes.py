"""Routes built directly (no planner) for the adapter tests, and a hypothesis strategy of them."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from hypothesis import strategies as st

from planner.config import Settings
from planner.model import FINISH, START, Leg, Route, Unreachable
from planner.routefile import round_to_resolution

HEX = "0123456789abcdef" * 4


def job_for(units: str, resolution: float) -> SimpleNamespace:
    """A stand-in for the planning result: adapters read only `settings` from it."""
    return SimpleNamespace(settings=Settings(units=units, resolution=resolution))


def make_route(stops: list[tuple[str, list[tuple[float, float]]]], units: str = "mm",
               resolution: float = 0.001, unreachable: tuple[str, ...] = (),
               scene_file: str = "job-0412.yaml") -> Route:
    """Legs from (to_id, points) pairs; each leg starts where the previous ended (or at start).

    The first entry's points include the start point. Points are snapped to the output grid as
    the planner does (the route file's round_to_resolution).
    """
    def snap(p):
        return tuple(float(v) for v in round_to_resolution(np.asarray(p, float), resolution))

    legs = []
    prev_id, prev_pt = START, None
    for to_id, pts in stops:
        pts = [snap(p) for p in pts]
        if prev_pt is not None:
            pts = [prev_pt, *pts]
        arr = np.asarray(pts)
        length = float(np.sum(np.hypot(*np.diff(arr, axis=0).T)))
        legs.append(Leg(from_id=prev_id, to_id=to_id, points=tuple(pts), length=length))
        prev_id, prev_pt = to_id, pts[-1]
    return Route(
        scene_file=scene_file, scene_sha256=HEX, config_sha256=HEX[::-1], units=units,
        legs=tuple(legs),
        unreachable=tuple(Unreachable(id=u, reason="blocked") for u in unreachable),
    )


def sample_route(units: str = "mm", resolution: float = 0.001) -> Route:
    return make_route([
        ("t1", [(20, 20), (96.2, 63.0), (500, 200)]),
        ("hole-7", [(700, 250.5), (1500, 900)]),
        (FINISH, [(20, 20)]),
    ], units=units, resolution=resolution, unreachable=("t3",))


def polyline(route: Route) -> np.ndarray:
    """Every point of the travel, each junction once (k, 2)."""
    pts = [route.legs[0].points[0]] if route.legs else []
    for leg in route.legs:
        pts.extend(leg.points[1:])
    return np.asarray(pts, dtype=float).reshape(-1, 2)


def distinct(points: np.ndarray) -> np.ndarray:
    """Consecutive repeats removed (a zero-length move is not a move)."""
    if len(points) == 0:
        return points
    keep = np.ones(len(points), dtype=bool)
    keep[1:] = np.any(points[1:] != points[:-1], axis=1)
    return points[keep]


RESOLUTIONS = {"mm": [0.001, 0.01, 0.0005], "inch": [0.001 / 25.4, 0.0001]}
IDS = st.sampled_from(["t1", "hole-7", "pick_2", "place-3", "A12", "exit-9"])


@st.composite
def routes(draw) -> tuple[Route, float]:
    """(route, resolution): 0 to 6 legs of 2 to 6 points, coordinates on the resolution grid."""
    units = draw(st.sampled_from(["mm", "inch"]))
    resolution = draw(st.sampled_from(RESOLUTIONS[units]))
    span = 3000.0 if units == "mm" else 120.0
    coord = st.floats(min_value=-0.1 * span, max_value=span, allow_nan=False)
    n_legs = draw(st.integers(min_value=0, max_value=6))
    stops = []
    for i in range(n_legs):
        n = draw(st.integers(min_value=1, max_value=5)) + (1 if i == 0 else 0)
        pts = draw(st.lists(st.tuples(coord, coord), min_size=n, max_size=n))
        to_id = FINISH if i == n_legs - 1 and draw(st.booleans()) else f"{draw(IDS)}-{i}"
        stops.append((to_id, pts))
    return make_route(stops, units=units, resolution=resolution), resolution
