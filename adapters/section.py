"""Read one adapter's settings section with clear messages: known keys only, typed values."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .base import AdapterSettingsError

__all__ = ["Section"]

_MISSING = object()


class Section:
    """The `adapter_settings.<adapter>` mapping of planner.yaml, read key by key.

    Every getter records the key it read; `finish()` then refuses keys nobody read, so a typo
    (`delimeter:`) is an error instead of a silently ignored setting.
    """

    def __init__(self, adapter: str, data: Any, file: str = "planner.yaml") -> None:
        self.adapter = adapter
        self.file = file
        self.path = f"adapter_settings.{adapter}"
        if data is None:
            data = {}
        if not isinstance(data, Mapping):
            raise self.error(
                self.path,
                f"the settings of adapter {adapter!r} must be a mapping, not "
                f"{type(data).__name__}",
                "write `key: value` lines indented under the adapter's name",
            )
        self.data = dict(data)
        self._read: set[str] = set()

    def error(self, path: str, message: str, hint: str | None = None) -> AdapterSettingsError:
        return AdapterSettingsError(
            file=self.file, line=None, column=None, path=path, message=message, hint=hint
        )

    def where(self, key: str) -> str:
        return f"{self.path}.{key}"

    def raw(self, key: str, default: Any = _MISSING) -> Any:
        self._read.add(key)
        value = self.data.get(key, _MISSING)
        if value is _MISSING or value is None:
            return default
        return value

    def choice(self, key: str, default: str, choices: Mapping[str, Any]) -> Any:
        """One of the named choices; returns the mapped value."""
        value = self.raw(key, default)
        if isinstance(value, bool) or not isinstance(value, str | int | float):
            value = repr(value)
        text = str(value)
        if text not in choices:
            named = [str(c) for c in choices if str(c).isidentifier()] or list(map(str, choices))
            raise self.error(
                self.where(key),
                f"{text!r} is not a known value",
                "use one of: " + ", ".join(named),
            )
        return choices[text]

    def flag(self, key: str, default: bool) -> bool:
        value = self.raw(key, default)
        if not isinstance(value, bool):
            raise self.error(self.where(key), f"{value!r} is not true or false",
                             "write true or false")
        return value

    def integer(self, key: str, default: int, low: int, high: int) -> int:
        value = self.raw(key, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(
                self.where(key), f"{value!r} is not a whole number",
                f"write a whole number from {low} to {high}",
            )
        if not low <= value <= high:
            raise self.error(
                self.where(key), f"{value} is out of range", f"use a number from {low} to {high}"
            )
        return value

    def number(self, key: str, default: float, *, positive: bool = True) -> float:
        value = self.raw(key, default)
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(self.where(key), f"{value!r} is not a number", "write a number")
        value = float(value)
        if value != value or value in (float("inf"), float("-inf")):
            raise self.error(self.where(key), f"{value!r} is not a finite number", "write a number")
        if positive and value <= 0:
            raise self.error(self.where(key), f"{value} must be greater than 0",
                             "write a positive number")
        return value

    def text(self, key: str, default: str) -> str:
        value = self.raw(key, default)
        if not isinstance(value, str):
            raise self.error(
                self.where(key), f"{value!r} is not text",
                "quote the value, or write it as a `|` block",
            )
        return value

    def mapping(self, key: str) -> Section:
        """A nested mapping (e.g. `blocks`), read with the same rules."""
        self._read.add(key)
        sub = Section.__new__(Section)
        sub.adapter = self.adapter
        sub.file = self.file
        sub.path = self.where(key)
        data = self.data.get(key)
        if data is None:
            data = {}
        if not isinstance(data, Mapping):
            raise self.error(sub.path, f"must be a mapping, not {type(data).__name__}",
                             "write `name: text` lines indented under it")
        sub.data = dict(data)
        sub._read = set()
        return sub

    def finish(self, known: list[str] | None = None) -> None:
        """Refuse keys that were never read (typos, or settings of another adapter)."""
        unknown = [str(k) for k in self.data if k not in self._read]
        if unknown:
            names = known if known is not None else sorted(self._read)
            raise self.error(
                self.where(unknown[0]),
                f"unknown setting {unknown[0]!r}",
                "known settings here: " + ", ".join(names),
            )
