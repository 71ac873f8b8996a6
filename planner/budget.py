"""Planning limits that keep every scene bounded: a time budget, and a size check done before
the free space is built.

The time budget is a deadline set once per plan (`within_time_budget` on `plan_scene`) and read
by `check_time` between the stages and inside the long loops of the road map build, so a scene
that would take too long ends with one clear TooComplexError instead of blocking the daemon.
The size check counts, before anything is built, the vertices the outer polygons of circles and
of the margin's round corners will have (they grow with the square root of radius / arc
tolerance, so a huge circle or a tiny arc tolerance can ask for millions).
"""

from __future__ import annotations

import functools
import inspect
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from typing import TYPE_CHECKING, TypeVar

import numpy as np

from .errors import TooComplexError

if TYPE_CHECKING:
    from .config import Settings
    from .model import Scene

__all__ = ["time_budget", "within_time_budget", "check_time", "check_size", "arc_vertices"]

_HINT = ("simplify the scene or split the job, or raise limits.time_budget_s in "
         "config/planner.yaml")


@dataclass(frozen=True)
class _Deadline:
    end: float  # time.monotonic() reading
    seconds: float
    what: str


_DEADLINE: ContextVar[_Deadline | None] = ContextVar("sidestep_deadline", default=None)

F = TypeVar("F", bound=Callable)


@contextmanager
def time_budget(seconds: float, what: str) -> Iterator[None]:
    """Run the block under a deadline `seconds` from now (an outer, earlier deadline stays)."""
    outer = _DEADLINE.get()
    deadline = _Deadline(time.monotonic() + float(seconds), float(seconds), what)
    if outer is not None and outer.end <= deadline.end:
        deadline = outer
    token = _DEADLINE.set(deadline)
    try:
        yield
    finally:
        _DEADLINE.reset(token)


def check_time(stage: str) -> None:
    """Raise TooComplexError when the current plan ran past its time budget (cheap: one clock
    reading; a no-op outside a budget)."""
    deadline = _DEADLINE.get()
    if deadline is not None and time.monotonic() > deadline.end:
        raise TooComplexError(
            f"{deadline.what}: too complex to plan within the time budget of "
            f"{deadline.seconds:g} s (stopped while {stage}; nothing was written) (fix: {_HINT})"
        )


def within_time_budget(func: F) -> F:
    """Decorate `plan_scene(scene, settings, ...)`: the call runs under
    `settings.limits.time_budget_s` and first passes `check_size`."""

    signature = inspect.signature(func)

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        bound = signature.bind(*args, **kwargs)
        scene, settings = bound.arguments["scene"], bound.arguments["settings"]
        with time_budget(settings.limits.time_budget_s, scene.file):
            check_size(scene, settings.in_units(scene.units))
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def arc_vertices(radii: np.ndarray, tolerance: float) -> np.ndarray:
    """Sides of the outer polygon of each circle of `radii` within `tolerance` (as the cspace's
    circumscribed polygons: the least multiple of 4 with r / cos(pi / n) - r <= tolerance)."""
    radii = np.asarray(radii, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        n = np.ceil(np.pi / np.arccos(radii / (radii + tolerance)))
    n = np.where(np.isfinite(n), n, np.inf)
    return np.maximum(4 * np.ceil(n / 4), 4)


def check_size(scene: Scene, settings: Settings) -> None:
    """TooComplexError when the grown obstacles would need more vertices than
    `limits.max_vertices` (settings in the scene's units)."""
    limit = settings.limits.max_vertices
    tol = settings.arc_tolerance
    clearance = scene.head.margin + settings.resolution
    foot = len(scene.head.footprint)
    circles = [o for o in scene.obstacles if o.circle is not None]
    polygon_vertices = sum(len(o.polygon) for o in scene.obstacles if o.polygon is not None)
    corner = float(arc_vertices(np.array([clearance]), tol)[0]) if clearance > 0 else 0.0
    total = polygon_vertices + foot + corner  # what the inputs ask for, before the sums
    worst = ("the head's round corners (margin)", corner)
    if circles:
        radii = np.array([o.circle.radius for o in circles]) + clearance
        sides = arc_vertices(radii, tol)
        total += float(sides.sum()) + foot * len(circles)
        k = int(np.argmax(sides))
        if sides[k] > worst[1]:
            worst = (f"circle {circles[k].id} ({circles[k].source})", float(sides[k]))
    if not total <= limit:
        raise TooComplexError(
            f"{scene.file}: the grown obstacles would need about {total:,.0f} vertices, more than "
            f"limits.max_vertices ({limit:,}); most of them for {worst[0]}: "
            f"{worst[1]:,.0f} vertices at arc tolerance {tol:g} {scene.units} (fix: check its "
            "size and units, raise arc_tolerance or limits.max_vertices in config/planner.yaml)"
        )
