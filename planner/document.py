"""Read, decode and parse one YAML or JSON file, keeping what finds the line of any path in it."""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from .jsonparse import parse_json
from .problem import PathPart, Problem, format_path
from .yamlparse import compose, parse_yaml

if TYPE_CHECKING:
    from .config import Limits
    from .errors import _Located

__all__ = ["Document", "read_file", "parse_document"]


def read_file(path: Path, max_bytes: int, error: type[_Located], file: str) -> bytes:
    """The file's bytes, refusing (before reading) anything larger than `max_bytes`."""
    try:
        size = os.stat(path).st_size
        if os.path.isdir(path):
            raise error(file, None, None, "", "this is a folder, not a file", None)
        if size > max_bytes:
            raise error(file, None, None, "", _too_big(size, max_bytes), _TOO_BIG_HINT)
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)  # a file that grew (or a device) is still bounded
    except OSError as exc:
        raise error(file, None, None, "", f"cannot read the file: {exc.strerror or exc}",
                    "check the path and its permissions") from None
    if len(data) > max_bytes:
        raise error(file, None, None, "", _too_big(len(data), max_bytes), _TOO_BIG_HINT)
    return data


_TOO_BIG_HINT = "split the job, or raise limits.max_file_bytes in config/planner.yaml"


def _too_big(size: int, limit: int) -> str:
    return f"the file is {size:,} bytes, more than the limit of {limit:,} bytes"


@dataclass
class Document:
    """A parsed document: its plain value and what is needed to find the line of a path."""

    file: str
    text: str
    is_json: bool
    value: Any
    max_depth: int = 16
    _root: Node | None = field(default=None, repr=False)
    _composed: bool = field(default=False, repr=False)

    def locate(self, path: Sequence[PathPart], at_key: bool = False) -> tuple[int, int] | None:
        """1-based (line, column) of the deepest node along `path` (of its key if `at_key`)."""
        root = self._node_root()
        if root is None:
            return None
        node, mark, key_mark = root, root.start_mark, None
        for i, part in enumerate(path):
            nxt = None
            if isinstance(node, MappingNode) and isinstance(part, str):
                for key, value in node.value:
                    if isinstance(key, ScalarNode) and key.value == part:
                        if at_key and i == len(path) - 1:
                            return key.start_mark.line + 1, key.start_mark.column + 1
                        nxt, next_key = value, key.start_mark
                        break
            elif isinstance(node, SequenceNode) and isinstance(part, int):
                if 0 <= part < len(node.value):
                    nxt, next_key = node.value[part], None
            if nxt is None:
                if i == len(path) - 1 and isinstance(node, MappingNode) and key_mark is not None:
                    mark = key_mark  # a missing key: point at the key of the mapping that lacks it
                break
            node, mark, key_mark = nxt, nxt.start_mark, next_key
        return mark.line + 1, mark.column + 1

    def error(self, problem: Problem, error: type[_Located]) -> _Located:
        """The located error (`SceneError`, `ConfigError`) for a problem in this document."""
        line, column = problem.line, problem.column
        if line is None:
            try:
                where = self.locate(problem.path, problem.at_key)
            except Exception:  # a location is a courtesy: never let it hide the message
                where = None
            if where is not None:
                line, column = where
        return error(self.file, line, column, format_path(problem.path), problem.message,
                     problem.hint)

    def _node_root(self) -> Node | None:
        if not self._composed:
            self._composed = True
            text = self.text.replace("\t", " ") if self.is_json else self.text
            try:
                self._root = compose(text)
            except (yaml.YAMLError, RecursionError, ValueError):
                self._root = None
        return self._root


def parse_document(data: bytes, file: str, limits: Limits, error: type[_Located],
                   allow_empty: bool = False) -> Document:
    """Parse YAML (or JSON, by the file's suffix) into plain data; any problem raises `error`.

    With `allow_empty`, a file holding no document (nothing, or only comments) gives None.
    """
    if len(data) > limits.max_file_bytes:
        raise error(file, None, None, "", _too_big(len(data), limits.max_file_bytes),
                    _TOO_BIG_HINT)
    is_json = file.lower().endswith(".json")
    doc = Document(file=file, text="", is_json=is_json, value=None, max_depth=limits.max_depth)
    try:
        doc.text = _decode(data)
        if allow_empty and _no_document(doc.text, is_json):
            return doc
        if is_json:
            doc.value = parse_json(doc.text, doc.max_depth, doc._node_root)
        else:
            doc.value = parse_yaml(doc.text, limits)
    except Problem as problem:
        raise doc.error(problem, error) from None
    return doc


def _no_document(text: str, is_json: bool) -> bool:
    if is_json:
        return not text.strip()
    return all(not line.strip() or line.lstrip().startswith("#") for line in text.splitlines())


def _decode(data: bytes) -> str:
    """Text from bytes: UTF-8 (BOM optional) or UTF-16/32 with a BOM."""
    for bom, codec in (
        (b"\xff\xfe\x00\x00", "utf-32-le"),
        (b"\x00\x00\xfe\xff", "utf-32-be"),
        (b"\xff\xfe", "utf-16-le"),
        (b"\xfe\xff", "utf-16-be"),
        (b"\xef\xbb\xbf", "utf-8"),
    ):
        if data.startswith(bom):
            data, encoding = data[len(bom):], codec
            break
    else:
        encoding = "utf-8"
    try:
        return data.decode(encoding)
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        column = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
        raise Problem((), f"the file is not {encoding.upper()} text (byte "
                      f"0x{data[exc.start]:02x} cannot be read)",
                      "save it as UTF-8 text; is this the right file?",
                      line=line, column=column) from None
