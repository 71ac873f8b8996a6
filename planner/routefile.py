"""The route file (`<stem>.route.yaml`), both ways: Route -> text and text -> Route.

The writer controls every character (key order, flow-style point lists, plain decimals) so the
same route always gives the same bytes; the reader accepts exactly that structure and reports
anything else as a RouteFileError (a ValueError) naming the place in the file.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np
import yaml

from .errors import _Located
from .model import Leg, Route, Unreachable

__all__ = [
    "ROUTE_FORMAT",
    "RouteFileError",
    "decimals_for",
    "round_to_resolution",
    "grid_inside",
    "dump_route",
    "load_route",
]

ROUTE_FORMAT = 1
UNITS = ("mm", "inch")
_MAX_DECIMALS = 12  # finer steps than 1e-12 would leave too few exact digits in a double
_TIDY_DIGITS = 6  # a resolution with more significant digits is a converted, untidy value
_ON_GRID = 1e-3  # a coordinate within this fraction of a step of the grid counts as on it

_ROUTE_KEYS = ("route", "scene", "scene_sha256", "config_sha256", "units", "status", "length")
_ROUTE_TAIL = ("legs", "unreachable")
_LEG_KEYS = ("from", "to", "length", "points")
_LEG_EXTRA_ORDER = ("time", "appeared", "gone", "carry")
_OMIT_WHEN_EMPTY = ("appeared", "gone")
_UNREACHABLE_KEYS = ("id", "reason")


class RouteFileError(_Located, ValueError):
    """A route file that is not in the documented format: file, line, column, path, what, fix."""


# ---- numbers ------------------------------------------------------------------------------------


def _grid(resolution: float) -> tuple[int, int]:
    """The output grid as (decimals d, multiple m): steps of m * 10**-d, never coarser than asked.

    A tidy resolution (0.001, 0.25, 0.0005, 5) is used as given. An untidy one, typically a
    converted unit (0.001 mm in inches), is replaced by the next finer power of ten, so the
    written decimals are exactly the values on the grid.
    """
    if isinstance(resolution, bool) or not (
        isinstance(resolution, int | float) and math.isfinite(resolution) and resolution > 0
    ):
        raise ValueError(f"the output resolution must be a number > 0, not {resolution!r}")
    text = np.format_float_positional(float(resolution), trim="-")
    decimals = len(text.partition(".")[2])
    significant = text.replace(".", "").lstrip("0")
    if len(significant) > _TIDY_DIGITS:
        decimals = max(0, math.ceil(-math.log10(resolution)))
        multiple = 1
    else:
        multiple = int(significant)
        if decimals == 0:  # a whole number: its trailing zeros belong to the multiple
            multiple = int(text)
    if decimals > _MAX_DECIMALS:
        raise ValueError(
            f"the output resolution {resolution!r} is too fine: at most {_MAX_DECIMALS} decimals"
        )
    return decimals, multiple


def decimals_for(resolution: float) -> int:
    """How many decimals numbers are written with at this output resolution (0.001 -> 3)."""
    return _grid(resolution)[0]


def _ticks(values: np.ndarray, resolution: float) -> tuple[np.ndarray, int]:
    """Values rounded to the output grid, as integer counts of 10**-d, and d."""
    decimals, multiple = _grid(resolution)
    arr = np.asarray(values, dtype=float)
    if not np.isfinite(arr).all():
        raise ValueError("a route coordinate or length is not a finite number")
    ticks = np.rint(arr * 10.0**decimals / multiple) * multiple
    if arr.size and np.abs(ticks).max() >= 2.0**53:
        raise ValueError(f"a value is too large to be written at resolution {resolution!r}")
    return ticks, decimals


def round_to_resolution(points: np.ndarray, resolution: float) -> np.ndarray:
    """`points` rounded to the output grid, as the floats the route file's decimals read back as.

    Plan with this and verify the result: it is exactly the path the route file will hold.
    """
    ticks, decimals = _ticks(points, resolution)
    # correctly rounded: the same double as float("<decimal>"); + 0.0 turns -0.0 into 0.0
    return ticks / 10.0**decimals + 0.0


def grid_inside(lo: np.ndarray, hi: np.ndarray, resolution: float
                ) -> tuple[np.ndarray, np.ndarray]:
    """Per axis, the smallest and largest values of the output grid within [lo, hi] (closed).

    A limit that is not on the grid is replaced by the nearest grid value inside it, so that
    rounded points clipped to these stay within the limits. ValueError when an axis is narrower
    than one step of the grid and holds none of its values.
    """
    decimals, multiple = _grid(resolution)
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    scale = 10.0**decimals
    t_lo, _ = _ticks(lo, resolution)
    t_hi, _ = _ticks(hi, resolution)
    t_lo = np.where(t_lo / scale + 0.0 < lo, t_lo + multiple, t_lo)
    t_hi = np.where(t_hi / scale + 0.0 > hi, t_hi - multiple, t_hi)
    if np.any(t_lo > t_hi):
        raise ValueError(f"the limits {lo.tolist()} to {hi.tolist()} hold no point of the "
                         f"output grid (resolution {resolution:g})")
    return t_lo / scale + 0.0, t_hi / scale + 0.0


def _fixed(tick: float, decimals: int) -> str:
    """An integer count of 10**-decimals written as a plain decimal: 12345, 3 -> '12.345'."""
    k = int(tick)
    sign = "-" if k < 0 else ""
    digits = str(abs(k))
    if decimals == 0:
        return sign + digits
    digits = digits.rjust(decimals + 1, "0")
    return f"{sign}{digits[:-decimals]}.{digits[-decimals:]}"


# ---- scalars and flow values ------------------------------------------------------------------

_PLAIN = re.compile(r"[A-Za-z_][A-Za-z0-9_.\-]*\Z")
_YAML_WORDS = {"y", "n", "yes", "no", "on", "off", "true", "false", "null"}  # YAML 1.1 and 1.2


def _quoted(text: str) -> str:
    dumped = yaml.safe_dump(text, default_style='"', allow_unicode=True, width=math.inf)
    return dumped.rstrip("\n")


def _text(text: str) -> str:
    """A string as a YAML scalar: plain when it cannot be read as anything else, else quoted."""
    if _PLAIN.match(text) and text.lower() not in _YAML_WORDS:
        return text
    return _quoted(text)


def _flow(value: Any, decimals: int) -> str:
    """An extra field's value in flow style; floats with the file's number of decimals."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"an extra field holds {value!r}; route files hold finite numbers")
        return _fixed(np.rint(value * 10.0**decimals), decimals)
    if isinstance(value, str):
        return _text(value)
    if isinstance(value, Mapping):
        items = ", ".join(f"{_key(k)}: {_flow(v, decimals)}" for k, v in value.items())
        return "{" + items + "}"
    if isinstance(value, Iterable):
        return "[" + ", ".join(_flow(v, decimals) for v in value) + "]"
    raise ValueError(f"an extra field holds a {type(value).__name__}, which a route file cannot")


def _key(key: Any) -> str:
    if not isinstance(key, str):
        raise ValueError(f"extra field names must be text, not {key!r}")
    return _text(key)


def _pairs(points: Any, resolution: float, *, on_grid: bool, what: str) -> str:
    """A list of [x, y] in flow style, rounded to the output grid."""
    arr = np.asarray(points, dtype=float).reshape(-1, 2)
    ticks, decimals = _ticks(arr, resolution)
    if on_grid:
        off = np.abs(arr * 10.0**decimals - ticks) / _grid(resolution)[1]
        if arr.size and off.max() > _ON_GRID:
            raise ValueError(
                f"{what} has a point that is not on the output grid (resolution {resolution!r}); "
                "round the path with round_to_resolution and verify that rounded path"
            )
    return "[" + ", ".join(
        f"[{_fixed(x, decimals)}, {_fixed(y, decimals)}]" for x, y in ticks
    ) + "]"


def _ordered_extra(extra: Mapping, reserved: tuple[str, ...], known: tuple[str, ...], where: str):
    clash = [k for k in extra if k in reserved]
    if clash:
        raise ValueError(f"{where} extra field {clash[0]!r} clashes with a route file key")
    keys = [k for k in known if k in extra] + [k for k in extra if k not in known]
    return [(k, extra[k]) for k in keys]


# ---- writing ------------------------------------------------------------------------------------


def dump_route(route: Route, resolution: float) -> str:
    """The route file's text for `route`, numbers on the output grid of `resolution`.

    Leg points must already be on the grid (round_to_resolution): the file must hold exactly
    the path that was verified, so a point off the grid is refused with ValueError rather than
    silently moved. `length` is the sum of the legs' lengths as written.
    """
    if route.units not in UNITS:
        raise ValueError(f"route units must be one of {UNITS}, not {route.units!r}")
    decimals = decimals_for(resolution)
    leg_ticks, _ = _ticks([leg.length for leg in route.legs], resolution)
    lines = [
        f"route: {ROUTE_FORMAT}",
        f"scene: {_text(route.scene_file)}",
        f"scene_sha256: {_quoted(route.scene_sha256)}",
        f"config_sha256: {_quoted(route.config_sha256)}",
        f"units: {route.units}",
        f"status: {route.status}",
        f"length: {_fixed(leg_ticks.sum(), decimals)}",
    ]
    for key, value in _ordered_extra(route.extra, _ROUTE_KEYS + _ROUTE_TAIL, ("time",), "route"):
        if isinstance(value, Mapping) and value:  # e.g. files: one companion file a line
            lines.append(f"{_key(key)}:")
            lines.extend(
                f"  {_key(k)}: {_quoted(v) if isinstance(v, str) else _flow(v, decimals)}"
                for k, v in value.items()
            )
        else:
            lines.append(f"{_key(key)}: {_flow(value, decimals)}")
    lines.append("legs:" if route.legs else "legs: []")
    for i, (leg, ticks) in enumerate(zip(route.legs, leg_ticks, strict=True)):
        if len(leg.points) == 0:
            raise ValueError(f"leg {i} ({leg.from_id} -> {leg.to_id}) has no points")
        lines.append(f"  - from: {_text(leg.from_id)}")
        lines.append(f"    to: {_text(leg.to_id)}")
        lines.append(f"    length: {_fixed(ticks, decimals)}")
        for key, value in _ordered_extra(leg.extra, _LEG_KEYS, _LEG_EXTRA_ORDER, f"leg {i}"):
            if key in _OMIT_WHEN_EMPTY and not len(value):
                continue
            if key == "carry":
                text = _pairs(value, resolution, on_grid=False, what=f"leg {i} carry")
            else:
                text = _flow(value, decimals)
            lines.append(f"    {_key(key)}: {text}")
        points = _pairs(leg.points, resolution, on_grid=True, what=f"leg {i}")
        lines.append(f"    points: {points}")
    lines.append("unreachable:" if route.unreachable else "unreachable: []")
    for item in route.unreachable:
        fields = [f"id: {_text(item.id)}", f"reason: {_quoted(item.reason)}"]
        where = f"unreachable {item.id}"
        for key, value in _ordered_extra(item.extra, _UNREACHABLE_KEYS, (), where):
            fields.append(f"{_key(key)}: {_flow(value, decimals)}")
        lines.append("  - {" + ", ".join(fields) + "}")
    return "\n".join(lines) + "\n"


# ---- reading ------------------------------------------------------------------------------------


class _Loader(yaml.SafeLoader):
    """Safe YAML without aliases (a route file never needs them; they can blow up in size)."""

    def compose_node(self, parent, index):  # noqa: ANN001, ANN201 - PyYAML's signature
        if self.check_event(yaml.AliasEvent):
            mark = self.peek_event().start_mark
            raise yaml.MarkedYAMLError(None, None, "aliases (*name) are not allowed", mark)
        return super().compose_node(parent, index)


def _marks(node: yaml.Node, path: str, out: dict[str, tuple[int, int]]) -> str | None:
    """Fill `out` with (line, column) of every location path; return a duplicate key's path."""
    out[path] = (node.start_mark.line + 1, node.start_mark.column + 1)
    if isinstance(node, yaml.MappingNode):
        seen = set()
        for key, value in node.value:
            name = str(key.value)
            child = f"{path}.{name}" if path else name
            if name in seen:
                out[child] = (key.start_mark.line + 1, key.start_mark.column + 1)
                return child
            seen.add(name)
            dup = _marks(value, child, out)
            if dup:
                return dup
    elif isinstance(node, yaml.SequenceNode):
        for i, value in enumerate(node.value):
            dup = _marks(value, f"{path}[{i}]", out)
            if dup:
                return dup
    return None


class _Reader:
    """Builds a Route from the parsed file, raising RouteFileError at the first problem."""

    def __init__(self, file: str, marks: dict[str, tuple[int, int]]) -> None:
        self.file = file
        self.marks = marks

    def fail(self, path: str, message: str, hint: str | None = None) -> RouteFileError:
        probe = path
        while probe and probe not in self.marks:
            probe = probe.rpartition(".")[0] if "." in probe else probe.rpartition("[")[0]
        line, column = self.marks.get(probe, (None, None))
        return RouteFileError(self.file, line, column, path, message, hint)

    def mapping(self, value: Any, path: str) -> dict:
        if not isinstance(value, dict):
            raise self.fail(path, "must be a mapping of keys to values")
        return value

    def required(self, data: dict, key: str, path: str) -> Any:
        if key not in data:
            where = path or "the top level"
            raise self.fail(path, f"the key {key!r} is missing", f"add `{key}:` to {where}")
        return data[key]

    def text(self, value: Any, path: str) -> str:
        if not isinstance(value, str):
            raise self.fail(path, f"must be text, not {value!r}", "write it in double quotes")
        return value

    def number(self, value: Any, path: str) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(path, f"must be a number, not {value!r}")
        if not math.isfinite(value):
            raise self.fail(path, f"must be a finite number, not {value!r}")
        return float(value)

    def pairs(self, value: Any, path: str, minimum: int) -> tuple[tuple[float, float], ...]:
        if not isinstance(value, list) or len(value) < minimum:
            raise self.fail(path, f"must be a list of at least {minimum} [x, y] pairs")
        out = []
        for i, pair in enumerate(value):
            if not isinstance(pair, list) or len(pair) != 2:
                raise self.fail(f"{path}[{i}]", f"must be an [x, y] pair, not {pair!r}")
            out.append((self.number(pair[0], f"{path}[{i}]"), self.number(pair[1], f"{path}[{i}]")))
        return tuple(out)

    def ids(self, value: Any, path: str) -> tuple[str, ...]:
        if not isinstance(value, list):
            raise self.fail(path, "must be a list of obstacle ids")
        return tuple(self.text(v, f"{path}[{i}]") for i, v in enumerate(value))

    def leg(self, value: Any, path: str) -> Leg:
        data = self.mapping(value, path)
        extra: dict[str, Any] = {}
        for key, item in data.items():
            if key in _LEG_KEYS:
                continue
            if key in ("appeared", "gone"):
                extra[key] = self.ids(item, f"{path}.{key}")
            elif key == "carry":
                extra[key] = self.pairs(item, f"{path}.{key}", 3)
            else:
                extra[key] = item
        length = self.number(self.required(data, "length", path), f"{path}.length")
        if length < 0:
            raise self.fail(f"{path}.length", f"must be >= 0, not {length!r}")
        return Leg(
            from_id=self.text(self.required(data, "from", path), f"{path}.from"),
            to_id=self.text(self.required(data, "to", path), f"{path}.to"),
            points=self.pairs(self.required(data, "points", path), f"{path}.points", 1),
            length=length,
            extra=extra,
        )

    def unreachable(self, value: Any, path: str) -> Unreachable:
        data = self.mapping(value, path)
        return Unreachable(
            id=self.text(self.required(data, "id", path), f"{path}.id"),
            reason=self.text(self.required(data, "reason", path), f"{path}.reason"),
            extra={k: v for k, v in data.items() if k not in _UNREACHABLE_KEYS},
        )

    def route(self, data: Any) -> Route:
        data = self.mapping(data, "")
        version = self.required(data, "route", "")
        if version != ROUTE_FORMAT or isinstance(version, bool):
            raise self.fail("route", f"route format {version!r} is not supported",
                            f"this reader reads route format {ROUTE_FORMAT}")
        units = self.text(self.required(data, "units", ""), "units")
        if units not in UNITS:
            raise self.fail("units", f"unknown units {units!r}", "use mm or inch")
        legs_in = self.required(data, "legs", "")
        if not isinstance(legs_in, list):
            raise self.fail("legs", "must be a list of legs (`legs: []` when there are none)")
        gaps_in = self.required(data, "unreachable", "")
        if not isinstance(gaps_in, list):
            raise self.fail("unreachable", "must be a list (`unreachable: []` when none)")
        route = Route(
            scene_file=self.text(self.required(data, "scene", ""), "scene"),
            scene_sha256=self.text(self.required(data, "scene_sha256", ""), "scene_sha256"),
            config_sha256=self.text(self.required(data, "config_sha256", ""), "config_sha256"),
            units=units,
            legs=tuple(self.leg(v, f"legs[{i}]") for i, v in enumerate(legs_in)),
            unreachable=tuple(self.unreachable(v, f"unreachable[{i}]")
                              for i, v in enumerate(gaps_in)),
            extra={k: v for k, v in data.items() if k not in _ROUTE_KEYS + _ROUTE_TAIL},
        )
        status = self.required(data, "status", "")
        if status != route.status:
            raise self.fail("status", f"status {status!r} does not match the file's unreachable "
                            f"list", f"it must be {route.status!r}")
        length = self.number(self.required(data, "length", ""), "length")
        if not abs(length - route.length) <= 1e-6 * max(1.0, abs(length)):
            raise self.fail("length", f"length {length!r} is not the sum of the legs' lengths "
                            f"({route.length!r})")
        return route


def load_route(text: str | bytes, *, file: str = "<route>") -> Route:
    """Read a route file's text; a malformed file raises RouteFileError (a ValueError).

    Keys other than the documented ones are kept in the `extra` dicts of the route, its legs and
    its unreachable entries (`appeared`/`gone` as tuples of ids, `carry` as a tuple of pairs).
    """
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as err:
            raise RouteFileError(file, None, None, "", f"is not UTF-8 text ({err})") from None
    loader = _Loader(text)
    try:
        node = loader.get_single_node()
        if node is None:
            raise RouteFileError(file, None, None, "", "is empty",
                                 "plan the scene again to write its route file")
        marks: dict[str, tuple[int, int]] = {}
        dup = _marks(node, "", marks)
        if dup:
            line, column = marks[dup]
            raise RouteFileError(file, line, column, dup, "this key appears twice")
        data = loader.construct_document(node)
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        line, column = (mark.line + 1, mark.column + 1) if mark else (None, None)
        raise RouteFileError(file, line, column, "", f"is not valid YAML: {err.problem}") from None
    except yaml.YAMLError as err:
        raise RouteFileError(file, None, None, "", f"is not valid YAML: {err}") from None
    finally:
        loader.dispose()
    return _Reader(file, marks).route(data)
