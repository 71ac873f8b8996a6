"""Read the config folder (planner.yaml, heads.yaml), convert units, merge with a scene's values.

Every problem in a config file is one `ConfigError` with file, line, location path and a fix.
Heads are converted from heads.yaml's units into planner.yaml's; `Settings.in_units` converts
everything to a scene's units.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from .errors import ConfigError
from .model import Head
from .motion import AxisModel, AxisSpecError, axis_model_from_mapping, check_axes_override

__all__ = [
    "Limits",
    "Settings",
    "MM_PER_UNIT",
    "convert_length",
    "find_config_dir",
    "load_settings",
    "effective_config_sha256",
]

MM_PER_UNIT = {"mm": 1.0, "inch": 25.4}


def convert_length(value: float, from_units: str, to_units: str) -> float:
    """A length given in `from_units`, expressed in `to_units`."""
    return value * MM_PER_UNIT[from_units] / MM_PER_UNIT[to_units]


@dataclass(frozen=True)
class Limits:
    """Input limits that protect the planner from files it cannot plan in reasonable time."""

    max_file_bytes: int = 64 * 1024 * 1024
    max_vertices: int = 2_000_000
    max_obstacles: int = 200_000
    max_targets: int = 10_000
    max_depth: int = 16
    max_aliases: int = 0  # YAML aliases are refused outright by default
    max_abs_coordinate: float = 1e9  # any number in a scene, either way (catches unit slips)
    time_budget_s: float = 120.0


@dataclass(frozen=True)
class Settings:
    """Effective settings; lengths are in `units` (use `in_units` to convert to a scene's)."""

    units: str = "mm"
    margin: float = 2.0  # default margin when a head does not give one
    arc_tolerance: float = 0.05  # max distance between a true arc and its outer approximation
    resolution: float = 0.001  # output rounding step of route coordinates
    sequence: str = "given"
    cost: str = "length"
    adapters: tuple[str, ...] = ()
    adapter_settings: dict = field(default_factory=dict, compare=False, hash=False)
    watch: dict = field(default_factory=dict, compare=False, hash=False)
    limits: Limits = field(default_factory=Limits)
    heads: dict[str, Head] = field(default_factory=dict, compare=False, hash=False)
    config_dir: Path | None = None
    raw: dict = field(default_factory=dict, compare=False, hash=False)  # planner.yaml as read
    axes: AxisModel | None = None  # planner.yaml's axis model (None: no time estimates)
    # head name -> (checked partial `axes` override from heads.yaml, heads.yaml's units)
    head_axes: dict = field(default_factory=dict, compare=False, hash=False)

    def in_units(self, units: str) -> Settings:
        """The same settings with every length expressed in `units` (heads included)."""
        if units == self.units:
            return self
        f = MM_PER_UNIT[self.units] / MM_PER_UNIT[units]
        heads = {
            name: Head(
                name=h.name,
                footprint=tuple((x * f, y * f) for x, y in h.footprint),
                margin=h.margin * f,
                ride_height=None if h.ride_height is None else h.ride_height * f,
            )
            for name, h in self.heads.items()
        }
        return replace(
            self,
            units=units,
            margin=self.margin * f,
            arc_tolerance=self.arc_tolerance * f,
            resolution=self.resolution * f,
            heads=heads,
            axes=None if self.axes is None else self.axes.in_units(units),
        )


SCHEMA = "config.schema.json"
PLANNER_FILE = "planner.yaml"
HEADS_FILE = "heads.yaml"
_CONFIG_MAX_BYTES = 4 * 1024 * 1024


def find_config_dir(config_dir: Path | None = None) -> Path:
    """The config folder: the one given, else $SIDESTEP_CONFIG, else ./config, else the bundled."""
    if config_dir is not None:
        return Path(config_dir)
    env = os.environ.get("SIDESTEP_CONFIG")
    if env:
        return Path(env)
    local = Path.cwd() / "config"
    if local.is_dir():
        return local
    import planner

    return Path(planner.__file__).resolve().parent.parent / "config"


def load_settings(config_dir: Path | None = None) -> Settings:
    """Read planner.yaml and heads.yaml from the config folder (see `find_config_dir`).

    Either file may be missing (defaults are used), but not both. Raises ConfigError.
    """
    folder = find_config_dir(config_dir)
    if not folder.is_dir():
        raise ConfigError(str(folder), None, None, "", "the config folder does not exist",
                          "point --config (or $SIDESTEP_CONFIG) at a folder holding planner.yaml "
                          "and heads.yaml")
    planner_path, heads_path = folder / PLANNER_FILE, folder / HEADS_FILE
    if not planner_path.exists() and not heads_path.exists():
        raise ConfigError(str(folder), None, None, "",
                          f"the config folder holds neither {PLANNER_FILE} nor {HEADS_FILE}",
                          "copy the config/ folder that comes with sidestep and edit it")
    settings = Settings(config_dir=folder)
    if planner_path.exists():
        settings = _read(planner_path, "planner", lambda data: _planner(data, folder))
    if heads_path.exists():
        heads, head_axes = _read(heads_path, "heads", lambda data: _heads(data, settings))
        settings = replace(settings, heads=heads, head_axes=head_axes)
    return settings


def _read(path: Path, definition: str, build: Any) -> Any:
    """Parse one config file, check it against its schema, build it; Problem -> ConfigError."""
    from .document import parse_document, read_file
    from .problem import Problem, kind_of
    from .schemacheck import check_schema

    data = read_file(path, _CONFIG_MAX_BYTES, ConfigError, str(path))
    doc = parse_document(data, str(path), Limits(max_file_bytes=_CONFIG_MAX_BYTES), ConfigError,
                         allow_empty=True)
    value = {} if doc.value is None else doc.value  # an empty file (or only comments) sets nothing
    try:
        if not isinstance(value, dict):
            raise Problem((), f"{path.name} must be a mapping of keys, but it holds "
                          f"{kind_of(value)}", "start from the file that comes with sidestep")
        _finite(value)
        check_schema(value, SCHEMA, definition, delegate=("ring",))  # footprints: ring_array
        return build(value)
    except Problem as problem:
        raise doc.error(problem, ConfigError) from None


def _finite(value: Any) -> None:
    from .problem import Problem

    stack: list[tuple[Any, tuple]] = [(value, ())]
    while stack:
        item, path = stack.pop()
        if isinstance(item, dict):
            stack.extend((v, (*path, k)) for k, v in item.items())
        elif isinstance(item, list):
            stack.extend((v, (*path, i)) for i, v in enumerate(item))
        elif isinstance(item, float) and not (abs(item) <= 1e15):
            raise Problem(path, f"{item!r} is not a usable number",
                          "write a plain finite number")
        elif type(item) is int and abs(item) > 10**15:
            raise Problem(path, f"{item} is too large", "write a smaller number")


def _planner(data: dict, folder: Path) -> Settings:
    defaults = Settings()
    limits = Limits(**{
        k: (float(v) if isinstance(getattr(Limits(), k), float) else int(v))
        for k, v in data.get("limits", {}).items()
    })
    return Settings(
        units=data.get("units", "mm"),
        margin=float(data.get("margin", defaults.margin)),
        arc_tolerance=float(data.get("arc_tolerance", defaults.arc_tolerance)),
        resolution=float(data.get("resolution", defaults.resolution)),
        sequence=data.get("sequence", defaults.sequence),
        cost=data.get("cost", defaults.cost),
        adapters=tuple(data.get("adapters", ())),
        adapter_settings=dict(data.get("adapter_settings", {})),
        watch=dict(data.get("watch", {})),
        limits=limits,
        config_dir=folder,
        raw=data,
        axes=_axes(data),
    )


def _axes(data: dict) -> AxisModel | None:
    """planner.yaml's `axes` section (both axes complete) as an AxisModel, or None if absent."""
    from .problem import Problem

    if "axes" not in data:
        return None
    try:
        return axis_model_from_mapping(data["axes"], data.get("units", "mm"))
    except AxisSpecError as exc:
        raise Problem(tuple(exc.path.split(".")), exc.message, exc.hint) from None


def _heads(data: dict, settings: Settings) -> tuple[dict[str, Head], dict]:
    """Named heads in planner.yaml's units (a head without margin takes planner.yaml's), and
    each head's `axes` override with heads.yaml's units."""
    from .scene import check_rings, ring_array

    units = data.get("units", "mm")
    limits = settings.limits
    heads: dict[str, Head] = {}
    rings = []
    for name, entry in data.get("heads", {}).items():
        path = ("heads", name, "footprint")
        rings.append((path, ring_array(entry["footprint"], path, limits)))
    check_rings(rings)
    for (_, footprint), (name, entry) in zip(rings, data.get("heads", {}).items(), strict=True):
        ride, margin = entry.get("ride_height"), entry.get("margin")

        def conv(v: float) -> float:
            return convert_length(float(v), units, settings.units)

        heads[name] = Head(
            name=name,
            footprint=tuple((conv(x), conv(y)) for x, y in footprint.tolist()),
            margin=settings.margin if margin is None else conv(margin),
            ride_height=None if ride is None else conv(ride),
        )
    head_axes = {}
    for name, entry in data.get("heads", {}).items():
        if "axes" in entry:
            try:
                override = check_axes_override(entry["axes"], "axes")
            except AxisSpecError as exc:
                from .problem import Problem

                raise Problem(("heads", name, *exc.path.split(".")), exc.message,
                              exc.hint) from None
            head_axes[name] = (override, units)
    return heads, head_axes


def effective_config_sha256(settings: Settings, head: Head) -> str:
    """Hex sha256 of the settings a plan depends on, plus the head it used.

    Pass settings already in the scene's units (`settings.in_units(scene.units)`) and the scene's
    resolved head: a margin retune changes the hash, a change to an unused head does not.
    """
    canonical = {
        "units": settings.units,
        "margin": settings.margin,
        "arc_tolerance": settings.arc_tolerance,
        "resolution": settings.resolution,
        "sequence": settings.sequence,
        "cost": settings.cost,
        "adapters": list(settings.adapters),
        "adapter_settings": settings.adapter_settings,
        "head": {
            "name": head.name,
            "footprint": [list(p) for p in head.footprint],
            "margin": head.margin,
            "ride_height": head.ride_height,
        },
    }
    if settings.axes is not None:  # time estimates depend on the axis model
        canonical["axes"] = settings.axes.as_dict()
    if head.name in settings.head_axes:
        override, units = settings.head_axes[head.name]
        canonical["head"]["axes"] = {"override": override, "units": units}
    text = json.dumps(canonical, sort_keys=True, separators=(",", ":"), allow_nan=False,
                      default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
