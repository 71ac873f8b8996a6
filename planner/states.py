"""The state of every leg of a job: which obstacles are present and what outline the head carries.

The contract ("Scenes that change as the job runs"): the state of a leg is the state after
visiting its first point. An obstacle with `after: X` is present on every leg that starts at X
or later, one with `until: X` on every leg that ends at X or earlier; a `carry` on target X
holds from the leg leaving X on until a later target sets another outline or `none`. Only
reached targets change the state: a target the planner could not reach never takes effect.

This module is the planner's side only; the safety check (verify.py) recomputes states on its
own from the route and the scene.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import shapely

from .model import FINISH, START, Obstacle, Ring, Scene

__all__ = [
    "State",
    "StateTracker",
    "has_states",
    "initial_state",
    "states_along",
    "changes",
    "present_obstacles",
    "footprint_of",
    "leg_extra",
]


@dataclass(frozen=True)
class State:
    """What one leg sees: the ids of the obstacles present (scene order) and the carried outline.

    `carry` is the outline in the head's frame (tool point at (0, 0)), None when the head
    carries nothing; `carry_from` is the target where it was picked up. Two states with the
    same `key` plan alike.
    """

    present: tuple[str, ...]
    carry: Ring | None = None
    carry_from: str | None = None

    @property
    def key(self) -> tuple[tuple[str, ...], Ring | None]:
        return self.present, self.carry


def has_states(scene: Scene) -> bool:
    """True when any obstacle has `after`/`until` or any target a `carry`: the state can change."""
    return any(o.after is not None or o.until is not None for o in scene.obstacles) or any(
        t.carry is not None for t in scene.targets
    )


class StateTracker:
    """Follows a job point by point: `state` is the state of the leg leaving the current point.

    Call `reach(id)` for each point the head actually arrives at, in travel order (targets the
    planner could not reach are simply never passed in, so they change nothing).
    """

    def __init__(self, scene: Scene) -> None:
        self._obstacles = scene.obstacles
        self._carry_of = {t.id: t.carry for t in scene.targets}
        self._reached: set[str] = {START}
        self._carry: Ring | None = None
        self._carry_from: str | None = None
        self._state: State | None = None

    def copy(self) -> StateTracker:
        other = StateTracker.__new__(StateTracker)
        other._obstacles = self._obstacles
        other._carry_of = self._carry_of
        other._reached = set(self._reached)
        other._carry = self._carry
        other._carry_from = self._carry_from
        other._state = self._state
        return other

    def reached(self, point_id: str) -> bool:
        return point_id in self._reached

    def reach(self, point_id: str) -> None:
        """The head arrived at `point_id` (a target id or finish): later legs leave from it."""
        if point_id == FINISH:
            return  # nothing can name finish; no leg leaves it
        self._reached.add(point_id)
        carry = self._carry_of.get(point_id)
        if carry == "none":
            self._carry, self._carry_from = None, None
        elif carry is not None:
            self._carry, self._carry_from = carry, point_id
        self._state = None

    @property
    def state(self) -> State:
        if self._state is None:
            reached = self._reached
            present = tuple(
                o.id for o in self._obstacles
                if (o.after is None or o.after in reached)
                and not (o.until is not None and o.until in reached)
            )
            self._state = State(present, self._carry, self._carry_from)
        return self._state


def initial_state(scene: Scene) -> State:
    """The state of the first leg (the one leaving start)."""
    return StateTracker(scene).state


def states_along(scene: Scene, visited: Iterable[str]) -> list[State]:
    """The state of each leg of a route that leaves start and reaches `visited` in this order.

    One state per leg: the i-th is that of the leg arriving at visited[i].
    """
    tracker = StateTracker(scene)
    out = []
    for point_id in visited:
        out.append(tracker.state)
        tracker.reach(point_id)
    return out


def changes(previous: State | None, current: State) -> tuple[list[str], list[str]]:
    """Ids that appeared and that went between two consecutive legs' states (scene order).

    The first leg (previous None) reports nothing: its state is where the job begins.
    """
    if previous is None:
        return [], []
    before, now = set(previous.present), set(current.present)
    return ([i for i in current.present if i not in before],
            [i for i in previous.present if i not in now])


def present_obstacles(scene: Scene, state: State) -> tuple[Obstacle, ...]:
    """The scene's obstacles present in `state`, in scene order."""
    ids = set(state.present)
    return tuple(o for o in scene.obstacles if o.id in ids)


def footprint_of(scene: Scene, state: State) -> Ring | shapely.Geometry:
    """The footprint of a leg: the head's own, united with the carried outline when there is one.

    The head's footprint is returned as given (the same ring the static planner uses) when the
    head carries nothing.
    """
    if state.carry is None:
        return scene.head.footprint
    head = shapely.Polygon(scene.head.footprint)
    return shapely.normalize(shapely.union(head, shapely.Polygon(state.carry)))


def leg_extra(previous: State | None, current: State) -> dict:
    """The route file's state fields of a leg: appeared and gone (only when not empty), and the
    carried outline while there is one."""
    appeared, gone = changes(previous, current)
    extra: dict = {}
    if appeared:
        extra["appeared"] = appeared
    if gone:
        extra["gone"] = gone
    if current.carry is not None:
        extra["carry"] = [list(p) for p in current.carry]
    return extra
