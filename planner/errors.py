"""Error types with a location, and the one place they are formatted for people."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "SidestepError",
    "SceneError",
    "ConfigError",
    "PlanningError",
    "TooComplexError",
    "UnsafeRouteError",
    "format_error",
]


class SidestepError(Exception):
    """Base of every error this package raises on purpose."""


@dataclass
class _Located(SidestepError):
    file: str
    line: int | None
    column: int | None
    path: str
    message: str
    hint: str | None = None

    def __post_init__(self) -> None:
        super().__init__(self.message)

    def __str__(self) -> str:
        return format_error(self)


class SceneError(_Located):
    """A scene file that cannot be planned as written: file, line, column, path, what, fix."""


class ConfigError(_Located):
    """A config file (planner.yaml, heads.yaml) that cannot be used as written."""


class PlanningError(SidestepError):
    """The planner could not finish for a reason that is not the scene's fault."""


class TooComplexError(PlanningError):
    """Planning ran past the configured time budget or size limit."""


class UnsafeRouteError(PlanningError):
    """The independent safety check rejected a planned route: a planner bug, nothing is written."""

    def __init__(self, message: str, violations: list) -> None:
        super().__init__(message)
        self.violations = violations


def format_error(err: BaseException) -> str:
    """One clear message for a person: `file:line:column: path: message (fix: hint)`."""
    if isinstance(err, _Located):
        where = err.file or "<scene>"
        if err.line is not None:
            where += f":{err.line}"
            if err.column is not None:
                where += f":{err.column}"
        text = f"{where}: "
        if err.path:
            text += f"{err.path}: "
        text += err.message
        if err.hint:
            text += f" (fix: {err.hint})"
        return text
    return str(err)
