"""Layers drawn over the table (route, hints for unreachable points, markers), above obstacles."""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence

import numpy as np

from .labels import BESIDE_POINT, LabelPlacer
from .model import FINISH, Route, Scene, Unreachable
from .svgparts import (
    PALETTE,
    Frame,
    chevron,
    leg_tag,
    one_decimal,
    start_marker,
    svg_points,
    svgnum,
    target_marker,
    text_width,
    unreachable_marker,
)

__all__ = ["route_layer", "hints_layer", "points_layer"]


def route_layer(fr: Frame, route: Route, placer: LabelPlacer, focus: int | None = None) -> str:
    """The legs, their arrows and tags; with `focus` (1-based) that leg bold, the others faint."""
    out = ['<g id="route" fill="none" stroke-linejoin="round" stroke-linecap="round">']
    paths = []
    for leg in route.legs:
        xy = fr.many(np.asarray(leg.points, dtype=float))
        paths.append(xy)
        out.append(f'<polyline points="{svg_points(xy)}" stroke="{PALETTE["paper"]}" '
                   'stroke-width="7"/>')
    drawn = sorted(range(1, len(paths) + 1), key=lambda k: k == focus)  # the focus on top
    for k, xy in ((k, paths[k - 1]) for k in drawn):
        if focus is None:
            style = 'stroke-width="3"'
        elif k == focus:
            style = f'stroke-width="5" id="leg-{k}"'
        else:
            style = 'stroke-width="2" stroke-opacity="0.3"'
        out.append(f'<polyline points="{svg_points(xy)}" stroke="{PALETTE["route"]}" {style}/>')
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
                out.append(chevron(p[0], p[1], seg[i][0], seg[i][1]))
        n = seg[longest] / lens[longest]
        spots = []
        for f, side in itertools.product((0.5, 0.65, 0.2, 0.8), (1.0, -1.0)):
            p = xy[longest] + seg[longest] * f + np.array([n[1], -n[0]]) * 14.0 * side
            spots.append((float(p[0]), float(p[1])))
        w = 8 + text_width(str(k), 11)
        boxes = [(x - w / 2, y - 8, x + w / 2, y + 8) for x, y in spots]
        x, y = spots[placer.choose(boxes)]
        out.append(leg_tag(x, y, k))
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


def hints_layer(fr: Frame, scene: Scene, unreachable: Sequence[Unreachable],
                letters: dict[str, str], placer: LabelPlacer) -> tuple[str, str, set[str]]:
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
                out.append(f'<line x1="{svgnum(x0)}" y1="{svgnum(y0)}" x2="{svgnum(x1)}" '
                           f'y2="{svgnum(y1)}" stroke="{ink}" stroke-width="2" '
                           'stroke-dasharray="5 3"/>')
                out.append(chevron(x1, y1, x1 - x0, y1 - y0, size=6, fill=ink))
            out.append(f'<circle cx="{svgnum(x1)}" cy="{svgnum(y1)}" r="4" '
                       f'fill="{PALETTE["paper"]}" stroke="{ink}" stroke-width="2"/>')
            move = extra.get("move")
            text = f"{letter}: move \u2265 {one_decimal(move)} {u}" if move is not None else letter
            labels.append(placer.text(x1, y1, text, BESIDE_POINT, size=11, weight="bold"))
            kinds.add("move")
        for pair in _pairs_to_draw(extra):
            (ax, ay), (bx, by) = (fr.px(*pt) for pt in pair["points"])
            length = math.hypot(bx - ax, by - ay)
            mx, my = (ax + bx) / 2, (ay + by) / 2
            if length < 8:
                out.append(f'<circle cx="{svgnum(mx)}" cy="{svgnum(my)}" r="9" fill="none" '
                           f'stroke="{ink}" stroke-width="5"/><circle cx="{svgnum(mx)}" '
                           f'cy="{svgnum(my)}" r="9" fill="none" stroke="{bad}" stroke-width="3"/>')
                nx, ny = 0.0, -1.0
            else:
                nx, ny = -(by - ay) / length, (bx - ax) / length
                for colour, w in ((ink, 7.0), (bad, 4.0)):
                    out.append(f'<line x1="{svgnum(ax)}" y1="{svgnum(ay)}" x2="{svgnum(bx)}" '
                               f'y2="{svgnum(by)}" stroke="{colour}" stroke-width="{svgnum(w)}" '
                               'stroke-linecap="butt"/>')
                for ex, ey in ((ax, ay), (bx, by)):
                    out.append(f'<line x1="{svgnum(ex - nx * 9)}" y1="{svgnum(ey - ny * 9)}" '
                               f'x2="{svgnum(ex + nx * 9)}" y2="{svgnum(ey + ny * 9)}" '
                               f'stroke="{ink}" stroke-width="2"/>')
            text = (f"{letter}: gap {one_decimal(pair['gap'])} {u}, "
                    f"needs {one_decimal(pair['need'])} {u}")
            spots = [(nx * r * s, ny * r * s + 4, "middle") for r in (22, 40)
                     for s in (1.0, -1.0)] + [
                (d, 4 + e, a) for d, e, a in ((16, 0, "start"), (-16, 0, "end"),
                                               (16, -20, "start"), (-16, -20, "end"),
                                               (16, 24, "start"), (-16, 24, "end"))]
            labels.append(placer.text(mx, my, text, spots, size=11, weight="bold"))
            kinds.add("gap")
    out.append("</g>")
    return "".join(out), "".join(labels), kinds


def points_layer(fr: Frame, scene: Scene, number: dict[str, int], bad: dict[str, str],
                 placer: LabelPlacer) -> tuple[str, Callable[[], str]]:
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
            out.append(unreachable_marker(fx, fy, bad[FINISH]))
            later.append((fx, fy, "finish", bold))
        else:
            out.append(start_marker(fx, fy, "F"))
            later.append((fx, fy, "finish", bold))
        placer.add((fx - 12, fy - 12, fx + 12, fy + 12))
    out.append(start_marker(sx, sy, "S"))
    placer.add((sx - 12, sy - 12, sx + 12, sy + 12))
    later.append((sx, sy, "start / finish" if same else "start", bold))
    for tg in scene.targets:
        x, y = fr.px(*tg.at)
        placer.add((x - 12, y - 12, x + 12, y + 12))
        if tg.id in bad:
            out.append(unreachable_marker(x, y, bad[tg.id]))
            later.append((x, y, tg.id, bold))
        elif tg.id in number:
            out.append(target_marker(x, y, str(number[tg.id]), PALETTE["target"]))
            later.append((x, y, tg.id, {**bold, "fill": PALETTE["target"]}))
        else:
            out.append(target_marker(x, y, "?", PALETTE["ink"]))
            later.append((x, y, tg.id, {"size": 11}))
    out.append("</g>")

    def labels() -> str:
        return "".join(placer.text(x, y, text, BESIDE_POINT, **style)
                       for x, y, text, style in later)

    return "".join(out), labels

