"""The planning pipeline: scene -> free space -> road map -> legs -> rounded, verified route.

Free spaces and road maps are cached by the hash of what they depend on, so a replan whose
obstacles, head, margin and travel did not change only runs the leg queries again.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass, replace

import numpy as np

from .budget import check_time, within_time_budget
from .config import Settings, effective_config_sha256
from .cspace import FreeSpace, build_free_space, free_space_key
from .errors import PlanningError, SceneError
from .explain import Explainer
from .incremental import StateSpaces
from .model import FINISH, START, Leg, Point, Route, Scene, Travel, Unreachable
from .motion import AxisModel, AxisSpecError, TimeCost, effective_axes, effective_cost, path_time
from .roadmap import EdgeCost, NoPath, Roadmap, build_roadmap
from .routefile import grid_inside, round_to_resolution
from .sequence import OrderReport, scene_order
from .stateorder import order_with_states
from .states import State, StateTracker, has_states, leg_extra
from .verify import verify_or_raise

__all__ = ["PlanCache", "PlanResult", "plan_scene", "verify_tolerance"]


@dataclass(frozen=True, eq=False)
class PlanResult:
    """A verified route with what it was planned from (for adapters, pictures, explanations)."""

    route: Route
    scene: Scene
    settings: Settings  # in the scene's units
    free: FreeSpace  # of the first leg's state when the scene changes as the job runs
    roadmap: Roadmap
    leg_states: tuple[State, ...] = ()  # per leg, when the scene changes as the job runs
    spaces: StateSpaces | None = None  # spaces.get(leg_states[i]): the space leg i was planned in
    order: OrderReport | None = None  # `sequence: shortest` in a scene without state changes


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
    check_time("building the free space")
    roadmap = build_roadmap(free)
    check_time("building the road map")
    if cache is not None:
        cache.put(key, (free, roadmap))
    return free, roadmap


@within_time_budget
def plan_scene(
    scene: Scene, settings: Settings, *, cache: PlanCache | None = None
) -> PlanResult:
    """Plan every leg of the scene, round to the output resolution and verify independently.

    Raises UnsafeRouteError (a planner bug) when the rounded route fails the safety check.
    """
    settings = settings.in_units(scene.units)
    model, edge_cost, cost_name = _time_model(scene, settings)
    # a scene whose obstacles or footprint change as the job runs plans each leg in its own
    # state (the state after the leg's first point); only reached targets change the state
    tracker = StateTracker(scene) if has_states(scene) else None
    spaces = StateSpaces(scene, settings) if tracker is not None else None
    if spaces is not None:
        first = spaces.get(tracker.state)
        free, roadmap = first.free, first.roadmap
    else:
        free, roadmap = free_space_and_roadmap(scene, settings, cache)
    legs: list[Leg] = []
    unreachable: list[Unreachable] = []
    leg_states: list[State] = []

    order = list(scene.targets)
    report = None
    if spaces is not None and scene.sequence == "shortest":
        order = [scene.targets[k] for k in order_with_states(scene, spaces, cost=edge_cost)]
    elif scene.sequence == "shortest":  # leg costs by the road map, one search per point
        report = scene_order(scene, roadmap, cost=edge_cost, cost_name=cost_name,
                             time_budget_s=settings.limits.time_budget_s / 4)
        order = [scene.targets[k] for k in report.order]
    current_id, current = START, scene.start
    stops: list[tuple[str, Point]] = [(t.id, t.at) for t in order]
    if scene.finish is not None:
        stops.append((FINISH, scene.finish))
    explainer = Explainer(scene, settings)
    for stop_id, point in stops:
        check_time(f"planning the leg to {stop_id}")
        try:
            if spaces is not None:  # in the leg's own state
                pts, _ = spaces.path(tracker.state, current, point, edge_cost)
            else:
                pts, _ = roadmap.path(current, point, edge_cost)
        except NoPath as exc:
            leg_free, built_from = free, {}
            if spaces is not None:
                space = spaces.get(tracker.state)
                leg_free = space.free
                built_from = {"footprint": space.footprint, "obstacles": space.obstacles}
            unreachable.append(
                explainer.unreachable(exc, current_id, stop_id, leg_free, **built_from))
            continue
        leg = _rounded_leg(current_id, stop_id, pts, settings, scene.travel)
        if tracker is not None:
            state = tracker.state
            leg = replace(leg, extra={**leg.extra, **leg_extra(
                leg_states[-1] if leg_states else None, state)})
            leg_states.append(state)
            tracker.reach(stop_id)
        legs.append(leg)
        current_id, current = stop_id, point

    route = Route(
        scene_file=scene.file,
        scene_sha256=scene.sha256,
        config_sha256=effective_config_sha256(settings, scene.head),
        units=scene.units,
        legs=tuple(legs),
        unreachable=tuple(unreachable),
    )
    route = _with_times(route, model)
    verify_or_raise(
        route, scene, tolerance=verify_tolerance(settings), resolution=settings.resolution
    )
    return PlanResult(route=route, scene=scene, settings=settings, free=free, roadmap=roadmap,
                      leg_states=tuple(leg_states), spaces=spaces, order=report)


def _time_model(scene: Scene, settings: Settings
                ) -> tuple[AxisModel | None, EdgeCost | None, str]:
    """The job's axis model (None: no time estimates), the road map's edge cost for
    `cost: time` (None: length) and the cost's name; SceneError when time has no model."""
    try:
        model = effective_axes(settings, scene)
    except AxisSpecError as exc:
        raise SceneError(scene.file, None, None, exc.path,
                         f"{exc.message}: the config has no axis model for this to change",
                         "give the whole model (x and y, each with speed and acceleration) or "
                         "add an axes section to config/planner.yaml") from None
    cost_name = effective_cost(settings, scene)
    if cost_name == "time" and model is None:
        raise SceneError(scene.file, None, None, "cost",
                         "cost: time needs the machine's axis model, and there is none",
                         "add an axes section to config/planner.yaml (docs/motion.md) or use "
                         "cost: length")
    return model, (TimeCost(model) if cost_name == "time" else None), cost_name


def _with_times(route: Route, model: AxisModel | None) -> Route:
    """Each leg's estimated traverse time (`time`, seconds, to the millisecond) and the job's
    total, by the axis model over the rounded points; the route unchanged without a model."""
    if model is None:
        return route
    legs = tuple(
        replace(leg, extra={**leg.extra, "time": round(path_time(np.asarray(leg.points), model),
                                                       3)})
        for leg in route.legs
    )
    total = round(sum(leg.extra["time"] for leg in legs), 3)
    return replace(route, legs=legs, extra={**route.extra, "time": total})


def _rounded_leg(
    from_id: str, to_id: str, pts: np.ndarray, settings: Settings, travel: Travel
) -> Leg:
    """A leg whose points are rounded to the output resolution; its length is the rounded one's.

    Rounded points are kept inside the travel limits: a limit that is not on the output grid is
    replaced by the nearest grid value inside it.
    """
    res = settings.resolution
    rounded = round_to_resolution(np.asarray(pts, dtype=float), res)
    try:  # the grid values inside travel, found on the very grid the file is written on
        lo, hi = grid_inside([travel.xmin, travel.ymin], [travel.xmax, travel.ymax], res)
    except ValueError as exc:
        raise PlanningError(f"travel is narrower than the output resolution: {exc} (fix: "
                            "widen travel, or set a finer resolution)") from None
    rounded = np.clip(rounded, lo, hi)
    keep = np.ones(len(rounded), dtype=bool)
    keep[1:] = np.any(rounded[1:] != rounded[:-1], axis=1)
    rounded = rounded[keep]
    if len(rounded) == 1:
        rounded = np.vstack([rounded, rounded])
    length = float(np.sum(np.hypot(*np.diff(rounded, axis=0).T)))
    points = tuple((float(x), float(y)) for x, y in rounded)
    return Leg(from_id=from_id, to_id=to_id, points=points, length=length)

