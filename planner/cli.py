"""Command line: argument parsing and messages only; the work is done by the pipeline modules."""

from __future__ import annotations

import argparse
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
    for i, leg in enumerate(route.legs, 1):
        t = leg.extra.get("time")
        est = "" if t is None else f"  {t:.3f} s"
        print(f"  leg {i}: {leg.from_id} -> {leg.to_id}  {leg.length:.3f} {route.units}{est}")
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
    from .render import render_svg, svg_to_png

    scene_path = Path(args.scene)
    if args.output:
        picture = Path(args.output)
        if picture.suffix.lower() not in (".svg", ".png"):
            print(f"{picture}: the picture must be named .svg or .png (fix: for example "
                  f"-o {picture.with_suffix('.svg').name})", file=sys.stderr)
            return EXIT_INVALID
    else:
        picture = output_path(scene_path.parent, output_stem(scene_path), ".svg")
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
    svg = render_svg(result.scene, route, result.free.blocked)
    atomic_write(picture, svg_to_png(svg) if picture.suffix.lower() == ".png" else svg)
    print(f"{scene_path.name}: {route.status}, {len(route.legs)} legs, "
          f"length {route.length:.3f} {route.units}")
    for item in route.unreachable:
        print(f"  unreachable {item.id}: {item.reason}")
    print(f"  picture: {picture}")
    print("Before running this route on the machine:")
    print(caution_text())
    return 0


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
    except Exception as exc:  # a bug of ours: one clear line, never a traceback
        print(f"sidestep: internal error ({type(exc).__name__}: {exc}); nothing was written "
              "for the scene being planned. Please report this with the scene file.",
              file=sys.stderr)
        return 4


if __name__ == "__main__":
    sys.exit(main())
