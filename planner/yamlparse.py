"""Plain data from YAML text under the YAML 1.2 core schema, refusing what could harm or mislead.

Only plain data comes out (dict with text keys, list, str, int, float, bool, None). Refused before
anything is built: aliases (`*name`, the "alias bomb"), duplicate keys, tags other than the core
ones, nesting deeper than the limit. Plain scalars follow the YAML 1.2 core schema (`012` is
twelve, `yes` is text, `1e5` is a number), so YAML and JSON agree.

Speed: libyaml builds one Python object per scalar, which is too slow for 100,000-vertex scenes.
The fast path first swaps every flow list of plain numbers (`[x, y]`, `[[x, y], ...]`) for a
unique placeholder word and parses the numbers with `json`; it is used only if every placeholder
comes back whole, as a value, untagged. Otherwise, and whenever a location is needed, the original
text is parsed as written.
"""

from __future__ import annotations

import json
import math
import re
import secrets
from typing import TYPE_CHECKING, Any

import yaml
from yaml.nodes import Node, ScalarNode, SequenceNode

from .problem import Problem, kind_of

if TYPE_CHECKING:
    from .config import Limits

__all__ = ["parse_yaml", "compose", "plain_scalar", "plain_number"]

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


class _Loader(_Base):  # type: ignore[misc, valid-type]
    """libyaml (when present) composing nodes; every untagged scalar keeps the tag `_IMPLICIT`."""

    def resolve(self, kind: type, value: Any, implicit: Any) -> str:
        return _IMPLICIT


def compose(text: str) -> Node | None:
    """The node tree of `text` with positions (None for no document); raises what libyaml raises."""
    return _Loader(text).get_single_node()


def _position(text: str, index: int) -> tuple[int, int]:
    line = text.count("\n", 0, index) + 1
    return line, index - (text.rfind("\n", 0, index) + 1) + 1


def parse_yaml(text: str, limits: Limits) -> Any:
    """Plain data from YAML text within `limits`; raises `Problem` with line and column."""
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
            root = compose(text)
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
            return plain_number(text)
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


def plain_number(text: str) -> int | float:
    """A plain number token: int, or float when it has a point, an exponent or is huge."""
    if "." in text or "e" in text or "E" in text or len(text) > 4000:
        return float(text)  # beyond Python's int parsing limit: a huge (or infinite) float
    return int(text)  # range checks refuse absurd values later, with their place


def _numbers(tokens: list[str]) -> list[int | float]:
    """Number tokens parsed as `plain_number` does (through json when they are JSON numbers)."""
    try:
        return json.loads("[" + ",".join(tokens) + "]")
    except ValueError:
        return [plain_number(t) for t in tokens]


def _number_list(text: str) -> list:
    """A flow list of plain numbers (one or two levels), parsed as YAML 1.2 would."""
    try:
        return json.loads(text)  # same values as `plain_number` for every number JSON accepts
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
