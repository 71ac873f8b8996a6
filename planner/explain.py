"""Why a target cannot be reached, with the numbers an operator can act on.

Two causes, two analyses:

- The point lies inside a grown obstacle. Each obstacle's true clearance to the head placed at
  the point is measured on the original shapes (shapely distances, circles exact); the ones below
  the margin are named, with how far the point must move to reach free space from which the way
  is open, and the margin below which the point itself would be clear.
- The point is cut off: both ends are free but in different pieces of free space. Around the
  smaller piece, each pair of obstacles (or an obstacle and a travel limit) whose grown shapes
  meet is a contact; a contact closes the way when carving out just the place where the two
  grown shapes overlap joins the two pieces. For each such pair the true gap between the
  original shapes is given against what the head needs there (its width across the gap plus
  twice the margin), with the margin that would open it (from the two obstacles grown by the
  footprint alone) and how much narrower the head would have to be. When no single contact
  opens the way (nested walls), a search from piece to piece finds the contacts that must all
  open.

Margins that are said to make a point reachable are checked by building the free space again
with that margin; claims that were not checked are not made.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import shapely
import shapely.ops

from .config import Settings
from .cspace import FreeSpace, build_free_space, c_obstacle_pieces
from .model import FINISH, START, Obstacle, Point, Ring, Scene, Unreachable
from .roadmap import NoPath

__all__ = ["Explainer", "explain_unreachable", "head_clearances", "Contact"]

# How many pieces of free space the search for gaps that must open together may look into
# before it gives up (each look measures every contact around one piece). Common practice, no
# source: enough for walls nested a few deep.
_MAX_PIECES_SEARCHED = 8


def _footprint_geometry(footprint: Ring | shapely.Geometry) -> shapely.Geometry:
    if isinstance(footprint, shapely.Geometry):
        return footprint
    return shapely.Polygon(np.asarray(footprint, dtype=float))


def _obstacle_geometry(o: Obstacle) -> shapely.Geometry:
    """Polygon obstacles as they are; circles as their centre (distances subtract the radius)."""
    if o.polygon is not None:
        return shapely.Polygon(o.polygon)
    return shapely.Point(o.circle.center)


def _radius(o: Obstacle) -> float:
    return 0.0 if o.circle is None else float(o.circle.radius)


def head_clearances(point: Point, footprint: Ring | shapely.Geometry,
                    obstacles: Sequence[Obstacle]) -> np.ndarray:
    """True distance between the head's footprint placed at `point` and each obstacle.

    Zero or negative where they overlap (negative only for circles: how deep the centre is
    inside). Exact for polygons and circles: no approximation of either.
    """
    fp = shapely.transform(_footprint_geometry(footprint), lambda c: c + np.asarray(point))
    geoms = np.array([_obstacle_geometry(o) for o in obstacles], dtype=object)
    radii = np.array([_radius(o) for o in obstacles], dtype=float)
    if len(geoms) == 0:
        return np.zeros(0)
    d = shapely.distance(fp, geoms) - radii
    # a circle's centre inside the footprint: distance 0 - r, already negative
    return d


def _floor(v: float, step: float) -> float:
    return math.floor(v / step + 1e-9) * step


def _ceil(v: float, step: float) -> float:
    return math.ceil(v / step - 1e-9) * step


@dataclass(frozen=True)
class Contact:
    """Two things whose grown shapes meet: obstacle ids, or an obstacle and a travel limit."""

    first: str
    second: str  # an obstacle id, or "travel x-min" ... "travel y-max"
    gap: float  # true gap between the original shapes (tool point to limit for a limit)
    need: float  # what the head needs there: width across the gap + 2 margins (reach + margin)
    head_width: float  # the head's width across the gap (its reach towards it, for a limit)
    across: tuple[float, float] | None  # unit direction across the gap, None when they touch
    margin_to_open: float | None  # largest margin that opens this contact; None: none does
    opens_alone: bool  # carving out this contact alone joins the two pieces of free space
    points: tuple[Point, Point] | None = None  # the ends of the gap on the two true shapes
    allowance: float = 0.0  # what the planner adds on top of `need` (its pad, round corners)

    @property
    def narrower_by(self) -> float:
        """How much narrower the head (or wider the gap) must be for the planner to pass."""
        return max(0.0, self.shortfall + self.allowance)

    @property
    def shortfall(self) -> float:
        return self.need - self.gap

    def as_dict(self) -> dict:
        return {
            "between": [self.first, self.second],
            "gap": self.gap,
            "need": self.need,
            "head_width": self.head_width,
            "across": None if self.across is None else list(self.across),
            "margin_to_open": self.margin_to_open,
            "narrower_by": self.narrower_by,
            "opens_alone": self.opens_alone,
            "points": None if self.points is None else [list(p) for p in self.points],
        }


@dataclass
class Explainer:
    """Explains unreachable legs of one scene; keeps what it computed for the next target."""

    scene: Scene
    settings: Settings  # in the scene's units
    _cache: dict = field(default_factory=dict, repr=False)

    # -- public ---------------------------------------------------------------------------------
    def unreachable(
        self,
        exc: NoPath,
        from_id: str,
        to_id: str,
        free: FreeSpace,
        *,
        footprint: Ring | shapely.Geometry | None = None,
        obstacles: Sequence[Obstacle] | None = None,
    ) -> Unreachable:
        """The Unreachable entry for a failed leg `from_id` -> `to_id` (a roadmap NoPath).

        `footprint` and `obstacles` are what `free` was built from, when they differ from the
        scene's head and obstacles (a carried part, obstacles that appear or go).
        """
        fp = self.scene.head.footprint if footprint is None else footprint
        grown_obstacles = self._grown_obstacles(free, obstacles)
        a = tuple(map(float, exc.a))
        b = a if exc.b is None else tuple(map(float, exc.b))
        head = f"no collision-free path from {from_id}"
        what = "finish" if to_id == FINISH else "target"
        if exc.kind == "outside-travel":
            text, extra = self._outside(a if _outside_end_is_a(exc, self.scene) else b, what)
        elif exc.kind == "start-blocked":
            where = "the start" if from_id == START else from_id
            text, extra = self._inside(a, "start-inside-obstacle", where, free, fp,
                                       grown_obstacles, from_id, other=b)
        elif exc.kind == "end-blocked":
            text, extra = self._inside(b, "inside-obstacle", f"the {what}", free, fp,
                                       grown_obstacles, from_id, other=a)
        else:
            text, extra = self._cut_off(a, b, what, free, fp, grown_obstacles)
        extra = {"kind": extra.pop("kind"), **extra}
        return Unreachable(id=to_id, reason=f"{head}: {text}", extra=extra)

    # -- the point is inside --------------------------------------------------------------------
    def _inside(self, p: Point, kind: str, where: str, free: FreeSpace, footprint,
                obstacles: Sequence[Obstacle], from_id: str, other: Point):
        u = self.scene.units
        m = self.scene.head.margin
        pad = free.clearance - m
        clear = head_clearances(p, footprint, obstacles)
        cspace_ids = set(free.blocking(p))
        rows = []
        for o, c in zip(obstacles, clear, strict=True):
            if c < m or o.id in cspace_ids:
                rows.append((o, float(c)))
        rows.sort(key=lambda r: r[1])
        names = [o.id for o, _ in rows] or ["the grown obstacles"]
        label = "obstacle" if len(names) == 1 else "obstacles"
        text = f"{where} lies inside {label} {', '.join(names)} grown by the footprint and margin"

        step = self._step()
        facts = []
        for o, c in rows:
            if c <= 0:
                facts.append(f"the head would overlap {o.id} there")
            elif c < m:
                facts.append(f"the head would come within {_num(c, u)} of {o.id} there "
                             f"(margin {_num(m, u)})")
            else:
                facts.append(f"the head would keep {_num(c, u)} from {o.id}, inside the "
                             f"planner's allowance of {_num(pad, u)} for rounding")
        for o, _ in rows:
            if o.after is not None and o.after == from_id:
                facts.append(f"{o.id} appears at {from_id} (after: {from_id}), so move the exit "
                             "point clear of it")

        extra: dict = {
            "kind": kind,
            "point": [p[0], p[1]],
            "blocking": [{"id": o.id, "clearance": max(0.0, c), "overlaps": bool(c <= 0)}
                         for o, c in rows],
            "margin": m,
        }

        # how far to the nearest free point connected to the other end of the leg
        fixes = []
        # (for the far end of a leg: connected to its start; for the start: anywhere)
        move, nearest, joined = self._nearest_free(p, other, free,
                                                   connected=kind == "inside-obstacle")
        if move is not None:
            move_r = _ceil(move, step)
            extra["move"] = move_r
            extra["nearest_free"] = [nearest[0], nearest[1]]
            fixes.append(f"move {where} at least {_num(move_r, u, step)}, to about "
                         f"({_coord(nearest[0])}, {_coord(nearest[1])})"
                         + ("" if joined else " (from there the way is still closed)"))
        else:
            fixes.append("no free point within the travel limits connects to the other end "
                         "of the leg")

        # the margin below which the point itself is clear
        positive = [c for _, c in rows]
        extra["margin_to_clear"] = None
        if positive and min(positive) > 0:
            limit = min(positive) - pad - self.settings.arc_tolerance
            if limit > 0:
                m_try = _floor(limit, step)
                extra["margin_to_clear"] = m_try
                if self._reachable_with_margin(m_try, p, other, footprint, obstacles):
                    extra["reachable_with_margin"] = m_try
                    fixes.append(f"or lower the margin to {_num(m_try, u, step)} "
                                 f"(now {_num(m, u)}): then it can be reached")
                else:
                    fixes.append(f"a margin of {_num(m_try, u, step)} would clear this point "
                                 "but not open the way to it")
        elif rows:
            fixes.append("no smaller margin helps while the head overlaps it")
        text += (": " + "; ".join(facts)) if facts else ""
        joined = fixes[0] + "".join((", " if f.startswith("or ") else "; ") + f
                                    for f in fixes[1:])
        return text + ". " + _capital(joined) + ".", extra

    def _nearest_free(self, p: Point, other: Point, free: FreeSpace, connected: bool):
        """Distance to, and the point of, the nearest free point: in the piece of free space
        holding `other` when `connected` (and `other` is free), else anywhere; and whether that
        point shares a piece with `other`."""
        comps = free.components()
        if len(comps) == 0:
            return None, None, False
        k = free.component_of(other)
        target = comps[k] if connected and k is not None else free.region
        pt = shapely.Point(p)
        near = shapely.ops.nearest_points(target, pt)[0]
        joined = k is not None and free.component_of((near.x, near.y)) == k
        return float(target.distance(pt)), (float(near.x), float(near.y)), joined

    # -- outside the travel limits --------------------------------------------------------------
    def _outside(self, p: Point, what: str):
        t = self.scene.travel
        u = self.scene.units
        over = []
        if p[0] < t.xmin:
            over.append(f"{_num(t.xmin - p[0], u)} below x-min {_coord(t.xmin)}")
        if p[0] > t.xmax:
            over.append(f"{_num(p[0] - t.xmax, u)} beyond x-max {_coord(t.xmax)}")
        if p[1] < t.ymin:
            over.append(f"{_num(t.ymin - p[1], u)} below y-min {_coord(t.ymin)}")
        if p[1] > t.ymax:
            over.append(f"{_num(p[1] - t.ymax, u)} beyond y-max {_coord(t.ymax)}")
        text = f"{what} lies outside the travel limits" + (f" ({', '.join(over)})" if over else "")
        return text, {"kind": "outside-travel", "point": [p[0], p[1]]}

    # -- cut off --------------------------------------------------------------------------------
    def _cut_off(self, a: Point, b: Point, what: str, free: FreeSpace, footprint,
                 obstacles: Sequence[Obstacle]):
        u = self.scene.units
        m = self.scene.head.margin
        step = self._step()
        text = (f"the grown obstacles close the way (the {what} lies in a separate region of "
                "free space)")
        extra: dict = {"kind": "cut-off", "margin": m, "pairs": [], "single_gap_opens": False,
                       "gaps_to_open": None}
        comps = free.components()
        ka, kb = free.component_of(a), free.component_of(b)
        if ka is None or kb is None or ka == kb:
            return text + ".", extra
        inner, outer = (ka, kb) if comps[ka].area <= comps[kb].area else (kb, ka)
        wall = self._wall(inner, free, footprint, obstacles)
        order = lambda c: (c.margin_to_open is None, c.shortfall)  # noqa: E731
        alone = sorted((c for c, joined in wall if outer in joined), key=order)
        alone = [replace(c, opens_alone=True) for c in alone]
        chain = alone[:1] if alone else self._chain(inner, outer, wall, free, footprint,
                                                    obstacles)
        used = {(c.first, c.second) for c in alone + chain}
        rest = sorted((c for c, _ in wall if (c.first, c.second) not in used), key=order)
        listed = (alone if alone else chain) + rest
        extra["pairs"] = [c.as_dict() for c in listed]
        extra["single_gap_opens"] = bool(alone)
        extra["gaps_to_open"] = len(chain) if chain else None

        sentences = []
        if alone:
            gaps = [c for c in alone if c.gap > 0][:3] or alone[:1]
            label = "Narrowest gap" if len(gaps) == 1 else "Gaps that would open it"
            sentences.append(f"{label}: " + "; ".join(
                self._describe_contact(c, m, u, step) for c in gaps))
            best = next((c for c in gaps if c.margin_to_open is not None), None)
            if best is not None and self._reachable_with_margin(
                    best.margin_to_open, a, b, footprint, obstacles):
                extra["reachable_with_margin"] = best.margin_to_open
                sentences.append(f"With a margin of {_num(best.margin_to_open, u, step)} "
                                 f"(now {_num(m, u)}) it can be reached")
            rest = [c for c in alone if c not in gaps] + rest
        elif chain:
            sentences.append(f"No single gap opens the way; these {len(chain)} must all open: "
                             + "; ".join(self._describe_contact(c, m, u, step) for c in chain))
            margins = [c.margin_to_open for c in chain]
            if all(v is not None for v in margins) and self._reachable_with_margin(
                    min(margins), a, b, footprint, obstacles):
                extra["reachable_with_margin"] = min(margins)
                sentences.append(f"With a margin of {_num(min(margins), u, step)} "
                                 f"(now {_num(m, u)}) it can be reached")
        else:
            sentences.append("No single gap opens the way")
            gaps = [c for c in rest if c.gap > 0][:3]
            if gaps:
                sentences[-1] += "; the narrowest gaps around it: " + "; ".join(
                    self._describe_contact(c, m, u, step) for c in gaps)
            rest = [c for c in rest if c not in gaps]
        if rest:
            names = ", ".join(_pair_name(c) for c in rest[:4])
            more = f" and {len(rest) - 4} more" if len(rest) > 4 else ""
            sentences.append(f"Also closing it: {names}{more}")
        return text + ". " + ". ".join(sentences) + ".", extra

    def _describe_contact(self, c: Contact, m: float, u: str, step: float) -> str:
        s_short = _num(_ceil(c.narrower_by, step), u, step)
        if c.second.startswith("travel "):
            side = c.second.removeprefix("travel ")
            if c.gap <= 0:
                return f"{c.first} reaches to the {side} travel limit: move it into the table"
            s = (f"{c.first} stands {_num(c.gap, u)} from the {side} travel limit, the head "
                 f"needs {_num(c.need, u)} there ({_num(c.head_width, u)} reach towards it + "
                 f"{_num(m, u)} margin)")
            moves = (f"move {c.first} {s_short} further from the limit or use a head reaching "
                     f"{s_short} less towards it")
        else:
            if c.gap <= 0:
                return f"{c.first} and {c.second} touch"
            s = (f"{c.first} and {c.second} are {_num(c.gap, u)} apart, the head needs "
                 f"{_num(c.need, u)} there ({_num(c.head_width, u)} across + 2 \u00d7 "
                 f"{_num(m, u)} margin)")
            moves = (f"move them {s_short} further apart or use a head {s_short} narrower "
                     "across the gap")
        if c.narrower_by <= 0:
            moves = ""
        if c.margin_to_open is not None:
            opening = _num(c.margin_to_open, u, step)
            return s + f": a margin of {opening} or less opens it" + (f", or {moves}" if moves
                                                                          else "")
        return s + ": no margin opens it" + (f"; {moves}" if moves else "")

    def _chain(self, inner: int, outer: int, wall, free: FreeSpace, footprint,
               obstacles: Sequence[Obstacle]) -> list[Contact]:
        """The fewest contacts that, opened together, lead from `inner` to `outer`: a search
        over pieces of free space, each step through one contact of the piece reached."""
        parent: dict[int, tuple[int, Contact] | None] = {inner: None}
        queue = [inner]
        expanded = 0
        while queue and outer not in parent and expanded < _MAX_PIECES_SEARCHED:
            k = queue.pop(0)
            expanded += 1
            entries = wall if k == inner else self._wall(k, free, footprint, obstacles)
            for contact, joined in sorted(entries, key=lambda e: e[0].shortfall):
                for j in sorted(joined):
                    if j not in parent:
                        parent[j] = (k, contact)
                        queue.append(j)
        if outer not in parent:
            return []
        chain = []
        k = outer
        while parent[k] is not None:
            k, contact = parent[k]
            chain.append(contact)
        return chain[::-1]

    def _wall(self, k: int, free: FreeSpace, footprint, obstacles: Sequence[Obstacle]):
        """Contacts of the grown shapes around piece `k` of free space, each with the pieces
        that carving it out joins to `k` (its own included)."""
        key = ("wall", id(free), k, _fp_key(footprint))
        hit = self._cache.get(key)
        if hit is not None and hit[0] is free:
            return hit[1]
        comps = free.components()
        piece = comps[k]
        tol = self._delta(free)
        by_id = {o.id: o for o in obstacles}
        ptree = self._piece_tree(free)
        near = free.piece_owner[ptree.query(piece, predicate="dwithin", distance=tol)]
        wall_ids = [free.obstacle_ids[i] for i in np.unique(near)
                    if free.obstacle_ids[i] in by_id]
        t = free.travel
        x0, y0, x1, y1 = free.blocked.bounds if not free.blocked.is_empty else (0, 0, 0, 0)
        far = 2 * (max(t.xmax, x1) - min(t.xmin, x0) + max(t.ymax, y1) - min(t.ymin, y0))
        strips = {
            "travel x-min": shapely.box(t.xmin - far, t.ymin - far, t.xmin, t.ymax + far),
            "travel x-max": shapely.box(t.xmax, t.ymin - far, t.xmax + far, t.ymax + far),
            "travel y-min": shapely.box(t.xmin - far, t.ymin - far, t.xmax + far, t.ymin),
            "travel y-max": shapely.box(t.xmin - far, t.ymax, t.xmax + far, t.ymax + far),
        }
        sides = [s for s, g in strips.items() if shapely.dwithin(g, piece, tol)]
        names = wall_ids + sides
        geoms = [free.grown(n) for n in wall_ids] + [strips[s] for s in sides]
        comp_tree = self._component_tree(free)

        entries = []
        if not names:
            self._cache[key] = (free, entries)
            return entries
        geoms = np.array(geoms, dtype=object)
        left, right = shapely.STRtree(geoms).query(geoms, predicate="intersects")
        for i, j in zip(left.tolist(), right.tolist(), strict=True):
            if j <= i:
                continue
            ni, nj = names[i], names[j]
            if ni.startswith("travel ") and nj.startswith("travel "):
                continue  # a corner of the table
            hole = shapely.buffer(shapely.intersection(geoms[i], geoms[j]), tol)
            if len(self._joined(hole, k, comp_tree, tol)) < 2:
                continue  # even before the rest is subtracted it reaches no other piece
            # what else is blocked where the hole is: other obstacles' pieces and the travel
            # limits that are not in this pair
            hits = ptree.query(hole, predicate="intersects")
            keep = [h for h in hits if free.obstacle_ids[free.piece_owner[h]] not in (ni, nj)]
            blockers = list(free.pieces[keep]) + [
                g for s, g in strips.items() if s not in (ni, nj)]
            if blockers:
                hole = shapely.difference(hole, shapely.union_all(blockers))
            joined = self._joined(hole, k, comp_tree, tol)
            if len(joined) < 2:
                continue  # carving it out opens nothing for this piece
            first, second = (nj, ni) if ni.startswith("travel ") else (ni, nj)
            entries.append((self._measure(first, second, by_id, footprint, free, False),
                            joined))
        self._cache[key] = (free, entries)
        return entries

    @staticmethod
    def _joined(hole, k: int, comp_tree, hair: float) -> frozenset[int]:
        """The pieces of free space that adding `hole` joins to piece `k` (k included).

        Each connected part of the hole joins the pieces it overlaps in area; overlap is tested
        on the part shrunk by a quarter of the carving hair, so pieces that the part only
        touches at a point (not a way through) do not count.
        """
        if hole.is_empty:
            return frozenset({k})
        parts = shapely.get_parts(hole)
        cores = shapely.buffer(parts, -hair / 4)
        cores = cores[~shapely.is_empty(cores)]
        part, cand = comp_tree.query(cores)  # bounding boxes first, then the prepared pieces
        comps = comp_tree.geometries
        hit = shapely.intersects(comps[cand], cores[part])
        groups = []
        for q in np.unique(part):
            g = set(cand[(part == q) & hit].tolist())
            if len(g) > 1:
                groups.append(g)
        joined = {k}
        grew = True
        while grew:  # parts that share a piece chain together
            grew = False
            for g in groups:
                if g & joined and not g <= joined:
                    joined |= g
                    grew = True
        return frozenset(joined)

    def _piece_tree(self, free: FreeSpace) -> shapely.STRtree:
        key = ("pieces", id(free))
        tree = self._cache.get(key)
        if tree is None or tree[0] is not free:
            tree = self._cache[key] = (free, shapely.STRtree(free.pieces))
        return tree[1]

    def _component_tree(self, free: FreeSpace) -> shapely.STRtree:
        key = ("components", id(free))
        tree = self._cache.get(key)
        if tree is None or tree[0] is not free:
            comps = free.components()
            shapely.prepare(comps)  # many small holes are tested against a few big pieces
            tree = self._cache[key] = (free, shapely.STRtree(comps))
        return tree[1]

    def _measure(self, first: str, second: str, by_id: dict[str, Obstacle], footprint,
                 free: FreeSpace, opens: bool) -> Contact:
        m = self.scene.head.margin
        pad = free.clearance - m
        arc = self.settings.arc_tolerance
        fp = np.asarray(shapely.get_coordinates(_footprint_geometry(footprint)), dtype=float)
        o1 = by_id[first]
        if second.startswith("travel "):
            gap, reach, across, points = _limit_gap(o1, second.removeprefix("travel "),
                                                    free.travel, fp)
            # the grown shape clears the limit when gap > reach + margin + the planner's pad
            return Contact(first, second, gap, reach + m, reach, across,
                           self._below(gap - reach - pad - arc), opens, points, pad + arc)
        o2 = by_id[second]
        gap, across, points = _gap(o1, o2)
        if across is not None:
            proj = fp @ np.asarray(across)
            width = float(proj.max() - proj.min())
        else:
            width = self._touch_width(fp, o1, o2)
        # exact: the two obstacles grown by the footprint alone, half their distance; the
        # planner's grown shapes part when margin + pad + arc tolerance is below that
        pieces, owner = c_obstacle_pieces([o1, o2], footprint, 0.0, arc)
        c1 = shapely.union_all(pieces[owner == 0])
        c2 = shapely.union_all(pieces[owner == 1])
        half = float(shapely.distance(c1, c2)) / 2
        return Contact(first, second, gap, width + 2 * m, width, across,
                       self._below(half - pad - arc), opens, points, 2 * (pad + arc))

    def _below(self, limit: float) -> float | None:
        """The largest reported margin strictly below `limit`, None when none is positive."""
        step = self._step()
        v = _floor(limit, step)
        if v >= limit:
            v -= step
        return v if v > 0 else None

    @staticmethod
    def _touch_width(fp: np.ndarray, o1: Obstacle, o2: Obstacle) -> float:
        """For obstacles that touch: the head's width along the line joining their centres."""
        c1 = _obstacle_geometry(o1).centroid
        c2 = _obstacle_geometry(o2).centroid
        d = np.array([c2.x - c1.x, c2.y - c1.y])
        n = float(np.hypot(*d))
        if n == 0:
            return float(max(np.ptp(fp[:, 0]), np.ptp(fp[:, 1])))
        proj = fp @ (d / n)
        return float(proj.max() - proj.min())

    # -- helpers --------------------------------------------------------------------------------
    def _grown_obstacles(self, free: FreeSpace, obstacles: Sequence[Obstacle] | None):
        given = self.scene.obstacles if obstacles is None else obstacles
        ids = set(free.obstacle_ids)
        return [o for o in given if o.id in ids]

    def _step(self) -> float:
        """Rounding step of the numbers in explanations: 0.01 mm, or the resolution if coarser."""
        per_unit = 0.01 if self.scene.units == "mm" else 0.001
        return max(per_unit, self.settings.resolution)

    def _delta(self, free: FreeSpace) -> float:
        """The hair by which contacts are widened when carving: the output resolution."""
        return max(self.settings.resolution, free.eps * 10)

    def _reachable_with_margin(self, margin: float, a: Point, b: Point, footprint,
                               obstacles: Sequence[Obstacle]) -> bool:
        """Build the free space again with `margin` and check a and b share a piece of it."""
        if margin is None or margin < 0:
            return False
        key = ("margin", round(margin, 12), _fp_key(footprint),
               tuple(o.id for o in obstacles))
        free = self._cache.get(key)
        if free is None:
            head = replace(self.scene.head, margin=float(margin))
            scene = replace(self.scene, head=head)
            free = build_free_space(scene, self.settings, obstacles=list(obstacles),
                                    footprint=footprint)
            self._cache[key] = free
        ka, kb = free.component_of(a), free.component_of(b)
        return ka is not None and ka == kb


def _outside_end_is_a(exc, scene: Scene) -> bool:
    """Which end of an outside-travel NoPath is outside the travel limits."""
    return not scene.travel.contains(tuple(exc.a))


def _exact_bounds(o: Obstacle) -> tuple[float, float, float, float]:
    """Bounding box of the true shape (circles exact)."""
    if o.polygon is not None:
        a = np.asarray(o.polygon, dtype=float)
        return a[:, 0].min(), a[:, 1].min(), a[:, 0].max(), a[:, 1].max()
    (cx, cy), r = o.circle.center, o.circle.radius
    return cx - r, cy - r, cx + r, cy + r


def _gap(o1: Obstacle, o2: Obstacle):
    """True distance between two obstacles, the unit direction from the first to the second,
    and the two ends of the shortest segment between them (None, None when they touch).

    Circles are measured through their centres (distance to the centre minus the radius), so
    the result is exact for polygons and circles alike.
    """
    g1, g2 = _obstacle_geometry(o1), _obstacle_geometry(o2)
    core = float(shapely.distance(g1, g2))
    gap = core - _radius(o1) - _radius(o2)
    if gap <= 0 or core <= 0:
        return max(0.0, gap), None, None
    p1, p2 = shapely.ops.nearest_points(g1, g2)
    d = np.array([p2.x - p1.x, p2.y - p1.y]) / core
    e1 = np.array([p1.x, p1.y]) + d * _radius(o1)
    e2 = np.array([p2.x, p2.y]) - d * _radius(o2)
    return gap, (float(d[0]), float(d[1])), ((float(e1[0]), float(e1[1])),
                                            (float(e2[0]), float(e2[1])))


def _limit_gap(o: Obstacle, side: str, t, fp: np.ndarray):
    """Gap between an obstacle and one travel limit (as the tool point sees it), the head's
    reach towards the obstacle from the tool point, the direction and the gap's two ends."""
    minx, miny, maxx, maxy = _exact_bounds(o)
    if o.polygon is not None:
        pts = np.asarray(o.polygon, dtype=float)
    else:
        pts = np.asarray([o.circle.center], dtype=float)
    axis = 0 if side.startswith("x") else 1
    if side.endswith("min"):
        k = int(np.argmin(pts[:, axis]))
        edge = (minx, miny)[axis]
        limit = (t.xmin, t.ymin)[axis]
        gap, reach = edge - limit, fp[:, axis].max()
        sign = -1.0
    else:
        k = int(np.argmax(pts[:, axis]))
        edge = (maxx, maxy)[axis]
        limit = (t.xmax, t.ymax)[axis]
        gap, reach = limit - edge, -fp[:, axis].min()
        sign = 1.0
    across = (sign, 0.0) if axis == 0 else (0.0, sign)
    on = pts[k].copy()
    on[axis] = edge
    at = on.copy()
    at[axis] = limit
    points = ((float(on[0]), float(on[1])), (float(at[0]), float(at[1])))
    return float(gap), float(reach), across, points


def _fp_key(footprint) -> bytes:
    return shapely.to_wkb(shapely.normalize(_footprint_geometry(footprint)))


def _num(v: float, units: str, step: float | None = None) -> str:
    """A length for a sentence: 2 decimals (or the step's); "less than 0.01 mm" for a length
    too small to show, rather than a misleading "0 mm"."""
    digits = 2 if step is None else max(0, -int(math.floor(math.log10(step) + 1e-9)))
    unit = "in" if units == "inch" else units
    text = f"{v:.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    if text in ("0", "-0"):
        if v > 0:
            return f"less than {10.0 ** -digits:.{digits}f} {unit}"
        text = "0"
    return f"{text} {unit}"


def _pair_name(c: Contact) -> str:
    if c.second.startswith("travel "):
        touching = " (touching)" if c.gap <= 0 else ""
        return f"{c.first} with the {c.second.removeprefix('travel ')} travel limit{touching}"
    return f"{c.first}/{c.second}" + (" (touching)" if c.gap <= 0 else "")


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def _coord(v: float) -> str:
    text = f"{v:.3f}".rstrip("0").rstrip(".")
    return text


def explain_unreachable(exc: NoPath, from_id: str, to_id: str, free: FreeSpace, scene: Scene,
                        settings: Settings, **kwargs) -> Unreachable:
    """One-off explanation (see Explainer.unreachable); for many, keep one Explainer per scene."""
    return Explainer(scene, settings).unreachable(exc, from_id, to_id, free, **kwargs)
