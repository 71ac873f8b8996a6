"""The planning pipeline: scene -> free space -> road map -> legs -> rounded, verified route.

Free spaces and road maps are cached by the hash of what they depend on, so a replan whose
obstacles, head, margin and travel did not change only runs the leg queries again.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from .config import Settings, effective_config_sha256
from .cspace import FreeSpace, build_free_space, free_space_key
from .explain import Explainer
from .model import FINISH, START, Leg, Point, Route, Scene, Travel, Unreachable
from .roadmap import NoPath, Roadmap, build_roadmap
from .routefile import round_to_resolution
from .verify import verify_or_raise

__all__ = ["PlanCache", "PlanResult", "plan_scene", "verify_tolerance"]


@dataclass(frozen=True, eq=False)
class PlanResult:
    """A verified route with what it was planned from (for adapters, pictures, explanations)."""

    route: Route
    scene: Scene
    settings: Settings  # in the scene's units
    free: FreeSpace
    roadmap: Roadmap


class PlanCache:
    """Least-recently-used cache of (FreeSpace, Roadmap) by free-space key."""

    def __init__(self, size: int = 8) -> None:
        self.size = size
        self._items: OrderedDict[str, tuple[FreeSpace, Roadmap]] = OrderedDict()
        self.hits = 0
        self.misses = 0

    def get(self, key: str) -> tuple[FreeSpace, Roadmap] | None:
        item = self._items.get(key)
        if item is not None:
            self._items.move_to_end(key)
            self.hits += 1
        else:
            self.misses += 1
        return item

    def put(self, key: str, value: tuple[FreeSpace, Roadmap]) -> None:
        self._items[key] = value
        self._items.move_to_end(key)
        while len(self._items) > self.size:
            self._items.popitem(last=False)


def verify_tolerance(settings: Settings) -> float:
    """Floating-point slack of the safety check: a thousandth of the output resolution."""
    return settings.resolution * 1e-3


def free_space_and_roadmap(
    scene: Scene, settings: Settings, cache: PlanCache | None = None
) -> tuple[FreeSpace, Roadmap]:
    """The scene's free space and road map, from the cache when nothing they depend on changed."""
    key = free_space_key(scene, settings)
    if cache is not None:
        hit = cache.get(key)
        if hit is not None:
            return hit
    free = build_free_space(scene, settings)
    roadmap = build_roadmap(free)
    if cache is not None:
        cache.put(key, (free, roadmap))
    return free, roadmap


def plan_scene(
    scene: Scene, settings: Settings, *, cache: PlanCache | None = None
) -> PlanResult:
    """Plan every leg of the scene, round to the output resolution and verify independently.

    Raises UnsafeRouteError (a planner bug) when the rounded route fails the safety check.
    """
    settings = settings.in_units(scene.units)
    free, roadmap = free_space_and_roadmap(scene, settings, cache)
    legs: list[Leg] = []
    unreachable: list[Unreachable] = []

    order = list(scene.targets)
    current_id, current = START, scene.start
    stops: list[tuple[str, Point]] = [(t.id, t.at) for t in order]
    if scene.finish is not None:
        stops.append((FINISH, scene.finish))
    explainer = Explainer(scene, settings)
    for stop_id, point in stops:
        try:
            pts, _ = roadmap.path(current, point)
        except NoPath as exc:
            unreachable.append(explainer.unreachable(exc, current_id, stop_id, free))
            continue
        legs.append(_rounded_leg(current_id, stop_id, pts, settings, scene.travel))
        current_id, current = stop_id, point

    route = Route(
        scene_file=scene.file,
        scene_sha256=scene.sha256,
        config_sha256=effective_config_sha256(settings, scene.head),
        units=scene.units,
        legs=tuple(legs),
        unreachable=tuple(unreachable),
    )
    verify_or_raise(
        route, scene, tolerance=verify_tolerance(settings), resolution=settings.resolution
    )
    return PlanResult(route=route, scene=scene, settings=settings, free=free, roadmap=roadmap)


def _rounded_leg(
    from_id: str, to_id: str, pts: np.ndarray, settings: Settings, travel: Travel
) -> Leg:
    """A leg whose points are rounded to the output resolution; its length is the rounded one's.

    Rounded points are kept inside the travel limits: a limit that is not on the output grid is
    replaced by the nearest grid value inside it.
    """
    res = settings.resolution
    rounded = round_to_resolution(np.asarray(pts, dtype=float), res)
    inner = np.array([
        [np.ceil(travel.xmin / res - 1e-9), np.ceil(travel.ymin / res - 1e-9)],
        [np.floor(travel.xmax / res + 1e-9), np.floor(travel.ymax / res + 1e-9)],
    ]) * res
    lo, hi = round_to_resolution(inner, res)
    rounded = np.clip(rounded, lo, hi)
    keep = np.ones(len(rounded), dtype=bool)
    keep[1:] = np.any(rounded[1:] != rounded[:-1], axis=1)
    rounded = rounded[keep]
    if len(rounded) == 1:
        rounded = np.vstack([rounded, rounded])
    length = float(np.sum(np.hypot(*np.diff(rounded, axis=0).T)))
    points = tuple((float(x), float(y)) for x, y in rounded)
    return Leg(from_id=from_id, to_id=to_id, points=points, length=length)

