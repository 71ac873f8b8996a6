"""Plain data from JSON text, refusing what `json` lets through: duplicate keys, deep nesting."""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from typing import Any

from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from .problem import PathPart, Problem
from .yamlparse import plain_number

__all__ = ["parse_json"]


class _Duplicate(Exception):
    def __init__(self, key: str) -> None:
        super().__init__(key)
        self.key = key


def _pairs(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out = dict(pairs)
    if len(out) != len(pairs):
        seen: set[str] = set()
        for key, _ in pairs:
            if key in seen:
                raise _Duplicate(key)
            seen.add(key)
    return out


def parse_json(text: str, max_depth: int, nodes: Callable[[], Node | None]) -> Any:
    """Plain data from JSON text; raises `Problem`. `nodes` gives the composed tree (only
    asked for to place a duplicate key)."""
    if not text.strip():
        raise Problem((), "the file is empty (no JSON value in it)",
                      "start from an example in docs/scene-format.md", line=1, column=1)
    try:
        try:
            value = json.loads(text, object_pairs_hook=_pairs)
        except json.JSONDecodeError:
            raise
        except ValueError:  # an integer too long for Python's int conversion
            value = json.loads(text, object_pairs_hook=_pairs, parse_int=plain_number)
    except json.JSONDecodeError as exc:
        raise Problem((), f"not valid JSON: {exc.msg}", "check the commas, quotes and brackets",
                      line=exc.lineno, column=exc.colno) from None
    except RecursionError:
        raise Problem((), "the document is nested too deeply", None, line=1) from None
    except _Duplicate as dup:
        where = _find_duplicate(nodes(), dup.key)
        raise Problem((), f"the key {dup.key!r} appears twice in one object",
                      "merge the two into one; a repeated key would hide the first",
                      line=where[0] if where else None,
                      column=where[1] if where else None) from None
    path = _too_deep(value, max_depth) if _json_depth(text) > max_depth else None
    if path is not None:
        raise Problem(path, f"nested deeper than {max_depth} levels",
                      "flatten the document (limits.max_depth in config/planner.yaml)")
    return value


def _find_duplicate(root: Node | None, key: str) -> tuple[int, int] | None:
    stack = [root] if root is not None else []
    while stack:
        node = stack.pop()
        if isinstance(node, MappingNode):
            names = [k.value for k, _ in node.value if isinstance(k, ScalarNode)]
            for i, (k, _v) in enumerate(node.value):
                if isinstance(k, ScalarNode) and k.value == key and key in names[:i]:
                    return k.start_mark.line + 1, k.start_mark.column + 1
            stack.extend(v for _, v in node.value)
        elif isinstance(node, SequenceNode):
            stack.extend(node.value)
    return None


_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*"')


def _json_depth(text: str) -> int:
    """Deepest nesting of arrays and objects in valid JSON text (strings skipped)."""
    import numpy as np

    codes = np.frombuffer(_JSON_STRING.sub("", text).encode("utf-8"), dtype=np.uint8)
    step = np.isin(codes, (ord("["), ord("{"))).astype(np.int32)
    step -= np.isin(codes, (ord("]"), ord("}")))
    return int(np.cumsum(step).max(initial=0))


def _too_deep(value: Any, max_depth: int) -> tuple[PathPart, ...] | None:
    stack: list[tuple[Any, tuple[PathPart, ...]]] = [(value, ())]
    while stack:
        item, path = stack.pop()
        if len(path) >= max_depth:
            return path
        if isinstance(item, dict):
            stack.extend((v, (*path, k)) for k, v in item.items() if isinstance(v, dict | list))
        elif isinstance(item, list):
            stack.extend((v, (*path, i)) for i, v in enumerate(item) if isinstance(v, dict | list))
    return None
