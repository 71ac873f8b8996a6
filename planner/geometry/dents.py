"""Fill an outline's shallow dents: a simplification that only ever adds area.

Finely sampled curves whose coordinates were rounded (a DXF export written to a thousandth of a
millimetre, say) zig-zag: every few vertices the outline turns the wrong way by a hair. Each
such inward vertex costs a convex piece in a decomposition and a back-and-forth through the
footprint in a convolution, with nothing to show for it. Removing an inward (reflex) vertex
adds the thin triangle it formed with its neighbours, so the outline can only grow; the total
growth is bounded by `depth`.
"""

from __future__ import annotations

import numpy as np
import shapely

from .polygons import Rings, drop_collinear, turns

__all__ = ["fill_shallow_dents"]

_ROUNDS = 6  # the allowance halves each round, so all rounds together stay within `depth`


def _dent_depths(rings: Rings) -> tuple[np.ndarray, np.ndarray]:
    """Per vertex: is it reflex (turns right in a counter-clockwise ring), and how far it lies
    from the chord between its neighbours."""
    p = rings.coords
    before, after = p[rings.prev_index()], p[rings.next_index()]
    cross, noise = turns(rings)
    chord = after - before
    length = np.hypot(chord[:, 0], chord[:, 1])
    lever = chord[:, 0] * (p[:, 1] - before[:, 1]) - chord[:, 1] * (p[:, 0] - before[:, 0])
    depth = np.abs(lever) / np.where(length > 0, length, np.inf)
    return cross < -noise, depth


def fill_shallow_dents(rings: Rings, depth: float) -> Rings:
    """The rings with reflex vertices less than `depth` deep removed, outward only.

    `rings`: counter-clockwise simple rings. Each returned ring contains its input and lies
    within `depth` of it; a ring whose filled outline would not be simple (another part of it
    passes within the dent) is returned unchanged.
    """
    if len(rings) == 0 or depth <= 0:
        return rings
    out = rings
    for r in range(_ROUNDS):
        reflex, dent = _dent_depths(out)
        fill = reflex & (dent <= depth / 2 ** (r + 1)) & (out.sizes[out.ring_of()] > 3)
        fill &= ~fill[out.prev_index()]  # never two neighbours at once: each uses its own chord
        if not fill.any():
            break
        out = out.keep_vertices(~fill)
    out = drop_collinear(out)
    changed = np.flatnonzero(out.sizes != rings.sizes)
    if len(changed) == 0:
        return rings
    simple = np.ones(len(rings), dtype=bool)
    simple[changed] = shapely.is_valid(out.select(changed).to_polygons())
    if simple.all():
        return out
    keep_rings = [out.ring(i) if simple[i] else rings.ring(i) for i in range(len(rings))]
    return Rings.from_list(keep_rings)
