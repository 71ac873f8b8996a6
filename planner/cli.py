"""Command line: argument parsing and messages only; the work is done by the pipeline modules."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from .config import load_settings
from .errors import ConfigError, format_error
from .jobs import EXIT_INVALID, run_job
from .safety import caution_text

__all__ = ["main"]


def _settings(args: argparse.Namespace):
    return load_settings(Path(args.config) if args.config else None)


def cmd_plan(args: argparse.Namespace) -> int:
    settings = _settings(args)
    scene_path = Path(args.scene)
    out_dir = Path(args.out) if args.out else None
    outcome = run_job(scene_path, out_dir, settings)
    if outcome.message:
        print(outcome.message, file=sys.stderr)
        return outcome.exit_code
    route = outcome.result.route
    print(f"{scene_path.name}: {route.status}, {len(route.legs)} legs, "
          f"length {route.length:.3f} {route.units}")
    for item in route.unreachable:
        print(f"  unreachable {item.id}: {item.reason}")
    for path in outcome.files:
        print(f"  wrote {path}")
    return outcome.exit_code


def cmd_check(args: argparse.Namespace) -> int:
    settings = _settings(args)
    scene_path = Path(args.scene)
    outcome = run_job(scene_path, None, settings, write=False)
    if outcome.message:
        print(outcome.message, file=sys.stderr)
        return outcome.exit_code
    route = outcome.result.route
    total = route.extra.get("time")
    timing = "" if total is None else f", estimated time {total:.3f} s"
    print(f"{scene_path.name}: valid; {route.status}: {len(route.legs)} legs, "
          f"length {route.length:.3f} {route.units}{timing} (nothing written)")
    from .render import leg_state_text

    for i, leg in enumerate(route.legs, 1):
        t = leg.extra.get("time")
        est = "" if t is None else f"  {t:.3f} s"
        changed = leg_state_text(leg.extra, route.units)
        changed = f"  [{changed}]" if changed else ""
        print(f"  leg {i}: {leg.from_id} -> {leg.to_id}  {leg.length:.3f} {route.units}{est}"
              f"{changed}")
    _print_order_saving(outcome.result, route.units)
    for item in route.unreachable:
        print(f"  unreachable {item.id}: {item.reason}")
    print("Before running this route on the machine:")
    print(caution_text())
    return outcome.exit_code


def _print_order_saving(result, units: str) -> None:
    """For `sequence: shortest`: the tour's cost against the file order, by the road map."""
    from .motion import effective_axes

    report = result.order
    if report is not None:
        unit = "s" if report.cost == "time" else units
        given, planned = report.given_cost, report.planned_cost
        share = f", {100 * report.saving / given:.1f}%" if given > 0 else ""
        print(f"  sequence shortest by {report.cost}: {planned:.3f} {unit} against {given:.3f} "
              f"{unit} in the given order (saves {report.saving:.3f} {unit}{share})")
    model = effective_axes(result.settings, result.scene)
    if model is not None and not model.linear:
        print("  note: axes.linear is false: times assume each axis runs on its own, but the "
              "route is checked safe only along its straight segments; the machine must run "
              "these moves as coordinated straight lines (docs/motion.md)")


def cmd_show(args: argparse.Namespace) -> int:
    from .files import atomic_write, output_path, output_stem
    from .render import leg_state_text, render_svg, svg_to_png

    scene_path = Path(args.scene)
    if args.leg is not None and args.leg < 1:
        print(f"--leg {args.leg}: legs are numbered from 1 (fix: --leg 1 or higher)",
              file=sys.stderr)
        return EXIT_INVALID
    if args.output:
        picture = Path(args.output)
        if picture.suffix.lower() not in (".svg", ".png"):
            print(f"{picture}: the picture must be named .svg or .png (fix: for example "
                  f"-o {picture.with_suffix('.svg').name})", file=sys.stderr)
            return EXIT_INVALID
    else:
        stem = output_stem(scene_path) + ("" if args.leg is None else f".leg{args.leg}")
        picture = output_path(scene_path.parent, stem, ".svg")
    if not picture.parent.is_dir():
        print(f"{picture}: folder {picture.parent} does not exist (fix: create it or pick "
              "another -o)", file=sys.stderr)
        return EXIT_INVALID
    if picture.exists() and picture.resolve() == scene_path.resolve():
        print(f"{picture}: refusing to overwrite the scene file", file=sys.stderr)
        return EXIT_INVALID
    outcome = run_job(scene_path, None, _settings(args), write=False)
    if outcome.message:
        print(outcome.message, file=sys.stderr)
        return outcome.exit_code
    result = outcome.result
    route = result.route
    if args.leg is not None and args.leg > len(route.legs):
        print(f"{scene_path.name}: --leg {args.leg}: the route has {len(route.legs)} "
              f"leg{'s' if len(route.legs) != 1 else ''} (fix: --leg 1 to "
              f"{len(route.legs)})" if route.legs else
              f"{scene_path.name}: --leg {args.leg}: no leg could be planned", file=sys.stderr)
        return EXIT_INVALID
    if args.leg is None:
        svg = render_svg(result.scene, route, result.free.blocked)
    else:
        view, grown = _leg_view(result, args.leg)
        svg = render_svg(result.scene, route, grown, leg=view)
    atomic_write(picture, svg_to_png(svg) if picture.suffix.lower() == ".png" else svg)
    print(f"{scene_path.name}: {route.status}, {len(route.legs)} legs, "
          f"length {route.length:.3f} {route.units}")
    for item in route.unreachable:
        print(f"  unreachable {item.id}: {item.reason}")
    if args.leg is not None:
        leg = route.legs[args.leg - 1]
        changed = leg_state_text(leg.extra, route.units)
        print(f"  leg {args.leg}: {leg.from_id} -> {leg.to_id}"
              + (f"  [{changed}]" if changed else ""))
    print(f"  picture: {picture}")
    print("Before running this route on the machine:")
    print(caution_text())
    return 0


def _leg_view(result, number: int):
    """What leg `number` (1-based) sees: a LegView and that leg's grown obstacles."""
    import shapely

    from .render import LegView
    from .states import footprint_of

    scene = result.scene
    if result.leg_states:
        states = result.leg_states
        state = states[number - 1]
        free = result.spaces.get(state).free
        present = set(state.present)
        earlier = {i for s in states[:number - 1] for i in s.present}
        # not present: gone when an earlier leg had it or nothing holds it back (`until` only)
        absent = {o.id: "already gone" if o.id in earlier or o.after is None
                  else "not yet present" for o in scene.obstacles if o.id not in present}
        footprint = footprint_of(scene, state)
        if not isinstance(footprint, shapely.Geometry):
            footprint = shapely.Polygon(footprint)
    else:
        free, absent = result.free, {}
        footprint = shapely.Polygon(scene.head.footprint)
    return LegView(number=number, absent=absent, footprint=footprint), free.blocked


def cmd_adapters(args: argparse.Namespace) -> int:
    from adapters import adapter_entries

    for entry in adapter_entries():  # one line each; a broken plugin says why instead
        if entry.adapter is not None:
            print(f"{entry.name:<12} {entry.adapter.suffix:<8} {entry.adapter.summary}")
        else:
            print(f"{entry.name:<12} {'-':<8} cannot be used: {entry.problem} "
                  f"(package {entry.distribution or 'unknown'})")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="sidestep",
        description="Plan collision-free traverse moves for XY gantry machines.",
    )
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("plan", help="plan one scene and write its route and adapter files")
    p.add_argument("scene", help="scene file (.yaml, .yml or .json)")
    p.add_argument("--out", help="output folder (default: beside the scene)")
    p.add_argument("--config", help="config folder (default: ./config)")
    p.set_defaults(func=cmd_plan)

    p = sub.add_parser("check", help="validate a scene and report reachability; writes nothing")
    p.add_argument("scene")
    p.add_argument("--config")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("show", help="draw the scene, its no-go zones and the route (SVG or PNG)")
    p.add_argument("scene")
    p.add_argument("-o", "--output", help="picture file ending in .svg or .png "
                   "(default: <scene name>.svg beside the scene)")
    p.add_argument("--leg", type=int, metavar="N", help="draw the scene as leg N (1-based) "
                   "sees it (default name: <scene name>.leg<N>.svg)")
    p.add_argument("--config", help="config folder (default: ./config)")
    p.set_defaults(func=cmd_show)

    p = sub.add_parser("adapters", help="list the installed adapters")
    p.add_argument("--config")
    p.set_defaults(func=cmd_adapters)

    p = sub.add_parser("watch", help="the daemon: plan every scene in a drop folder, then each "
                       "one that appears or changes, until stopped")
    p.add_argument("drop", help="drop folder the scenes are saved into")
    p.add_argument("--out", help="output folder (default: the drop folder)")
    p.add_argument("--config", help="config folder (default: ./config)")
    p.add_argument("--verbose", action="store_true", help="log every event and decision")
    p.set_defaults(func=cmd_watch)

    p = sub.add_parser("demo", help="start a watcher on a fresh drop folder, drop the bundled "
                       "scenes in one by one, show where their routes are, stop")
    p.add_argument("--out", default="demo-out", help="folder for the demo (default: demo-out)")
    p.add_argument("--config")
    p.add_argument("--keep-running", action="store_true",
                   help="leave the watcher running after the demo scenes (stop it with Ctrl-C)")
    p.set_defaults(func=cmd_demo)
    return parser


def cmd_watch(args: argparse.Namespace) -> int:
    from .watch import run_watch

    return run_watch(Path(args.drop), Path(args.out) if args.out else None, _settings(args),
                     verbose=args.verbose)


def cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    return run_demo(Path(args.out), _settings(args),
                    config=Path(args.config) if args.config else None,
                    keep_running=args.keep_running)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except ConfigError as exc:
        print(format_error(exc), file=sys.stderr)
        return EXIT_INVALID
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:  # output piped into e.g. `head`, which stopped reading
        try:
            sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the flush at exit
        except OSError:
            pass
        return 0
    except Exception as exc:  # a bug of ours: one clear line, never a traceback
        print(f"sidestep: internal error ({type(exc).__name__}: {exc}); nothing was written "
              "for the scene being planned. Please report this with the scene file.",
              file=sys.stderr)
        return 4


if __name__ == "__main__":
    sys.exit(main())
