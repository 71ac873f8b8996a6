"""Where a picture's labels go (text boxes, a placer keeping them apart, wrapping), in one place."""

from __future__ import annotations

import itertools
from collections.abc import Iterator, Sequence

import numpy as np
import shapely
import shapely.ops

from .svgparts import CHAR_WIDTH, Frame, svg_text, svgnum, text_width

__all__ = ["Box", "text_box", "LabelPlacer", "BESIDE_POINT", "wrap_text", "label_obstacle"]

Box = tuple[float, float, float, float]


def text_box(x: float, y: float, text: str, size: float, anchor: str = "start") -> Box:
    """The page box (x0, y0, x1, y1) a line of text takes, a little generous."""
    w = text_width(text, size) * 1.08  # bold glyphs are a little wider
    x0 = x if anchor == "start" else x - w / 2 if anchor == "middle" else x - w
    return (x0 - 2, y - size, x0 + w + 2, y + 3)


class LabelPlacer:
    """Keeps labels off each other and off the point markers (boxes in page pixels).

    Boxes are kept in a grid of cells so that a query looks only at its neighbours.
    """

    _CELL = 64.0  # px

    def __init__(self, bounds: Box) -> None:
        self.bounds = bounds
        self._grid: dict[tuple[int, int], list[tuple[Box, float]]] = {}

    def _cells(self, box: Box) -> Iterator[tuple[int, int]]:
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
        boxes = [text_box(x + dx, y + dy, text, size, a) for dx, dy, a in spots]
        dx, dy, a = spots[self.choose(boxes)]
        return svg_text(x + dx, y + dy, text, anchor=a, **style)


# Offsets tried, in order, for a label beside a point marker (page px, text anchor).
BESIDE_POINT = ((14, -12, "start"), (14, 20, "start"), (-14, -12, "end"), (-14, 20, "end"),
                (0, -18, "middle"), (0, 28, "middle"))


def wrap_text(text: str, size: float, width: float) -> list[str]:
    """Greedy word wrap to a pixel width (estimated glyph widths)."""
    limit = max(8, int(width / (size * CHAR_WIDTH)))
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


def label_obstacle(frame: Frame, geom: shapely.Geometry, layouts: list[list[str]],
                   inside_fill: str, placer: LabelPlacer, inside_halo: bool = False) -> str:
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
        width = max(text_width(line, size) for line in lines) + 6
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
                out += svg_text(cx, y, line, size=size, fill=inside_fill, anchor="middle",
                                halo=inside_halo, weight="bold")
                y += step
            if rotate:
                out = f'<g transform="rotate(-90 {svgnum(cx)} {svgnum(cy)})">{out}</g>'
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
    boxes = [text_box(x, y, text, size, a) for x, y, a in spots]
    x, y, a = spots[placer.choose(boxes)]
    return svg_text(x, y, text, size=size, anchor=a, weight="bold")

