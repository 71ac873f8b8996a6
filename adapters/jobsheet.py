"""The job sheet: one self-contained HTML page per route for the shop PC next to the machine.

Everything is inside the file (styles, the picture as inline SVG); no scripts, no fonts, no
links to fetch, so it opens the same from a USB stick, a network share or a browser's print.
"""

from __future__ import annotations

import html
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from planner.model import Route
from planner.safety import CAUTIONS

from .base import config_file_name
from .section import Section

if TYPE_CHECKING:
    import shapely

__all__ = ["JobSheetAdapter", "read_jobsheet_settings"]

KNOWN = ["picture"]

_STYLE = """
body { font-family: "DejaVu Sans", Verdana, Arial, sans-serif; color: #1a1a1a; margin: 24px;
       max-width: 1500px; }
h1 { font-size: 24px; margin: 0 0 4px 0; }
h2 { font-size: 18px; margin: 24px 0 8px 0; border-bottom: 2px solid #1a1a1a; }
.status { font-size: 16px; font-weight: bold; margin: 4px 0 12px 0; }
.status.incomplete { color: #a34400; }
.cautions { border: 3px solid #1a1a1a; background: #fff6cc; padding: 8px 16px; margin: 12px 0; }
.cautions p { margin: 4px 0; font-weight: bold; }
.cautions li { margin: 3px 0; }
figure { margin: 12px 0; }
figure svg { max-width: 100%; height: auto; border: 1px solid #999; }
table { border-collapse: collapse; margin: 8px 0; }
th, td { border: 1px solid #888; padding: 4px 10px; text-align: left; }
th { background: #e6e6e6; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.unreachable li { margin: 6px 0; }
.unreachable .id { font-weight: bold; }
code, .hash { font-family: "DejaVu Sans Mono", monospace; font-size: 13px; word-break: break-all; }
@media print { body { margin: 8mm; } h2 { break-after: avoid; } figure { break-inside: avoid; } }
"""


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _len(v: float, units: str) -> str:
    return f"{v:.1f} {'in' if units == 'inch' else units}" if units == "mm" else f"{v:.3f} in"


def _time(seconds: Any) -> str:
    try:
        s = float(seconds)
    except (TypeError, ValueError):
        return _e(seconds)
    if s >= 60:
        return f"{int(s // 60)} min {s % 60:04.1f} s"
    return f"{s:.1f} s"


def read_jobsheet_settings(section: Any, file: str = "planner.yaml") -> bool:
    """Check `adapter_settings.jobsheet` and return whether the sheet carries the picture."""
    s = Section("jobsheet", section, file)
    picture = s.flag("picture", True)
    s.finish(KNOWN)
    return picture


class JobSheetAdapter:
    """`<stem>.html`: the picture, the legs, what cannot be reached and why, hashes, cautions."""

    name = "jobsheet"
    suffix = ".html"
    summary = "self-contained HTML job sheet: picture, legs, unreachable targets, cautions"

    def check(self, settings: Mapping[str, Any], job: Any = None) -> None:
        read_jobsheet_settings(settings, config_file_name(job))

    def write(self, route: Route, settings: Mapping[str, Any], job: Any = None) -> str:
        picture = read_jobsheet_settings(settings, config_file_name(job))
        units = route.units
        out = [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f"<title>Job sheet: {_e(route.scene_file)}</title>",
            f"<style>{_STYLE}</style></head><body>",
            f"<h1>Job sheet: {_e(route.scene_file)}</h1>",
        ]
        if route.status == "complete":
            status = (f"Route complete: {len(route.legs)} legs, {_len(route.length, units)} "
                      "of traverse.")
        else:
            n = len(route.unreachable)
            status = (f"Route INCOMPLETE: {n} point{'s' if n != 1 else ''} cannot be reached; "
                      f"{len(route.legs)} legs, {_len(route.length, units)} of traverse.")
        total_time = route.extra.get("time")
        if total_time is not None:
            status += f" Estimated traverse time {_time(total_time)}."
        out.append(f'<p class="status {route.status}">{_e(status)}</p>')

        out.append('<div class="cautions"><p>Before running this route on the machine:</p><ul>')
        out.extend(f"<li>{_e(c)}</li>" for c in CAUTIONS)
        out.append("</ul></div>")

        if picture and job is not None and getattr(job, "scene", None) is not None:
            from planner.render import render_svg

            grown, label = _zones_to_draw(job)
            svg = render_svg(job.scene, route, grown, details=False, grown_label=label)
            svg = svg.split("\n", 1)[1] if svg.startswith("<?xml") else svg
            out.append(f'<figure aria-label="picture of the scene and route">{svg}</figure>')

        out.append(self._unreachable(route))
        out.append(self._legs(route))
        out.append("<h2>Files and hashes</h2><table>")
        rows = [
            ("scene file", _e(route.scene_file)),
            ("scene sha256", f'<span class="hash">{_e(route.scene_sha256)}</span>'),
            ("config sha256", f'<span class="hash">{_e(route.config_sha256)}</span>'),
            ("units", _e(units)),
            ("status", _e(route.status)),
        ]
        if job is not None and getattr(job, "scene", None) is not None:
            head = job.scene.head
            desc = f"{head.name or 'given in the scene'}, margin {head.margin:g} {units}"
            if head.ride_height is not None:
                desc += f", ride height {head.ride_height:g} {units}"
            rows.append(("head", _e(desc)))
        out.extend(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows)
        out.append("</table>")
        out.append("<p>Check that the scene file above is the one for the sheet on the table: "
                   "the sha256 printed here must match the route file's.</p>")
        out.append("</body></html>")
        return "\n".join(out) + "\n"

    @staticmethod
    def _legs(route: Route) -> str:
        units = route.units
        from planner.render import leg_state_text

        timed = any("time" in leg.extra for leg in route.legs)
        # scenes that change as the job runs: what appeared, went or is carried on each leg
        changes = [leg_state_text(leg.extra, units) for leg in route.legs]
        changing = any(changes)
        head = "<tr><th>leg</th><th>from</th><th>to</th><th>length</th>"
        head += "<th>time</th>" if timed else ""
        head += "<th>waypoints</th>"
        head += "<th>state changes</th>" if changing else ""
        head += "</tr>"
        rows = [f"<h2>Legs ({len(route.legs)})</h2>", "<table>", head]
        for k, leg in enumerate(route.legs, start=1):
            row = (f"<tr><td class=\"num\">{k}</td><td>{_e(leg.from_id)}</td>"
                   f"<td>{_e(leg.to_id)}</td><td class=\"num\">{_len(leg.length, units)}</td>")
            if timed:
                shown = _time(leg.extra["time"]) if "time" in leg.extra else ""
                row += f"<td class=\"num\">{shown}</td>"
            row += f"<td class=\"num\">{len(leg.points)}</td>"
            row += f"<td>{_e(changes[k - 1])}</td>" if changing else ""
            row += "</tr>"
            rows.append(row)
        total = (f"<tr><th colspan=\"3\">total</th><th class=\"num\">"
                 f"{_len(route.length, units)}</th>")
        if timed:
            t = route.extra.get("time")
            if t is None and all("time" in leg.extra for leg in route.legs):
                t = sum(float(leg.extra["time"]) for leg in route.legs)
            total += f"<th class=\"num\">{'' if t is None else _time(t)}</th>"
        total += "<th></th><th></th></tr>" if changing else "<th></th></tr>"
        rows.append(total)
        rows.append("</table>")
        if not route.legs:
            rows = ["<h2>Legs</h2>", "<p>No leg could be planned.</p>"]
        return "\n".join(rows)

    @staticmethod
    def _unreachable(route: Route) -> str:
        if not route.unreachable:
            return "<h2>Cannot be reached</h2><p>Every target is reached.</p>"
        items = []
        for i, u in enumerate(route.unreachable):
            letter = chr(ord("A") + i) if i < 26 else str(i + 1)
            items.append(f'<li><span class="id">{letter}: {_e(u.id)}</span>: {_e(u.reason)}</li>')
        return ("<h2>Cannot be reached</h2><ul class=\"unreachable\">" + "".join(items)
                + "</ul>")


def _zones_to_draw(job) -> tuple[shapely.Geometry | None, str | None]:
    """The no-go zones for the job sheet's one picture, and the legend's words for them.

    A scene that does not change has one free space. In one that changes as the job runs each
    leg has its own zones, so one picture draws what holds on every leg: the zones of the
    obstacles present on all of them, grown by the head alone (a carried part only adds to
    them); `sidestep show --leg N` draws each leg's own.
    """
    free = getattr(job, "free", None)
    states = getattr(job, "leg_states", ()) or ()
    if free is None or not states:
        return (None if free is None else free.blocked), None
    from planner.cspace import build_free_space
    from planner.errors import PlanningError

    scene = job.scene
    everywhere = set.intersection(*(set(s.present) for s in states))
    obstacles = [o for o in scene.obstacles if o.id in everywhere]
    try:
        blocked = build_free_space(scene, job.settings, obstacles=obstacles).blocked
    except PlanningError:
        return None, None
    u = "in" if scene.units == "inch" else scene.units
    return blocked, (f"no-go zone on every leg: obstacles present throughout, grown by the head "
                     f"outline and the {scene.head.margin:g} {u} margin (each leg's own zones: "
                     f"sidestep show --leg N)")
