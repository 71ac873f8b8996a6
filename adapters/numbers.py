"""Numbers as adapters write them: the route file's decimals, `.` as decimal mark, nothing lost."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from planner.routefile import decimals_for as _route_decimals

from .base import AdapterError

__all__ = ["decimals_for", "check_on_grid", "fixed", "trimmed"]

# A written coordinate may differ from the checked one by this fraction of the resolution (float
# noise only): the adapters' files hold the verified path, as the route file does.
ON_GRID = 1e-3


def decimals_for(resolution: float) -> int:
    """Decimals of coordinates at this output resolution: the route file's (0.001 -> 3).

    A tidy resolution (0.001, 0.0005, 0.25) gives the decimals of its step; an untidy one (0.001
    mm expressed in inch) the next finer power of ten, the grid the planner rounds to.
    """
    return _route_decimals(resolution)


def check_on_grid(points: Iterable, decimals: int, resolution: float, what: str) -> None:
    """Refuse points that `decimals` decimals would move: the file must hold the checked path."""
    arr = np.asarray(list(points), dtype=float).reshape(-1, 2)
    if not arr.size:
        return
    written = np.round(arr, decimals)
    off = np.abs(written - arr).max()
    if off > ON_GRID * resolution:
        raise AdapterError(
            f"{what}: a route point is not on the output grid (resolution {resolution:g}); "
            f"written with {decimals} decimals it would move by {off:.3g}, off the checked path "
            "(replan the scene: the planner rounds every point to the grid)"
        )


def fixed(value: float, decimals: int) -> str:
    """`value` with exactly `decimals` decimals, `.` as mark, no exponent, no `-0.000`."""
    text = f"{value:.{decimals}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return text


def trimmed(value: float, decimals: int) -> str:
    """Like `fixed` but without trailing zeros (`3000`, `118.11`), for feeds and other settings."""
    text = fixed(value, decimals)
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text or "0"
