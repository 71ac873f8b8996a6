"""The `gcode` adapter's settings section: checked values and the configurable text blocks.

Word meanings (NISTIR 6556, Kramer, Proctor and Messina, 2000): G20/G21 inch/millimetre units
(ISO 6983-1 dialects write G70/G71), G61 exact path mode, G61.1 exact stop mode, G64 continuous
(blended) mode, N line numbers of at most five digits, lines of at most 256 characters.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from .gcode_words import BLOCKS, comment, non_printable, refusal, split_comments
from .numbers import decimals_for
from .section import Section

__all__ = ["GcodeSettings", "TextBlock", "read_gcode_settings", "PLACEHOLDERS", "DEFAULT_BLOCKS"]

UNIT_WORDS = {
    "rs274": {"mm": "G21", "inch": "G20"},  # NISTIR 6556: G20 inch, G21 millimetre
    "iso6983": {"mm": "G71", "inch": "G70"},  # ISO 6983-1 dialects (from memory)
}
PATH_MODES = {
    "exact_path": "G61",  # NISTIR 6556: exact path mode, the planned corners are kept
    "exact_stop": "G61.1",  # NISTIR 6556: exact stop mode, stops at the end of every move
    "continuous": "G64",  # NISTIR 6556: continuous mode, corners may be rounded (cut inside)
    "none": None,  # the control's own mode; nothing is written
}
LINE_ENDINGS = {"lf": "\n", "crlf": "\r\n"}
FEED_UNITS = {"mm": "mm", "inch": "inch"}

# What each block may use: `{name}` is replaced by the value when the block is written.
PLACEHOLDERS = {
    "program_start": (),
    "before_leg": ("leg", "from", "to", "x", "y"),
    "after_leg": ("leg", "from", "to", "x", "y"),
    "at_target": ("id", "index", "x", "y"),
    "program_end": (),
}
DEFAULT_BLOCKS = {
    "program_start": "",
    "before_leg": "",
    "after_leg": "",
    "at_target": "(target {index}: {id})",
    "program_end": "M30",
}
DEFAULTS = {
    "traverse_feed": 3000.0,  # per minute; a cautious value (common practice, no source)
    "max_line_length": 256,  # NISTIR 6556: a line may have up to 256 characters
    "line_number_start": 10,
    "line_number_step": 10,
}
MAX_LINE_NUMBER = 99999  # NISTIR 6556: N and an integer of at most five digits
KNOWN = [
    "units", "traverse_feed", "rapids_linear", "path_mode", "unit_words", "decimals",
    "line_numbers", "line_number_start", "line_number_step", "max_line_length", "line_ending",
    "percent", "strict_words", "blocks",
]

_PLACEHOLDER = re.compile(r"\{([^{}]*)\}")
_SAMPLE = "0"  # stands in for placeholder values when a block is checked before any route


@dataclass(frozen=True)
class TextBlock:
    """A configured block: lines of ("code" | "comment", template) pieces, checked."""

    name: str
    lines: tuple[tuple[tuple[str, str], ...], ...]

    def render(self, values: dict[str, str]) -> list[str]:
        """The block's lines with placeholders filled; values in comments are made comment-safe."""
        out = []
        for pieces in self.lines:
            parts = []
            for kind, template in pieces:
                if kind == "comment":
                    filled = _fill(template, {k: comment(v)[1:-1] for k, v in values.items()})
                    parts.append(f"({filled})")
                else:
                    parts.append(_fill(template, values))
            line = "".join(parts).strip()
            if line:
                out.append(line)
        return out


def _fill(template: str, values: dict[str, str]) -> str:
    return _PLACEHOLDER.sub(lambda m: values[m.group(1)], template)


@dataclass(frozen=True)
class GcodeSettings:
    """Checked settings of the gcode adapter; the feed is in `feed_units` per minute."""

    feed_units: str
    traverse_feed: float
    rapids_linear: bool
    path_word: str | None
    unit_words: dict[str, str]
    decimals: int | None  # None: from the output resolution
    line_numbers: bool
    line_number_start: int
    line_number_step: int
    max_line_length: int
    line_ending: str
    percent: bool
    strict_words: bool
    blocks: dict[str, TextBlock]


def read_gcode_settings(
    section: Any,
    file: str = "planner.yaml",
    *,
    config_units: str = "mm",
    resolution: float | None = None,
    resolution_units: str | None = None,
) -> GcodeSettings:
    """Check `adapter_settings.gcode` and return the values to use.

    `resolution` (in `resolution_units`, the route's) is the output resolution; when given,
    `decimals` may not be coarser than it, so the written path is the checked one.
    """
    s = Section("gcode", section, file)
    feed_units = s.choice("units", config_units, FEED_UNITS)
    feed = s.number("traverse_feed", DEFAULTS["traverse_feed"])
    rapids_linear = s.flag("rapids_linear", False)
    path_word = s.choice("path_mode", "exact_path", PATH_MODES)
    unit_words = s.choice("unit_words", "rs274", UNIT_WORDS)
    decimals = _decimals(s, resolution, resolution_units)
    line_numbers = s.flag("line_numbers", False)
    start = s.integer("line_number_start", DEFAULTS["line_number_start"], 0, MAX_LINE_NUMBER)
    step = s.integer("line_number_step", DEFAULTS["line_number_step"], 1, 1000)
    max_len = s.integer("max_line_length", DEFAULTS["max_line_length"], 20, 256)
    line_ending = s.choice("line_ending", "lf", LINE_ENDINGS)
    percent = s.flag("percent", False)
    strict = s.flag("strict_words", True)
    blocks_section = s.mapping("blocks")
    blocks = {
        name: _text_block(blocks_section, name, rapids_linear, strict, max_len, line_numbers)
        for name in BLOCKS
    }
    blocks_section.finish(list(BLOCKS))
    s.finish(KNOWN)
    return GcodeSettings(
        feed_units=feed_units, traverse_feed=feed, rapids_linear=rapids_linear,
        path_word=path_word, unit_words=unit_words, decimals=decimals,
        line_numbers=line_numbers, line_number_start=start, line_number_step=step,
        max_line_length=max_len, line_ending=line_ending, percent=percent, strict_words=strict,
        blocks=blocks,
    )


def _decimals(s: Section, resolution: float | None, units: str | None) -> int | None:
    value = s.raw("decimals", "auto")
    if value == "auto":
        return None
    decimals = s.integer("decimals", 0, 0, 9)
    if resolution is not None:
        needed = decimals_for(resolution)
        if decimals < needed:
            raise s.error(
                s.where("decimals"),
                f"{decimals} decimals would write points up to {0.5 * 10.0 ** -decimals:g} "
                f"{units or ''} away from the checked route (output resolution {resolution:g} "
                f"{units or ''})".replace("  ", " "),
                f"use auto or at least {needed} decimals; for fewer, set planner.yaml's "
                "resolution to a coarser decimal step in the scene's units",
            )
    return decimals


def _text_block(
    blocks: Section, name: str, rapids_linear: bool, strict: bool, max_len: int,
    line_numbers: bool,
) -> TextBlock:
    text = blocks.text(name, DEFAULT_BLOCKS[name])
    where = blocks.where(name)
    allowed = PLACEHOLDERS[name]
    lines = []
    for number, line in enumerate(text.splitlines(), 1):
        at = f"{where} (line {number} of the block)" if "\n" in text.strip() else where
        bad = non_printable(line)
        if bad is not None:
            raise blocks.error(at, f"contains the character {bad!r}, which a control may not read",
                               "use printable ASCII characters only")
        for m in _PLACEHOLDER.finditer(line):
            if m.group(1) not in allowed:
                names = ", ".join("{" + a + "}" for a in allowed)
                hint = f"allowed here: {names}" if allowed else "this block takes no placeholders"
                raise blocks.error(at, f"unknown placeholder {{{m.group(1)}}}", hint)
        if "{" in _PLACEHOLDER.sub("", line) or "}" in _PLACEHOLDER.sub("", line):
            raise blocks.error(at, "a `{` or `}` that is not part of a placeholder",
                               "write placeholders as {name}; braces have no other use here")
        try:
            pieces = tuple(split_comments(line))
        except ValueError as exc:
            raise blocks.error(at, f"{exc}: {line!r}",
                               "write comments as (text), one pair of parentheses each") from None
        for kind, piece in pieces:
            if kind == "comment" and ";" in piece:
                raise blocks.error(at, f"a `;` inside the comment {piece!r}",
                                   "many dialects start a comment at `;`, which would cut this "
                                   "one open; write `,` instead")
            if kind != "code":
                continue
            reason = refusal(_fill_sample(piece), name, rapids_linear=rapids_linear,
                             strict=strict)
            if reason:
                raise blocks.error(at, f"{line.strip()!r} is refused: {reason}",
                                   "the adapter writes every X/Y move itself; keep blocks to "
                                   "Z moves, tool and process words, subprogram calls, comments")
        fixed_len = len(_PLACEHOLDER.sub("", line.strip())) + (7 if line_numbers else 0)
        if fixed_len > max_len:
            raise blocks.error(at, f"the line is longer than max_line_length ({max_len})",
                               "split it over several lines (a `|` block)")
        lines.append(pieces)
    return TextBlock(name=name, lines=tuple(lines))


def _fill_sample(template: str) -> str:
    return _PLACEHOLDER.sub(_SAMPLE, template)
