"""Pure 2D geometry on numpy arrays and shapely geometries: rings, convex decomposition,
convex Minkowski sums by edge merge, sums of simple polygons with a convex one by convolution,
and outer approximations of circles and rounded offsets."""

from .arcs import circle_sides, circumscribed_polygon, circumscribed_polygons, grow_convex
from .bisect import bisect_polygons
from .convolution import convolution_cycles, polygon_sums, winding_numbers
from .cuts import cut_caps, split_by_diagonals
from .decompose import convex_decomposition, merge_faces, triangulate
from .dents import fill_shallow_dents
from .minkowski import convex_sum, convex_sums, edge_angles
from .polygons import (
    REL_NOISE,
    Rings,
    canonical_convex,
    convex_mask,
    drop_collinear,
    orient_ccw,
    ragged_positions,
    reflect,
    signed_areas,
    start_lowest,
    turns,
)

__all__ = [
    "REL_NOISE",
    "Rings",
    "bisect_polygons",
    "canonical_convex",
    "circle_sides",
    "circumscribed_polygon",
    "circumscribed_polygons",
    "convex_decomposition",
    "convex_mask",
    "convex_sum",
    "convex_sums",
    "convolution_cycles",
    "drop_collinear",
    "edge_angles",
    "fill_shallow_dents",
    "grow_convex",
    "merge_faces",
    "cut_caps",
    "split_by_diagonals",
    "orient_ccw",
    "polygon_sums",
    "ragged_positions",
    "reflect",
    "signed_areas",
    "start_lowest",
    "triangulate",
    "turns",
    "winding_numbers",
]
