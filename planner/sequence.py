"""Target order: the cheapest visiting order over a cost matrix, start and finish fixed.

A nearest-neighbour tour is improved by 2-opt (reverse a stretch) and Or-opt (move a stretch of
one to three targets, either way round) until neither gains, then by an iterated local search:
a seeded segment swap ("double bridge" for an open path) followed by the same local search, kept
when it is cheaper. The work is a fixed number of kicks, so the same matrix gives the same order
on every machine; a wall-clock budget only caps pathological sizes. Targets pinned `first` or
`last` and `after:` precedence constraints are kept by every move.

Costs may be asymmetric. `scene_order` builds the matrix from a road map (one single-source
search per point) and leaves out the targets the start cannot reach.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .model import Scene, Target
from .roadmap import EdgeCost, NoPath, Roadmap

__all__ = [
    "Precedence",
    "precedence_of",
    "shortest_order",
    "order_cost",
    "OrderReport",
    "leg_cost_matrix",
    "scene_order",
]

_FIRST, _NORMAL, _LAST = 0, 1, 2
_SEED = 20240611  # fixed: the same matrix always gets the same order
_BATCH = 16  # marked nodes looked at together by the local search
_NEIGHBOURS = 10  # candidate new edges per node: to its cheapest few others


@dataclass(frozen=True)
class Precedence:
    """Ordering constraints over target indices 0..n-1.

    `level[k]` is 0 for a target pinned first, 2 for one pinned last, 1 otherwise: levels never
    decrease along the tour. `before` holds pairs (a, b): target a is visited before target b.
    """

    level: tuple[int, ...]
    before: tuple[tuple[int, int], ...] = ()

    @staticmethod
    def none(n: int) -> Precedence:
        return Precedence(level=(_NORMAL,) * n)

    def restricted(self, keep: Sequence[int]) -> Precedence:
        """The constraints among the targets `keep` (renumbered 0..len(keep)-1 in that order)."""
        index = {old: new for new, old in enumerate(keep)}
        return Precedence(
            level=tuple(self.level[k] for k in keep),
            before=tuple((index[a], index[b]) for a, b in self.before if a in index and b in index),
        )

    def satisfied_by(self, order: Sequence[int]) -> bool:
        pos = {t: i for i, t in enumerate(order)}
        levels = [self.level[t] for t in order]
        if any(x > y for x, y in zip(levels, levels[1:], strict=False)):
            return False
        return all(pos[a] < pos[b] for a, b in self.before if a in pos and b in pos)


def precedence_of(targets: Sequence[Target]) -> Precedence:
    """The scene's pins and `after:` constraints as a Precedence (the scene loader has already
    refused unknown names, cycles and contradictions; unknown names are ignored here)."""
    index = {t.id: k for k, t in enumerate(targets)}
    level = tuple(_FIRST if t.first else _LAST if t.last else _NORMAL for t in targets)
    before = tuple(
        (index[t.after], k)
        for k, t in enumerate(targets)
        if t.after is not None and t.after in index and index[t.after] != k
    )
    return Precedence(level=level, before=before)


def order_cost(cost: np.ndarray, order: Sequence[int], has_finish: bool) -> float:
    """Total cost of visiting targets `order` (0-based) from node 0, ending at node n+1 if any.

    `cost` is indexed by node: 0 = start, 1..n = targets, n+1 = finish (when `has_finish`).
    """
    nodes = [0, *(t + 1 for t in order)]
    if has_finish:
        nodes.append(cost.shape[0] - 1)
    c = np.asarray(cost, dtype=float)
    return float(sum(c[a, b] for a, b in zip(nodes, nodes[1:], strict=False)))


def shortest_order(
    cost: np.ndarray,
    *,
    has_finish: bool,
    precedence: Precedence | None = None,
    kicks: int | None = None,
    time_budget_s: float = 30.0,
) -> list[int]:
    """The visiting order (target indices 0..n-1) of a cheap tour from start to finish.

    `cost` is a square matrix indexed by node: 0 = start, 1..n = targets, n+1 = finish when
    `has_finish` (else the tour may end at any target). Entries must be >= 0; inf marks a
    missing connection and is avoided where the constraints allow. `kicks` is the number of
    iterated-local-search rounds (default grows with n); `time_budget_s` caps the whole search.
    """
    c = np.asarray(cost, dtype=float)
    n = c.shape[0] - 1 - (1 if has_finish else 0)
    if c.ndim != 2 or c.shape[0] != c.shape[1] or n < 0:
        raise ValueError("cost must be a square matrix over start, targets (and finish)")
    prec = precedence if precedence is not None else Precedence.none(n)
    if len(prec.level) != n:
        raise ValueError("precedence must cover every target")
    if n <= 1:
        return list(range(n))

    full = np.zeros((n + 2, n + 2))  # node n+1 is the finish or a free end (cost 0 to reach)
    full[: n + 1, : n + 1] = c[: n + 1, : n + 1]
    if has_finish:
        full[: n + 1, n + 1] = c[: n + 1, n + 1]
    finite = full[np.isfinite(full)]
    big = (float(finite.max()) if finite.size else 1.0) * (n + 2) * 4.0 + 1.0
    full = np.where(np.isfinite(full), full, big)
    np.fill_diagonal(full, 0.0)

    search = _TourSearch(full, prec, deadline=time.monotonic() + time_budget_s)
    tour = search.nearest_neighbour()
    tour = search.improve(tour)
    rounds = kicks if kicks is not None else min(400, 50 + 4 * n)
    tour = search.iterate(tour, rounds)
    return [int(v) - 1 for v in tour[1:-1]]


@dataclass(frozen=True)
class OrderReport:
    """The chosen visiting order of a scene and what it saves against the file order.

    `order` indexes scene.targets: the reachable targets in tour order, then the ones the start
    cannot reach (in file order, so that the planner reports them). Costs are by the road map
    (`cost` says length or time) over the reachable targets, start to finish.
    """

    order: tuple[int, ...]
    cost: str
    given_cost: float
    planned_cost: float

    @property
    def saving(self) -> float:
        return self.given_cost - self.planned_cost


def leg_cost_matrix(
    roadmap: Roadmap, points: np.ndarray, sources: int, cost: EdgeCost | None = None
) -> np.ndarray:
    """Least costs between `points` by the road map: row i from point i (i < `sources`), one
    single-source search per row; inf where there is no path (or point i is blocked)."""
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    out = np.full((len(pts), len(pts)), np.inf)
    for i in range(min(sources, len(pts))):
        try:
            out[i] = roadmap.distances_from((float(pts[i, 0]), float(pts[i, 1])), pts, cost)
        except NoPath:
            continue
        out[i, i] = 0.0
    return out


def scene_order(
    scene: Scene,
    roadmap: Roadmap,
    *,
    cost: EdgeCost | None = None,
    cost_name: str = "length",
    time_budget_s: float = 30.0,
) -> OrderReport:
    """The cheapest order for `sequence: shortest` over the road map's leg costs (all pairs).

    Targets the start cannot reach are left out of the tour (and their constraints with them);
    an unreachable finish leaves the tour's end free.
    """
    n = len(scene.targets)
    pts = [scene.start, *(t.at for t in scene.targets)]
    if scene.finish is not None:
        pts.append(scene.finish)
    matrix = leg_cost_matrix(roadmap, np.array(pts, dtype=float), n + 1, cost)
    reach = [k for k in range(n) if np.isfinite(matrix[0, k + 1])]
    has_finish = scene.finish is not None and bool(np.isfinite(matrix[0, n + 1]))
    nodes = [0, *(k + 1 for k in reach)] + ([n + 1] if has_finish else [])
    sub = matrix[np.ix_(nodes, nodes)]
    if has_finish:  # from the finish nothing is needed; keep the matrix finite there
        sub[-1, :] = 0.0
    prec = precedence_of(scene.targets).restricted(reach)
    tour = shortest_order(sub, has_finish=has_finish, precedence=prec,
                          time_budget_s=time_budget_s)
    planned = order_cost(sub, tour, has_finish)
    given_cost = order_cost(sub, list(range(len(reach))), has_finish)  # the file order
    unreachable = [k for k in range(n) if k not in set(reach)]
    return OrderReport(
        order=tuple([reach[t] for t in tour] + unreachable),
        cost=cost_name,
        given_cost=float(given_cost),
        planned_cost=float(planned),
    )


class _TourSearch:
    """Local search over paths of node indices 0 .. N-1 with fixed ends 0 and N-1."""

    def __init__(self, cost: np.ndarray, prec: Precedence, deadline: float) -> None:
        self.c = cost
        self.size = cost.shape[0]
        self.level = np.array([-1, *prec.level, 3])
        self.pair_a = np.array([a + 1 for a, _ in prec.before], dtype=int)
        self.pair_b = np.array([b + 1 for _, b in prec.before], dtype=int)
        self.constrained = bool(len(self.pair_a)) or bool(np.any(self.level[1:-1] != _NORMAL))
        self.deadline = deadline
        scale = float(np.mean(cost)) if cost.size else 1.0
        self.eps = 1e-9 * max(scale, 1e-12)
        k = min(_NEIGHBOURS, self.size - 1)
        both = cost + cost.T
        np.fill_diagonal(both, np.inf)
        near = np.argpartition(both, k - 1, axis=1)[:, :k] if k < self.size - 1 else \
            np.argsort(both, axis=1)[:, :k]
        self.nb = near  # each node's k cheapest other nodes (either way round)

    # -- feasibility and cost --------------------------------------------------------------
    def feasible(self, tour: np.ndarray) -> bool:
        if not self.constrained:
            return True
        if np.any(np.diff(self.level[tour]) < 0):
            return False
        if len(self.pair_a):
            pos = np.empty(self.size, dtype=int)
            pos[tour] = np.arange(self.size)
            return bool(np.all(pos[self.pair_a] < pos[self.pair_b]))
        return True

    def cost_of(self, tour: np.ndarray) -> float:
        return float(self.c[tour[:-1], tour[1:]].sum())

    # -- construction ------------------------------------------------------------------------
    def nearest_neighbour(self) -> np.ndarray:
        """From the start, always the cheapest next target whose constraints allow it now."""
        n = self.size - 2
        waiting = np.zeros(self.size, dtype=int)  # unvisited predecessors per node
        succ: list[list[int]] = [[] for _ in range(self.size)]
        for a, b in zip(self.pair_a, self.pair_b, strict=True):
            waiting[b] += 1
            succ[a].append(b)
        visited = np.zeros(self.size, dtype=bool)
        visited[0] = visited[-1] = True
        tour = [0]
        current = 0
        for _ in range(n):
            open_ = ~visited & (waiting == 0)
            if not open_.any():
                raise ValueError("the ordering constraints contradict each other (a cycle)")
            lowest = self.level[open_].min()
            allowed = np.flatnonzero(open_ & (self.level == lowest))
            nxt = int(allowed[np.argmin(self.c[current, allowed])])
            tour.append(nxt)
            visited[nxt] = True
            for b in succ[nxt]:
                waiting[b] -= 1
            current = nxt
        tour.append(self.size - 1)
        return np.array(tour, dtype=int)

    # -- local search ------------------------------------------------------------------------
    def _moves(self, tour: np.ndarray, dirty: np.ndarray | None):
        """Improving 2-opt and Or-opt moves as arrays (delta, kind, a, b, reversed).

        kind 0 is 2-opt (a, b: the removed edges, positions a+1..b reversed); kind L = 1..3 is
        Or-opt (positions a..a+L-1 moved into edge b). Only moves that create an edge to one of
        a node's nearest neighbours are looked at; with `dirty` (edge indices), only those that
        also remove one of these edges.
        """
        c, p, size, nb = self.c, tour, self.size, self.nb
        m = size - 1  # edges 0..m-1; edge k joins positions k and k+1
        pos = np.empty(size, dtype=int)
        pos[p] = np.arange(size)
        f = c[p[:-1], p[1:]]
        g = np.concatenate(([0.0], np.cumsum(c[p[1:], p[:-1]] - f)))  # reversed minus forward
        rows = np.arange(m) if dirty is None else dirty
        found = []

        # 2-opt between edge r and edge j creates (p_r, p_j) and (p_r+1, p_j+1)
        part = np.concatenate((pos[nb[p[rows]]], pos[nb[p[rows + 1]]] - 1), axis=1)
        lo = np.minimum(rows[:, None], part)
        hi = np.maximum(rows[:, None], part)
        ok = (hi - lo >= 2) & (lo >= 0) & (hi <= m - 1)
        lo, hi = np.where(ok, lo, 0), np.where(ok, hi, 2)
        d = c[p[lo], p[hi]] + c[p[lo + 1], p[hi + 1]] - f[lo] - f[hi] + g[hi] - g[lo + 1]
        found.append((np.where(ok, d, np.inf), 0, lo, hi, 0))

        # Or-opt: stretch s..e into edge q creates (p_q, p_s), (p_e, p_q+1), or reversed
        for length in (1, 2, 3):
            last = size - 1 - length  # the last possible stretch start
            if last < 1:
                continue
            if dirty is None:
                s_a = np.arange(1, last + 1)
            else:
                s_a = np.union1d(dirty + 1, dirty - length + 1)
                s_a = s_a[(s_a >= 1) & (s_a <= last)]
            e_a = s_a + length - 1
            blocks = []
            if s_a.size:
                q_a = np.concatenate((pos[nb[p[s_a]]], pos[nb[p[s_a]]] - 1,
                                      pos[nb[p[e_a]]], pos[nb[p[e_a]]] - 1), axis=1)
                blocks.append((np.broadcast_to(s_a[:, None], q_a.shape), q_a))
            if dirty is not None and dirty.size:
                near_q, near_q1 = pos[nb[p[dirty]]], pos[nb[p[dirty + 1]]]
                s_b = np.concatenate((near_q, near_q - length + 1, near_q1,
                                      near_q1 - length + 1), axis=1)
                blocks.append((s_b, np.broadcast_to(dirty[:, None], s_b.shape)))
            for s, q in blocks:
                ok = (s >= 1) & (s <= last) & (q >= 0) & (q <= m - 1)
                ok &= (q < s - 1) | (q > s + length - 1)
                s, q = np.where(ok, s, 1), np.where(ok, q, 0)
                e = s + length - 1
                removal = f[s - 1] + f[e] - c[p[s - 1], p[e + 1]]
                base = f[q] + removal
                fwd = c[p[q], p[s]] + c[p[e], p[q + 1]] - base
                found.append((np.where(ok, fwd, np.inf), length, s, q, 0))
                if length > 1:
                    rev = c[p[q], p[e]] + c[p[s], p[q + 1]] - base + g[e] - g[s]
                    found.append((np.where(ok, rev, np.inf), length, s, q, 1))

        if not self.constrained:
            best = None
            for delta, kind, a, b, rev in found:
                if delta.size == 0:
                    continue
                k = np.unravel_index(np.argmin(delta), delta.shape)
                if delta[k] < -self.eps and (best is None or delta[k] < best[0][0]):
                    best = (np.array([delta[k]]), np.array([kind]), np.array([a[k]]),
                            np.array([b[k]]), np.array([rev]))
            return best
        parts = []
        for delta, kind, a, b, rev in found:
            hit = delta < -self.eps
            if np.any(hit):
                count = int(hit.sum())
                parts.append((delta[hit], np.full(count, kind), a[hit], b[hit],
                              np.full(count, rev)))
        if not parts:
            return None
        return tuple(np.concatenate(col) for col in zip(*parts, strict=True))

    @staticmethod
    def _apply(tour: np.ndarray, kind: int, a: int, b: int, rev: int):
        """The tour after a move, and the nodes at the ends of the edges it created."""
        if kind == 0:  # 2-opt
            new = tour.copy()
            new[a + 1: b + 1] = tour[a + 1: b + 1][::-1]
            return new, tour[[a, a + 1, b, b + 1]]
        s, e, q = a, a + kind - 1, b
        seg = tour[s: e + 1][::-1] if rev else tour[s: e + 1]
        ends = tour[[s - 1, s, e, e + 1, q, q + 1]]
        if q < s - 1:
            return np.concatenate((tour[: q + 1], seg, tour[q + 1: s], tour[e + 1:])), ends
        return np.concatenate((tour[:s], tour[e + 1: q + 1], seg, tour[q + 1:])), ends

    def improve(self, tour: np.ndarray, dirty_nodes: np.ndarray | None = None) -> np.ndarray:
        """2-opt and Or-opt until no feasible move gains ("don't look" marks on nodes).

        Marked nodes are looked at a batch at a time, in tour order: the best feasible move that
        removes an edge at one of them is made and the nodes of the edges it creates are marked;
        a batch without one is unmarked. Default: every node marked.
        """
        marked = np.ones(self.size, dtype=bool) if dirty_nodes is None else np.zeros(
            self.size, dtype=bool)
        if dirty_nodes is not None:
            marked[dirty_nodes] = True
        while time.monotonic() < self.deadline:
            at = np.flatnonzero(marked[tour])
            if at.size == 0:
                return tour
            take = at[:_BATCH]
            dirty = np.unique(np.concatenate((take - 1, take)))
            dirty = dirty[(dirty >= 0) & (dirty < self.size - 1)]
            moves = self._moves(tour, dirty)
            made = False
            if moves is not None:
                delta, kind, a, b, rev = moves
                for k in np.lexsort((np.arange(delta.size), delta)):
                    new, ends = self._apply(tour, int(kind[k]), int(a[k]), int(b[k]),
                                            int(rev[k]))
                    if self.feasible(new):
                        tour, made = new, True
                        marked[ends] = True
                        break
            if not made:
                marked[tour[take]] = False
        return tour

    def iterate(self, tour: np.ndarray, rounds: int) -> np.ndarray:
        """Iterated local search: seeded segment swaps, each followed by a local `improve`, kept
        when cheaper; a full `improve` of the best tour at the end."""
        size = self.size
        if size < 5 or rounds <= 0:
            return tour
        rng = np.random.default_rng(_SEED)
        best, best_cost = tour, self.cost_of(tour)
        longest = max(1, min(50, (size - 2) // 3))
        for _ in range(rounds):
            if time.monotonic() >= self.deadline:
                break
            for _try in range(20):
                if rng.random() < 0.5:  # anywhere: large rearrangements
                    a, b, c = (int(v) for v in np.sort(rng.choice(size - 1, 3, replace=False) + 1))
                else:  # two short neighbouring stretches
                    a = int(rng.integers(1, size - 2))
                    b = a + int(rng.integers(1, longest + 1))
                    c = b + int(rng.integers(1, longest + 1))
                    if c > size - 1:
                        continue
                kicked = np.concatenate((best[:a], best[b:c], best[a:b], best[c:]))
                if self.feasible(kicked):
                    break
            else:
                continue
            ends = best[[a - 1, a, b - 1, b, c - 1, c]]
            candidate = self.improve(kicked, ends)
            cand_cost = self.cost_of(candidate)
            if cand_cost < best_cost - self.eps:
                best, best_cost = candidate, cand_cost
        return self.improve(best)
