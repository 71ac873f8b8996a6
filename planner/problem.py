"""One problem found in a document, at a location path, and the words used to describe values.

Shared by the parsers (`yamlparse`, `jsonparse`), the schema check (`schemacheck`) and the loaders
(`scene`, `config`) so that every message names places and values the same way.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

__all__ = ["PathPart", "Problem", "format_path", "closest", "kind_of"]

PathPart = str | int


class Problem(Exception):
    """A problem at a location path of a document; `Document.error` turns it into a located error.

    `at_key` points at the key itself (an unknown key) rather than its value; `line`/`column`
    (1-based) are set when the place is known without a path (a syntax error).
    """

    def __init__(
        self,
        path: Sequence[PathPart],
        message: str,
        hint: str | None = None,
        *,
        at_key: bool = False,
        line: int | None = None,
        column: int | None = None,
    ) -> None:
        super().__init__(message)
        self.path = tuple(path)
        self.message = message
        self.hint = hint
        self.at_key = at_key
        self.line = line
        self.column = column


def format_path(path: Sequence[PathPart]) -> str:
    """`("obstacles", 3, "polygon")` -> `obstacles[3].polygon`."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += f".{part}" if text else str(part)
    return text


def closest(word: str, choices: Sequence[str]) -> str | None:
    """The choice most like `word` (for "did you mean"), or None."""
    import difflib

    found = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return found[0] if found else None


def kind_of(value: Any) -> str:
    """A person's word for the type of a parsed value."""
    if value is None:
        return "nothing (null)"
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, int | float):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"the text {_short(value)!r}"
    if isinstance(value, list):
        return f"a list of {len(value)}"
    if isinstance(value, dict):
        return "a mapping"
    return type(value).__name__


def _short(text: str, n: int = 40) -> str:
    return text if len(text) <= n else text[: n - 3] + "..."
