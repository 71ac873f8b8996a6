"""SVG building blocks (palette, page frame, paths, text, markers): every layer looks the same.

The palette is the Okabe-Ito colour-universal-design set (Okabe & Ito, 2008), chosen so every role
also differs in lightness and in shape, and the picture still reads in greyscale print.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from xml.sax.saxutils import escape, quoteattr

import numpy as np
import shapely

__all__ = ["PALETTE", "FONT", "CHAR_WIDTH", "Frame", "svgnum", "svg_points", "ring_path",
           "geometry_path", "svg_text", "text_width", "one_decimal", "target_marker",
           "unreachable_marker", "start_marker", "chevron", "leg_tag"]

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

FONT = "DejaVu Sans, Verdana, Arial, sans-serif"
CHAR_WIDTH = 0.60  # average glyph width as a fraction of the font size (DejaVu Sans, measured)


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


# ---------------------------------------------------------------------------------------------
# small SVG writers

def svgnum(v: float) -> str:
    """A number for an SVG attribute: at most two decimals, no trailing zeros."""
    return f"{v:.2f}".rstrip("0").rstrip(".")


def svg_points(xy: np.ndarray) -> str:
    """Page points as the `points` attribute of a polyline or polygon."""
    return " ".join(f"{svgnum(x)},{svgnum(y)}" for x, y in xy)


def ring_path(frame: Frame, coords: Iterable[Sequence[float]]) -> str:
    """A closed SVG path; runs of vertices inside one quarter pixel are drawn as one."""
    xy = frame.many(np.asarray(coords if isinstance(coords, np.ndarray) else list(coords),
                               dtype=float))
    if len(xy) > 1 and abs(xy[0, 0] - xy[-1, 0]) <= 1e-6 and abs(xy[0, 1] - xy[-1, 1]) <= 1e-6:
        xy = xy[:-1]  # closed by repeating the first vertex (page pixels: 1e-6 is nothing)
    if len(xy) > 8:
        cells = np.round(xy * 4.0)
        keep = np.ones(len(xy), dtype=bool)
        keep[1:] = np.any(cells[1:] != cells[:-1], axis=1)
        if keep.sum() >= 3:
            xy = xy[keep]
    return "M" + " L".join(f"{svgnum(x)},{svgnum(y)}" for x, y in xy) + " Z"


def geometry_path(frame: Frame, geom: shapely.Geometry) -> str:
    """One path for every polygon of `geom` (holes included; draw with fill-rule evenodd)."""
    parts = []
    for poly in shapely.get_parts(geom):
        if not isinstance(poly, shapely.Polygon) or poly.is_empty:
            continue
        parts.append(ring_path(frame, shapely.get_coordinates(poly.exterior)))
        parts.extend(ring_path(frame, shapely.get_coordinates(r)) for r in poly.interiors)
    return " ".join(parts)


def svg_text(x: float, y: float, text: str, *, size: float = 12.0, fill: str = PALETTE["ink"],
             anchor: str = "start", weight: str = "normal", halo: bool = True,
             family: str = FONT) -> str:
    """Text with a white halo underneath (a second copy: some renderers lack paint-order)."""
    attrs = (f'x="{svgnum(x)}" y="{svgnum(y)}" font-family={quoteattr(family)} '
             f'font-size="{svgnum(size)}" text-anchor="{anchor}" font-weight="{weight}"')
    body = escape(text)
    out = ""
    if halo:
        out += (f'<text {attrs} fill="{PALETTE["paper"]}" stroke="{PALETTE["paper"]}" '
                f'stroke-width="3.5" stroke-linejoin="round">{body}</text>')
    return out + f'<text {attrs} fill="{fill}">{body}</text>'


def text_width(text: str, size: float) -> float:
    """Estimated width of `text` in px at font size `size`."""
    return len(text) * size * CHAR_WIDTH


def one_decimal(v: float) -> str:
    """A value for people to read: at most one decimal, no trailing zeros."""
    return f"{v:.1f}".rstrip("0").rstrip(".")


# ---------------------------------------------------------------------------------------------
# markers

def target_marker(x: float, y: float, label: str, colour: str) -> str:
    """A target: a circle with its visit number."""
    return (f'<circle cx="{svgnum(x)}" cy="{svgnum(y)}" r="10" fill="{PALETTE["paper"]}" '
            f'stroke="{colour}" stroke-width="2.5"/>'
            + svg_text(x, y + 4.2, label, size=11.5, fill=colour, anchor="middle",
                       weight="bold", halo=False))


def unreachable_marker(x: float, y: float, label: str) -> str:
    """A point that cannot be reached: a diamond with its letter."""
    c = PALETTE["unreachable"]
    r = 12.0
    d = (f"M{svgnum(x)},{svgnum(y - r)} L{svgnum(x + r)},{svgnum(y)} "
         f"L{svgnum(x)},{svgnum(y + r)} L{svgnum(x - r)},{svgnum(y)} Z")
    return (f'<path d="{d}" fill="{c}" stroke="{PALETTE["ink"]}" stroke-width="1.5"/>'
            + svg_text(x, y + 4.2, label, size=11.5, fill=PALETTE["ink"], anchor="middle",
                       weight="bold", halo=False))


def start_marker(x: float, y: float, label: str) -> str:
    """The start or finish: a square with S or F."""
    c = PALETTE["start"]
    return (f'<rect x="{svgnum(x - 10)}" y="{svgnum(y - 10)}" width="20" height="20" rx="2" '
            f'fill="{c}" stroke="{PALETTE["ink"]}" stroke-width="1.2"/>'
            + svg_text(x, y + 4.2, label, size=11.5, fill=PALETTE["paper"], anchor="middle",
                       weight="bold", halo=False))


def chevron(x: float, y: float, dx: float, dy: float, size: float = 7.0,
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
    return (f'<path d="M{" L".join(f"{svgnum(p)},{svgnum(q)}" for p, q in pts)} Z" '
            f'fill="{fill}" stroke="{PALETTE["paper"]}" stroke-width="1"/>')


def leg_tag(x: float, y: float, number: int) -> str:
    """A leg's number in a small rounded box."""
    text = str(number)
    w = 8 + text_width(text, 11)
    return (f'<rect x="{svgnum(x - w / 2)}" y="{svgnum(y - 8)}" width="{svgnum(w)}" height="16" '
            f'rx="3" fill="{PALETTE["paper"]}" stroke="{PALETTE["route"]}" stroke-width="1.5"/>'
            + svg_text(x, y + 4, text, size=11, fill=PALETTE["ink"], anchor="middle",
                       halo=False))

