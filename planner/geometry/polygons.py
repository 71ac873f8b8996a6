"""Many rings packed in one array, and the vectorised checks and clean-ups done on them.

A `Rings` holds K rings (polygon outlines, not closed) as one (N, 2) coordinate array and K+1
offsets, so that orientation, convexity and collinear-vertex tests run as single numpy passes
over every vertex of every ring instead of a Python loop per polygon.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
import shapely

__all__ = [
    "REL_NOISE",
    "Rings",
    "ragged_positions",
    "signed_areas",
    "orient_ccw",
    "reflect",
    "turns",
    "convex_mask",
    "drop_collinear",
    "start_lowest",
    "canonical_convex",
]

# Relative floating-point noise level: two edges whose cross product is below this fraction of
# the product of their lengths are taken as parallel. It is a count of rounding errors, not a
# length, so it needs no units; it moves a boundary by ~1e-14 of an edge's length at most.
REL_NOISE = 64.0 * np.finfo(np.float64).eps


@dataclass(frozen=True)
class Rings:
    """K rings packed together: ring i is `coords[offsets[i]:offsets[i + 1]]`, not closed."""

    coords: np.ndarray  # (N, 2) float64
    offsets: np.ndarray  # (K + 1,) int64, offsets[0] == 0, offsets[-1] == N

    @classmethod
    def from_list(cls, rings: Iterable[Sequence[Sequence[float]] | np.ndarray]) -> Rings:
        """Pack a list of (n_i, 2) vertex lists."""
        arrays = [np.asarray(r, dtype=np.float64).reshape(-1, 2) for r in rings]
        sizes = np.array([len(a) for a in arrays], dtype=np.int64)
        offsets = np.zeros(len(arrays) + 1, dtype=np.int64)
        np.cumsum(sizes, out=offsets[1:])
        coords = np.concatenate(arrays) if arrays else np.zeros((0, 2))
        return cls(coords, offsets)

    @classmethod
    def from_index(cls, coords: np.ndarray, ring_of: np.ndarray, count: int) -> Rings:
        """Pack vertices already grouped by ring (`ring_of` non-decreasing, values < count)."""
        sizes = np.bincount(ring_of, minlength=count)
        offsets = np.zeros(count + 1, dtype=np.int64)
        np.cumsum(sizes, out=offsets[1:])
        return cls(np.ascontiguousarray(coords, dtype=np.float64), offsets)

    @classmethod
    def from_polygons(cls, polygons: np.ndarray | Sequence[shapely.Polygon]) -> Rings:
        """The exterior rings of shapely Polygons (closing vertex dropped)."""
        polygons = np.asarray(polygons, dtype=object)
        exteriors = shapely.get_exterior_ring(polygons)
        coords, index = shapely.get_coordinates(exteriors, return_index=True)
        counts = np.bincount(index, minlength=len(polygons))
        keep = np.ones(len(coords), dtype=bool)
        keep[(np.cumsum(counts) - 1)[counts > 0]] = False  # the closing repeat of each ring
        return cls.from_index(coords[keep], index[keep], len(polygons))

    def __len__(self) -> int:
        return len(self.offsets) - 1

    @property
    def sizes(self) -> np.ndarray:
        return np.diff(self.offsets)

    def ring(self, i: int) -> np.ndarray:
        return self.coords[self.offsets[i] : self.offsets[i + 1]]

    def ring_of(self) -> np.ndarray:
        """Ring index of every vertex, shape (N,)."""
        return np.repeat(np.arange(len(self), dtype=np.int64), self.sizes)

    def next_index(self) -> np.ndarray:
        """Index of each vertex's successor within its own ring (cyclic)."""
        nxt = np.arange(1, len(self.coords) + 1, dtype=np.int64)
        nonempty = self.sizes > 0
        nxt[self.offsets[1:][nonempty] - 1] = self.offsets[:-1][nonempty]
        return nxt

    def prev_index(self) -> np.ndarray:
        """Index of each vertex's predecessor within its own ring (cyclic)."""
        prv = np.arange(-1, len(self.coords) - 1, dtype=np.int64)
        nonempty = self.sizes > 0
        prv[self.offsets[:-1][nonempty]] = self.offsets[1:][nonempty] - 1
        return prv

    def select(self, mask_or_index: np.ndarray) -> Rings:
        """The rings picked by a boolean mask or an index array, in that order."""
        picked = np.arange(len(self))[mask_or_index]
        sizes = self.sizes[picked]
        vertex = ragged_positions(sizes) + np.repeat(self.offsets[:-1][picked], sizes)
        return Rings.from_index(self.coords[vertex], np.repeat(np.arange(len(picked)), sizes),
                                len(picked))

    def keep_vertices(self, keep: np.ndarray) -> Rings:
        """The same rings with only the vertices where `keep` is True."""
        return Rings.from_index(self.coords[keep], self.ring_of()[keep], len(self))

    def to_polygons(self) -> np.ndarray:
        """One shapely Polygon per ring (array of objects); an empty one for a ring of fewer
        than 3 vertices (left by dropping flat vertices of a sliver: it has no area)."""
        if len(self) == 0:
            return np.empty(0, dtype=object)
        small = self.sizes < 3
        if small.any():
            out = np.full(len(self), shapely.Polygon(), dtype=object)
            if not small.all():
                out[~small] = self.select(~small).to_polygons()
            return out
        rings = shapely.linearrings(self.coords, indices=self.ring_of())
        return shapely.polygons(rings)

    @staticmethod
    def concat(parts: Sequence[Rings]) -> Rings:
        """All rings of `parts`, one after another."""
        coords = np.concatenate([p.coords for p in parts]) if parts else np.zeros((0, 2))
        sizes = np.concatenate([p.sizes for p in parts]) if parts else np.zeros(0, np.int64)
        offsets = np.zeros(len(sizes) + 1, dtype=np.int64)
        np.cumsum(sizes, out=offsets[1:])
        return Rings(coords, offsets)


def ragged_positions(sizes: np.ndarray) -> np.ndarray:
    """Position of each element within its group: [0..s0-1, 0..s1-1, ...] for group sizes s."""
    sizes = np.asarray(sizes, dtype=np.int64)
    total = int(sizes.sum())
    starts = np.cumsum(sizes) - sizes
    return np.arange(total, dtype=np.int64) - np.repeat(starts, sizes)


def signed_areas(rings: Rings) -> np.ndarray:
    """Shoelace area of every ring: positive for counter-clockwise rings."""
    if len(rings) == 0:
        return np.zeros(0)
    p = rings.coords
    q = p[rings.next_index()]
    # Relative to each ring's first vertex, so large offsets do not cost precision.
    origin = np.repeat(p[rings.offsets[:-1]], rings.sizes, axis=0)
    a, b = p - origin, q - origin
    cross = a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0]
    return 0.5 * np.bincount(rings.ring_of(), weights=cross, minlength=len(rings))


def _reverse(rings: Rings, flip: np.ndarray) -> Rings:
    """The rings with those marked in `flip` traversed the other way round."""
    if not flip.any():
        return rings
    pos = ragged_positions(rings.sizes)
    ring = rings.ring_of()
    start = rings.offsets[:-1][ring]
    size = rings.sizes[ring]
    src = np.where(flip[ring], start + size - 1 - pos, start + pos)
    return Rings(rings.coords[src], rings.offsets)


def orient_ccw(rings: Rings) -> Rings:
    """Every ring counter-clockwise (positive area); clockwise ones are reversed."""
    return _reverse(rings, signed_areas(rings) < 0)


def reflect(rings: Rings) -> Rings:
    """Point reflection through the origin (p -> -p), orientation kept counter-clockwise."""
    return orient_ccw(Rings(-rings.coords, rings.offsets))


def turns(rings: Rings) -> tuple[np.ndarray, np.ndarray]:
    """Per vertex: cross product of incoming and outgoing edge, and its rounding-noise bound.

    The edges are differences of coordinates, each off by up to an ulp of the coordinates, so
    the bound grows with the coordinates' size as well as the edges' lengths: a vertex within
    ~1e-14 of the coordinates' size from the line of its neighbours counts as flat.
    """
    p = rings.coords
    e_in = p - p[rings.prev_index()]
    e_out = p[rings.next_index()] - p
    cross = e_in[:, 0] * e_out[:, 1] - e_in[:, 1] * e_out[:, 0]
    len_in = np.hypot(e_in[:, 0], e_in[:, 1])
    len_out = np.hypot(e_out[:, 0], e_out[:, 1])
    scale = np.abs(p).max(axis=1)
    noise = REL_NOISE * (len_in * len_out + (len_in + len_out) * scale)
    return cross, noise


def convex_mask(rings: Rings) -> np.ndarray:
    """True for every counter-clockwise ring with no right turn (collinear vertices allowed).

    Assumes simple rings (the scene loader checks that): a simple ring that never turns right is
    convex.
    """
    if len(rings) == 0:
        return np.zeros(0, dtype=bool)
    cross, noise = turns(rings)
    right = cross < -noise
    bad = np.bincount(rings.ring_of(), weights=right, minlength=len(rings)) > 0
    return ~bad & (signed_areas(rings) > 0)


def drop_collinear(rings: Rings) -> Rings:
    """Remove repeated vertices and vertices between two parallel, same-direction edges."""
    p = rings.coords
    keep = np.any(p != p[rings.next_index()], axis=1)
    rings = rings.keep_vertices(keep)
    p = rings.coords
    e_in = p - p[rings.prev_index()]
    e_out = p[rings.next_index()] - p
    cross, noise = turns(rings)
    dot = e_in[:, 0] * e_out[:, 0] + e_in[:, 1] * e_out[:, 1]
    flat = (np.abs(cross) <= noise) & (dot > 0)
    return rings.keep_vertices(~flat)


def start_lowest(rings: Rings) -> Rings:
    """Each ring rotated to start at its lowest vertex (smallest y, then smallest x)."""
    if len(rings) == 0:
        return rings
    ring = rings.ring_of()
    order = np.lexsort((rings.coords[:, 0], rings.coords[:, 1], ring))
    first = order[rings.offsets[:-1]]  # per ring: index of its lowest-leftmost vertex
    shift = first - rings.offsets[:-1]
    pos = ragged_positions(rings.sizes)
    size = rings.sizes[ring]
    src = rings.offsets[:-1][ring] + (pos + shift[ring]) % size
    return Rings(rings.coords[src], rings.offsets)


def canonical_convex(polygons: np.ndarray) -> tuple[Rings, np.ndarray]:
    """The convex hulls of shapely geometries as canonical rings for the edge merge.

    Canonical: counter-clockwise, strictly convex (GEOS drops collinear hull points), starting at
    the lowest-then-leftmost vertex. Hulls that have no area (points, segments) are left out;
    the second value gives, per ring kept, its index in `polygons`. A hull contains its input,
    so replacing a piece that is convex up to rounding noise by its hull is conservative.
    """
    hulls = shapely.convex_hull(np.asarray(polygons, dtype=object))
    kept = np.flatnonzero(shapely.get_type_id(hulls) == shapely.GeometryType.POLYGON)
    rings = Rings.from_polygons(hulls[kept])
    rings = drop_collinear(orient_ccw(rings))
    return start_lowest(rings), kept
