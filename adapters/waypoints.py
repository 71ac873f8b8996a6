"""A route as one flat list of waypoints: each point once, tagged with its leg and what it is."""

from __future__ import annotations

from dataclasses import dataclass

from planner.model import FINISH, START, Route

from .base import AdapterError

__all__ = ["Waypoint", "route_waypoints", "check_continuous", "KINDS"]

KINDS = ("start", "via", "target", "finish")


@dataclass(frozen=True)
class Waypoint:
    """One point of the travel: `leg` is the leg arriving at it (0 for the start)."""

    seq: int  # 1, 2, ... in travel order
    leg: int
    kind: str  # start | via | target | finish
    target: str  # the target's id for kind target, else ""
    x: float
    y: float


def check_continuous(route: Route) -> None:
    """Each leg must begin where the previous one ended; a gap would be an unplanned move."""
    for i in range(1, len(route.legs)):
        before, after = route.legs[i - 1], route.legs[i]
        if before.to_id != after.from_id or tuple(before.points[-1]) != tuple(after.points[0]):
            raise AdapterError(
                f"leg {i + 1} ({after.from_id} -> {after.to_id}) does not start where leg {i} "
                f"ended ({before.to_id} at {before.points[-1]}); the route is not one continuous "
                "path, so no adapter file is written (replan the scene)"
            )
    for i, leg in enumerate(route.legs, 1):
        if len(leg.points) < 2:
            raise AdapterError(
                f"leg {i} ({leg.from_id} -> {leg.to_id}) has fewer than 2 points; replan the scene"
            )


def _end_kind(to_id: str) -> tuple[str, str]:
    if to_id == FINISH:
        return "finish", ""
    return "target", to_id


def route_waypoints(route: Route) -> list[Waypoint]:
    """Every waypoint in travel order; the point shared by two legs appears once.

    The first point of the first leg is the start (or, for a route that begins elsewhere, the
    `from` of its first leg), the last point of each leg is its target (or the finish), and the
    points between are vias.
    """
    check_continuous(route)
    out: list[Waypoint] = []
    for number, leg in enumerate(route.legs, 1):
        if number == 1:
            x, y = leg.points[0]
            kind, target = ("start", "") if leg.from_id == START else ("target", leg.from_id)
            out.append(Waypoint(1, 0, kind, target, float(x), float(y)))
        for x, y in leg.points[1:-1]:
            out.append(Waypoint(len(out) + 1, number, "via", "", float(x), float(y)))
        x, y = leg.points[-1]
        kind, target = _end_kind(leg.to_id)
        out.append(Waypoint(len(out) + 1, number, kind, target, float(x), float(y)))
    return out
