"""Pictures of a scene, its grown obstacles and its route: pure functions from plain data to SVG.

Machine coordinates, y away from the operator (up on the page). This module lays out the page and
draws the table and its obstacles; the building blocks, label placement, the layers over the table
and the text around the drawing live in svgparts, labels, overlays and legend. PNG is the same SVG
rasterised by cairosvg.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from xml.sax.saxutils import escape, quoteattr

import numpy as np
import shapely
import shapely.affinity

from .labels import LabelPlacer, label_obstacle
from .legend import (
    BELOW_HEIGHT,
    LEGEND_WIDTH,
    PAGE_PAD,
    TITLE_HEIGHT,
    below_block,
    legend_block,
    title_block,
)
from .model import FINISH, START, Obstacle, Point, Ring, Route, Scene, Target
from .overlays import hints_layer, points_layer, route_layer
from .svgparts import PALETTE, Frame, geometry_path, one_decimal, ring_path, svg_points, svgnum

__all__ = ["PALETTE", "Frame", "LegView", "frame_for", "visit_order", "render_svg", "svg_to_png",
           "leg_state_text"]

_MAX_W, _MAX_H = 1080.0, 700.0  # largest drawing of the table, px
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
        words.append(f"carrying a {one_decimal(w)} x {one_decimal(h)} {units} outline "
                     "(the footprint includes it)")
    return "; ".join(words)


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
    return Frame(x0=x0, y1=y1, scale=scale, left=PAGE_PAD, top=PAGE_PAD + TITLE_HEIGHT,
                 width=(x1 - x0) * scale, height=(y1 - y0) * scale)


def visit_order(scene: Scene, route: Route | None) -> list[str]:
    """Target ids in the order the route visits them (file order when there is no route)."""
    if route is None:
        return [t.id for t in scene.targets]
    return [leg.to_id for leg in route.legs if leg.to_id != FINISH]


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


def render_svg(
    scene: Scene,
    route: Route | None = None,
    grown: shapely.Geometry | None = None,
    *,
    reasons: Sequence[tuple[str, str]] | None = None,
    details: bool = True,
    leg: LegView | None = None,
    grown_label: str | None = None,
) -> str:
    """The picture of a scene as SVG text.

    `grown` is the union of the grown obstacles (the free space's `blocked`), drawn translucent;
    `route` adds the legs, visit numbers and unreachable targets; `reasons` overrides the
    (id, reason) pairs listed in the legend (default: the route's unreachable ones); without
    `details` the legend leaves out the reasons' words and the list of legs (for pages that
    print them beside the picture).
    With `leg`, the scene is drawn as that leg sees it: absent obstacles faint and dashed
    (labelled why), the leg's footprint at its start, that leg highlighted and the others faint;
    `grown` should then be that leg's grown obstacles. `grown_label` replaces the legend's
    words for `grown` (when it is not simply every obstacle's zone).
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

    placer = LabelPlacer((fr.left, fr.top, fr.left + fr.width, fr.top + fr.height))
    points_svg, point_labels = points_layer(fr, scene, number, bad_letter, placer)
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
            labels.append(label_obstacle(fr, shapes[i], [[f"{name}: {absent[o.id]}"]],
                                         PALETTE["ink"], placer, inside_halo=True))
        elif o.is_avoided(ride):
            labels.append(label_obstacle(fr, shapes[i], [[name]], PALETTE["paper"], placer))
        else:
            high = f"{one_decimal(o.height)} {units} high, passed over"
            labels.append(label_obstacle(fr, shapes[i], [[name, high], [f"{name}: {high}"]],
                                         PALETTE["ink"], placer, inside_halo=True))
    route_svg = route_layer(fr, route, placer, leg.number if leg else None) if route else ""
    labels.append(point_labels())
    hints, hint_labels, hint_kinds = hints_layer(fr, scene, unreachable, bad_letter, placer)
    labels.append(hint_labels)
    legend, legend_h = legend_block(scene, route, reasons, bad_letter, bool(passed),
                                    grown is not None, bool(_carried_outlines(scene, order)),
                                    hint_kinds, details, unlabelled,
                                    focus=leg.number if leg is not None else None,
                                    any_absent=bool(faint), grown_label=grown_label)
    draw_h = fr.height + BELOW_HEIGHT
    width = PAGE_PAD + fr.width + 28 + LEGEND_WIDTH + PAGE_PAD
    height = PAGE_PAD + TITLE_HEIGHT + max(draw_h, legend_h) + PAGE_PAD
    legend_x = PAGE_PAD + fr.width + 28

    out: list[str] = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{svgnum(width)}" '
        f'height="{svgnum(height)}" viewBox="0 0 {svgnum(width)} {svgnum(height)}">',
        f"<title>{escape(scene.file)}: scene, grown obstacles and route</title>",
        "<defs>"
        f'<pattern id="passed-hatch" width="9" height="9" patternUnits="userSpaceOnUse" '
        f'patternTransform="rotate(45)"><rect width="9" height="9" fill="{PALETTE["passed"]}"/>'
        f'<line x1="0" y1="0" x2="0" y2="9" stroke="{PALETTE["obstacle"]}" stroke-width="1.6"/>'
        "</pattern>"
        f'<clipPath id="drawing"><rect x="{svgnum(fr.left)}" y="{svgnum(fr.top)}" '
        f'width="{svgnum(fr.width)}" height="{svgnum(fr.height)}"/></clipPath>'
        "</defs>",
        f'<rect width="{svgnum(width)}" height="{svgnum(height)}" fill="{PALETTE["paper"]}"/>',
    ]
    out.append(title_block(scene, route, details))

    # outside the travel limits, then the travel rectangle itself
    t = scene.travel
    tx0, ty1 = fr.px(t.xmin, t.ymin)
    tx1, ty0 = fr.px(t.xmax, t.ymax)
    out.append(f'<rect id="drawing-area" x="{svgnum(fr.left)}" y="{svgnum(fr.top)}" '
               f'width="{svgnum(fr.width)}" height="{svgnum(fr.height)}" '
               f'fill="{PALETTE["outside"]}"/>')
    out.append(
        f'<rect id="travel" x="{svgnum(tx0)}" y="{svgnum(ty0)}" width="{svgnum(tx1 - tx0)}" '
        f'height="{svgnum(ty1 - ty0)}" fill="{PALETTE["paper"]}" '
        f'data-xmin="{t.xmin!r}" data-xmax="{t.xmax!r}" data-ymin="{t.ymin!r}" '
        f'data-ymax="{t.ymax!r}"/>'
    )

    out.append('<g clip-path="url(#drawing)">')
    if grown is not None and not grown.is_empty:
        out.append(
            f'<path id="grown" d="{geometry_path(fr, grown)}" fill="{PALETTE["grown"]}" '
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
    out.append(f'<rect x="{svgnum(tx0)}" y="{svgnum(ty0)}" width="{svgnum(tx1 - tx0)}" '
               f'height="{svgnum(ty1 - ty0)}" fill="none" stroke="{PALETTE["ink"]}" '
               'stroke-width="2"/>')

    # head outlines at the start and every target (and what it carries away from it)
    carried = _carried_outlines(scene, order)
    points: list[tuple[str, Point]] = [(START, scene.start)]
    points += [(tg.id, tg.at) for tg in scene.targets]
    fp = np.asarray(scene.head.footprint, dtype=float)
    out.append('<g id="footprints" fill="none" stroke-linejoin="round">')
    for pid, (px_, py_) in points:
        xy = fr.many(fp + np.array([px_, py_]))
        out.append(f'<polygon points="{svg_points(xy)}" stroke="{PALETTE["ink"]}" '
                   'stroke-width="1.1" stroke-dasharray="4 2.5"/>')
        if pid in carried:
            cxy = fr.many(np.asarray(carried[pid], dtype=float) + np.array([px_, py_]))
            out.append(f'<polygon points="{svg_points(cxy)}" stroke="{PALETTE["target"]}" '
                       'stroke-width="1.3" stroke-dasharray="1.5 2"/>')
    if leg is not None and route is not None and 0 < leg.number <= len(route.legs):
        sx, sy = route.legs[leg.number - 1].points[0]
        moved = shapely.affinity.translate(leg.footprint, sx, sy)
        out.append(f'<path id="leg-footprint" d="{geometry_path(fr, moved)}" '
                   f'stroke="{PALETTE["ink"]}" stroke-width="2.2" fill-rule="evenodd"/>')
    out.append("</g>")

    out.append(route_svg)
    out.append(hints)
    out.append(points_svg)
    out.append('<g id="labels">' + "".join(labels) + "</g>")

    out.append(below_block(fr, scene))
    out.append(f'<g transform="translate({svgnum(legend_x)},{svgnum(PAGE_PAD + TITLE_HEIGHT)})">'
               f'{legend}</g>')
    out.append("</svg>")
    return "\n".join(out) + "\n"


def _obstacle_shape(fr: Frame, o: Obstacle, style: str) -> str:
    ident = quoteattr(f"obstacle-{o.id}")
    if o.circle is not None:
        cx, cy = fr.px(*o.circle.center)
        return (f'<circle id={ident} cx="{svgnum(cx)}" cy="{svgnum(cy)}" '
                f'r="{svgnum(o.circle.radius * fr.scale)}" {style}/>')
    return f'<path id={ident} d="{ring_path(fr, o.polygon)}" {style}/>'


def svg_to_png(svg: str, scale: float = 1.0) -> bytes:
    """Rasterise SVG text to PNG bytes (cairosvg)."""
    import cairosvg  # imported here: only pictures need it

    return cairosvg.svg2png(bytestring=svg.encode("utf-8"), scale=scale)
