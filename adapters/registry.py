"""Find adapters: built-in and third-party ones alike, through the `sidestep.adapters` entry points.

A plugin is any installed distribution with an entry point in the group, e.g. in its
pyproject.toml: `[project.entry-points."sidestep.adapters"]` / `plc = "plant_plc:PlcAdapter"`.
The entry point's name is the adapter's name in planner.yaml (`adapters: [csv, plc]`).
"""

from __future__ import annotations

import os
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, replace
from importlib.metadata import entry_points
from typing import Any

from planner.errors import ConfigError

from .base import Adapter

__all__ = ["GROUP", "AdapterEntry", "adapter_entries", "installed_adapters", "enabled_adapters"]

GROUP = "sidestep.adapters"

# `<stem><suffix>` must stay one plain file name; suffixes of scene files are refused so an
# adapter's file can never replace, or be taken for, a scene in the drop folder.
_SUFFIX = re.compile(r"^(\.[A-Za-z0-9][A-Za-z0-9_-]*){1,3}$")
_SCENE_SUFFIXES = (".yaml", ".yml", ".json")


@dataclass(frozen=True)
class AdapterEntry:
    """One registration in the entry-point group: loaded, or why it could not be used."""

    name: str
    value: str  # "module:attribute"
    distribution: str | None  # the installed package that registers it
    adapter: Adapter | None
    problem: str | None = None


def _problem(name: str, adapter: Any) -> str | None:
    """What is wrong with a loaded adapter object, or None."""
    if not isinstance(adapter, Adapter):
        return "it is not an adapter (it needs name, suffix, summary and write(route, settings))"
    if not callable(getattr(adapter, "write", None)):
        return "its write is not callable"
    if adapter.name != name:
        return f"its name {adapter.name!r} differs from its entry point name {name!r}"
    suffix = adapter.suffix
    if not isinstance(suffix, str) or not _SUFFIX.match(suffix):
        return f"its suffix {suffix!r} is not like .csv or .plc.txt"
    if suffix.lower().endswith(_SCENE_SUFFIXES):
        return f"its suffix {suffix!r} is a scene file's: its file could replace a scene"
    if not isinstance(adapter.summary, str) or "\n" in adapter.summary:
        return "its summary is not one line of text"
    return None


_CACHE: dict = {}  # the last scan: {"key": path signature, "entries": [...]}


def _path_signature() -> tuple:
    """sys.path and each folder's modification time: installing or removing a distribution
    adds or removes its metadata folder in one of them, which changes that folder's mtime."""
    out = []
    for entry in sys.path:
        try:
            out.append((entry, os.stat(entry or ".").st_mtime_ns))
        except OSError:
            out.append((entry, None))
    return tuple(out)


def adapter_entries() -> list[AdapterEntry]:
    """Every registration in the group, loaded where possible, sorted by name.

    Scanning the installed distributions takes ~20 ms, so the result is kept until sys.path or
    one of its folders changes (a plugin installed or removed, even while the daemon runs).
    """
    key = _path_signature()
    if _CACHE.get("key") != key:
        _CACHE["entries"] = _scan_entries()
        _CACHE["key"] = key
    return list(_CACHE["entries"])


def _scan_entries() -> list[AdapterEntry]:
    entries = []
    for ep in entry_points(group=GROUP):
        dist = getattr(getattr(ep, "dist", None), "name", None)
        try:
            obj = ep.load()
            adapter = obj() if isinstance(obj, type) else obj
        except Exception as exc:  # a broken plugin must not stop the others: report it
            entries.append(AdapterEntry(ep.name, ep.value, dist, None,
                                        f"it could not be loaded ({type(exc).__name__}: {exc})"))
            continue
        problem = _problem(ep.name, adapter)
        entries.append(AdapterEntry(ep.name, ep.value, dist, None if problem else adapter, problem))
    by_name: dict[str, list[AdapterEntry]] = {}
    for entry in entries:
        by_name.setdefault(entry.name, []).append(entry)
    out = []
    for name, same in sorted(by_name.items()):
        if len(same) > 1:
            who = ", ".join(sorted(str(e.distribution or e.value) for e in same))
            same = [AdapterEntry(e.name, e.value, e.distribution, None,
                                 f"the name {name!r} is registered more than once ({who})")
                    for e in same]
        out.extend(same)
    return out


def installed_adapters() -> dict[str, Adapter]:
    """Every usable adapter registered in the entry-point group, by name (instances)."""
    return {e.name: e.adapter for e in adapter_entries() if e.adapter is not None}


def enabled_adapters(
    names: tuple[str, ...] | list[str],
    config_file: str = "planner.yaml",
    adapter_settings: Mapping[str, Any] | None = None,
) -> list[Adapter]:
    """The adapters planner.yaml enables, in its order; every problem is a clear config error.

    With `adapter_settings` (planner.yaml's mapping of adapter name -> section), each enabled
    adapter's section is checked too (adapters that have `check`), and a section naming no
    installed adapter is refused (a typo would silently drop its settings).
    """
    entries = adapter_entries()
    usable = {e.name: e.adapter for e in entries if e.adapter is not None}
    broken = {e.name: e for e in entries if e.adapter is None}
    known = ", ".join(usable) or "none"

    def error(path: str, message: str, hint: str) -> ConfigError:
        return ConfigError(file=config_file, line=None, column=None, path=path,
                           message=message, hint=hint)

    chosen: list[Adapter] = []
    suffixes: dict[str, str] = {}
    for i, name in enumerate(names):
        if name in broken:
            entry = broken[name]
            raise error(f"adapters[{i}]",
                        f"adapter {name!r} ({entry.value}, from {entry.distribution or 'unknown'}) "
                        f"cannot be used: {entry.problem}",
                        "fix or reinstall the package that provides it, or remove it from adapters")
        if name not in usable:
            raise error(f"adapters[{i}]", f"unknown adapter {name!r}",
                        f"installed adapters: {known}")
        adapter = usable[name]
        if any(a.name == name for a in chosen):
            raise error(f"adapters[{i}]", f"adapter {name!r} is listed twice", "list it once")
        if adapter.suffix in suffixes:
            raise error(f"adapters[{i}]",
                        f"adapters {suffixes[adapter.suffix]!r} and {name!r} both write "
                        f"<stem>{adapter.suffix}", "enable only one of them")
        suffixes[adapter.suffix] = name
        chosen.append(adapter)

    if adapter_settings is not None:
        if not isinstance(adapter_settings, Mapping):
            raise error("adapter_settings", "must be a mapping of adapter name -> settings",
                        "write `csv:`, `gcode:` ... indented under adapter_settings")
        for key in adapter_settings:
            if key not in usable and key not in broken:
                raise error(f"adapter_settings.{key}", f"no installed adapter is called {key!r}",
                            f"installed adapters: {known}")
        for adapter in chosen:
            check = getattr(adapter, "check", None)
            if callable(check):
                try:
                    check(adapter_settings.get(adapter.name) or {})
                except ConfigError as exc:
                    if exc.file == "planner.yaml" and config_file != exc.file:
                        raise replace(exc, file=config_file) from None
                    raise
    return chosen
