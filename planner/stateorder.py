"""Target order for `sequence: shortest` when the scene changes as the job runs.

A leg's cost depends on the state it is planned in (which obstacles are present, what the head
carries), and that depends on the order. Candidate orders are evaluated exactly: each leg in
its own state, leg costs cached by (from, to, state key), unreachable targets skipped without
changing the state. The candidates are the given order (when it keeps the constraints) and the
tours that sequence.py's heuristics find on cost matrices built from the best order so far: a
row per point, for the state the head would be in when leaving that point (lower bounds from a
kept state with fewer obstacles, where there is one: the matrix only guides the search). A new tour
is kept only when it reaches more targets or is shorter, so the result is never worse than the
given order and, like the search itself, the same on every run.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .budget import check_time
from .incremental import StateSpaces
from .model import FINISH, START, Point, Scene
from .roadmap import EdgeCost, NoPath
from .sequence import precedence_of, shortest_order
from .states import State, StateTracker

__all__ = ["LegCosts", "order_with_states", "evaluate_order"]

_ROUNDS = 3  # matrix rebuilds after the first; each is kept only if it improves the tour


class LegCosts:
    """Leg costs by (from, to, state key): exact ones for evaluating orders, one path search each;
    and rows of lower bounds for the search's matrices, one search per (from, state)."""

    def __init__(self, scene: Scene, spaces: StateSpaces, cost: EdgeCost | None = None) -> None:
        self.scene = scene
        self.spaces = spaces
        self.cost = cost
        self.ids = [t.id for t in scene.targets] + ([FINISH] if scene.finish is not None else [])
        pts = [t.at for t in scene.targets] + ([scene.finish] if scene.finish is not None else [])
        self.points = np.asarray(pts, dtype=float).reshape(-1, 2)
        self.point_of: dict[str, Point] = {START: scene.start}
        self.point_of.update(zip(self.ids, map(tuple, self.points), strict=True))
        self.index = {i: k for k, i in enumerate(self.ids)}
        self._rows: dict[tuple, np.ndarray] = {}
        self._legs: dict[tuple, float] = {}

    def row(self, from_id: str, state: State) -> np.ndarray:
        """Lower bounds on the costs (lengths, or by `cost`) from `from_id` to every target (and
        finish) in `state` (exact where no kept state has fewer obstacles); inf: no path."""
        key = (from_id, state.key)
        row = self._rows.get(key)
        if row is None:
            check_time("ordering the targets")
            try:
                row = self.spaces.bound_distances(state, self.point_of[from_id], self.points,
                                                  self.cost)
            except NoPath:  # the point itself is blocked in this state
                row = np.full(len(self.points), np.inf)
            self._rows[key] = row
        return row

    def leg(self, from_id: str, to_id: str, state: State) -> float:
        """The exact cost of one leg in its state (inf: unreachable)."""
        key = (from_id, to_id, state.key)
        d = self._legs.get(key)
        if d is None:
            check_time("ordering the targets")
            try:
                pts, length = self.spaces.path(state, self.point_of[from_id],
                                               self.point_of[to_id], self.cost)
                d = length if self.cost is None else _polyline_cost(pts, self.cost)
            except NoPath:
                d = np.inf
            self._legs[key] = d
        return float(d)


def _polyline_cost(pts: np.ndarray, cost: EdgeCost) -> float:
    moves = np.diff(np.asarray(pts, dtype=float), axis=0)
    moves = moves[np.any(moves != 0, axis=1)]
    return float(np.sum(cost(moves))) if len(moves) else 0.0


def evaluate_order(costs: LegCosts, order: Sequence[int]) -> tuple[int, float, list[State]]:
    """(targets not reached, total cost (length, or by the costs' `cost`), the state of each
    point when the head leaves it) for visiting the targets `order` (indices) and then finish,
    each leg in its own state."""
    scene = costs.scene
    tracker = StateTracker(scene)
    at = START
    missed, total = 0, 0.0
    leaving = {START: tracker.state}
    stops = [scene.targets[k].id for k in order] + ([FINISH] if scene.finish is not None else [])
    for stop in stops:
        d = costs.leg(at, stop, tracker.state)
        if not np.isfinite(d):
            missed += 1
            probe = tracker.copy()
            probe.reach(stop)
            leaving[stop] = probe.state  # as if reached, for the next matrix
            continue
        total += d
        tracker.reach(stop)
        at = stop
        leaving[stop] = tracker.state
    return missed, total, [leaving[START]] + [leaving[scene.targets[k].id] for k in order]


def _matrix(costs: LegCosts, order: Sequence[int], leaving: list[State]) -> np.ndarray:
    """Node-indexed costs (0 start, 1..n targets, n+1 finish) with each row measured in the
    state the head has when it leaves that node in `order`."""
    scene = costs.scene
    n = len(scene.targets)
    size = n + 1 + (1 if scene.finish is not None else 0)
    m = np.full((size, size), np.inf)
    state_of = {START: leaving[0]}
    for k, st in zip(order, leaving[1:], strict=True):
        state_of[scene.targets[k].id] = st
    for node in range(n + 1):
        from_id = START if node == 0 else scene.targets[node - 1].id
        m[node, 1:] = costs.row(from_id, state_of[from_id])
    np.fill_diagonal(m, 0.0)
    return m


def order_with_states(scene: Scene, spaces: StateSpaces, *, cost: EdgeCost | None = None,
                      rounds: int = _ROUNDS) -> list[int]:
    """The visiting order (target indices) for `sequence: shortest` with state-dependent legs.

    Constraints (`after`, `first`, `last`) always hold; with a given order that keeps them the
    result is never longer (nor reaches fewer targets).
    """
    n = len(scene.targets)
    if n <= 1:
        return list(range(n))
    costs = LegCosts(scene, spaces, cost)
    prec = precedence_of(scene.targets)
    has_finish = scene.finish is not None

    given = list(range(n))
    if prec.satisfied_by(given):
        best = given
    else:  # the first tour: lengths as in the state the job begins with
        st0 = StateTracker(scene).state
        best = shortest_order(_matrix(costs, given, [st0] * (n + 1)), has_finish=has_finish,
                              precedence=prec)
    missed, length, leaving = evaluate_order(costs, best)
    for _ in range(rounds):
        check_time("ordering the targets")
        tour = shortest_order(_matrix(costs, best, leaving), has_finish=has_finish,
                              precedence=prec)
        if tour == best or not prec.satisfied_by(tour):
            break
        t_missed, t_length, t_leaving = evaluate_order(costs, tour)
        if (t_missed, t_length) < (missed, length - 1e-9 * max(length, 1.0)):
            best, missed, length, leaving = tour, t_missed, t_length, t_leaving
        else:
            break
    return best
