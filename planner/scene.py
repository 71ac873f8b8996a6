"""Read and validate a scene file: bytes in, a frozen `Scene` out, or exactly one `SceneError`.

Checks run cheapest first: size and counts, then the coordinate lists (plain numpy, so a
100,000-vertex scene never goes through jsonschema), then the JSON Schema on what is left, then
the rules a schema cannot say (simple polygons, ids, names, order constraints, travel).
"""

from __future__ import annotations

import hashlib
import itertools
import math
import re
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely

from .document import parse_document, read_file
from .errors import SceneError
from .model import FINISH, START, Circle, Head, Obstacle, Point, Ring, Scene, Target, Travel
from .problem import PathPart, Problem, closest, kind_of
from .schemacheck import check_schema

if TYPE_CHECKING:
    from .config import Limits, Settings

__all__ = ["load_scene", "load_scene_bytes", "ring_array", "check_rings", "SCHEMA"]

SCHEMA = "scene.schema.json"
_NUMERIC = {int, float}
Path_ = tuple[PathPart, ...]


def load_scene(path: Path, settings: Settings) -> Scene:
    """Read and validate the scene file at `path` (its size is checked before it is read)."""
    path = Path(path)
    data = read_file(path, settings.limits.max_file_bytes, SceneError, path.name)
    return load_scene_bytes(data, path.name, settings)


def load_scene_bytes(data: bytes, file: str, settings: Settings) -> Scene:
    """Validate a scene given as bytes; `file` names it in messages (`.json` means JSON)."""
    doc = parse_document(data, file, settings.limits, SceneError)
    try:
        return _scene(doc.value, file, hashlib.sha256(data).hexdigest(), settings)
    except Problem as problem:
        raise doc.error(problem, SceneError) from None


# ------------------------------------------------------------------------ coordinate lists


def ring_array(value: Any, path: Sequence[PathPart], limits: Limits) -> np.ndarray:
    """A polygon's vertex list as an (n, 2) float array; Problem unless >= 3 finite [x, y]."""
    path = tuple(path)
    if not isinstance(value, list):
        raise Problem(path, f"expected a polygon (a list of [x, y] vertices), got "
                      f"{kind_of(value)}", "for example [[0, 0], [100, 0], [100, 50]]")
    if len(value) < 3:
        raise Problem(path, f"a polygon needs at least 3 vertices, this one has {len(value)}",
                      "list every corner as [x, y]")
    shapes_ok = set(map(type, value)) == {list} and set(map(len, value)) == {2}
    if not (shapes_ok and set(map(type, itertools.chain.from_iterable(value))) <= _NUMERIC):
        _find_bad_vertex(value, path)
    try:
        arr = np.array(value, dtype=float)
    except OverflowError:
        arr = np.array([[_clip(x), _clip(y)] for x, y in value], dtype=float)
    bad = ~np.isfinite(arr) | (np.abs(arr) > limits.max_abs_coordinate)
    if bad.any():
        i, j = (int(k) for k in np.argwhere(bad)[0])
        raise _number_problem((*path, i, j), value[i][j], limits)
    return arr


def _clip(v: int | float) -> float:
    try:
        return float(v)
    except OverflowError:
        return math.inf


def _find_bad_vertex(value: list, path: Path_) -> None:
    for i, p in enumerate(value):
        if type(p) is not list or len(p) != 2:
            raise Problem((*path, i), f"expected an [x, y] vertex, got {kind_of(p)}",
                          "write each vertex as [x, y]")
        for j, v in enumerate(p):
            if type(v) not in _NUMERIC:
                raise Problem((*path, i, j), f"expected a number, got {kind_of(v)}",
                              "write a plain number like 12.5, without quotes or a unit")


def _number_problem(path: Path_, v: Any, limits: Limits) -> Problem:
    if isinstance(v, float) and not math.isfinite(v):
        return Problem(path, f"{v!r} is not a finite number",
                       "NaN and infinity cannot be positions or sizes; write a plain number")
    bound = limits.max_abs_coordinate
    return Problem(path, f"{v!r} is out of range (at most {bound:g} either way)",
                   "check the units and the decimal point; the bound is limits."
                   "max_abs_coordinate, or what the output resolution leaves exact (move the "
                   "origin near the table, or use a coarser resolution)")


def _check_numbers(value: Any, limits: Limits) -> None:
    """Every number in `value` is finite and within range."""
    bound = limits.max_abs_coordinate
    stack: list[tuple[Any, Path_]] = [(value, ())]
    while stack:
        item, path = stack.pop()
        kind = type(item)
        if kind is dict:
            stack.extend((v, (*path, k)) for k, v in item.items())
        elif kind is list:
            stack.extend((v, (*path, i)) for i, v in enumerate(item))
        elif kind in _NUMERIC and not abs(_clip(item)) <= bound:
            raise _number_problem(path, item, limits)


_REASON = re.compile(r"^(?P<what>[^\[]+)\[(?P<x>[^\]\s]+) (?P<y>[^\]\s]+)")


def check_rings(rings: Sequence[tuple[Sequence[PathPart], np.ndarray]]) -> None:
    """Problem for the first ring that is closed, repeats a vertex, crosses itself or is flat.

    Uses GEOS validity (shapely) on all rings at once.
    """
    if not rings:
        return
    arrays = [a for _, a in rings]
    counts = np.fromiter(map(len, arrays), dtype=np.int64, count=len(arrays))
    coords = np.concatenate(arrays)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    ends = starts + counts - 1
    succ = np.arange(1, len(coords) + 1)
    succ[ends] = starts
    same = np.all(coords == coords[succ], axis=1)
    if same.any():
        k = int(np.argmax(same))
        r = int(np.searchsorted(starts, k, side="right") - 1)
        path, j = tuple(rings[r][0]), k - int(starts[r])
        pt = _pt(coords[k])
        if k == ends[r]:
            raise Problem((*path, j), f"the polygon is closed: its last vertex repeats the "
                          f"first, {pt}", "drop the last vertex; polygons close themselves")
        raise Problem((*path, j + 1), f"vertex {j + 1} repeats vertex {j}, {pt}",
                      "remove the repeated vertex")
    owner = np.repeat(np.arange(len(arrays)), counts)
    lines = shapely.linearrings(coords, indices=owner)
    polygons = shapely.polygons(lines)
    ok = shapely.is_valid(polygons) & shapely.is_simple(lines) & (shapely.area(polygons) > 0)
    if ok.all():
        return
    r = int(np.argmin(ok))
    path = tuple(rings[r][0])
    reason = shapely.is_valid_reason(polygons[r])
    m = _REASON.match(reason or "")
    near = f" near ({_num(m['x'])}, {_num(m['y'])})" if m else ""
    if shapely.area(shapely.convex_hull(lines[r])) <= 0:
        raise Problem(path, "the polygon encloses no area (its vertices lie on one line)",
                      "give its real corners, or remove it")
    if m is not None and "Too few" in m["what"]:
        raise Problem(path, "the polygon has fewer than 3 distinct corners",
                      "give at least 3 different vertices")
    raise Problem(path, f"the polygon's outline crosses or touches itself{near}",
                  "a polygon must be simple: reorder the vertices so no edges cross or touch "
                  "(spikes and pinches count); give overlapping shapes as separate obstacles")


def _num(text: str) -> str:
    try:
        return f"{float(text):g}"
    except ValueError:
        return text


def _pt(p: Sequence[float]) -> str:
    return f"[{float(p[0]):g}, {float(p[1]):g}]"


def _as_ring(arr: np.ndarray) -> Ring:
    return tuple(map(tuple, arr.tolist()))


# ------------------------------------------------------------------------------- the scene


def _precise_limits(value: Any, settings: Settings) -> Limits:
    """The limits, with max_abs_coordinate lowered to what a double holds exactly enough at the
    output resolution: the road map's tolerance (resolution * EPS_PER_RESOLUTION) must stay
    64 rounding errors or more of the largest coordinate."""
    from dataclasses import replace

    from .config import MM_PER_UNIT
    from .cspace import EPS_PER_RESOLUTION

    units = value.get("units") if isinstance(value, dict) else None
    units = units if isinstance(units, str) and units in MM_PER_UNIT else "mm"
    eps = settings.in_units(units).resolution * EPS_PER_RESOLUTION
    bound = eps / (64 * np.finfo(np.float64).eps)
    limits = settings.limits
    if bound < limits.max_abs_coordinate:
        limits = replace(limits, max_abs_coordinate=float(f"{bound:.2g}"))
    return limits


def _scene(value: Any, file: str, sha256: str, settings: Settings) -> Scene:
    limits = _precise_limits(value, settings)
    if not isinstance(value, dict):
        raise Problem((), f"the scene must be a mapping of keys (scene: 1, travel: ..., start: "
                      f"..., targets: ...), but the file holds {kind_of(value)}",
                      "start from an example in docs/scene-format.md")
    _check_counts(value, limits)
    skeleton, rings = _split_rings(value, limits)
    _check_numbers(skeleton, limits)
    check_schema(skeleton, SCHEMA, delegate=("ring",), dedupe=("obstacles", "targets"))
    check_rings(list(rings.items()))

    units = value.get("units", "mm")
    travel = _travel(value["travel"])
    _travel_on_grid(travel, settings.in_units(units).resolution, units)
    targets = _targets(value["targets"], rings)
    ids = [t.id for t in targets]
    obstacles = _obstacles(value.get("obstacles", []), rings, set(ids))
    sequence = value.get("sequence", settings.sequence)
    _check_order(targets, value["targets"], sequence)
    options = _options(value)

    start = _point(value["start"])
    _inside(travel, start, ("start",), "start")
    for i, (t, raw) in enumerate(zip(targets, value["targets"], strict=True)):
        where: Path_ = ("targets", i) if isinstance(raw, list) else ("targets", i, "at")
        _inside(travel, t.at, where, f"target {t.id}")
    finish = _point(value["finish"]) if "finish" in value else None
    if finish is not None:
        _inside(travel, finish, ("finish",), "finish")

    return Scene(
        file=file,
        sha256=sha256,
        units=units,
        travel=travel,
        head=_head(value["head"], rings, units, settings),
        obstacles=obstacles,
        start=start,
        targets=targets,
        finish=finish,
        sequence=sequence,
        options=options,
    )


def _options(value: dict) -> dict:
    """Scene-level overrides: `cost` (length | time) and `axes` (a checked partial axis model,
    in the scene's units; see docs/motion.md)."""
    from .motion import AxisSpecError, check_axes_override

    options: dict = {}
    if "cost" in value:
        options["cost"] = value["cost"]
    if "axes" in value:
        try:
            options["axes"] = check_axes_override(value["axes"], "axes")
        except AxisSpecError as exc:
            raise Problem(tuple(exc.path.split(".")), exc.message, exc.hint) from None
    return options


def _check_counts(value: dict, limits: Limits) -> None:
    for key, limit, name in (
        ("obstacles", limits.max_obstacles, "max_obstacles"),
        ("targets", limits.max_targets, "max_targets"),
    ):
        items = value.get(key)
        if isinstance(items, list) and len(items) > limit:
            raise Problem((key,), f"{len(items):,} {key} are more than the limit of {limit:,}",
                          f"split the job, or raise limits.{name} in config/planner.yaml")


def _split_rings(value: dict, limits: Limits) -> tuple[dict, dict[Path_, np.ndarray]]:
    """The checked vertex lists (everywhere the schema has a `ring`), and the scene without them.

    The schema check is told to leave rings to this (`delegate`), so a value found here must be
    checked here even when it is not a list.
    """
    found: list[tuple[Path_, Any]] = []
    skeleton = dict(value)
    head = value.get("head")
    if isinstance(head, dict) and "footprint" in head:
        found.append((("head", "footprint"), head["footprint"]))
        skeleton["head"] = {**head, "footprint": []}
    for key, field in (("obstacles", "polygon"), ("targets", "carry")):
        items = value.get(key)
        if not isinstance(items, list):
            continue
        cut = []
        for i, item in enumerate(items):
            if (isinstance(item, dict) and field in item
                    and not (field == "carry" and isinstance(item[field], str))):
                found.append(((key, i, field), item[field]))
                item = {**item, field: []}
            cut.append(item)
        skeleton[key] = cut
    total = sum(len(v) for _, v in found if isinstance(v, list))
    if total > limits.max_vertices:
        raise Problem((), f"the scene has {total:,} polygon vertices, more than the limit of "
                      f"{limits.max_vertices:,}",
                      "simplify the outlines, or raise limits.max_vertices in config/planner.yaml")
    return skeleton, {path: ring_array(v, path, limits) for path, v in found}


def _point(value: list) -> Point:
    return float(value[0]), float(value[1])


def _travel(value: dict) -> Travel:
    for axis in ("x", "y"):
        lo, hi = value[axis]
        if not lo < hi:
            hint = "write [min, max]" if lo > hi else "travel must have a real width and depth"
            raise Problem(("travel", axis), f"travel {axis} must be [min, max] with min < max, "
                          f"got [{lo:g}, {hi:g}]", hint)
    (x0, x1), (y0, y1) = value["x"], value["y"]
    return Travel(float(x0), float(x1), float(y0), float(y1))


def _travel_on_grid(travel: Travel, resolution: float, units: str) -> None:
    """Route points are rounded to the output grid: travel must hold some of its points, and its
    numbers must be small enough to be written at that resolution."""
    from .routefile import grid_inside

    try:
        grid_inside([travel.xmin, travel.ymin], [travel.xmax, travel.ymax], resolution)
    except ValueError as exc:
        raise Problem(("travel",), f"travel cannot hold route points at the output resolution "
                      f"of {resolution:g} {units}: {exc}",
                      "widen travel (check the units), or change resolution in "
                      "config/planner.yaml") from None


def _inside(travel: Travel, p: Point, path: Path_, what: str) -> None:
    if not travel.contains(p):
        raise Problem(path, f"{what} {_pt(p)} is outside travel (x {travel.xmin:g} to "
                      f"{travel.xmax:g}, y {travel.ymin:g} to {travel.ymax:g})",
                      "move it inside travel, or correct travel")


def _unique(path: Path_, new_id: str, given: bool, seen: dict[str, tuple[int, bool]],
            index: int, what: str) -> None:
    if new_id in seen:
        j, j_given = seen[new_id]
        notes = [f"{new_id} is the default id of {what}s[{k}]"
                 for k, g in ((j, j_given), (index, given)) if not g]
        hint = f"{what} ids must be unique: rename one"
        if notes:
            hint += " (" + "; ".join(notes) + ")"
        raise Problem((*path, "id") if given else path,
                      f"the {what} id {new_id!r} is used twice: by {what}s[{j}] and "
                      f"{what}s[{index}]", hint)
    seen[new_id] = (index, given)


def _obstacles(items: list, rings: dict[Path_, np.ndarray], target_ids: set[str]
               ) -> tuple[Obstacle, ...]:
    out = []
    seen: dict[str, tuple[int, bool]] = {}
    for i, ob in enumerate(items):
        path: Path_ = ("obstacles", i)
        oid = ob.get("id", f"o{i + 1}")
        _unique(path, oid, "id" in ob, seen, i, "obstacle")
        polygon: Ring | None = None
        circle = None
        if "polygon" in ob:
            polygon = _as_ring(rings[(*path, "polygon")])
        elif "circle" in ob:
            circle = Circle(_point(ob["circle"]["center"]), float(ob["circle"]["radius"]))
        else:
            (x0, y0), (x1, y1) = _point(ob["rect"]["min"]), _point(ob["rect"]["max"])
            if not (x0 < x1 and y0 < y1):
                raise Problem((*path, "rect"), f"rect min {_pt((x0, y0))} must be below and "
                              f"left of max {_pt((x1, y1))}",
                              "min is the lower-left corner, max the upper-right; both sides "
                              "must have a length")
            polygon = ((x0, y0), (x1, y0), (x1, y1), (x0, y1))  # counter-clockwise
        for key in ("after", "until"):
            if key in ob:
                _check_state_name((*path, key), ob[key], key, target_ids)
        height = ob.get("height")
        out.append(Obstacle(
            id=oid,
            polygon=polygon,
            circle=circle,
            height=None if height is None else float(height),
            after=ob.get("after"),
            until=ob.get("until"),
            source=f"obstacles[{i}]",
        ))
    return tuple(out)


def _known(name: str, target_ids: set[str], extra: Sequence[str] = ()) -> str:
    choices = sorted(target_ids) + list(extra)
    near = closest(name, choices)
    listed = ", ".join(choices[:12]) + (", ..." if len(choices) > 12 else "")
    text = f"did you mean {near!r}? " if near else ""
    return text + (f"known: {listed}" if choices else "the scene has no targets")


def _check_state_name(path: Path_, name: str, key: str, target_ids: set[str]) -> None:
    if name == FINISH:
        hint = ("no leg leaves finish, so nothing can appear after it" if key == "after"
                else "an obstacle present to the end needs no until; remove it")
        raise Problem(path, f"an obstacle's {key} cannot name finish", hint)
    if name != START and name not in target_ids:
        raise Problem(path, f"{key}: {name!r} names no target",
                      _known(name, target_ids, [START]))


def _targets(items: list, rings: dict[Path_, np.ndarray]) -> tuple[Target, ...]:
    out = []
    seen: dict[str, tuple[int, bool]] = {}
    for i, entry in enumerate(items):
        path: Path_ = ("targets", i)
        if isinstance(entry, list):
            entry = {"at": entry}
        tid = entry.get("id", f"t{i + 1}")
        if tid in (START, FINISH):
            raise Problem((*path, "id"), f"a target cannot be called {tid!r}",
                          "start and finish name the job's own end points; pick another id")
        _unique(path, tid, "id" in entry, seen, i, "target")
        carry = entry.get("carry")
        if isinstance(carry, list):
            carry = _as_ring(rings[(*path, "carry")])
        out.append(Target(
            id=tid,
            at=_point(entry["at"]),
            carry=carry,
            after=entry.get("after"),
            first=bool(entry.get("first", False)),
            last=bool(entry.get("last", False)),
            source=f"targets[{i}]",
        ))
    return tuple(out)


def _check_order(targets: tuple[Target, ...], raw: list, sequence: str) -> None:
    """Target `after`, `first` and `last`: names exist, no cycle, no contradiction."""
    index = {t.id: i for i, t in enumerate(targets)}
    ids = set(index)
    for i, t in enumerate(targets):
        path: Path_ = ("targets", i)
        if t.first and t.last and len(targets) > 1:
            raise Problem(path, f"target {t.id} is marked both first and last",
                          "keep one of them")
        if t.after is None:
            continue
        if t.after == START:
            raise Problem((*path, "after"), "every target is visited after start",
                          "remove after: start")
        if t.after == FINISH:
            raise Problem((*path, "after"), "no target can be visited after finish",
                          "finish is the park position at the end; remove after: finish")
        if t.after not in ids:
            raise Problem((*path, "after"), f"after: {t.after!r} names no target",
                          _known(t.after, ids))
    for i, t in enumerate(targets):  # each target names at most one: follow the chain
        chain, cur = [t.id], t
        while cur.after is not None and cur.after not in chain:
            chain.append(cur.after)
            cur = targets[index[cur.after]]
        if cur.after is not None and cur.after == t.id:
            loop = " -> ".join([*chain, t.id])
            raise Problem(("targets", i, "after"), f"the targets' after constraints form a "
                          f"cycle: {loop} (each comes after the next)",
                          "remove one of these after constraints")
    for i, t in enumerate(targets):
        if t.after is None:
            continue
        other = targets[index[t.after]]
        path = ("targets", i, "after")
        if t.first and not other.first:
            raise Problem(path, f"target {t.id} is marked first but comes after "
                          f"{other.id}, which is not", f"mark {other.id} first too, or drop one "
                          "of the constraints")
        if other.last and not t.last:
            raise Problem(path, f"target {t.id} comes after {other.id}, which is marked last",
                          f"mark {t.id} last too, or drop one of the constraints")
        if sequence == "given" and index[t.after] > i:
            raise Problem(path, f"target {t.id} is listed before {other.id} but says after: "
                          f"{other.id}; with sequence: given the file order is the visiting "
                          "order", f"move it below {other.id}, or use sequence: shortest")
    if sequence == "given":
        for flag, word in (("first", "before"), ("last", "after")):
            marks = [getattr(t, flag) for t in targets]
            if flag == "last":
                marks = marks[::-1]
            if any(marks) and marks != sorted(marks, reverse=True):
                k = next(j for j in range(1, len(marks)) if marks[j] and not marks[j - 1])
                i = k if flag == "first" else len(marks) - 1 - k
                raise Problem(("targets", i, flag), f"target {targets[i].id} is marked {flag} "
                              f"but another target without {flag} is listed {word} it; with "
                              "sequence: given the file order is the visiting order",
                              "move it, or use sequence: shortest")


def _head(value: Any, rings: dict[Path_, np.ndarray], units: str, settings: Settings) -> Head:
    scaled = settings.in_units(units)
    if isinstance(value, str):
        if value not in scaled.heads:
            known = sorted(scaled.heads)
            near = closest(value, known)
            hint = (f"did you mean {near!r}? " if near else "") + (
                f"known heads: {', '.join(known)}" if known else "the config names no heads")
            hint += "; or give the head inline as {footprint, margin, ride_height}"
            raise Problem(("head",), f"no head named {value!r} in the config", hint)
        return scaled.heads[value]
    ride = value.get("ride_height")
    return Head(
        name=None,
        footprint=_as_ring(rings[("head", "footprint")]),
        margin=float(value.get("margin", scaled.margin)),
        ride_height=None if ride is None else float(ride),
    )
