"""The axis model and traverse-time estimates: how long a straight move, a leg and a job take.

The model is deliberately conservative: every straight segment starts and ends at rest (the head
stops at every corner), and each segment runs a trapezoidal speed profile (accelerate at the
limit, cruise at the top speed, brake at the limit), or a triangular one when the segment is too
short to reach the top speed. With linear interpolation both axes are coordinated so the tool
point moves along the straight segment and neither axis exceeds its own speed or acceleration.
Speeds are in length units per second, accelerations in length units per second squared.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .config import Settings
    from .model import Scene

__all__ = [
    "Axis",
    "AxisModel",
    "AxisSpecError",
    "AXIS_NAMES",
    "AXIS_KEYS",
    "axis_model_from_mapping",
    "check_axes_override",
    "merge_axes",
    "profile_time",
    "segment_limits",
    "segment_times",
    "path_time",
    "TimeCost",
    "effective_axes",
    "effective_cost",
]

AXIS_NAMES = ("x", "y")
AXIS_KEYS = ("speed", "acceleration")
_MM_PER_UNIT = {"mm": 1.0, "inch": 25.4}


@dataclass(frozen=True)
class Axis:
    """One axis's traverse limits: top speed (units/s) and acceleration (units/s^2), both > 0."""

    speed: float
    acceleration: float


@dataclass(frozen=True)
class AxisModel:
    """The machine's X and Y axes and whether the control interpolates them linearly.

    `linear` True: the axes are coordinated, the tool point runs along the straight segment.
    False: each axis runs its own profile at its own limits and the move ends when the slower
    axis arrives (the time estimate of a control that does not coordinate traverse moves).
    """

    x: Axis
    y: Axis
    linear: bool = True
    units: str = "mm"

    def in_units(self, units: str) -> AxisModel:
        """The same model with speeds and accelerations expressed in `units` per second."""
        if units == self.units:
            return self
        f = _MM_PER_UNIT[self.units] / _MM_PER_UNIT[units]
        return replace(
            self,
            x=Axis(self.x.speed * f, self.x.acceleration * f),
            y=Axis(self.y.speed * f, self.y.acceleration * f),
            units=units,
        )

    def as_dict(self) -> dict:
        """Plain data, e.g. for the effective-config hash."""
        return {
            "units": self.units,
            "linear": self.linear,
            **{n: {"speed": a.speed, "acceleration": a.acceleration}
               for n, a in (("x", self.x), ("y", self.y))},
        }


class AxisSpecError(ValueError):
    """An `axes` mapping that cannot be used: `path` inside the mapping, what is wrong, the fix.

    The config and scene loaders turn it into their own located error (file, line, column).
    """

    def __init__(self, path: str, message: str, hint: str | None = None) -> None:
        super().__init__(message)
        self.path = path
        self.message = message
        self.hint = hint


def _positive_number(value: object, path: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise AxisSpecError(path, f"must be a number, not {value!r}",
                            "write a positive number, e.g. 500")
    number = float(value)
    if not math.isfinite(number) or number <= 0:
        raise AxisSpecError(path, f"must be a positive finite number, not {value!r}",
                            "write a positive number, e.g. 500")
    return number


def check_axes_override(data: object, path: str = "axes") -> dict:
    """Validate a partial `axes` mapping (any subset of x/y speed/acceleration and linear).

    Returns a clean copy with floats; raises AxisSpecError on unknown keys or bad values.
    """
    if not isinstance(data, Mapping):
        raise AxisSpecError(path, "must be a mapping",
                            "write e.g. {x: {speed: 500, acceleration: 2000}, linear: true}")
    clean: dict = {}
    for key, value in data.items():
        where = f"{path}.{key}"
        if key == "linear":
            if not isinstance(value, bool):
                raise AxisSpecError(where, f"must be true or false, not {value!r}")
            clean["linear"] = value
        elif key in AXIS_NAMES:
            if not isinstance(value, Mapping):
                raise AxisSpecError(where, "must be a mapping",
                                    "write e.g. {speed: 500, acceleration: 2000}")
            axis: dict = {}
            for k, v in value.items():
                if k not in AXIS_KEYS:
                    raise AxisSpecError(f"{where}.{k}", f"unknown key {k!r}",
                                        "an axis takes speed (units/s) and acceleration "
                                        "(units/s^2)")
                axis[k] = _positive_number(v, f"{where}.{k}")
            clean[key] = axis
        else:
            raise AxisSpecError(where, f"unknown key {key!r}",
                                "axes takes x, y (each with speed and acceleration) and linear")
    return clean


def axis_model_from_mapping(data: object, units: str, path: str = "axes") -> AxisModel:
    """A complete axis model from a mapping: x and y each need speed and acceleration."""
    clean = check_axes_override(data, path)
    for name in AXIS_NAMES:
        for key in AXIS_KEYS:
            if key not in clean.get(name, {}):
                raise AxisSpecError(f"{path}.{name}", f"missing {key}",
                                    f"give {path}.{name}.{key} (a positive number)")
    return AxisModel(
        x=Axis(**clean["x"]), y=Axis(**clean["y"]), linear=clean.get("linear", True), units=units
    )


def merge_axes(base: AxisModel, override: Mapping, units: str) -> AxisModel:
    """`base` with the values of a checked partial override given in `units` put over it."""
    f = _MM_PER_UNIT[units] / _MM_PER_UNIT[base.units]
    axes = {}
    for name in AXIS_NAMES:
        old: Axis = getattr(base, name)
        new = override.get(name, {})
        axes[name] = Axis(
            speed=new["speed"] * f if "speed" in new else old.speed,
            acceleration=new["acceleration"] * f if "acceleration" in new else old.acceleration,
        )
    return replace(base, x=axes["x"], y=axes["y"], linear=override.get("linear", base.linear))


def profile_time(distance, speed, acceleration) -> np.ndarray:
    """Rest-to-rest time over `distance` at most `speed` and `acceleration` (arrays broadcast).

    Reaching `speed` from rest and braking back takes distance v^2/a; a longer move cruises for
    the rest (t = d/v + v/a), a shorter one is triangular (t = 2 sqrt(d/a)). Zero distance: 0.
    """
    d = np.abs(np.asarray(distance, dtype=float))
    v = np.asarray(speed, dtype=float)
    a = np.asarray(acceleration, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ramp = v * v / a
        t = np.where(d >= ramp, d / v + v / a, 2.0 * np.sqrt(d / a))
    return np.where(d > 0, t, 0.0)


def segment_limits(deltas: np.ndarray, model: AxisModel) -> tuple[np.ndarray, np.ndarray]:
    """Path speed and acceleration limits of coordinated moves along each (dx, dy) in `deltas`.

    Along unit direction u the tool point may go at min(vx/|ux|, vy/|uy|) and accelerate at
    min(ax/|ux|, ay/|uy|): then neither axis exceeds its own limit. Zero moves get (inf, inf).
    """
    d = np.abs(np.asarray(deltas, dtype=float).reshape(-1, 2))
    length = np.hypot(d[:, 0], d[:, 1])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ux = np.where(length > 0, d[:, 0] / length, 0.0)
        uy = np.where(length > 0, d[:, 1] / length, 0.0)
        v = np.minimum(
            np.where(ux > 0, model.x.speed / ux, np.inf),
            np.where(uy > 0, model.y.speed / uy, np.inf),
        )
        a = np.minimum(
            np.where(ux > 0, model.x.acceleration / ux, np.inf),
            np.where(uy > 0, model.y.acceleration / uy, np.inf),
        )
    return v, a


def segment_times(deltas: np.ndarray, model: AxisModel) -> np.ndarray:
    """Rest-to-rest time of each straight move (dx, dy) in `deltas` ((k, 2) array) under `model`."""
    d = np.asarray(deltas, dtype=float).reshape(-1, 2)
    if model.linear:
        v, a = segment_limits(d, model)
        return profile_time(np.hypot(d[:, 0], d[:, 1]), v, a)
    tx = profile_time(d[:, 0], model.x.speed, model.x.acceleration)
    ty = profile_time(d[:, 1], model.y.speed, model.y.acceleration)
    return np.maximum(tx, ty)


def path_time(points: np.ndarray, model: AxisModel) -> float:
    """Time of a polyline ((k, 2) points) that stops at every corner: the sum of its segments'."""
    p = np.asarray(points, dtype=float).reshape(-1, 2)
    if len(p) < 2:
        return 0.0
    return float(np.sum(segment_times(np.diff(p, axis=0), model)))


@dataclass(frozen=True)
class TimeCost:
    """Rest-to-rest traverse time as the cost of straight moves (for road-map searches).

    Hashable, so a road map can keep its graph weighted by one model between searches.
    """

    model: AxisModel

    def __call__(self, moves: np.ndarray) -> np.ndarray:
        return segment_times(moves, self.model)


def effective_axes(settings: Settings, scene: Scene) -> AxisModel | None:
    """The axis model of one job, in the scene's units: planner.yaml's `axes`, then the named
    head's `axes` from heads.yaml, then the scene's own `axes`, each over the one before.

    None when no complete model results (then no times are estimated). Raises AxisSpecError
    when the scene gives a partial model and the config none.
    """
    base = settings.axes.in_units(scene.units) if settings.axes is not None else None
    layers = []
    head_name = scene.head.name
    if head_name is not None and head_name in settings.head_axes:
        layers.append(settings.head_axes[head_name])
    if "axes" in scene.options:
        layers.append((scene.options["axes"], scene.units))
    for override, units in layers:
        if base is None:
            base = axis_model_from_mapping(override, units).in_units(scene.units)
        else:
            base = merge_axes(base, override, units)
    return base


def effective_cost(settings: Settings, scene: Scene) -> str:
    """`length` or `time`: the scene's `cost`, else the config's."""
    return scene.options.get("cost", settings.cost)
