"""The plain data that flows through the pipeline: scenes in, routes out (frozen dataclasses).

Every coordinate is in the scene's units. Rings are tuples of (x, y) vertices, at least 3, not
closed, any orientation (the loader has checked they are simple).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

__all__ = [
    "Point",
    "Ring",
    "Circle",
    "Obstacle",
    "Head",
    "Target",
    "Travel",
    "Scene",
    "Leg",
    "Unreachable",
    "Route",
    "START",
    "FINISH",
]

Point = tuple[float, float]
Ring = tuple[Point, ...]

START = "start"
FINISH = "finish"


@dataclass(frozen=True)
class Circle:
    """A true circle; the planner approximates it only from outside."""

    center: Point
    radius: float


@dataclass(frozen=True)
class Obstacle:
    """One obstacle as the scene gives it: exactly one of `polygon` (also rects) or `circle`."""

    id: str
    polygon: Ring | None = None
    circle: Circle | None = None
    height: float | None = None
    after: str | None = None  # present from the leg that leaves this target on
    until: str | None = None  # present up to the leg that arrives at this target
    source: str = ""  # location path in the scene file, e.g. "obstacles[3]"

    def is_avoided(self, ride_height: float | None) -> bool:
        """True unless the head passes over it (height strictly below ride_height)."""
        if self.height is None or ride_height is None:
            return True
        return self.height >= ride_height


@dataclass(frozen=True)
class Head:
    """The head's footprint around the tool point (0, 0), its margin and ride height."""

    name: str | None  # None for a head given inline in the scene
    footprint: Ring
    margin: float
    ride_height: float | None = None  # None: no obstacle is passed over


@dataclass(frozen=True)
class Target:
    """A work point to visit."""

    id: str
    at: Point
    carry: Ring | Literal["none"] | None = None  # None: unchanged; "none": drop what is carried
    after: str | None = None  # ordering constraint: visit after this target
    first: bool = False
    last: bool = False
    source: str = ""


@dataclass(frozen=True)
class Travel:
    """Axis limits of the tool point (closed rectangle)."""

    xmin: float
    xmax: float
    ymin: float
    ymax: float

    def contains(self, p: Point) -> bool:
        return self.xmin <= p[0] <= self.xmax and self.ymin <= p[1] <= self.ymax


@dataclass(frozen=True)
class Scene:
    """A validated scene: what the operator dropped, with the head resolved from config."""

    file: str  # the file's name as shown to people
    sha256: str  # hex of the file's bytes
    units: str  # "mm" | "inch"
    travel: Travel
    head: Head
    obstacles: tuple[Obstacle, ...]
    start: Point
    targets: tuple[Target, ...]
    finish: Point | None = None
    sequence: str = "given"  # "given" | "shortest"
    options: dict = field(default_factory=dict, compare=False, hash=False)  # scene-level overrides


@dataclass(frozen=True)
class Leg:
    """One traverse between two points of the job, as written to the route file."""

    from_id: str
    to_id: str
    points: tuple[Point, ...]  # first = from, last = to; rounded to the output resolution
    length: float
    extra: dict = field(default_factory=dict, compare=False, hash=False)  # time, appeared, gone...


@dataclass(frozen=True)
class Unreachable:
    id: str
    reason: str
    # the numbers behind the reason (distances, gaps), for pictures and job sheets
    extra: dict = field(default_factory=dict, compare=False, hash=False)


@dataclass(frozen=True)
class Route:
    """A planned, verified job: legs in travel order and the targets that could not be reached."""

    scene_file: str
    scene_sha256: str
    config_sha256: str
    units: str
    legs: tuple[Leg, ...]
    unreachable: tuple[Unreachable, ...]
    extra: dict = field(default_factory=dict, compare=False, hash=False)  # e.g. total time

    @property
    def status(self) -> str:
        return "incomplete" if self.unreachable else "complete"

    @property
    def length(self) -> float:
        return float(sum(leg.length for leg in self.legs))
