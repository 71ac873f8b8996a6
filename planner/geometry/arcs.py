"""Outer polygons for circles and for growing convex pieces by a radius, within a tolerance.

A regular n-gon circumscribed about a circle of radius r (edges tangent to it, vertices at
r / cos(pi / n)) contains the disk; its vertices stick out by r / cos(pi / n) - r, and n is the
smallest multiple of 4 that keeps this within the tolerance. (A multiple of 4 gives axis-aligned
edges, which merge with the edges of rectangles instead of adding vertices.) Shapely's buffer
puts its vertices ON the circle, inside the true disk between them: never used here.
"""

from __future__ import annotations

import numpy as np

from .minkowski import convex_sums
from .polygons import REL_NOISE, Rings, ragged_positions, start_lowest

__all__ = ["circle_sides", "circumscribed_polygons", "circumscribed_polygon", "grow_convex"]


def circle_sides(radius: np.ndarray | float, tolerance: float) -> np.ndarray:
    """Sides of the circumscribed regular polygon that stays within `tolerance` of the circle."""
    if not tolerance > 0:
        raise ValueError(f"arc tolerance must be positive, got {tolerance!r}")
    radius = np.asarray(radius, dtype=np.float64)
    if np.any(radius <= 0):
        raise ValueError("circle radius must be positive")
    # r / cos(pi / n) - r <= tol  <=>  n >= pi / acos(r / (r + tol))
    n = np.ceil(np.pi / np.arccos(radius / (radius + tolerance)))
    n = 4 * np.ceil(n / 4)
    return np.maximum(n, 4).astype(np.int64)


def circumscribed_polygons(centers: np.ndarray, radii: np.ndarray, tolerance: float) -> Rings:
    """One outer polygon per circle: contains the disk, vertices within `tolerance` of it.

    Rings come back canonical for the edge merge (counter-clockwise, starting at the lowest
    vertex). The vertex radius carries a pad of a few rounding errors of the coordinates so
    the polygon contains the disk in floating point too.
    """
    centers = np.asarray(centers, dtype=np.float64).reshape(-1, 2)
    radii = np.asarray(radii, dtype=np.float64).reshape(-1)
    sides = circle_sides(radii, tolerance)
    ring = np.repeat(np.arange(len(radii)), sides)
    j = ragged_positions(sides)
    n = sides[ring].astype(np.float64)
    theta = (2.0 * j + 1.0) * np.pi / n
    pad = (radii + np.abs(centers).max(axis=1)) * REL_NOISE
    vertex_radius = (radii / np.cos(np.pi / sides) + pad)[ring]
    coords = centers[ring] + vertex_radius[:, None] * np.column_stack(
        [np.cos(theta), np.sin(theta)]
    )
    return start_lowest(Rings.from_index(coords, ring, len(radii)))


def circumscribed_polygon(
    center: tuple[float, float], radius: float, tolerance: float
) -> np.ndarray:
    """The outer polygon of one circle as an (n, 2) counter-clockwise vertex array."""
    return circumscribed_polygons(np.array([center]), np.array([radius]), tolerance).ring(0)


def grow_convex(rings: Rings, radius: float, tolerance: float) -> Rings:
    """Each canonical convex ring grown by `radius` from outside (Minkowski sum with the
    circumscribed polygon of that radius): contains the true rounded offset, within tolerance.
    """
    disk = circumscribed_polygons(np.zeros((1, 2)), np.array([radius]), tolerance)
    k = len(rings)
    return convex_sums(rings, disk, np.arange(k), np.zeros(k, dtype=np.int64))
