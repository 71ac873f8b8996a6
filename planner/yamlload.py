"""Read YAML or JSON documents safely and fast, and point at the line of any problem found later.

Only plain data comes out (dict with text keys, list, str, int, float, bool, None). Refused before
anything is built: files over the size limit, aliases (`*name`, the "alias bomb"), duplicate keys,
tags other than the core ones, nesting deeper than the limit. Plain scalars follow the YAML 1.2
core schema (`012` is twelve, `yes` is text, `1e5` is a number), so YAML and JSON agree.

Speed: libyaml builds one Python object per scalar, which is too slow for 100,000-vertex scenes.
The fast path first swaps every flow list of plain numbers (`[x, y]`, `[[x, y], ...]`) for a
unique placeholder word and parses the numbers with `json`; it is used only if every placeholder
comes back whole, as a value, untagged. Otherwise, and whenever a location is needed, the original
text is parsed as written.
"""

from __future__ import annotations

import json
import math
import os
import re
import secrets
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

if TYPE_CHECKING:
    from .config import Limits
    from .errors import _Located

__all__ = [
    "Problem",
    "Document",
    "read_file",
    "parse_document",
    "format_path",
    "closest",
    "kind_of",
    "plain_scalar",
    "check_schema",
    "load_schema",
    "flow",
]

PathPart = str | int

_Base = getattr(yaml, "CSafeLoader", None) or yaml.SafeLoader
_IMPLICIT = "?implicit"  # tag given to every scalar that carries no explicit tag
_TAG = "tag:yaml.org,2002:"
_SCALAR_TAGS = {_TAG + t for t in ("str", "int", "float", "bool", "null")}

_NUM = r"[-+]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]+)?"
_NUMBER = re.compile(_NUM + r"\Z")
_WS = r"[ \r\n]*"
_SEQ1 = rf"\[{_WS}{_NUM}(?:{_WS},{_WS}{_NUM})*{_WS}\]"
_SEQ2 = rf"\[{_WS}{_SEQ1}(?:{_WS},{_WS}{_SEQ1})*{_WS}\]"
_NUMBER_LISTS = re.compile(f"{_SEQ2}|{_SEQ1}")
# a run of block-sequence items that are [x, y] pairs, as `- [x, y]` or as `- - x` / `  - y`
_PAIR = (rf"- (?:\[ *{_NUM} *, *{_NUM} *\]|- {_NUM} *\r?\n(?P=ind)  - {_NUM}) *\r?\n")
_BLOCK_RUNS = re.compile(rf"^(?P<ind> *){_PAIR}(?:(?P=ind){_PAIR})+", re.MULTILINE)
_NUMBERS = re.compile(_NUM)
_NULLS = {"", "~", "null", "Null", "NULL"}
_TRUE = {"true", "True", "TRUE"}
_FALSE = {"false", "False", "FALSE"}
_INF = {".inf", ".Inf", ".INF", "+.inf", "+.Inf", "+.INF"}
_NINF = {"-.inf", "-.Inf", "-.INF"}
_NAN = {".nan", ".NaN", ".NAN"}
_HEX = re.compile(r"0x[0-9a-fA-F]+\Z")
_OCT = re.compile(r"0o[0-7]+\Z")


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
                self._root = _Loader(text).get_single_node()
            except (yaml.YAMLError, RecursionError, ValueError):
                self._root = None
        return self._root


class _Loader(_Base):  # type: ignore[misc, valid-type]
    """libyaml (when present) composing nodes; every untagged scalar keeps the tag `_IMPLICIT`."""

    def resolve(self, kind: type, value: Any, implicit: Any) -> str:
        return _IMPLICIT


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
            doc.value = _parse_json(doc)
        else:
            doc.value = _parse_yaml(doc.text, limits)
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


def _position(text: str, index: int) -> tuple[int, int]:
    line = text.count("\n", 0, index) + 1
    return line, index - (text.rfind("\n", 0, index) + 1) + 1


# ---------------------------------------------------------------------------------------- YAML


def _parse_yaml(text: str, limits: Limits) -> Any:
    nonce = secrets.token_hex(8)
    while nonce in text:
        nonce = secrets.token_hex(8)
    prefix = f"_n{nonce}_"
    pieces: list[str] = []

    def swap(m: re.Match[str]) -> str:
        pieces.append(m.group(0))
        return f"{prefix}{len(pieces) - 1}"

    def splice(m: re.Match[str]) -> str:
        pieces.append(m.group(0))
        return f"{m['ind']}- {prefix}s{len(pieces) - 1}\n"

    fast = _BLOCK_RUNS.sub(splice, text) if "- " in text else text
    fast = _NUMBER_LISTS.sub(swap, fast) if "[" in fast else fast
    if pieces:
        try:
            builder = _Builder(limits, prefix, pieces)
            value = builder.run(fast)
            if len(builder.used) == len(pieces):  # every placeholder read back, once each
                return value
        except (Problem, yaml.YAMLError, RecursionError, ValueError):
            pass  # the text as written gives the exact problem and place
    return _Builder(limits).run(text)


class _Builder:
    """Plain data from composed nodes, enforcing the limits (no aliases, no duplicates...)."""

    def __init__(self, limits: Limits, prefix: str = "", pieces: list[str] | None = None) -> None:
        self.max_depth = limits.max_depth
        self.max_aliases = limits.max_aliases
        self.prefix = prefix
        self.pieces = pieces or []
        self.used: set[int] = set()  # placeholders read back as whole values
        self.aliases = 0
        self.built = 0
        self.seen: set[int] = set()
        self.expanding = False

    def run(self, text: str) -> Any:
        self.text = text
        try:
            root = _Loader(text).get_single_node()
        except yaml.MarkedYAMLError as exc:
            raise _syntax_problem(exc) from None
        except yaml.reader.ReaderError as exc:
            line, column = _position(text, exc.position)
            raise Problem((), f"the file holds a character YAML does not allow "
                          f"(code {exc.character!r})", "remove it; is this the right file?",
                          line=line, column=column) from None
        except yaml.YAMLError as exc:
            raise Problem((), f"not valid YAML: {exc}", None, line=1, column=1) from None
        except RecursionError:
            raise Problem((), "the document is nested too deeply", None, line=1) from None
        if root is None:
            raise Problem((), "the file is empty (no YAML document in it)",
                          "start from an example in docs/scene-format.md", line=1, column=1)
        self.budget = max(10_000, 4 * len(text))
        return self.build(root, 1)

    def _here(self, node: Node, message: str, hint: str | None = None) -> Problem:
        m = node.start_mark
        return Problem((), message, hint, line=m.line + 1, column=m.column + 1)

    def _visit(self, node: Node) -> bool:
        """Note a node; True when it was seen before (reached through an alias)."""
        key = id(node)
        if key not in self.seen:
            self.seen.add(key)
            return False
        if not self.expanding:  # a written alias, not one inside an alias being expanded
            self.aliases += 1
            if self.aliases > self.max_aliases:
                problem = Problem((), "YAML aliases (*name) are not accepted" if
                                  self.max_aliases == 0 else
                                  f"more than {self.max_aliases} YAML aliases (*name)",
                                  "write the value out in full where it is used")
                problem.line, problem.column = self._alias_place(self.aliases, node)
                raise problem
        return True

    def _alias_place(self, n: int, node: Node) -> tuple[int, int]:
        """Where the n-th alias (`*name`) is written; nodes only know where their anchor is."""
        try:
            count = 0
            for event in yaml.parse(self.text, Loader=_Loader):
                if isinstance(event, yaml.AliasEvent):
                    count += 1
                    if count == n:
                        return event.start_mark.line + 1, event.start_mark.column + 1
        except yaml.YAMLError:
            pass
        return node.start_mark.line + 1, node.start_mark.column + 1

    def build(self, node: Node, depth: int) -> Any:
        cls = type(node)
        if cls is not ScalarNode and depth > self.max_depth:
            raise self._here(node, f"nested deeper than {self.max_depth} levels",
                             "flatten the document (limits.max_depth in config/planner.yaml)")
        again = self._visit(node)
        self.built += 1
        if self.built > self.budget:
            raise self._here(node, "aliases expand the document far beyond its written size",
                             "write the values out instead of using aliases")
        if again and not self.expanding:
            self.expanding = True
            try:
                return self._build(node, cls, depth)
            finally:
                self.expanding = False
        return self._build(node, cls, depth)

    def _build(self, node: Node, cls: type, depth: int) -> Any:
        if cls is ScalarNode:
            return self.scalar(node, value_position=True)
        if cls is SequenceNode:
            if node.tag not in (_IMPLICIT, _TAG + "seq"):
                raise self._tag(node)
            if self.prefix:
                return self._items(node.value, depth + 1)
            return [self.build(item, depth + 1) for item in node.value]
        if node.tag not in (_IMPLICIT, _TAG + "map"):
            raise self._tag(node)
        out: dict[str, Any] = {}
        lines: dict[str, int] = {}
        for knode, vnode in node.value:
            self._visit(knode)
            if type(knode) is not ScalarNode:
                raise self._here(knode, "a key must be plain text",
                                 "write keys as words, like `obstacles:`")
            name = self.scalar(knode, value_position=False)
            if not isinstance(name, str):
                raise self._here(knode, f"the key {knode.value!r} must be text, not "
                                 f"{kind_of(name)}", f"quote it: \"{knode.value}\":")
            if name in out:
                raise self._here(knode, f"the key {name!r} appears twice in this mapping (first "
                                 f"on line {lines[name]})",
                                 "merge the two into one; a repeated key would hide the first")
            lines[name] = knode.start_mark.line + 1
            out[name] = self.build(vnode, depth + 1)
        return out

    def _items(self, nodes: list[Node], depth: int) -> list:
        """A sequence's items, with each splice placeholder replaced by the pairs it stands for."""
        out: list = []
        splice = self.prefix + "s"
        for item in nodes:
            if (type(item) is ScalarNode and item.tag == _IMPLICIT and not item.style
                    and item.value.startswith(splice) and item.value[len(splice):].isdigit()
                    and int(item.value[len(splice):]) < len(self.pieces)):
                self._visit(item)
                index = int(item.value[len(splice):])
                self.used.add(index)
                text = self.pieces[index]
                if depth > self.max_depth:
                    raise self._here(item, f"nested deeper than {self.max_depth} levels", None)
                numbers = _numbers(_NUMBERS.findall(text))
                out.extend([list(p) for p in zip(numbers[::2], numbers[1::2], strict=True)])
            else:
                out.append(self.build(item, depth))
        return out

    def _tag(self, node: Node) -> Problem:
        return self._here(node, f"the tag {node.tag!r} is not accepted",
                          "remove the !tag; only plain values, lists and mappings are read")

    def scalar(self, node: ScalarNode, value_position: bool) -> Any:
        text, tag = node.value, node.tag
        if tag == _IMPLICIT:
            if node.style:  # quoted or block text ('' or None is plain, by parser)
                return text
            if value_position and self.prefix and text.startswith(self.prefix):
                index = text[len(self.prefix):]  # a splice (`s12`) here is not at its place
                if index.isdigit() and int(index) < len(self.pieces):
                    self.used.add(int(index))
                    return _number_list(self.pieces[int(index)])
            return plain_scalar(text)
        if tag not in _SCALAR_TAGS:
            raise self._tag(node)
        if tag == _TAG + "str":
            return text
        value = plain_scalar(text)
        wanted = {"int": (int,), "float": (float, int), "bool": (bool,), "null": (type(None),)}
        kind = tag[len(_TAG):]
        if isinstance(value, bool) and kind != "bool" or not isinstance(value, wanted[kind]):
            raise self._here(node, f"{text!r} is not a valid {kind}", "remove the tag or fix it")
        return float(value) if kind == "float" else value


def plain_scalar(text: str) -> Any:
    """A plain (unquoted) YAML scalar under the YAML 1.2 core schema."""
    if not text or text in _NULLS:
        return None
    head = text[0]
    if head in "0123456789+-.":
        if _NUMBER.match(text):
            return _number(text)
        if text in _INF:
            return math.inf
        if text in _NINF:
            return -math.inf
        if text in _NAN:
            return math.nan
        if _HEX.match(text):
            return int(text, 16)
        if _OCT.match(text):
            return int(text[2:], 8)
        return text
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False
    return text


def _number(text: str) -> int | float:
    if "." in text or "e" in text or "E" in text or len(text) > 4000:
        return float(text)  # beyond Python's int parsing limit: a huge (or infinite) float
    return int(text)  # range checks refuse absurd values later, with their place


def _numbers(tokens: list[str]) -> list[int | float]:
    """Plain number tokens parsed as `_number` does (through json when they are JSON numbers)."""
    try:
        return json.loads("[" + ",".join(tokens) + "]")
    except ValueError:
        return [_number(t) for t in tokens]


def _number_list(text: str) -> list:
    """A flow list of plain numbers (one or two levels), parsed as YAML 1.2 would."""
    try:
        return json.loads(text)  # same values as `_number` for every number JSON accepts
    except ValueError:
        pass
    if text.lstrip(" \r\n[").startswith("["):  # nested: [[x, y], ...]
        inner = re.findall(r"\[[^\[\]]*\]", text[text.index("[") + 1:])
        return [_numbers(_NUMBERS.findall(part)) for part in inner]
    return _numbers(_NUMBERS.findall(text))


def _syntax_problem(exc: yaml.MarkedYAMLError) -> Problem:
    mark = exc.problem_mark or exc.context_mark
    what = exc.problem or "the text cannot be read"
    if exc.context:
        what = f"{what} ({exc.context}"
        if exc.context_mark is not None and exc.context_mark is not mark:
            what += f" at line {exc.context_mark.line + 1}"
        what += ")"
    hint = "check the indentation, colons and brackets here"
    if "single document" in what:
        hint = "a file holds one scene: remove the `---` separator and what follows"
    elif "undefined alias" in what:
        hint = "YAML aliases (*name) are not accepted; write the value out in full"
    elif "\t" in what or "tab" in what:
        hint = "indent with spaces, not tabs"
    line = mark.line + 1 if mark is not None else None
    column = mark.column + 1 if mark is not None else None
    return Problem((), f"not valid YAML: {what}", hint, line=line, column=column)


# ---------------------------------------------------------------------------------------- JSON


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


def _parse_json(doc: Document) -> Any:
    text = doc.text
    if not text.strip():
        raise Problem((), "the file is empty (no JSON value in it)",
                      "start from an example in docs/scene-format.md", line=1, column=1)
    try:
        try:
            value = json.loads(text, object_pairs_hook=_pairs)
        except json.JSONDecodeError:
            raise
        except ValueError:  # an integer too long for Python's int conversion
            value = json.loads(text, object_pairs_hook=_pairs, parse_int=_number)
    except json.JSONDecodeError as exc:
        raise Problem((), f"not valid JSON: {exc.msg}", "check the commas, quotes and brackets",
                      line=exc.lineno, column=exc.colno) from None
    except RecursionError:
        raise Problem((), "the document is nested too deeply", None, line=1) from None
    except _Duplicate as dup:
        where = _find_duplicate(doc._node_root(), dup.key)
        raise Problem((), f"the key {dup.key!r} appears twice in one object",
                      "merge the two into one; a repeated key would hide the first",
                      line=where[0] if where else None,
                      column=where[1] if where else None) from None
    path = _too_deep(value, doc.max_depth) if _json_depth(text) > doc.max_depth else None
    if path is not None:
        raise Problem(path, f"nested deeper than {doc.max_depth} levels",
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


# ------------------------------------------------------------------------------ JSON Schema


def check_schema(
    value: Any,
    schema_file: str,
    definition: str | None = None,
    delegate: Sequence[str] = (),
    dedupe: Sequence[str] = (),
) -> None:
    """Raise a `Problem` for the most relevant way `value` breaks the packaged JSON Schema.

    `definition` picks one of the schema's `$defs` (config.schema.json holds one per file).
    `delegate` names `$defs` the caller has checked itself (the vertex lists, in numpy): they
    accept anything here, so jsonschema never walks 100,000 vertices. `dedupe` names top-level
    lists whose items are checked once per distinct form (see `_form`) when that is sound.
    """
    from jsonschema.exceptions import best_match

    root, validator = _validator(schema_file, definition, tuple(delegate))
    value, places = _deduplicated(value, validator.schema, dedupe)
    error = best_match(validator.iter_errors(value))
    if error is not None:
        problem = _schema_problem(error, root)
        if len(problem.path) >= 2 and (problem.path[0], problem.path[1]) in places:
            problem.path = (problem.path[0], places[problem.path[:2]], *problem.path[2:])
        raise problem


def _form(value: Any) -> Any:
    """What a JSON Schema whose number limits are all 0 can tell apart: structure, keys, text,
    true/false/null verbatim, and of each number only its type and sign."""
    kind = type(value)
    if kind is dict:
        return ("d", tuple((k, _form(v)) for k, v in value.items()))
    if kind is list:
        return ("l", tuple(_form(v) for v in value))
    if kind is int or kind is float:
        if value != value:
            return ("nan",)
        return (kind.__name__, (value > 0) - (value < 0))
    return (kind.__name__, value)


_NUMERIC_LIMITS = ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum")


def _form_decides(schema: Any) -> bool:
    """True when `_form` keeps everything `schema` can check: no number limit but 0, no integer
    type, no multiple-of, no numeric const/enum, no uniqueness among items."""
    stack = [schema]
    while stack:
        item = stack.pop()
        if isinstance(item, list):
            stack.extend(item)
        elif isinstance(item, dict):
            for key, sub in item.items():
                if key in ("description", "examples", "title"):
                    continue
                if key in _NUMERIC_LIMITS and sub != 0 or key in ("multipleOf", "uniqueItems"):
                    return False
                if key == "type" and "integer" in (sub if isinstance(sub, list) else [sub]):
                    return False
                if key in ("const", "enum"):
                    values = sub if key == "enum" else [sub]
                    if any(isinstance(v, int | float) and not isinstance(v, bool) for v in values):
                        return False
                stack.append(sub)
    return True


def _deduplicated(value: Any, schema: dict, keys: Sequence[str]
                  ) -> tuple[Any, dict[tuple[str, int], int]]:
    """`value` with the listed top-level lists cut to one item per form, and where each came from.

    Only done when the list's item schema passes `_form_decides`: then every item shares the
    verdict of the item of its form that is checked.
    """
    places: dict[tuple[str, int], int] = {}
    if not keys or not isinstance(value, dict):
        return value, places
    value = dict(value)
    for key in keys:
        items = value.get(key)
        item_schema = schema.get("properties", {}).get(key, {}).get("items")
        if not isinstance(items, list) or item_schema is None or not _form_decides(item_schema):
            continue
        seen: set = set()
        kept = []
        for i, item in enumerate(items):
            form = _form(item)
            if form not in seen:
                seen.add(form)
                places[(key, len(kept))] = i
                kept.append(item)
        value[key] = kept
    return value, places


_VALIDATORS: dict[tuple, tuple[dict, Any]] = {}


def load_schema(schema_file: str) -> dict:
    """The packaged schema `planner/schema/<schema_file>` as a dict."""
    from importlib import resources

    text = resources.files("planner").joinpath("schema", schema_file).read_text("utf-8")
    return json.loads(text)


def _validator(schema_file: str, definition: str | None, delegate: tuple[str, ...]
               ) -> tuple[dict, Any]:
    """A validator for the schema with its local `$ref`s inlined (lookups are slow)."""
    key = (schema_file, definition, delegate)
    if key not in _VALIDATORS:
        from jsonschema import Draft202012Validator

        root = load_schema(schema_file)
        root["$defs"] = {k: ({} if k in delegate else v) for k, v in root["$defs"].items()}
        top = root["$defs"][definition] if definition else root
        flat = _inline({k: v for k, v in top.items() if k != "$defs"}, root, 0)
        Draft202012Validator.check_schema(flat)
        _VALIDATORS[key] = (root, Draft202012Validator(flat))
    return _VALIDATORS[key]


def _inline(schema: Any, root: dict, depth: int) -> Any:
    if depth > 50:
        raise ValueError("schema $refs nest too deeply (a loop?)")
    if isinstance(schema, dict):
        merged = _deref(schema, root) if "$ref" in schema else schema
        return {k: _inline(v, root, depth + 1) for k, v in merged.items()}
    if isinstance(schema, list):
        return [_inline(v, root, depth + 1) for v in schema]
    return schema


def _deref(schema: Any, root: dict) -> dict:
    """Follow local `$ref`s (`#/$defs/name`), keeping a description given beside the `$ref`."""
    if not isinstance(schema, dict):
        return {}
    seen = 0
    merged = dict(schema)
    while "$ref" in merged and seen < 10:
        ref = merged.pop("$ref")
        target: Any = root
        for part in ref.split("#", 1)[-1].strip("/").split("/"):
            target = target.get(part, {}) if isinstance(target, dict) else {}
        merged = {**merged, **target}  # the definition's own words describe the value's shape
        seen += 1
    return merged


def flow(value: Any) -> str:
    """A value written the way a person types it in YAML flow style: `{x: [0, 3000]}`."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {flow(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(flow(v) for v in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    return str(value)


def _example(schema: dict) -> str | None:
    examples = schema.get("examples")
    return flow(examples[0]) if examples else None


def _schema_problem(error: Any, root: dict) -> Problem:
    path = tuple(error.absolute_path)
    kind = error.validator
    inst = error.instance
    schema = _deref(error.schema, root)
    desc = schema.get("description", "")
    example = _example(schema)
    props = list(_deref(error.schema, root).get("properties", {}))

    if kind == "additionalProperties" and isinstance(inst, dict):
        extra = [k for k in inst if k not in props]
        key = extra[0] if extra else "?"
        near = closest(key, props)
        hint = (f"did you mean {near!r}? " if near else "") + "allowed here: " + ", ".join(props)
        return Problem((*path, key), f"unknown key {key!r}", hint, at_key=True)
    if kind == "required" and isinstance(inst, dict):
        missing = [k for k in error.validator_value if k not in inst]
        key = missing[0] if missing else "?"
        sub = _deref(schema.get("properties", {}).get(key, {}), root)
        ex = _example(sub)
        hint = f"add `{key}: {ex}`" if ex else f"add `{key}`"
        if sub.get("description"):
            hint += f" ({sub['description']})"
        return Problem((*path, key), f"the required key {key!r} is missing", hint)
    if kind == "oneOf" and isinstance(inst, dict):
        keys = [b["required"][0] for b in error.validator_value
                if isinstance(b, dict) and len(b.get("required", ())) == 1]
        present = [k for k in keys if k in inst]
        if not present:
            return Problem(path, f"needs one of {', '.join(keys)}",
                           f"for example {example}" if example else None)
        return Problem(path, f"gives both {' and '.join(present)}; give exactly one of "
                       f"{', '.join(keys)}", "split it into separate entries")
    if kind == "enum":
        options = [str(o) for o in error.validator_value]
        near = closest(str(inst), options) if isinstance(inst, str) else None
        hint = f"did you mean {near!r}?" if near else f"use one of: {', '.join(options)}"
        return Problem(path, f"{kind_of(inst)} is not one of: {', '.join(options)}", hint)
    bounds = {
        "minimum": "at least",
        "exclusiveMinimum": "more than",
        "maximum": "at most",
        "exclusiveMaximum": "less than",
    }
    if kind in bounds:
        limit = error.validator_value
        return Problem(path, f"must be {bounds[kind]} {limit}, got {inst!r}",
                       f"use a number {bounds[kind]} {limit}")
    if kind == "uniqueItems":
        return Problem(path, "the list repeats an entry", "list each entry once")
    simple = kind == "type" and schema.get("type") in ("number", "integer", "boolean", "string")
    what = _TYPE_WORDS[schema["type"]] if simple else desc or _TYPE_WORDS.get(
        str(schema.get("type")), "another value")
    hint = None
    if schema.get("type") in ("number", "integer") and not isinstance(inst, int | float):
        hint = "write a plain number like 12.5, without quotes or a unit"
    elif simple and schema["type"] == "string" and isinstance(inst, int | float | bool):
        hint = f'put it in quotes: "{flow(inst)}"'
    elif simple and desc:
        hint = desc
    elif kind == "const":
        hint = f"write {flow(error.validator_value)}"
    elif example:
        hint = f"for example {example}"
    if kind in ("type", "const", "minItems", "maxItems", "minLength", "maxLength", "pattern"):
        return Problem(path, f"expected {what}, got {kind_of(inst)}", hint)
    return Problem(path, f"{error.message}", hint)


_TYPE_WORDS = {
    "number": "a number",
    "integer": "a whole number",
    "string": "text",
    "boolean": "true or false",
    "array": "a list",
    "object": "a mapping",
}
