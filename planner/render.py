"""Pictures of a scene, its grown obstacles and its route: pure functions from plain data to SVG.

Machine coordinates, y away from the operator (up on the page). The palette is the Okabe-Ito
colour-universal-design set (Okabe & Ito, 2008), chosen so every role also differs in lightness
and in shape, and the picture still reads in greyscale print. PNG is the same SVG rasterised
by cairosvg.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from xml.sax.saxutils import escape, quoteattr

import numpy as np
import shapely
import shapely.affinity
import shapely.ops

from .model import FINISH, START, Obstacle, Point, Ring, Route, Scene, Target

__all__ = ["PALETTE", "Frame", "LegView", "frame_for", "visit_order", "render_svg", "svg_to_png",
           "leg_state_text"]

# Okabe-Ito colours (with their approximate CIE L* in brackets, for the greyscale check):
PALETTE = {
    "route": "#D55E00",  # vermillion (L* 55): the route, its arrows and leg tags
    "grown": "#56B4E9",  # sky blue (L* 70), drawn translucent: where the tool point may not go
    "obstacle": "#3D3D3D",  # black at 76 % (L* 26): obstacles the head must avoid
    "passed": "#F0E442",  # yellow (L* 89), hatched: obstacles the head passes over
    "target": "#0072B2",  # blue (L* 47): targets, circles numbered in visit order
    "unreachable": "#CC79A7",  # reddish purple (L* 62): unreachable targets, diamonds
    "start": "#009E73",  # bluish green (L* 56): start and finish, squares
    "ink": "#1A1A1A",  # text, travel limits, footprint outlines
    "paper": "#FFFFFF",
    "outside": "#F0F0F0",  # outside the travel limits
}

_FONT = "DejaVu Sans, Verdana, Arial, sans-serif"
_MAX_W, _MAX_H = 1080.0, 700.0  # largest drawing of the table, px
_PAD = 24.0  # px around everything
_TITLE_H = 96.0  # px above the drawing
_BELOW_H = 92.0  # px below the drawing: axis labels, operator side, scale bar
_LEGEND_W = 430.0  # px right of the drawing
_CHAR_W = 0.60  # average glyph width as a fraction of the font size (DejaVu Sans, measured)
_MAX_LABELS = 300  # obstacle ids drawn at most (the largest obstacles); more would be a smudge


@dataclass(frozen=True)
class LegView:
    """How one leg sees a scene that changes as the job runs (for `show --leg N`).

    `number` is the leg (1-based, as tagged in the picture); `absent` maps each obstacle not
    present on that leg to why ("not yet present" or "already gone"); `footprint` is the
    leg's footprint (the head's own, with the carried outline) in the head's frame.
    """

    number: int
    absent: dict[str, str]
    footprint: shapely.Geometry


def leg_state_text(extra: dict, units: str) -> str:
    """What changed for a leg (its route fields `appeared`, `gone`, `carry`), in words; ''
    when nothing did and the head carries nothing."""
    words = [f"+{i} appeared" for i in extra.get("appeared", ())]
    words += [f"-{i} gone" for i in extra.get("gone", ())]
    carry = extra.get("carry")
    if carry:
        a = np.asarray(carry, dtype=float)
        w, h = np.ptp(a[:, 0]), np.ptp(a[:, 1])
        words.append(f"carrying a {_num(w)} x {_num(h)} {units} outline "
                     "(the footprint includes it)")
    return "; ".join(words)


@dataclass(frozen=True)
class Frame:
    """Where the table lands on the page: scene point (x, y) -> pixel (px, py), y flipped."""

    x0: float  # scene x at the left edge of the drawing
    y1: float  # scene y at the top edge of the drawing
    scale: float  # px per scene unit
    left: float  # px of the drawing's left edge
    top: float  # px of the drawing's top edge
    width: float  # px
    height: float  # px

    def px(self, x: float, y: float) -> tuple[float, float]:
        return self.left + (x - self.x0) * self.scale, self.top + (self.y1 - y) * self.scale

    def many(self, xy: np.ndarray) -> np.ndarray:
        xy = np.asarray(xy, dtype=float).reshape(-1, 2)
        return np.column_stack(
            [self.left + (xy[:, 0] - self.x0) * self.scale,
             self.top + (self.y1 - xy[:, 1]) * self.scale]
        )


def _footprint_bounds(footprint: Ring) -> tuple[float, float, float, float]:
    a = np.asarray(footprint, dtype=float)
    return float(a[:, 0].min()), float(a[:, 1].min()), float(a[:, 0].max()), float(a[:, 1].max())


def _obstacle_geometry(obstacle: Obstacle) -> shapely.Geometry:
    if obstacle.polygon is not None:
        return shapely.polygons(np.asarray(obstacle.polygon, dtype=float))
    c = obstacle.circle
    # a circle too small for doubles to draw around its centre is drawn a few spacings wide
    smallest = 64 * float(np.spacing(max(abs(c.center[0]), abs(c.center[1]), 1.0)))
    return shapely.Point(c.center).buffer(max(c.radius, smallest), quad_segs=32)


def frame_for(scene: Scene) -> Frame:
    """The page frame: travel limits, obstacles and the head's reach, uniformly scaled."""
    t = scene.travel
    fx0, fy0, fx1, fy1 = _footprint_bounds(scene.head.footprint)
    xs = [t.xmin + fx0, t.xmax + fx1, t.xmin, t.xmax]
    ys = [t.ymin + fy0, t.ymax + fy1, t.ymin, t.ymax]
    for o in scene.obstacles:
        b = _obstacle_geometry(o).bounds
        xs += [b[0], b[2]]
        ys += [b[1], b[3]]
    x0, x1, y0, y1 = min(xs), max(xs), min(ys), max(ys)
    span = max(x1 - x0, y1 - y0)
    pad = 0.02 * span
    x0, x1, y0, y1 = x0 - pad, x1 + pad, y0 - pad, y1 + pad
    scale = min(_MAX_W / (x1 - x0), _MAX_H / (y1 - y0))
    return Frame(x0=x0, y1=y1, scale=scale, left=_PAD, top=_PAD + _TITLE_H,
                 width=(x1 - x0) * scale, height=(y1 - y0) * scale)


def visit_order(scene: Scene, route: Route | None) -> list[str]:
    """Target ids in the order the route visits them (file order when there is no route)."""
    if route is None:
        return [t.id for t in scene.targets]
    return [leg.to_id for leg in route.legs if leg.to_id != FINISH]


# ---------------------------------------------------------------------------------------------
# small SVG writers

def _f(v: float) -> str:
    return f"{v:.2f}".rstrip("0").rstrip(".")


def _pts(xy: np.ndarray) -> str:
    return " ".join(f"{_f(x)},{_f(y)}" for x, y in xy)


def _ring_path(frame: Frame, coords: Iterable[Sequence[float]]) -> str:
    """A closed SVG path; runs of vertices inside one quarter pixel are drawn as one."""
    xy = frame.many(np.asarray(coords if isinstance(coords, np.ndarray) else list(coords),
                               dtype=float))
    if len(xy) and np.allclose(xy[0], xy[-1]):
        xy = xy[:-1]
    if len(xy) > 8:
        cells = np.round(xy * 4.0)
        keep = np.ones(len(xy), dtype=bool)
        keep[1:] = np.any(cells[1:] != cells[:-1], axis=1)
        if keep.sum() >= 3:
            xy = xy[keep]
    return "M" + " L".join(f"{_f(x)},{_f(y)}" for x, y in xy) + " Z"


def _geometry_path(frame: Frame, geom: shapely.Geometry) -> str:
    """One path for every polygon of `geom` (holes included; draw with fill-rule evenodd)."""
    parts = []
    for poly in shapely.get_parts(geom):
        if not isinstance(poly, shapely.Polygon) or poly.is_empty:
            continue
        parts.append(_ring_path(frame, shapely.get_coordinates(poly.exterior)))
        parts.extend(_ring_path(frame, shapely.get_coordinates(r)) for r in poly.interiors)
    return " ".join(parts)


def _text(x: float, y: float, text: str, *, size: float = 12.0, fill: str = PALETTE["ink"],
          anchor: str = "start", weight: str = "normal", halo: bool = True,
          family: str = _FONT) -> str:
    """Text with a white halo underneath (a second copy: some renderers lack paint-order)."""
    attrs = (f'x="{_f(x)}" y="{_f(y)}" font-family={quoteattr(family)} font-size="{_f(size)}" '
             f'text-anchor="{anchor}" font-weight="{weight}"')
    body = escape(text)
    out = ""
    if halo:
        out += (f'<text {attrs} fill="{PALETTE["paper"]}" stroke="{PALETTE["paper"]}" '
                f'stroke-width="3.5" stroke-linejoin="round">{body}</text>')
    return out + f'<text {attrs} fill="{fill}">{body}</text>'


def _text_width(text: str, size: float) -> float:
    return len(text) * size * _CHAR_W


Box = tuple[float, float, float, float]


def _text_box(x: float, y: float, text: str, size: float, anchor: str = "start") -> Box:
    w = _text_width(text, size) * 1.08  # bold glyphs are a little wider
    x0 = x if anchor == "start" else x - w / 2 if anchor == "middle" else x - w
    return (x0 - 2, y - size, x0 + w + 2, y + 3)


class _Placer:
    """Keeps labels off each other and off the point markers (boxes in page pixels).

    Boxes are kept in a grid of cells so that a query looks only at its neighbours.
    """

    _CELL = 64.0  # px

    def __init__(self, bounds: Box) -> None:
        self.bounds = bounds
        self._grid: dict[tuple[int, int], list[tuple[Box, float]]] = {}

    def _cells(self, box: Box):
        x0, y0, x1, y1 = box
        c = self._CELL
        return itertools.product(range(int(x0 // c), int(x1 // c) + 1),
                                 range(int(y0 // c), int(y1 // c) + 1))

    def _put(self, box: Box, weight: float) -> None:
        item = (box, weight)
        for cell in self._cells(box):
            self._grid.setdefault(cell, []).append(item)

    def add(self, box: Box) -> None:
        self._put(box, 1.0)

    def avoid(self, box: Box) -> None:
        """A place better not covered (an obstacle), but allowed."""
        self._put(box, 0.2)

    def cost(self, box: Box, soft: bool = True) -> float:
        x0, y0, x1, y1 = box
        bx0, by0, bx1, by1 = self.bounds
        outside = max(0, bx0 - x0) + max(0, x1 - bx1) + max(0, by0 - y0) + max(0, y1 - by1)
        overlap = 0.0
        seen: set[int] = set()
        for cell in self._cells(box):
            for item in self._grid.get(cell, ()):
                (t0, u0, t1, u1), weight = item
                if id(item) in seen or (weight < 1.0 and not soft):
                    continue
                seen.add(id(item))
                w = min(x1, t1) - max(x0, t0)
                h = min(y1, u1) - max(y0, u0)
                if w > 0 and h > 0:
                    overlap += weight * w * h
        return overlap + 1000.0 * outside

    def choose(self, boxes: Sequence[Box]) -> int:
        """Index of the first box that is free, else of the least covered one; it is taken."""
        costs = [self.cost(b) for b in boxes]
        best = next((i for i, c in enumerate(costs) if c == 0), int(np.argmin(costs)))
        self.add(boxes[best])
        return best

    def text(self, x: float, y: float, text: str, spots: Sequence[tuple[float, float, str]],
             **style) -> str:
        """Text near (x, y) at the first free of the offsets (dx, dy, anchor)."""
        size = style.get("size", 12.0)
        boxes = [_text_box(x + dx, y + dy, text, size, a) for dx, dy, a in spots]
        dx, dy, a = spots[self.choose(boxes)]
        return _text(x + dx, y + dy, text, anchor=a, **style)


# Offsets tried, in order, for a label beside a point marker (page px, text anchor).
_AROUND = ((14, -12, "start"), (14, 20, "start"), (-14, -12, "end"), (-14, 20, "end"),
           (0, -18, "middle"), (0, 28, "middle"))


def _wrap(text: str, size: float, width: float) -> list[str]:
    """Greedy word wrap to a pixel width (estimated glyph widths)."""
    limit = max(8, int(width / (size * _CHAR_W)))
    lines: list[str] = []
    line = ""
    for word in text.split():
        while len(word) > limit:  # a very long token (a hash, an id): break it
            if line:
                lines.append(line)
                line = ""
            lines.append(word[:limit])
            word = word[limit:]
        if not line:
            line = word
        elif len(line) + 1 + len(word) <= limit:
            line += " " + word
        else:
            lines.append(line)
            line = word
    if line:
        lines.append(line)
    return lines


def _nice_length(target: float) -> float:
    """1, 2 or 5 times a power of ten, not above `target`."""
    exp = math.floor(math.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**exp <= target:
            return m * 10**exp
    return 10**exp


def _fmt_len(v: float, units: str) -> str:
    if units == "inch":
        return f"{v:g} in"
    return f"{v:g} {units}"


def _num(v: float) -> str:
    return f"{v:.1f}".rstrip("0").rstrip(".")


# ---------------------------------------------------------------------------------------------
# markers

def _target_marker(x: float, y: float, label: str, colour: str) -> str:
    return (f'<circle cx="{_f(x)}" cy="{_f(y)}" r="10" fill="{PALETTE["paper"]}" stroke="{colour}" '
            f'stroke-width="2.5"/>'
            + _text(x, y + 4.2, label, size=11.5, fill=colour, anchor="middle", weight="bold",
                    halo=False))


def _unreachable_marker(x: float, y: float, label: str) -> str:
    c = PALETTE["unreachable"]
    r = 12.0
    d = f"M{_f(x)},{_f(y - r)} L{_f(x + r)},{_f(y)} L{_f(x)},{_f(y + r)} L{_f(x - r)},{_f(y)} Z"
    return (f'<path d="{d}" fill="{c}" stroke="{PALETTE["ink"]}" stroke-width="1.5"/>'
            + _text(x, y + 4.2, label, size=11.5, fill=PALETTE["ink"], anchor="middle",
                    weight="bold", halo=False))


def _start_marker(x: float, y: float, label: str) -> str:
    c = PALETTE["start"]
    return (f'<rect x="{_f(x - 10)}" y="{_f(y - 10)}" width="20" height="20" rx="2" fill="{c}" '
            f'stroke="{PALETTE["ink"]}" stroke-width="1.2"/>'
            + _text(x, y + 4.2, label, size=11.5, fill=PALETTE["paper"], anchor="middle",
                    weight="bold", halo=False))


def _chevron(x: float, y: float, dx: float, dy: float, size: float = 7.0,
             fill: str = PALETTE["route"]) -> str:
    """A filled arrowhead at (x, y) pointing along (dx, dy) (page coordinates)."""
    n = math.hypot(dx, dy)
    ux, uy = dx / n, dy / n
    px, py = -uy, ux
    tip = (x + ux * size, y + uy * size)
    a = (x - ux * size + px * size * 0.85, y - uy * size + py * size * 0.85)
    b = (x - ux * size - px * size * 0.85, y - uy * size - py * size * 0.85)
    back = (x - ux * size * 0.35, y - uy * size * 0.35)
    pts = [tip, a, back, b]
    return (f'<path d="M{" L".join(f"{_f(p)},{_f(q)}" for p, q in pts)} Z" '
            f'fill="{fill}" stroke="{PALETTE["paper"]}" stroke-width="1"/>')


def _leg_tag(x: float, y: float, number: int) -> str:
    text = str(number)
    w = 8 + _text_width(text, 11)
    return (f'<rect x="{_f(x - w / 2)}" y="{_f(y - 8)}" width="{_f(w)}" height="16" rx="3" '
            f'fill="{PALETTE["paper"]}" stroke="{PALETTE["route"]}" stroke-width="1.5"/>'
            + _text(x, y + 4, text, size=11, fill=PALETTE["ink"], anchor="middle", halo=False))


# ---------------------------------------------------------------------------------------------
# the picture


def _carried_outlines(scene: Scene, order: list[str]) -> dict[str, Ring]:
    """For each visited target: the outline carried when the head leaves it (if any)."""
    by_id = {t.id: t for t in scene.targets}
    carried: Ring | None = None
    out: dict[str, Ring] = {}
    for tid in order:
        t: Target | None = by_id.get(tid)
        if t is None:
            continue
        if t.carry == "none":
            carried = None
        elif t.carry is not None:
            carried = t.carry
        if carried is not None:
            out[tid] = carried
    return out


def _obstacle_note(o: Obstacle) -> str:
    notes = []
    if o.after:
        notes.append(f"from {o.after} on")
    if o.until:
        notes.append(f"until {o.until}")
    return f" ({', '.join(notes)})" if notes else ""


def _label_obstacle(frame: Frame, geom: shapely.Geometry, layouts: list[list[str]],
                    inside_fill: str, placer: _Placer, inside_halo: bool = False) -> str:
    """Label inside the obstacle when one of the layouts fits (across, or along a tall shape),
    else just above it."""
    size = 11.0
    step = size + 2
    minx, miny, maxx, maxy = geom.bounds
    spots = [geom.centroid, shapely.ops.polylabel(geom, tolerance=max(
        (maxx - minx), (maxy - miny)) / 50)]
    spots += [shapely.Point(minx + (maxx - minx) * fx, miny + (maxy - miny) * fy)
              for fy in (0.8, 0.2, 0.5) for fx in (0.5, 0.25, 0.75)]
    for lines, rotate, spot in itertools.product(layouts, (False, True), spots):
        width = max(_text_width(line, size) for line in lines) + 6
        height = len(lines) * step + 2
        w, h = (height, width) if rotate else (width, height)
        hw, hh = w / 2 / frame.scale, h / 2 / frame.scale
        box = shapely.box(spot.x - hw, spot.y - hh, spot.x + hw, spot.y + hh)
        cx, cy = frame.px(spot.x, spot.y)
        if geom.contains(box) and placer.cost((cx - w / 2, cy - h / 2, cx + w / 2,
                                               cy + h / 2), soft=False) == 0:
            out = ""
            y = cy - (len(lines) * step) / 2 + size - 1
            for line in lines:
                out += _text(cx, y, line, size=size, fill=inside_fill, anchor="middle",
                             halo=inside_halo, weight="bold")
                y += step
            if rotate:
                out = f'<g transform="rotate(-90 {_f(cx)} {_f(cy)})">{out}</g>'
            placer.add((cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2))
            return out
    # outside: above the shape, below it, or beside it, wherever no other label is
    lines = layouts[-1]
    text = lines[0] if len(lines) == 1 else " ".join(lines)
    left, top = frame.px(minx, maxy)
    right, bottom = frame.px(maxx, miny)
    mid_x, mid_y = (left + right) / 2, (top + bottom) / 2
    spots = [(mid_x, top - 5, "middle"), (mid_x, bottom + size + 3, "middle"),
             (right + 5, mid_y + 4, "start"), (left - 5, mid_y + 4, "end")]
    boxes = [_text_box(x, y, text, size, a) for x, y, a in spots]
    x, y, a = spots[placer.choose(boxes)]
    return _text(x, y, text, size=size, anchor=a, weight="bold")


def render_svg(
    scene: Scene,
    route: Route | None = None,
    grown: shapely.Geometry | None = None,
    *,
    reasons: Sequence[tuple[str, str]] | None = None,
    details: bool = True,
    leg: LegView | None = None,
) -> str:
    """The picture of a scene as SVG text.

    `grown` is the union of the grown obstacles (the free space's `blocked`), drawn translucent;
    `route` adds the legs, visit numbers and unreachable targets; `reasons` overrides the
    (id, reason) pairs listed in the legend (default: the route's unreachable ones); without
    `details` the legend leaves out the reasons' words and the list of legs (for pages that
    print them beside the picture).
    With `leg`, the scene is drawn as that leg sees it: absent obstacles faint and dashed
    (labelled why), the leg's footprint at its start, that leg highlighted and the others faint;
    `grown` should then be that leg's grown obstacles.
    """
    fr = frame_for(scene)
    units = scene.units
    order = visit_order(scene, route)
    number = {tid: i + 1 for i, tid in enumerate(order)}
    unreachable = list(route.unreachable) if route is not None else []
    if reasons is None:
        reasons = [(u.id, u.reason) for u in unreachable]
    bad_letter = {uid: chr(ord("A") + i) if i < 26 else str(i + 1)
                  for i, (uid, _) in enumerate(reasons)}
    ride = scene.head.ride_height
    absent = leg.absent if leg is not None else {}
    passed = [o for o in scene.obstacles if not o.is_avoided(ride) and o.id not in absent]
    avoided = [o for o in scene.obstacles if o.is_avoided(ride) and o.id not in absent]
    faint = [o for o in scene.obstacles if o.id in absent]

    placer = _Placer((fr.left, fr.top, fr.left + fr.width, fr.top + fr.height))
    points_svg, point_labels = _points_layer(fr, scene, number, bad_letter, placer)
    labels = []  # drawn last, above everything in the drawing
    shapes = [_obstacle_geometry(o) for o in scene.obstacles]
    boxes = []
    for g in shapes:
        (x0, y0), (x1, y1) = fr.px(*g.bounds[:2]), fr.px(*g.bounds[2:])
        boxes.append((x0, y1, x1, y0))  # page y runs down
        placer.avoid(boxes[-1])
    # the largest first: they take labels inside; beyond the budget, ids are left out
    by_size = sorted(range(len(shapes)), key=lambda i: -(boxes[i][2] - boxes[i][0])
                     * (boxes[i][3] - boxes[i][1]))
    unlabelled = max(0, len(by_size) - _MAX_LABELS)
    for i in by_size[:_MAX_LABELS]:
        o = scene.obstacles[i]
        name = o.id + _obstacle_note(o)
        if o.id in absent:
            labels.append(_label_obstacle(fr, shapes[i], [[f"{name}: {absent[o.id]}"]],
                                          PALETTE["ink"], placer, inside_halo=True))
        elif o.is_avoided(ride):
            labels.append(_label_obstacle(fr, shapes[i], [[name]], PALETTE["paper"], placer))
        else:
            high = f"{_num(o.height)} {units} high, passed over"
            labels.append(_label_obstacle(fr, shapes[i], [[name, high], [f"{name}: {high}"]],
                                          PALETTE["ink"], placer, inside_halo=True))
    route_svg = _route_layer(fr, route, placer, leg.number if leg else None) if route else ""
    labels.append(point_labels())
    hints, hint_labels, hint_kinds = _hints_layer(fr, scene, unreachable, bad_letter, placer)
    labels.append(hint_labels)
    legend, legend_h = _legend(scene, route, reasons, bad_letter, bool(passed), grown is not None,
                               bool(_carried_outlines(scene, order)), hint_kinds, details,
                               unlabelled, focus=leg.number if leg is not None else None,
                               any_absent=bool(faint))
    draw_h = fr.height + _BELOW_H
    width = _PAD + fr.width + 28 + _LEGEND_W + _PAD
    height = _PAD + _TITLE_H + max(draw_h, legend_h) + _PAD
    legend_x = _PAD + fr.width + 28

    out: list[str] = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{_f(width)}" height="{_f(height)}" '
        f'viewBox="0 0 {_f(width)} {_f(height)}">',
        f"<title>{escape(scene.file)}: scene, grown obstacles and route</title>",
        "<defs>"
        f'<pattern id="passed-hatch" width="9" height="9" patternUnits="userSpaceOnUse" '
        f'patternTransform="rotate(45)"><rect width="9" height="9" fill="{PALETTE["passed"]}"/>'
        f'<line x1="0" y1="0" x2="0" y2="9" stroke="{PALETTE["obstacle"]}" stroke-width="1.6"/>'
        "</pattern>"
        f'<clipPath id="drawing"><rect x="{_f(fr.left)}" y="{_f(fr.top)}" '
        f'width="{_f(fr.width)}" height="{_f(fr.height)}"/></clipPath>'
        "</defs>",
        f'<rect width="{_f(width)}" height="{_f(height)}" fill="{PALETTE["paper"]}"/>',
    ]
    out.append(_title(scene, route, details))

    # outside the travel limits, then the travel rectangle itself
    t = scene.travel
    tx0, ty1 = fr.px(t.xmin, t.ymin)
    tx1, ty0 = fr.px(t.xmax, t.ymax)
    out.append(f'<rect id="drawing-area" x="{_f(fr.left)}" y="{_f(fr.top)}" '
               f'width="{_f(fr.width)}" height="{_f(fr.height)}" fill="{PALETTE["outside"]}"/>')
    out.append(
        f'<rect id="travel" x="{_f(tx0)}" y="{_f(ty0)}" width="{_f(tx1 - tx0)}" '
        f'height="{_f(ty1 - ty0)}" fill="{PALETTE["paper"]}" '
        f'data-xmin="{t.xmin!r}" data-xmax="{t.xmax!r}" data-ymin="{t.ymin!r}" '
        f'data-ymax="{t.ymax!r}"/>'
    )

    out.append('<g clip-path="url(#drawing)">')
    if grown is not None and not grown.is_empty:
        out.append(
            f'<path id="grown" d="{_geometry_path(fr, grown)}" fill="{PALETTE["grown"]}" '
            f'fill-opacity="0.5" fill-rule="evenodd" stroke="{PALETTE["target"]}" '
            f'stroke-width="0.8" stroke-opacity="0.6"/>'
        )
    for o in passed:
        out.append(_obstacle_shape(fr, o, 'fill="url(#passed-hatch)" '
                                   f'stroke="{PALETTE["obstacle"]}" stroke-width="1.2" '
                                   'stroke-dasharray="5 3"'))
    for o in avoided:
        out.append(_obstacle_shape(fr, o, f'fill="{PALETTE["obstacle"]}" '
                                   f'stroke="{PALETTE["ink"]}" stroke-width="1"'))
    for o in faint:  # not present on the leg drawn: an outline only
        out.append(_obstacle_shape(fr, o, f'fill="none" stroke="{PALETTE["obstacle"]}" '
                                   'stroke-width="1" stroke-opacity="0.45" '
                                   'stroke-dasharray="3 3" data-absent="true"'))
    out.append("</g>")
    out.append(f'<rect x="{_f(tx0)}" y="{_f(ty0)}" width="{_f(tx1 - tx0)}" '
               f'height="{_f(ty1 - ty0)}" fill="none" stroke="{PALETTE["ink"]}" stroke-width="2"/>')

    # head outlines at the start and every target (and what it carries away from it)
    carried = _carried_outlines(scene, order)
    points: list[tuple[str, Point]] = [(START, scene.start)]
    points += [(tg.id, tg.at) for tg in scene.targets]
    fp = np.asarray(scene.head.footprint, dtype=float)
    out.append('<g id="footprints" fill="none" stroke-linejoin="round">')
    for pid, (px_, py_) in points:
        xy = fr.many(fp + np.array([px_, py_]))
        out.append(f'<polygon points="{_pts(xy)}" stroke="{PALETTE["ink"]}" stroke-width="1.1" '
                   'stroke-dasharray="4 2.5"/>')
        if pid in carried:
            cxy = fr.many(np.asarray(carried[pid], dtype=float) + np.array([px_, py_]))
            out.append(f'<polygon points="{_pts(cxy)}" stroke="{PALETTE["target"]}" '
                       'stroke-width="1.3" stroke-dasharray="1.5 2"/>')
    if leg is not None and route is not None and 0 < leg.number <= len(route.legs):
        sx, sy = route.legs[leg.number - 1].points[0]
        moved = shapely.affinity.translate(leg.footprint, sx, sy)
        out.append(f'<path id="leg-footprint" d="{_geometry_path(fr, moved)}" '
                   f'stroke="{PALETTE["ink"]}" stroke-width="2.2" fill-rule="evenodd"/>')
    out.append("</g>")

    out.append(route_svg)
    out.append(hints)
    out.append(points_svg)
    out.append('<g id="labels">' + "".join(labels) + "</g>")

    out.append(_below(fr, scene))
    out.append(f'<g transform="translate({_f(legend_x)},{_f(_PAD + _TITLE_H)})">{legend}</g>')
    out.append("</svg>")
    return "\n".join(out) + "\n"


def _obstacle_shape(fr: Frame, o: Obstacle, style: str) -> str:
    ident = quoteattr(f"obstacle-{o.id}")
    if o.circle is not None:
        cx, cy = fr.px(*o.circle.center)
        return (f'<circle id={ident} cx="{_f(cx)}" cy="{_f(cy)}" '
                f'r="{_f(o.circle.radius * fr.scale)}" {style}/>')
    return f'<path id={ident} d="{_ring_path(fr, o.polygon)}" {style}/>'


def _route_layer(fr: Frame, route: Route, placer: _Placer, focus: int | None = None) -> str:
    """The legs, their arrows and tags; with `focus` (1-based) that leg bold, the others faint."""
    out = ['<g id="route" fill="none" stroke-linejoin="round" stroke-linecap="round">']
    paths = []
    for leg in route.legs:
        xy = fr.many(np.asarray(leg.points, dtype=float))
        paths.append(xy)
        out.append(f'<polyline points="{_pts(xy)}" stroke="{PALETTE["paper"]}" stroke-width="7"/>')
    drawn = sorted(range(1, len(paths) + 1), key=lambda k: k == focus)  # the focus on top
    for k, xy in ((k, paths[k - 1]) for k in drawn):
        if focus is None:
            style = 'stroke-width="3"'
        elif k == focus:
            style = f'stroke-width="5" id="leg-{k}"'
        else:
            style = 'stroke-width="2" stroke-opacity="0.3"'
        out.append(f'<polyline points="{_pts(xy)}" stroke="{PALETTE["route"]}" {style}/>')
    out.append("</g><g id='route-marks'>")
    for k, xy in enumerate(paths, start=1):
        seg = np.diff(xy, axis=0)
        lens = np.hypot(seg[:, 0], seg[:, 1])
        if len(lens) == 0 or lens.max() <= 0:
            continue
        longest = int(np.argmax(lens))
        for i, ln in enumerate(lens):
            if ln < 36 and i != longest:
                continue
            if ln < 14:
                continue
            # two arrows on long segments, one on short ones
            spots = (0.3, 0.7) if ln > 240 else (0.5,)
            for f in spots:
                if i == longest and f == 0.5:
                    f = 0.35
                p = xy[i] + seg[i] * f
                out.append(_chevron(p[0], p[1], seg[i][0], seg[i][1]))
        n = seg[longest] / lens[longest]
        spots = []
        for f, side in itertools.product((0.5, 0.65, 0.2, 0.8), (1.0, -1.0)):
            p = xy[longest] + seg[longest] * f + np.array([n[1], -n[0]]) * 14.0 * side
            spots.append((float(p[0]), float(p[1])))
        w = 8 + _text_width(str(k), 11)
        boxes = [(x - w / 2, y - 8, x + w / 2, y + 8) for x, y in spots]
        x, y = spots[placer.choose(boxes)]
        out.append(_leg_tag(x, y, k))
    out.append("</g>")
    return "".join(out)


def _pairs_to_draw(extra: dict) -> list[dict]:
    """The gaps an explanation says must open (those with two ends to draw between)."""
    if extra.get("kind") != "cut-off":
        return []
    pairs = extra.get("pairs") or []
    if extra.get("single_gap_opens"):
        chosen = [p for p in pairs if p.get("opens_alone") and p.get("gap", 0) > 0][:3]
    elif extra.get("gaps_to_open"):
        chosen = [p for p in pairs[: int(extra["gaps_to_open"])] if p.get("gap", 0) > 0]
    else:
        chosen = []
    return [p for p in chosen if p.get("points")]


def _hints_layer(fr: Frame, scene: Scene, unreachable, letters: dict[str, str],
                 placer: _Placer) -> tuple[str, str, set[str]]:
    """Where an unreachable point would have to move, and the gaps that are too narrow."""
    u = scene.units
    ink, bad = PALETTE["ink"], PALETTE["unreachable"]
    out = ['<g id="hints">']
    labels = []
    kinds: set[str] = set()
    for item in unreachable:
        extra = item.extra or {}
        letter = letters.get(item.id, "?")
        if extra.get("nearest_free") and extra.get("point"):
            x0, y0 = fr.px(*extra["point"])
            x1, y1 = fr.px(*extra["nearest_free"])
            if math.hypot(x1 - x0, y1 - y0) > 4:
                out.append(f'<line x1="{_f(x0)}" y1="{_f(y0)}" x2="{_f(x1)}" y2="{_f(y1)}" '
                           f'stroke="{ink}" stroke-width="2" stroke-dasharray="5 3"/>')
                out.append(_chevron(x1, y1, x1 - x0, y1 - y0, size=6, fill=ink))
            out.append(f'<circle cx="{_f(x1)}" cy="{_f(y1)}" r="4" fill="{PALETTE["paper"]}" '
                       f'stroke="{ink}" stroke-width="2"/>')
            move = extra.get("move")
            text = f"{letter}: move \u2265 {_num(move)} {u}" if move is not None else letter
            labels.append(placer.text(x1, y1, text, _AROUND, size=11, weight="bold"))
            kinds.add("move")
        for pair in _pairs_to_draw(extra):
            (ax, ay), (bx, by) = (fr.px(*pt) for pt in pair["points"])
            length = math.hypot(bx - ax, by - ay)
            mx, my = (ax + bx) / 2, (ay + by) / 2
            if length < 8:
                out.append(f'<circle cx="{_f(mx)}" cy="{_f(my)}" r="9" fill="none" '
                           f'stroke="{ink}" stroke-width="5"/><circle cx="{_f(mx)}" '
                           f'cy="{_f(my)}" r="9" fill="none" stroke="{bad}" stroke-width="3"/>')
                nx, ny = 0.0, -1.0
            else:
                nx, ny = -(by - ay) / length, (bx - ax) / length
                for colour, w in ((ink, 7.0), (bad, 4.0)):
                    out.append(f'<line x1="{_f(ax)}" y1="{_f(ay)}" x2="{_f(bx)}" y2="{_f(by)}" '
                               f'stroke="{colour}" stroke-width="{_f(w)}" stroke-linecap="butt"/>')
                for ex, ey in ((ax, ay), (bx, by)):
                    out.append(f'<line x1="{_f(ex - nx * 9)}" y1="{_f(ey - ny * 9)}" '
                               f'x2="{_f(ex + nx * 9)}" y2="{_f(ey + ny * 9)}" stroke="{ink}" '
                               'stroke-width="2"/>')
            text = f"{letter}: gap {_num(pair['gap'])} {u}, needs {_num(pair['need'])} {u}"
            spots = [(nx * r * s, ny * r * s + 4, "middle") for r in (22, 40)
                     for s in (1.0, -1.0)] + [
                (d, 4 + e, a) for d, e, a in ((16, 0, "start"), (-16, 0, "end"),
                                               (16, -20, "start"), (-16, -20, "end"),
                                               (16, 24, "start"), (-16, 24, "end"))]
            labels.append(placer.text(mx, my, text, spots, size=11, weight="bold"))
            kinds.add("gap")
    out.append("</g>")
    return "".join(out), "".join(labels), kinds


def _points_layer(fr: Frame, scene: Scene, number: dict[str, int], bad: dict[str, str],
                  placer: _Placer):
    """Markers of the start, targets and finish (their boxes taken now), and a function that
    places their labels once the obstacles' labels are down."""
    out = ['<g id="points">']
    later: list[tuple[float, float, str, dict]] = []
    sx, sy = fr.px(*scene.start)
    same = scene.finish is not None and np.allclose(scene.finish, scene.start)
    bold = {"size": 11, "weight": "bold"}
    if scene.finish is not None and not same:
        fx, fy = fr.px(*scene.finish)
        if FINISH in bad:
            out.append(_unreachable_marker(fx, fy, bad[FINISH]))
            later.append((fx, fy, "finish", bold))
        else:
            out.append(_start_marker(fx, fy, "F"))
            later.append((fx, fy, "finish", bold))
        placer.add((fx - 12, fy - 12, fx + 12, fy + 12))
    out.append(_start_marker(sx, sy, "S"))
    placer.add((sx - 12, sy - 12, sx + 12, sy + 12))
    later.append((sx, sy, "start / finish" if same else "start", bold))
    for tg in scene.targets:
        x, y = fr.px(*tg.at)
        placer.add((x - 12, y - 12, x + 12, y + 12))
        if tg.id in bad:
            out.append(_unreachable_marker(x, y, bad[tg.id]))
            later.append((x, y, tg.id, bold))
        elif tg.id in number:
            out.append(_target_marker(x, y, str(number[tg.id]), PALETTE["target"]))
            later.append((x, y, tg.id, {**bold, "fill": PALETTE["target"]}))
        else:
            out.append(_target_marker(x, y, "?", PALETTE["ink"]))
            later.append((x, y, tg.id, {"size": 11}))
    out.append("</g>")

    def labels() -> str:
        return "".join(placer.text(x, y, text, _AROUND, **style) for x, y, text, style in later)

    return "".join(out), labels


def _title(scene: Scene, route: Route | None, details: bool = True) -> str:
    y = _PAD + 18
    out = _text(_PAD, y, f"{scene.file}", size=20, weight="bold", halo=False)
    u = scene.units
    if route is None:
        status = "Not planned: the scene and its no-go zones only."
    elif route.unreachable:
        n = len(route.unreachable)
        status = (f"Route INCOMPLETE: {n} point{'s' if n > 1 else ''} cannot be reached "
                  f"(diamonds, reasons {'on the right' if details else 'below'}); "
                  f"{len(route.legs)} legs, "
                  f"{_num(route.length)} {u} of traverse.")
    else:
        status = (f"Route complete: every target reached in {len(route.legs)} legs, "
                  f"{_num(route.length)} {u} of traverse.")
    out += _text(_PAD, y + 24, status, size=15, weight="bold", halo=False)
    hashes = f"scene sha256 {scene.sha256}"
    if route is not None and route.config_sha256:
        hashes += f"   config sha256 {route.config_sha256[:16]}\u2026"
    out += _text(_PAD, y + 44, hashes, size=10.5, halo=False, family="DejaVu Sans Mono, monospace")
    head = scene.head
    head_txt = f"Head {head.name or '(given in the scene)'}, margin {_num(head.margin)} {u}"
    if head.ride_height is not None:
        head_txt += f", rides {_num(head.ride_height)} {u} above the table"
    out += _text(_PAD, y + 62, head_txt + ". Seen from above, machine coordinates; y points "
                 "away from the operator.", size=11.5, halo=False)
    return out


def _below(fr: Frame, scene: Scene) -> str:
    """Axis values at the travel limits, the operator side, and a scale bar."""
    t = scene.travel
    u = scene.units
    x0, yb = fr.px(t.xmin, t.ymin)
    x1, yt = fr.px(t.xmax, t.ymax)
    bottom = fr.top + fr.height
    out = [f'<g id="axes" font-family="{_FONT}">']
    out.append(_text(x0, bottom + 14, f"x {_num(t.xmin)}", size=10.5, anchor="middle"))
    out.append(_text(x1, bottom + 14, f"x {_num(t.xmax)}", size=10.5, anchor="middle"))
    for y in (yb, yt):
        out.append(f'<line x1="{_f(fr.left - 4)}" y1="{_f(y)}" x2="{_f(fr.left)}" y2="{_f(y)}" '
                   f'stroke="{PALETTE["ink"]}"/>')
    for x in (x0, x1):
        out.append(f'<line x1="{_f(x)}" y1="{_f(bottom)}" x2="{_f(x)}" y2="{_f(bottom + 4)}" '
                   f'stroke="{PALETTE["ink"]}"/>')
    out.append(_text(fr.left + 4, yt + 12, f"y {_num(t.ymax)}", size=10.5))
    out.append(_text(fr.left + 4, yb - 4, f"y {_num(t.ymin)}", size=10.5))
    # axis arrows at the lower left
    ax, ay = fr.left + 2, bottom + 44
    ink = PALETTE["ink"]
    out.append(f'<path d="M{_f(ax)},{_f(ay)} L{_f(ax + 34)},{_f(ay)} M{_f(ax + 28)},{_f(ay - 4)} '
               f'L{_f(ax + 34)},{_f(ay)} L{_f(ax + 28)},{_f(ay + 4)} M{_f(ax)},{_f(ay)} '
               f'L{_f(ax)},{_f(ay - 30)} M{_f(ax - 4)},{_f(ay - 24)} L{_f(ax)},{_f(ay - 30)} '
               f'L{_f(ax + 4)},{_f(ay - 24)}" fill="none" stroke="{ink}" stroke-width="1.5"/>')
    out.append(_text(ax + 38, ay + 4, "x", size=11, weight="bold"))
    out.append(_text(ax + 8, ay - 24, "y", size=11, weight="bold"))
    # operator side
    out.append(_text(fr.left + fr.width / 2, bottom + 30,
                     "\u25bc operator side (front of the table) \u25bc", size=12, anchor="middle",
                     weight="bold"))
    # scale bar
    length = _nice_length((t.xmax - t.xmin) / 4)
    bar = length * fr.scale
    bx = fr.left + fr.width - bar - 6
    by = bottom + 54
    half = bar / 2
    out.append(f'<g id="scale-bar" data-length="{length!r}">'
               f'<rect x="{_f(bx)}" y="{_f(by)}" width="{_f(half)}" height="7" fill="{ink}"/>'
               f'<rect x="{_f(bx + half)}" y="{_f(by)}" width="{_f(half)}" height="7" '
               f'fill="{PALETTE["paper"]}" stroke="{ink}"/></g>')
    out.append(_text(bx, by - 4, "0", size=10.5, anchor="middle"))
    out.append(_text(bx + half, by - 4, _num(length / 2), size=10.5, anchor="middle"))
    out.append(_text(bx + bar, by - 4, _fmt_len(length, u), size=10.5, anchor="middle"))
    out.append("</g>")
    return "".join(out)


def _legend(scene: Scene, route: Route | None, reasons: Sequence[tuple[str, str]],
            letters: dict[str, str], any_passed: bool, any_grown: bool,
            any_carry: bool, hint_kinds: set[str], details: bool = True,
            unlabelled: int = 0, focus: int | None = None,
            any_absent: bool = False) -> tuple[str, float]:
    """The key (symbols with words) and the unreachable targets with their reasons."""
    ink = PALETTE["ink"]
    u = scene.units
    out = [_text(0, 14, "How to read this picture", size=14, weight="bold", halo=False)]
    y = 34.0
    row = 24.0
    text_x = 46.0
    if focus is not None:
        out.append(_text(0, y, f"Drawn as leg {focus} sees it (the bold leg; others faint)",
                         size=12, weight="bold", halo=False))
        y += 22

    def entry(symbol: str, words: str) -> None:
        nonlocal y
        lines = _wrap(words, 11.5, _LEGEND_W - text_x)
        out.append(f'<g transform="translate(0,{_f(y)})">{symbol}</g>')
        for i, line in enumerate(lines):
            out.append(_text(text_x, y + 4 + i * 14, line, size=11.5, halo=False))
        y += max(row, 14 * len(lines) + 10)

    entry(f'<rect x="4" y="-8" width="30" height="16" fill="{PALETTE["obstacle"]}" '
          f'stroke="{ink}"/>',
          "obstacle the head must avoid (clamp, fixture, part)")
    if any_absent:
        entry(f'<rect x="4" y="-8" width="30" height="16" fill="none" '
              f'stroke="{PALETTE["obstacle"]}" stroke-opacity="0.45" stroke-dasharray="3 3"/>',
              f"obstacle not there on leg {focus} (not yet present or already gone)")
    if any_passed:
        ride = scene.head.ride_height
        entry('<rect x="4" y="-8" width="30" height="16" fill="url(#passed-hatch)" '
              f'stroke="{PALETTE["obstacle"]}" stroke-dasharray="5 3"/>',
              f"low obstacle the head passes over (lower than its ride height "
              f"{_num(ride)} {u})")
    if any_grown:
        entry(f'<rect x="4" y="-8" width="30" height="16" fill="{PALETTE["grown"]}" '
              f'fill-opacity="0.5" stroke="{PALETTE["target"]}" stroke-width="0.8"/>',
              f"no-go zone for the tool point: obstacle grown by the head outline and the "
              f"{_num(scene.head.margin)} {u} margin")
    entry(f'<rect x="6" y="-9" width="26" height="18" fill="none" stroke="{ink}" '
          'stroke-dasharray="4 2.5" stroke-width="1.1"/>',
          "outline of the head at the start and at each target")
    if focus is not None:
        entry(f'<rect x="6" y="-9" width="26" height="18" fill="none" stroke="{ink}" '
              'stroke-width="2.2"/>',
              f"footprint of leg {focus} at its start (head with any carried outline)")
    if any_carry:
        entry(f'<rect x="8" y="-7" width="22" height="14" fill="none" stroke="{PALETTE["target"]}" '
              'stroke-dasharray="1.5 2" stroke-width="1.3"/>',
              "outline of the part carried away from that target")
    entry(f'<line x1="2" y1="0" x2="36" y2="0" stroke="{PALETTE["paper"]}" stroke-width="7"/>'
          f'<line x1="2" y1="0" x2="36" y2="0" stroke="{PALETTE["route"]}" stroke-width="3"/>'
          + _chevron(19, 0, 1, 0), "route of the tool point; arrows show the direction of travel")
    entry(_leg_tag(19, 0, 2), "leg number (leg 2 runs from the 1st to the 2nd target)")
    entry(_target_marker(19, 0, "3", PALETTE["target"]), "target, numbered in visit order")
    entry(_start_marker(19, 0, "S"), "start (S) and finish (F) of the head")
    if reasons:
        entry(_unreachable_marker(19, 0, "A"), "point that cannot be reached; why, below")
    if "move" in hint_kinds:
        entry(f'<line x1="2" y1="0" x2="30" y2="0" stroke="{ink}" stroke-width="2" '
              f'stroke-dasharray="5 3"/><circle cx="32" cy="0" r="4" fill="{PALETTE["paper"]}" '
              f'stroke="{ink}" stroke-width="2"/>',
              "nearest place the point could move to and still be reached")
    if "gap" in hint_kinds:
        entry(f'<line x1="4" y1="0" x2="34" y2="0" stroke="{ink}" stroke-width="7"/>'
              f'<line x1="4" y1="0" x2="34" y2="0" stroke="{PALETTE["unreachable"]}" '
              f'stroke-width="4"/>', "gap too narrow for the head: the one to widen")
    entry(f'<rect x="4" y="-9" width="30" height="18" fill="{PALETTE["paper"]}" '
          f'stroke="{ink}" stroke-width="2"/><rect x="4" y="-9" width="6" height="18" '
          f'fill="{PALETTE["outside"]}"/>',
          "travel limits of the tool point (grey: outside them)")
    if unlabelled:
        entry("", f"{unlabelled} of the smallest obstacles are drawn without their ids")

    y += 8
    out.append(f'<line x1="0" y1="{_f(y)}" x2="{_f(_LEGEND_W)}" y2="{_f(y)}" stroke="{ink}" '
               'stroke-width="0.8"/>')
    y += 22
    if reasons:
        out.append(_text(0, y, "Cannot be reached", size=14, weight="bold", halo=False,
                         fill=ink))
        y += 20
        for uid, reason in reasons:
            out.append(f'<g transform="translate(0,{_f(y - 4)})">'
                       f'{_unreachable_marker(12, 0, letters.get(uid, "?"))}</g>')
            out.append(_text(32, y, uid, size=12, weight="bold", halo=False))
            y += 16
            for line in _wrap(reason, 11, _LEGEND_W - 32) if details else []:
                out.append(_text(32, y, line, size=11, halo=False))
                y += 14
            y += 8
        if not details:
            out.append(_text(0, y, "Why: see the list below the picture.", size=11,
                             halo=False))
            y += 18
    elif route is not None:
        out.append(_text(0, y, "Every target is reached.", size=13, weight="bold", halo=False))
        y += 20
    if route is not None and route.legs and details:
        y += 4
        out.append(_text(0, y, "Legs", size=14, weight="bold", halo=False))
        y += 18
        for k, leg in enumerate(route.legs, start=1):
            line = f"{k:>2}  {leg.from_id} \u2192 {leg.to_id}"
            out.append(_text(0, y, line, size=11, halo=False))
            out.append(_text(_LEGEND_W, y, f"{_num(leg.length)} {u}", size=11, halo=False,
                             anchor="end"))
            y += 14
        out.append(_text(0, y + 4, "total", size=11, weight="bold", halo=False))
        out.append(_text(_LEGEND_W, y + 4, f"{_num(route.length)} {u}", size=11, halo=False,
                         anchor="end", weight="bold"))
        y += 20
    return "".join(out), y


def svg_to_png(svg: str, scale: float = 1.0) -> bytes:
    """Rasterise SVG text to PNG bytes (cairosvg)."""
    import cairosvg  # imported here: only pictures need it

    return cairosvg.svg2png(bytestring=svg.encode("utf-8"), scale=scale)
