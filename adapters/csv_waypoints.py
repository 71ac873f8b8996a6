"""The `csv` adapter: one header row, then one row per waypoint, for controller-side scripts.

Columns: seq, leg, kind (start|via|target|finish), target, x_<unit>, y_<unit> with the unit in
the column name (`x_mm`, `x_in`). Coordinates have fixed decimals from the output resolution and
`.` as decimal mark; no comment lines, no quoting (a value that would need quotes is refused).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from planner.model import Route

from .base import AdapterError, config_file_name, output_resolution
from .numbers import check_on_grid, decimals_for, fixed
from .section import Section
from .waypoints import route_waypoints

__all__ = ["CsvWaypoints", "CsvSettings", "read_csv_settings", "COLUMN_UNIT"]

COLUMN_UNIT = {"mm": "mm", "inch": "in"}

DELIMITERS = {
    "comma": ",", ",": ",",
    "semicolon": ";", ";": ";",
    "tab": "\t", "\t": "\t",
    "pipe": "|", "|": "|",
}
LINE_ENDINGS = {"lf": "\n", "crlf": "\r\n"}
KNOWN = ["delimiter", "line_ending"]


@dataclass(frozen=True)
class CsvSettings:
    """The csv adapter's settings, checked."""

    delimiter: str
    line_ending: str


def read_csv_settings(section: Any, file: str = "planner.yaml") -> CsvSettings:
    """Check `adapter_settings.csv` (delimiter, line_ending) and return the values to use."""
    s = Section("csv", section, file)
    settings = CsvSettings(
        delimiter=s.choice("delimiter", "comma", DELIMITERS),
        line_ending=s.choice("line_ending", "lf", LINE_ENDINGS),
    )
    s.finish(KNOWN)
    return settings


def _plain(value: str, what: str, delimiter: str) -> str:
    """A field as written: refused if a reader would need quotes to split the row right."""
    bad = [c for c in (delimiter, '"', "\r", "\n") if c in value]
    if bad:
        shown = {"\t": "a tab", "\r": "a line break", "\n": "a line break", '"': 'a `"`'}
        raise AdapterError(
            f"csv: {what} {value!r} contains {shown.get(bad[0], repr(bad[0]))}, which a "
            "controller script splitting rows would misread; rename it in the scene or choose "
            "another delimiter (adapter_settings.csv.delimiter)"
        )
    return value


class CsvWaypoints:
    """Route -> `<stem>.csv`, one row per waypoint in travel order."""

    name = "csv"
    suffix = ".csv"
    summary = "waypoints as CSV rows (seq, leg, kind, target, x, y) for controller-side scripts"

    def check(self, settings: Mapping[str, Any], job: Any = None) -> None:
        read_csv_settings(settings, config_file_name(job))

    def write(self, route: Route, settings: Mapping[str, Any], job: Any = None) -> str:
        cfg = read_csv_settings(settings, config_file_name(job))
        if route.units not in COLUMN_UNIT:
            raise AdapterError(f"csv: unknown route units {route.units!r} (expected mm or inch)")
        unit = COLUMN_UNIT[route.units]
        resolution = output_resolution(route, job)
        decimals = decimals_for(resolution)
        waypoints = route_waypoints(route)
        check_on_grid(((w.x, w.y) for w in waypoints), decimals, resolution, "csv")
        d, end = cfg.delimiter, cfg.line_ending
        rows = [d.join(["seq", "leg", "kind", "target", f"x_{unit}", f"y_{unit}"])]
        for w in waypoints:
            target = _plain(w.target, "target id", d)
            rows.append(d.join(
                [str(w.seq), str(w.leg), w.kind, target, fixed(w.x, decimals), fixed(w.y, decimals)]
            ))
        return end.join(rows) + end
