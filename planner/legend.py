"""The title, axes, scale bar and legend around the drawing; they read only the scene and route."""

from __future__ import annotations

import math
from collections.abc import Sequence

from .labels import wrap_text
from .model import Route, Scene
from .svgparts import (
    FONT,
    PALETTE,
    Frame,
    chevron,
    leg_tag,
    one_decimal,
    start_marker,
    svg_text,
    svgnum,
    target_marker,
    unreachable_marker,
)

__all__ = ["PAGE_PAD", "TITLE_HEIGHT", "BELOW_HEIGHT", "LEGEND_WIDTH", "title_block",
           "below_block", "legend_block"]

PAGE_PAD = 24.0  # px around everything
TITLE_HEIGHT = 96.0  # px above the drawing
BELOW_HEIGHT = 92.0  # px below the drawing: axis labels, operator side, scale bar
LEGEND_WIDTH = 430.0  # px right of the drawing


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


def title_block(scene: Scene, route: Route | None, details: bool = True) -> str:
    """The scene file, whether the route is complete, the hashes and the head, above the drawing."""
    y = PAGE_PAD + 18
    out = svg_text(PAGE_PAD, y, f"{scene.file}", size=20, weight="bold", halo=False)
    u = scene.units
    if route is None:
        status = "Not planned: the scene and its no-go zones only."
    elif route.unreachable:
        n = len(route.unreachable)
        status = (f"Route INCOMPLETE: {n} point{'s' if n > 1 else ''} cannot be reached "
                  f"(diamonds, reasons {'on the right' if details else 'below'}); "
                  f"{len(route.legs)} legs, "
                  f"{one_decimal(route.length)} {u} of traverse.")
    else:
        status = (f"Route complete: every target reached in {len(route.legs)} legs, "
                  f"{one_decimal(route.length)} {u} of traverse.")
    out += svg_text(PAGE_PAD, y + 24, status, size=15, weight="bold", halo=False)
    hashes = f"scene sha256 {scene.sha256}"
    if route is not None and route.config_sha256:
        hashes += f"   config sha256 {route.config_sha256[:16]}\u2026"
    out += svg_text(PAGE_PAD, y + 44, hashes, size=10.5, halo=False,
                    family="DejaVu Sans Mono, monospace")
    head = scene.head
    head_txt = (f"Head {head.name or '(given in the scene)'}, "
                f"margin {one_decimal(head.margin)} {u}")
    if head.ride_height is not None:
        head_txt += f", rides {one_decimal(head.ride_height)} {u} above the table"
    out += svg_text(PAGE_PAD, y + 62, head_txt + ". Seen from above, machine coordinates; "
                    "y points away from the operator.", size=11.5, halo=False)
    return out


def below_block(fr: Frame, scene: Scene) -> str:
    """Axis values at the travel limits, the operator side, and a scale bar."""
    t = scene.travel
    u = scene.units
    x0, yb = fr.px(t.xmin, t.ymin)
    x1, yt = fr.px(t.xmax, t.ymax)
    bottom = fr.top + fr.height
    out = [f'<g id="axes" font-family="{FONT}">']
    out.append(svg_text(x0, bottom + 14, f"x {one_decimal(t.xmin)}", size=10.5,
                        anchor="middle"))
    out.append(svg_text(x1, bottom + 14, f"x {one_decimal(t.xmax)}", size=10.5,
                        anchor="middle"))
    for y in (yb, yt):
        out.append(f'<line x1="{svgnum(fr.left - 4)}" y1="{svgnum(y)}" x2="{svgnum(fr.left)}" '
                   f'y2="{svgnum(y)}" stroke="{PALETTE["ink"]}"/>')
    for x in (x0, x1):
        out.append(f'<line x1="{svgnum(x)}" y1="{svgnum(bottom)}" x2="{svgnum(x)}" '
                   f'y2="{svgnum(bottom + 4)}" stroke="{PALETTE["ink"]}"/>')
    out.append(svg_text(fr.left + 4, yt + 12, f"y {one_decimal(t.ymax)}", size=10.5))
    out.append(svg_text(fr.left + 4, yb - 4, f"y {one_decimal(t.ymin)}", size=10.5))
    # axis arrows at the lower left
    ax, ay = fr.left + 2, bottom + 44
    ink = PALETTE["ink"]
    out.append(f'<path d="M{svgnum(ax)},{svgnum(ay)} L{svgnum(ax + 34)},{svgnum(ay)} '
               f'M{svgnum(ax + 28)},{svgnum(ay - 4)} L{svgnum(ax + 34)},{svgnum(ay)} '
               f'L{svgnum(ax + 28)},{svgnum(ay + 4)} M{svgnum(ax)},{svgnum(ay)} '
               f'L{svgnum(ax)},{svgnum(ay - 30)} M{svgnum(ax - 4)},{svgnum(ay - 24)} '
               f'L{svgnum(ax)},{svgnum(ay - 30)} L{svgnum(ax + 4)},{svgnum(ay - 24)}" '
               f'fill="none" stroke="{ink}" stroke-width="1.5"/>')
    out.append(svg_text(ax + 38, ay + 4, "x", size=11, weight="bold"))
    out.append(svg_text(ax + 8, ay - 24, "y", size=11, weight="bold"))
    # operator side
    out.append(svg_text(fr.left + fr.width / 2, bottom + 30,
                        "\u25bc operator side (front of the table) \u25bc", size=12,
                        anchor="middle", weight="bold"))
    # scale bar
    length = _nice_length((t.xmax - t.xmin) / 4)
    bar = length * fr.scale
    bx = fr.left + fr.width - bar - 6
    by = bottom + 54
    half = bar / 2
    out.append(f'<g id="scale-bar" data-length="{length!r}">'
               f'<rect x="{svgnum(bx)}" y="{svgnum(by)}" width="{svgnum(half)}" height="7" '
               f'fill="{ink}"/>'
               f'<rect x="{svgnum(bx + half)}" y="{svgnum(by)}" width="{svgnum(half)}" height="7" '
               f'fill="{PALETTE["paper"]}" stroke="{ink}"/></g>')
    out.append(svg_text(bx, by - 4, "0", size=10.5, anchor="middle"))
    out.append(svg_text(bx + half, by - 4, one_decimal(length / 2), size=10.5,
                        anchor="middle"))
    out.append(svg_text(bx + bar, by - 4, _fmt_len(length, u), size=10.5, anchor="middle"))
    out.append("</g>")
    return "".join(out)


def legend_block(scene: Scene, route: Route | None, reasons: Sequence[tuple[str, str]],
                 letters: dict[str, str], any_passed: bool, any_grown: bool,
                 any_carry: bool, hint_kinds: set[str], details: bool = True,
                 unlabelled: int = 0, focus: int | None = None,
                 any_absent: bool = False, grown_label: str | None = None) -> tuple[str, float]:
    """The key (symbols with words) and the unreachable targets with their reasons; also the
    height it takes, in px."""
    ink = PALETTE["ink"]
    u = scene.units
    out = [svg_text(0, 14, "How to read this picture", size=14, weight="bold", halo=False)]
    y = 34.0
    row = 24.0
    text_x = 46.0
    if focus is not None:
        out.append(svg_text(0, y, f"Drawn as leg {focus} sees it (the bold leg; others faint)",
                            size=12, weight="bold", halo=False))
        y += 22

    def entry(symbol: str, words: str) -> None:
        nonlocal y
        lines = wrap_text(words, 11.5, LEGEND_WIDTH - text_x)
        out.append(f'<g transform="translate(0,{svgnum(y)})">{symbol}</g>')
        for i, line in enumerate(lines):
            out.append(svg_text(text_x, y + 4 + i * 14, line, size=11.5, halo=False))
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
              f"{one_decimal(ride)} {u})")
    if any_grown:
        entry(f'<rect x="4" y="-8" width="30" height="16" fill="{PALETTE["grown"]}" '
              f'fill-opacity="0.5" stroke="{PALETTE["target"]}" stroke-width="0.8"/>',
              grown_label or f"no-go zone for the tool point: obstacle grown by the head "
              f"outline and the {one_decimal(scene.head.margin)} {u} margin")
    entry(f'<rect x="6" y="-9" width="26" height="18" fill="none" stroke="{ink}" '
          'stroke-dasharray="4 2.5" stroke-width="1.1"/>',
          "outline of the head at the start and at each target")
    if focus is not None:
        entry(f'<rect x="6" y="-9" width="26" height="18" fill="none" stroke="{ink}" '
              'stroke-width="2.2"/>',
              f"footprint of leg {focus} at its start (head with any carried outline)")
    if any_carry:
        entry(f'<rect x="8" y="-7" width="22" height="14" fill="none" '
              f'stroke="{PALETTE["target"]}" stroke-dasharray="1.5 2" stroke-width="1.3"/>',
              "outline of the part carried away from that target")
    entry(f'<line x1="2" y1="0" x2="36" y2="0" stroke="{PALETTE["paper"]}" stroke-width="7"/>'
          f'<line x1="2" y1="0" x2="36" y2="0" stroke="{PALETTE["route"]}" stroke-width="3"/>'
          + chevron(19, 0, 1, 0), "route of the tool point; arrows show the direction of travel")
    entry(leg_tag(19, 0, 2), "leg number (leg 2 runs from the 1st to the 2nd target)")
    entry(target_marker(19, 0, "3", PALETTE["target"]), "target, numbered in visit order")
    entry(start_marker(19, 0, "S"), "start (S) and finish (F) of the head")
    if reasons:
        entry(unreachable_marker(19, 0, "A"), "point that cannot be reached; why, below")
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
    out.append(f'<line x1="0" y1="{svgnum(y)}" x2="{svgnum(LEGEND_WIDTH)}" y2="{svgnum(y)}" '
               f'stroke="{ink}" stroke-width="0.8"/>')
    y += 22
    if reasons:
        out.append(svg_text(0, y, "Cannot be reached", size=14, weight="bold", halo=False,
                            fill=ink))
        y += 20
        for uid, reason in reasons:
            out.append(f'<g transform="translate(0,{svgnum(y - 4)})">'
                       f'{unreachable_marker(12, 0, letters.get(uid, "?"))}</g>')
            out.append(svg_text(32, y, uid, size=12, weight="bold", halo=False))
            y += 16
            for line in wrap_text(reason, 11, LEGEND_WIDTH - 32) if details else []:
                out.append(svg_text(32, y, line, size=11, halo=False))
                y += 14
            y += 8
        if not details:
            out.append(svg_text(0, y, "Why: see the list below the picture.", size=11,
                                halo=False))
            y += 18
    elif route is not None:
        out.append(svg_text(0, y, "Every target is reached.", size=13, weight="bold",
                            halo=False))
        y += 20
    if route is not None and route.legs and details:
        y += 4
        out.append(svg_text(0, y, "Legs", size=14, weight="bold", halo=False))
        y += 18
        for k, leg in enumerate(route.legs, start=1):
            line = f"{k:>2}  {leg.from_id} \u2192 {leg.to_id}"
            out.append(svg_text(0, y, line, size=11, halo=False))
            out.append(svg_text(LEGEND_WIDTH, y, f"{one_decimal(leg.length)} {u}", size=11,
                                halo=False, anchor="end"))
            y += 14
        out.append(svg_text(0, y + 4, "total", size=11, weight="bold", halo=False))
        out.append(svg_text(LEGEND_WIDTH, y + 4, f"{one_decimal(route.length)} {u}", size=11,
                            halo=False, anchor="end", weight="bold"))
        y += 20
    return "".join(out), y

