"""Replay a .nc program with two general-purpose G-code parsers from PyPI and check it.

pygcode (an RS274/NGC parser and machine-state interpreter: modal groups, comments, line
numbers) replays the program; gcodeparser reads the same move words a second way (it does not
know parenthesised comments, so it also shows the adapter's own comments hold no G words). The
rules checked are NISTIR 6556's (Kramer, Proctor and Messina, "The NIST RS274NGC Interpreter -
Version 3", 2000), named beside each check.
"""

from __future__ import annotations

import re

import numpy as np
from _adapter_routes import distinct, polyline
from gcodeparser import parse_gcode_lines
from pygcode import GCodeLinearMove, GCodeRapidMove, Line, Machine

UNIT_WORD = {"mm": "G21", "inch": "G20"}


def replay(text: str) -> dict:
    """Run the program through pygcode's machine: every XY move's end point, feed and kind."""
    machine = Machine()
    out = {"xy": [], "feed": [], "rapid": [], "words_before_first_move": [], "comments": [],
           "lines": []}
    for raw in text.splitlines():
        line = Line(raw)  # raises on what pygcode cannot parse (e.g. nested comments)
        block = line.block
        if line.comment:
            out["comments"].append(line.comment.text)
        moves = [g for g in block.gcodes
                 if isinstance(g, GCodeLinearMove | GCodeRapidMove)
                 and ("X" in g.params or "Y" in g.params)]
        if not out["xy"] and not moves:
            out["words_before_first_move"].extend(str(w) for w in block.words)
        machine.process_block(block)
        if moves:
            out["xy"].append((machine.pos.X, machine.pos.Y))
            out["feed"].append(machine.mode.feed_rate.word.value)
            out["rapid"].append(isinstance(moves[0], GCodeRapidMove))
            if not out["lines"]:
                out["words_before_first_move"].extend(
                    str(w) for w in block.words if w.letter != "X" and w.letter != "Y")
            out["lines"].append(raw)
    out["xy"] = np.asarray(out["xy"], dtype=float).reshape(-1, 2)
    return out


def gcodeparser_moves(text: str) -> tuple[np.ndarray, set[str]]:
    """The same program read by gcodeparser: XY end points of G0/G1 moves, commands seen."""
    xy, commands = [], set()
    x = y = None
    for line in parse_gcode_lines(text):
        commands.add(line.command_str)
        if line.command in (("G", 0), ("G", 1)) and ("X" in line.params or "Y" in line.params):
            x = float(line.params.get("X", x))
            y = float(line.params.get("Y", y))
            xy.append((x, y))
    return np.asarray(xy, dtype=float).reshape(-1, 2), commands


def check_program(text: str, route, resolution: float, *, rapids: bool = False,
                  max_len: int = 256) -> dict:
    """The checks every written program must pass; returns the replay for more checks."""
    run = replay(text)
    expected = distinct(polyline(route))
    # NISTIR 6556 (G0 rapid, G1 linear motion, G90 absolute distance mode): replaying the
    # absolute moves puts the tool point on every vertex of the route, in order, within a
    # thousandth of the output resolution (the written path is the checked one).
    assert run["xy"].shape == expected.shape
    assert np.all(np.abs(run["xy"] - expected) <= resolution * 1e-3)
    other, commands = gcodeparser_moves(text)
    assert np.all(np.abs(other - expected) <= resolution * 1e-3)
    if len(expected):
        # NISTIR 6556 (G20/G21 length units, G90 distance mode): both are in force before the
        # first move, since the machine's own defaults are unknown.
        before = run["words_before_first_move"]
        assert UNIT_WORD[route.units] in before and "G90" in before
    # NISTIR 6556: G0 moves at rapid rate, and many controls move each axis of a rapid on its
    # own (common practice, no source): no G0 at all unless config says rapids are linear.
    assert all(run["rapid"]) if rapids else not any(run["rapid"])
    if not rapids:
        assert "G0" not in commands
    for raw in text.splitlines():
        # NISTIR 6556: a line has at most 256 characters; a line number is N and at most five
        # digits.
        assert len(raw) <= max_len
        m = re.match(r"\s*N(\d+)", raw)
        if m:
            assert len(m.group(1)) <= 5
    return run
