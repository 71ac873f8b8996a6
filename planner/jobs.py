"""One scene file in, its files out: load, plan, verify, render adapters, write atomically.

Hand-off rule for machine-side readers: every adapter file is written first (each atomically),
the route file last; the route file names each companion file with its sha256, so a reader that
finds a route file can check it is looking at one consistent set.
"""

from __future__ import annotations

import contextlib
import hashlib
from dataclasses import dataclass, field, replace
from pathlib import Path

from adapters import AdapterError, enabled_adapters

from .config import Settings
from .errors import ConfigError, PlanningError, SceneError, format_error
from .files import atomic_write, output_path, output_stem
from .plan import PlanCache, PlanResult, plan_scene
from .routefile import dump_route
from .scene import load_scene, load_scene_bytes

__all__ = ["JobOutcome", "EXIT_OK", "EXIT_INCOMPLETE", "EXIT_INVALID", "EXIT_FAILED", "run_job",
           "route_file_name"]

EXIT_OK = 0
EXIT_INVALID = 2
EXIT_INCOMPLETE = 3
EXIT_FAILED = 4  # the planner itself failed (e.g. its route did not pass the safety check)


@dataclass
class JobOutcome:
    """What happened to one scene file."""

    state: str  # planned | incomplete | invalid | failed
    exit_code: int
    message: str | None = None
    files: list[Path] = field(default_factory=list)
    result: PlanResult | None = None
    write_error: bool = False  # planned, but the outputs could not be written (disk full...)


def _named(scene_path: Path, message: str) -> str:
    """The message with the scene's file name in front, once."""
    name = scene_path.name
    return message if message.startswith(f"{name}:") else f"{name}: {message}"


def _planner_yaml(settings: Settings) -> Path:
    folder = settings.config_dir if settings.config_dir is not None else Path("config")
    return folder / "planner.yaml"


def route_file_name(stem: str) -> str:
    return f"{stem}.route.yaml"


def run_job(
    scene_path: Path,
    out_dir: Path | None,
    settings: Settings,
    *,
    cache: PlanCache | None = None,
    write: bool = True,
    data: bytes | None = None,
) -> JobOutcome:
    """Plan one scene file; with `write`, put its route and adapter files into `out_dir`.

    `data`: the file's bytes when the caller has read them already (the watcher plans exactly
    the bytes it hashed and saw settle, never a second read of a file that may have changed).
    """
    try:
        if data is None:
            scene = load_scene(scene_path, settings)
        else:
            scene = load_scene_bytes(data, scene_path.name, settings)
        adapters = (
            enabled_adapters(
                settings.adapters,
                config_file=str(_planner_yaml(settings)),
                adapter_settings=settings.adapter_settings,
            )
            if write
            else []
        )
        result = plan_scene(scene, settings, cache=cache)
    except (SceneError, ConfigError) as exc:
        return JobOutcome("invalid", EXIT_INVALID, format_error(exc))
    except PlanningError as exc:
        return JobOutcome("failed", EXIT_FAILED, _named(scene_path, format_error(exc)))

    route = result.route
    if route.status == "complete":
        state, code = "planned", EXIT_OK
    else:
        state, code = "incomplete", EXIT_INCOMPLETE
    outcome = JobOutcome(state, code, result=result)
    if not write:
        return outcome

    out_dir = scene_path.parent if out_dir is None else out_dir
    stem = output_stem(scene_path)
    texts: dict[Path, str] = {}
    try:
        for adapter in adapters:
            own = settings.adapter_settings.get(adapter.name, {})
            texts[output_path(out_dir, stem, adapter.suffix)] = adapter.write(route, own, result)
    except AdapterError as exc:
        return JobOutcome("failed", EXIT_FAILED, _named(scene_path, f"adapter: {exc}"))

    companions = {
        path.name: hashlib.sha256(text.encode("utf-8")).hexdigest() for path, text in texts.items()
    }
    if companions:
        route = replace(route, extra={**route.extra, "files": companions})
    route_path = output_path(out_dir, stem, ".route.yaml")
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        for path, text in texts.items():
            atomic_write(path, text)
            outcome.files.append(path)
        atomic_write(route_path, dump_route(route, result.settings.resolution))
    except OSError as exc:
        # no route file, no hand-off: take back the companions this job wrote (ours alone)
        for path in outcome.files:
            with contextlib.suppress(OSError):
                path.unlink()
        return JobOutcome("failed", EXIT_FAILED, _named(
            scene_path, f"planned, but the outputs cannot be written into {out_dir}: "
            f"{exc.strerror or exc}; nothing was written for this scene (fix: free space in, "
            f"or give write access to, {out_dir})"), write_error=True)
    outcome.files.append(route_path)
    outcome.result = replace(result, route=route)
    return outcome
