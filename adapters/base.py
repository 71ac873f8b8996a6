"""What an adapter is: a name, a file suffix, and a pure function from a route to file text."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

from planner.config import Settings
from planner.errors import ConfigError, SidestepError
from planner.model import Route

__all__ = [
    "Adapter",
    "AdapterError",
    "AdapterSettingsError",
    "config_file_name",
    "output_resolution",
]


class AdapterError(SidestepError):
    """An adapter could not turn this route into its file (bad settings or an unwritable value)."""


class AdapterSettingsError(ConfigError, AdapterError):
    """An adapter's settings section in planner.yaml cannot be used as written.

    It is both a ConfigError (located: file, path `adapter_settings.<name>.<key>`, hint) and an
    AdapterError, so a caller that only knows adapters still catches it.
    """


@runtime_checkable
class Adapter(Protocol):
    """An adapter writes one file `<stem><suffix>` beside the route file.

    `settings` is the adapter's own section of planner.yaml (`adapter_settings: {name: {...}}`);
    `job` is the planning result (scene, settings in scene units, free space) for adapters that
    need more than the route, e.g. a picture. An adapter may also have `check(settings)`, which
    validates its section before any planning starts (raises AdapterSettingsError).
    """

    name: str
    suffix: str
    summary: str

    def write(self, route: Route, settings: Mapping[str, Any], job: Any = None) -> str: ...


def output_resolution(route: Route, job: Any = None) -> float:
    """The output resolution the route was rounded to, in the route's units.

    From the planning result when there is one; otherwise the project's default resolution
    (Settings) converted to the route's units.
    """
    settings = getattr(job, "settings", None)
    resolution = getattr(settings, "resolution", None)
    if isinstance(resolution, int | float) and resolution > 0:
        return float(resolution)
    return Settings().in_units(route.units).resolution


def config_file_name(job: Any = None) -> str:
    """The planner.yaml path to name in settings errors (the config folder's, when known)."""
    settings = getattr(job, "settings", None)
    folder = getattr(settings, "config_dir", None)
    if folder:
        return str(Path(folder) / "planner.yaml")
    return "planner.yaml"
