"""Line syntax of the `.nc` file and the words a configured text block may not contain.

Word meanings follow the NIST RS274NGC interpreter report (T. Kramer, F. Proctor, E. Messina,
"The NIST RS274NGC Interpreter - Version 3", NISTIR 6556, 2000), cited below as NISTIR 6556:
a line is optional line number, then words (a letter and a real value), parameter settings and
comments; comments are in parentheses and may not nest; spaces do not change the meaning of a
line outside comments; letters are case-insensitive.
"""

from __future__ import annotations

import re

__all__ = [
    "split_comments",
    "code_words",
    "refusal",
    "syntax_problem",
    "comment",
    "non_printable",
    "BLOCKS",
]

# The configurable text blocks, in the order they can occur in a program.
BLOCKS = ("program_start", "before_leg", "after_leg", "at_target", "program_end")

# A word: a letter not preceded by another letter (so the X in the expression function FIX[...]
# is not taken for an axis word), then a number, an expression `[` or a parameter `#`.
_WORD = re.compile(r"(?<![A-Z])([A-Z])([+-]?(?:\d+\.?\d*|\.\d+)|\[|#)")

# Axis words that would move the head in the plane or turn it (NISTIR 6556: X, Y, Z linear axes,
# A, B, C rotational; U, V are ISO 6983 secondary axes parallel to X and Y). The route is planned
# for a head that only translates in X and Y along the planned path; Z is left to the blocks.
_AXES = {
    "X": "an X word moves the head off the planned path",
    "Y": "a Y word moves the head off the planned path",
    "U": "a U word (an axis parallel to X) moves the head off the planned path",
    "V": "a V word (an axis parallel to Y) moves the head off the planned path",
    "A": "an A word turns the head, but the route is planned for a head that only translates",
    "B": "a B word turns the head, but the route is planned for a head that only translates",
    "C": "a C word turns the head, but the route is planned for a head that only translates",
}

# (low, high, reason): G numbers in [low, high] are refused in every block. NISTIR 6556 names:
# G2/G3 arcs, G10 coordinate system data, G28/G30 return to home (through an intermediate point),
# G41/G42 cutter radius compensation on (offsets the path), G92 coordinate system offsets.
# G51/G52/G68 are not in NISTIR 6556; common dialects use them for scaling, local offsets and
# rotation of the coordinates (common practice, no source), so they are refused too.
_G_REFUSED = [
    (2, 3, "arcs (G2, G3) move the head off the planned straight segments"),
    (10, 10.99, "G10 changes coordinate system data, so later positions land elsewhere"),
    (28, 28.99, "G28 returns home through an intermediate point: an unplanned move"),
    (30, 30.99, "G30 returns home through an intermediate point: an unplanned move"),
    (41, 42.99, "cutter radius compensation (G41, G42) offsets the planned path"),
    (51, 52.99, "scaling or local offsets (G51, G52) move later positions"),
    (68, 68.99, "coordinate rotation (G68) moves later positions"),
    (92, 92.99, "G92 coordinate offsets move later positions"),
]
# Coordinate system selection (NISTIR 6556: G54 to G59.3) shifts every later position: allowed
# only in program_start, before the first move.
_G_WORK_OFFSET = (54, 59.99)
# NISTIR 6556: M2 and M30 end the program; M99 is not in NISTIR 6556 but ends or repeats a
# program in common dialects (common practice, no source).
_M_END = {2: "M2 ends the program", 30: "M30 ends the program"}
_M_REFUSED = {99: "M99 returns from or repeats a program"}


def non_printable(text: str) -> str | None:
    """The first character that is not printable ASCII (a control may stop on it), or None."""
    for ch in text:
        if not (" " <= ch <= "~" or ch == "\t"):
            return ch
    return None


def split_comments(line: str) -> list[tuple[str, str]]:
    """A line as ("code", text) and ("comment", inner text) pieces, in order.

    Raises ValueError when parentheses do not pair up or nest (NISTIR 6556: a comment is
    everything between `(` and the next `)`; nested comments are not allowed).
    """
    pieces: list[tuple[str, str]] = []
    rest = line
    while rest:
        open_at = rest.find("(")
        close_at = rest.find(")")
        if close_at != -1 and (open_at == -1 or close_at < open_at):
            raise ValueError("a `)` without its `(`")
        if open_at == -1:
            pieces.append(("code", rest))
            break
        if open_at:
            pieces.append(("code", rest[:open_at]))
        end = rest.find(")", open_at + 1)
        if end == -1:
            raise ValueError("a `(` comment without its closing `)`")
        inner = rest[open_at + 1:end]
        if "(" in inner:
            raise ValueError("a comment inside a comment (comments may not nest)")
        pieces.append(("comment", inner))
        rest = rest[end + 1:]
    return pieces


def code_words(code: str) -> list[tuple[str, float | None]]:
    """The words in a piece of code: (letter, value) with value None for `[expr]` or `#param`.

    Read twice and joined, to err on the side of finding a word: once with every space removed
    (NISTIR 6556: spaces do not change the meaning), and once keeping the spaces between items,
    so that `CALL X5` still shows its X word.
    """
    upper = code.upper()
    squeezed = re.sub(r"\s+", "", upper)
    spaced = re.sub(r"([A-Z])\s+(?=[-+.\d\[#])", r"\1", re.sub(r"\s+", " ", upper))
    out: list[tuple[str, float | None]] = []
    for text in (squeezed, spaced):
        for m in _WORD.finditer(text):
            letter, value = m.group(1), m.group(2)
            word = (letter, None if value in ("[", "#") else float(value))
            if word not in out:
                out.append(word)
    return out


# NISTIR 6556 word letters (E, O, U, V, W are not among them).
_NGC_LETTERS = set("ABCDFGHIJKLMNPQRSTXYZ")
_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)")
_PARAMETER = re.compile(r"#(?:\d+|<[^<>]*>)")


# NISTIR 6556 unary operations (a real value may be one applied to a bracketed expression).
_UNARY = re.compile(r"ABS|ACOS|ASIN|ATAN|COS|EXP|FIX|FUP|LN|ROUND|SIN|SQRT|TAN")


def _bracket_end(s: str, i: int) -> int | None:
    if i >= len(s) or s[i] != "[":
        return None
    depth = 0
    for j in range(i, len(s)):
        depth += {"[": 1, "]": -1}.get(s[j], 0)
        if depth == 0:
            return j + 1
    return None


def _value_end(s: str, i: int) -> int | None:
    """Where a real value starting at s[i] ends (NISTIR 6556: a number, a parameter value, an
    expression in brackets, or a unary operation on one; ATAN takes [a]/[b])."""
    m = _NUMBER.match(s, i) or _PARAMETER.match(s, i)
    if m:
        return m.end()
    m = _UNARY.match(s, i)
    if m:
        end = _bracket_end(s, m.end())
        if end is not None and m.group() == "ATAN" and s.startswith("/", end):
            end = _bracket_end(s, end + 1)
        return end
    return _bracket_end(s, i)


def syntax_problem(code: str) -> str | None:
    """Why `code` is not a sequence of NISTIR 6556 items (words, parameter settings), or None.

    Items: a word is a letter and a real value (a number, `#n` or `[expression]`); a parameter
    setting is `#n=value`; a leading `/` is block delete. Spaces are ignored.
    """
    s = re.sub(r"\s+", "", code).upper()
    i = 1 if s.startswith("/") else 0
    while i < len(s):
        start = i
        if s[i].isalpha():
            if s[i] not in _NGC_LETTERS:
                return f"{s[i]!r} is not an RS274/NGC word letter"
            end = _value_end(s, i + 1)
        elif s[i] == "#":
            m = _PARAMETER.match(s, i)
            end = None
            if m and m.end() < len(s) and s[m.end()] == "=":
                end = _value_end(s, m.end() + 1)
        else:
            end = None
        if end is None:
            return f"{s[start:start + 12]!r} is not a word (a letter and a number)"
        i = end
    return None


def refusal(code: str, block: str, *, rapids_linear: bool, strict: bool = True) -> str | None:
    """Why this code may not stand in `block` (a configured text block), or None if it may.

    With `strict`, the code must also be plain RS274/NGC items (see `syntax_problem`).
    """
    if "%" in code:
        return "`%` marks the start or end of a program tape"
    if strict:
        problem = syntax_problem(code)
        if problem:
            return (f"{problem} (NISTIR 6556); for dialect lines such as O-word subprogram "
                    "calls set strict_words: false")
    for letter, value in code_words(code):
        if letter in _AXES:
            return _AXES[letter]
        if letter == "N":
            return "line numbers are the adapter's own (setting line_numbers)"
        if letter in ("G", "M") and value is None:
            return f"a {letter} word with a computed value cannot be checked; write the number"
        if letter == "G":
            if abs(value) < 1e-4 and not rapids_linear:
                return ("G0 (rapid) is refused while rapids_linear is false: this control's "
                        "rapids are not known to be straight; use G1 with an F word")
            for low, high, reason in _G_REFUSED:
                if low - 1e-4 <= value <= high:
                    return reason
            low, high = _G_WORK_OFFSET
            if low - 1e-4 <= value <= high and block != "program_start":
                return ("selecting a coordinate system (G54 to G59.3) is allowed in "
                        "program_start only")
        if letter == "M":
            number = round(value)
            if abs(value - number) < 1e-4:
                if number in _M_END and block != "program_end":
                    return f"{_M_END[number]}; it belongs in program_end"
                if number in _M_REFUSED:
                    return _M_REFUSED[number]
    return None


def comment(text: str) -> str:
    """`text` as one NISTIR 6556 comment: parentheses become brackets, other odd characters `?`.

    `;` becomes `,`: NISTIR 6556 gives it no meaning, but many dialects (and parsers) take it
    for the start of an end-of-line comment, which would cut this one open.
    """
    clean = text.replace("(", "[").replace(")", "]").replace(";", ",")
    clean = "".join(ch if " " <= ch <= "~" else "?" for ch in clean)
    return f"({clean})"
