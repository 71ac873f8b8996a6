"""The `gcode` adapter: the route as a G-code-like move file `<stem>.nc` after ISO 6983-1 / RS-274.

Words and their meanings follow NISTIR 6556 (Kramer, Proctor and Messina, "The NIST RS274NGC
Interpreter - Version 3", 2000):
- `( ... )` comment; `N` line number (at most five digits); lines of at most 256 characters.
- G17 XY plane; G20/G21 inch/millimetre (G70/G71 in ISO 6983-1 dialects); G90 absolute distance
  mode; G94 units-per-minute feed mode; G40 cutter radius compensation off.
- G61 exact path mode (default): a control in G64 continuous mode may round a corner and so
  leave the planned, checked path on its inside.
- G1 linear move at the feed `F`. G0 is a rapid move; many controls move each axis of a rapid at
  its own top speed, so its path is a dog-leg, not the straight checked segment (common
  practice, no source): G0 is written only when `rapids_linear: true`.
- M30 program end (the default program_end block).

The program moves X and Y only. Raising the head to ride height, plunging, and the work done at a
target are the configured text blocks' job (before_leg, after_leg, at_target).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from planner.config import convert_length
from planner.model import FINISH, START, Route

from .base import AdapterError, config_file_name, output_resolution
from .gcode_settings import MAX_LINE_NUMBER, GcodeSettings, TextBlock, read_gcode_settings
from .gcode_words import comment, non_printable, refusal, split_comments
from .numbers import check_on_grid, decimals_for, fixed, trimmed
from .waypoints import check_continuous

__all__ = ["GcodeMoves"]

UNIT_NAMES = {"mm": "millimetres", "inch": "inches"}


class _Program:
    """Lines of the program: optional N numbers, the length limit, one line ending."""

    def __init__(self, cfg: GcodeSettings) -> None:
        self.cfg = cfg
        self.lines: list[str] = []
        self.number = cfg.line_number_start

    def raw(self, text: str) -> None:
        self.lines.append(text)

    def add(self, text: str, source: str) -> None:
        """One line; `source` says where it came from for error messages."""
        cfg = self.cfg
        if cfg.line_numbers and any(k == "code" and v.strip() for k, v in split_comments(text)):
            if self.number > MAX_LINE_NUMBER:
                raise AdapterError(
                    f"gcode: the program needs line numbers above N{MAX_LINE_NUMBER} (NISTIR 6556 "
                    "allows five digits); set a smaller adapter_settings.gcode.line_number_step "
                    "or line_number_start, or line_numbers: false"
                )
            text = f"N{self.number} {text}"
            self.number += cfg.line_number_step
        if len(text) > cfg.max_line_length:
            raise AdapterError(
                f"gcode: {source} writes a line of {len(text)} characters, more than "
                f"max_line_length ({cfg.max_line_length}): {text[:60]!r}...; shorten the block "
                "or the ids it uses"
            )
        self.lines.append(text)

    def comment(self, text: str, source: str = "the header") -> None:
        """A comment, wrapped over several lines when it is longer than a line may be."""
        width = self.cfg.max_line_length - 2
        words = text.split(" ")
        line = ""
        for word in words:
            while len(word) > width:  # a very long id: cut it
                if line:
                    self.add(comment(line), source)
                    line = ""
                self.add(comment(word[:width]), source)
                word = word[width:]
            if line and len(line) + 1 + len(word) > width:
                self.add(comment(line), source)
                line = word
            else:
                line = f"{line} {word}" if line else word
        if line:
            self.add(comment(line), source)

    def text(self) -> str:
        end = self.cfg.line_ending
        return end.join(self.lines) + end


class GcodeMoves:
    """Route -> `<stem>.nc`: units, absolute mode and exact path first, then every traverse."""

    name = "gcode"
    suffix = ".nc"
    summary = "G-code-like traverse program (RS-274 / ISO 6983 words, NISTIR 6556 meanings)"

    def check(self, settings: Mapping[str, Any], job: Any = None) -> None:
        read_gcode_settings(settings, config_file_name(job), config_units=_config_units(job))

    def write(self, route: Route, settings: Mapping[str, Any], job: Any = None) -> str:
        if route.units not in UNIT_NAMES:
            raise AdapterError(f"gcode: unknown route units {route.units!r} (expected mm or inch)")
        resolution = output_resolution(route, job)
        cfg = read_gcode_settings(
            settings, config_file_name(job), config_units=_config_units(job),
            resolution=resolution, resolution_units=route.units,
        )
        check_continuous(route)
        decimals = cfg.decimals if cfg.decimals is not None else decimals_for(resolution)
        check_on_grid((p for leg in route.legs for p in leg.points), decimals, resolution, "gcode")
        return _Writer(route, cfg, decimals).program()


def _config_units(job: Any) -> str:
    """planner.yaml's `units` (the default units of lengths in the adapter's section)."""
    raw = getattr(getattr(job, "settings", None), "raw", None)
    units = raw.get("units") if isinstance(raw, Mapping) else None
    return units if units in UNIT_NAMES else "mm"


class _Writer:
    """Writes one program; keeps track of what the blocks may have changed."""

    def __init__(self, route: Route, cfg: GcodeSettings, decimals: int) -> None:
        self.route = route
        self.cfg = cfg
        self.decimals = decimals
        self.out = _Program(cfg)
        self.units_word = cfg.unit_words[route.units]
        feed = cfg.traverse_feed * _length_factor(cfg.feed_units, route.units)
        self.feed = trimmed(feed, 3)
        if float(self.feed) <= 0:  # NISTIR 6556: a G1 move at feed rate zero is an error
            raise AdapterError(f"gcode: traverse_feed {cfg.traverse_feed:g} {cfg.feed_units}/min "
                               f"is 0 when written in {route.units}/min; set a larger feed")
        self.need_feed = True  # the next G1 carries the F word
        self.need_modes = False  # a block ran since the modes were last stated
        self.at: tuple[str, str] | None = None  # the last written X, Y

    def xy(self, point: tuple[float, float]) -> tuple[str, str]:
        return fixed(point[0], self.decimals), fixed(point[1], self.decimals)

    def program(self) -> str:
        cfg, route, out = self.cfg, self.route, self.out
        if cfg.percent:
            out.raw("%")
        self.header()
        self.modes(explained=True)
        self.block(cfg.blocks["program_start"], {}, "blocks.program_start")
        index = 0
        for number, leg in enumerate(route.legs, 1):
            out.comment(f"leg {number}: {leg.from_id} -> {leg.to_id}, "
                        f"{leg.length:.{self.decimals}f} {route.units}", f"leg {number}")
            x0, y0 = self.xy(leg.points[0])
            x1, y1 = self.xy(leg.points[-1])
            ids = {"leg": str(number), "from": leg.from_id, "to": leg.to_id}
            self.block(cfg.blocks["before_leg"], {**ids, "x": x0, "y": y0},
                       f"blocks.before_leg of leg {number}")
            if self.need_modes:
                self.modes(explained=False)
            points = leg.points if number == 1 else leg.points[1:]
            for point in points:
                self.move(point, f"leg {number}")
            self.block(cfg.blocks["after_leg"], {**ids, "x": x1, "y": y1},
                       f"blocks.after_leg of leg {number}")
            if leg.to_id not in (START, FINISH):
                index += 1
                self.block(cfg.blocks["at_target"],
                           {"id": leg.to_id, "index": str(index), "x": x1, "y": y1},
                           f"blocks.at_target of target {leg.to_id}")
        self.block(cfg.blocks["program_end"], {}, "blocks.program_end")
        if cfg.percent:
            out.raw("%")
        return out.text()

    def header(self) -> None:
        """Comments only; they name no G or M word, so even a parser that does not know
        parenthesised comments reads no command into them (ids excepted)."""
        route, cfg, out = self.route, self.cfg, self.out
        out.comment("sidestep traverse program: X and Y moves only")
        out.comment(f"scene: {route.scene_file}")
        out.comment(f"scene sha256: {route.scene_sha256}")
        out.comment(f"config sha256: {route.config_sha256}")
        out.comment(f"units: {route.units}, status: {route.status}, legs: {len(route.legs)}, "
                    f"length: {route.length:.{self.decimals}f} {route.units}")
        if route.unreachable:
            out.comment("unreachable, not visited: " + ", ".join(u.id for u in route.unreachable))
        if cfg.rapids_linear:
            out.comment("traverses: rapid moves, as rapids_linear says this control moves "
                        "rapids in a straight line")
        else:
            out.comment(f"traverses: linear moves at feed {self.feed} {route.units}/min, no rapid "
                        "moves, as this control's rapids are not known to be straight")
        if cfg.path_word is None:
            out.comment("path mode: not set, the control's own, a blending mode may round corners")
        if route.legs:
            x, y = self.xy(route.legs[0].points[0])
            out.comment(f"the head must be at the start point x = {x}, y = {y} before this "
                        "program runs")

    def modes(self, *, explained: bool) -> None:
        """Plane, units, absolute mode, feed mode, compensation off, path mode (NISTIR 6556)."""
        words = [
            ("G17", "XY plane"),
            (self.units_word, f"lengths in {UNIT_NAMES[self.route.units]}"),
            ("G90", "absolute positions"),
            ("G94", "feed in units per minute"),
            ("G40", "cutter radius compensation off"),
        ]
        path = {"G61": "exact path: corners are not rounded",
                "G61.1": "exact stop at the end of every move",
                "G64": "continuous: the control may round corners inside the checked path"}
        if self.cfg.path_word is not None:
            words.append((self.cfg.path_word, path[self.cfg.path_word]))
        if explained:
            for word, meaning in words:
                self.out.add(f"{word} {comment(meaning)}", "the header")
        else:
            self.out.add(" ".join(w for w, _ in words) + " " + comment("modes again after a block"),
                         "the modes line")
        self.need_modes = False
        self.need_feed = True

    def move(self, point: tuple[float, float], source: str) -> None:
        x, y = self.xy(point)
        if (x, y) == self.at:
            return  # a zero-length move: nothing to write
        if self.cfg.rapids_linear:
            self.out.add(f"G0 X{x} Y{y}", source)
        else:
            feed = f" F{self.feed}" if self.need_feed else ""
            self.out.add(f"G1 X{x} Y{y}{feed}", source)
            self.need_feed = False
        self.at = (x, y)

    def block(self, block: TextBlock, values: dict[str, str], source: str) -> None:
        lines = block.render(values)
        for line in lines:
            reason = _rendered_refusal(line, block.name, self.cfg)
            if reason:
                raise AdapterError(
                    f"gcode: {source} writes {line!r}, which is refused: {reason}; change "
                    f"adapter_settings.gcode.blocks.{block.name} or the id it uses"
                )
            pieces = split_comments(line)
            has_code = any(kind == "code" and text.strip() for kind, text in pieces)
            if len(line) > self.cfg.max_line_length and not has_code:
                # A comment-only line (e.g. a long id) wraps like the header's comments.
                self.out.comment(" ".join(text for kind, text in pieces if kind == "comment"),
                                 source)
            else:
                self.out.add(line, source)
            if has_code:  # it may have changed modes or the feed: state them again
                self.need_modes = True


def _rendered_refusal(line: str, block: str, cfg: GcodeSettings) -> str | None:
    """Re-check a block line after its placeholders were filled (an id may bring words in)."""
    bad = non_printable(line)
    if bad is not None:
        return f"it contains the character {bad!r}, which a control may not read"
    try:
        pieces = split_comments(line)
    except ValueError as exc:
        return str(exc)
    for kind, text in pieces:
        if kind == "code":
            reason = refusal(text, block, rapids_linear=cfg.rapids_linear,
                             strict=cfg.strict_words)
            if reason:
                return reason
    return None


def _length_factor(from_units: str, to_units: str) -> float:
    return convert_length(1.0, from_units, to_units)
