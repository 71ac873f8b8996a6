"""Numbers as adapters write them: fixed decimals, `.` as decimal mark, nothing lost."""

from __future__ import annotations

import math

__all__ = ["decimals_for", "written_error", "fixed", "trimmed"]

# Relative slack when comparing decimal steps with the resolution (0.001 is not exact in binary).
_SLACK = 1e-9
# When no finite number of decimals writes every multiple of the resolution exactly (0.001 mm in
# inch), this many decimals past the resolution's first keep the written value within 0.0005 of
# a resolution step of the value the route was checked with.
_EXTRA = 3


def _first_decimal(resolution: float) -> int:
    return max(0, math.ceil(-math.log10(resolution) - _SLACK))


def _is_multiple_of_step(resolution: float, decimals: int) -> bool:
    scaled = resolution * 10.0**decimals
    return abs(scaled - round(scaled)) <= 1e-6 * max(1.0, scaled)


def decimals_for(resolution: float) -> int:
    """Decimals to write coordinates that were rounded to `resolution`, losing nothing.

    The fewest decimals that write every multiple of the resolution exactly (0.001 -> 3,
    0.0005 -> 4, 0.25 -> 2, 1 -> 0); for a resolution that is no decimal step (0.001 mm expressed
    in inch, 3.94e-5), 3 decimals more than its first one (-> 8), so the written value stays
    within 0.0005 of a resolution step of the value the route was checked with.
    """
    if not (isinstance(resolution, int | float) and math.isfinite(resolution) and resolution > 0):
        raise ValueError(f"resolution must be a positive number, not {resolution!r}")
    first = _first_decimal(resolution)
    for decimals in range(first, first + _EXTRA + 1):
        if _is_multiple_of_step(resolution, decimals):
            return decimals
    return first + _EXTRA


def written_error(decimals: int) -> float:
    """How far a value can move when written with `decimals` decimals (half the last digit)."""
    return 0.5 * 10.0 ** (-decimals)


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
