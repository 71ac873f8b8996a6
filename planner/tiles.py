"""A triangulation of the free space kept in fixed tiles, so that a change re-triangulates only
the tiles it touches and the whole is put together again by concatenation.

Each tile's part of the free region is triangulated on its own (GEOS constrained Delaunay, no
new vertices beyond the region's and the tile sides' crossings) and kept with its own vertex
ids and neighbour links. Assembling a state joins the tiles: vertices on the cut lines between
tiles are merged (values a few ulps apart, computed separately on each side, become one), and
the open edges along the cuts are paired across. A cut edge without a partner means the two
sides did not meet edge to edge: TileMismatch, and the caller triangulates the region whole.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import shapely

from ._visibility import Triangulation, pair_edges, snap_cuts

__all__ = ["TileGrid", "TileMesh", "TileMismatch", "tile_mesh", "assemble", "vertex_ids"]

class TileMismatch(Exception):
    """Triangles of neighbouring tiles do not share their edges along a cut."""


@dataclass(frozen=True)
class TileGrid:
    """Cut positions of a grid over the travel box, and each tile's bounds (x0, y0, x1, y1)."""

    cut_x: np.ndarray
    cut_y: np.ndarray
    bounds: np.ndarray  # (tiles, 4)

    @staticmethod
    def over(box: tuple[float, float, float, float], tiles: int, max_per_axis: int) -> TileGrid:
        x0, y0, x1, y1 = box
        n = max(1, tiles)
        nx = int(np.clip(round(np.sqrt(n * (x1 - x0) / (y1 - y0))), 1, max_per_axis))
        ny = int(np.clip(-(-n // nx), 1, max_per_axis))
        # cut at odd fractions so that no cut line is likely to run along an obstacle edge
        cut_x = x0 + (x1 - x0) * (np.arange(1, nx) + 0.1180339887) / nx
        cut_y = y0 + (y1 - y0) * (np.arange(1, ny) + 0.1180339887) / ny
        ex, ey = np.r_[x0, cut_x, x1], np.r_[y0, cut_y, y1]
        bounds = np.array([[ex[i], ey[j], ex[i + 1], ey[j + 1]]
                           for i in range(nx) for j in range(ny)], dtype=float)
        return TileGrid(cut_x, cut_y, bounds)


@dataclass(frozen=True, eq=False)
class TileMesh:
    """One tile's triangles with tile-local vertex ids and neighbour links (-1: open edge)."""

    xy: np.ndarray  # (V, 2)
    tri: np.ndarray  # (T, 3)
    nbr: np.ndarray  # (T, 3)
    nbr_k: np.ndarray  # (T, 3)
    polygons: np.ndarray  # (T,) shapely triangles
    on_cut: np.ndarray  # (V,) vertex lies on a cut line (shared with a neighbouring tile)


def tile_mesh(region: shapely.Geometry, bounds: np.ndarray, grid: TileGrid) -> TileMesh:
    """Triangulate the part of `region` inside one tile."""
    x0, y0, x1, y1 = map(float, bounds)
    part = shapely.clip_by_rect(region, x0, y0, x1, y1)
    polys = shapely.get_parts(np.asarray([part], dtype=object))
    polys = polys[(shapely.get_type_id(polys) == shapely.GeometryType.POLYGON)
                  & (shapely.area(polys) > 0.0)]
    tris = (shapely.get_parts(shapely.constrained_delaunay_triangles(polys)) if len(polys)
            else np.empty(0, dtype=object))
    tris = tris[shapely.area(tris) > 0.0] if len(tris) else tris
    if len(tris) == 0:
        z = np.zeros((0, 3), dtype=np.int64)
        return TileMesh(np.zeros((0, 2)), z, z.copy(), z.copy(), tris, np.zeros(0, dtype=bool))
    corners = shapely.get_coordinates(tris).reshape(-1, 4, 2)[:, :3].reshape(-1, 2) + 0.0
    xy, inv = np.unique(corners, axis=0, return_inverse=True)
    tri = inv.reshape(-1, 3).astype(np.int64)
    nbr, nbr_k = pair_edges(tri, len(xy))
    on_cut = (np.isin(xy[:, 0], grid.cut_x) & ((xy[:, 0] == x0) | (xy[:, 0] == x1))) | (
        np.isin(xy[:, 1], grid.cut_y) & ((xy[:, 1] == y0) | (xy[:, 1] == y1)))
    return TileMesh(xy, tri, nbr, nbr_k, tris, on_cut)


def assemble(meshes: Sequence[TileMesh], grid: TileGrid) -> Triangulation:
    """One triangulation from the tiles' meshes (cut vertices merged, cut edges paired)."""
    own_xy, own_count, cut_xy = [], [], []
    for m in meshes:
        own_xy.append(m.xy[~m.on_cut])
        own_count.append(int((~m.on_cut).sum()))
        cut_xy.append(m.xy[m.on_cut])
    n_own = int(sum(own_count))
    cut_all = np.concatenate(cut_xy) if cut_xy else np.zeros((0, 2))
    snap_cuts(cut_all, grid.cut_x, grid.cut_y)
    cut_uniq, cut_inv = (np.unique(cut_all, axis=0, return_inverse=True) if len(cut_all)
                         else (np.zeros((0, 2)), np.zeros(0, dtype=np.int64)))
    cut_inv = cut_inv.reshape(-1).astype(np.int64)
    xy = np.concatenate([*own_xy, cut_uniq]) if meshes else np.zeros((0, 2))

    tris, nbrs, nbr_ks, polys = [], [], [], []
    own_off, cut_off, tri_off = 0, 0, 0
    for m, n_m in zip(meshes, own_count, strict=True):
        gid = np.empty(len(m.xy), dtype=np.int64)
        gid[~m.on_cut] = own_off + np.arange(n_m)
        k = int(m.on_cut.sum())
        gid[m.on_cut] = n_own + cut_inv[cut_off:cut_off + k]
        own_off += n_m
        cut_off += k
        tris.append(gid[m.tri])
        nbrs.append(np.where(m.nbr >= 0, m.nbr + tri_off, -1))
        nbr_ks.append(m.nbr_k)
        polys.append(m.polygons)
        tri_off += len(m.tri)
    tri = np.concatenate(tris) if tris else np.zeros((0, 3), dtype=np.int64)
    nbr = np.concatenate(nbrs) if nbrs else tri.copy()
    nbr_k = np.concatenate(nbr_ks) if nbr_ks else tri.copy()
    polygons = np.concatenate(polys) if polys else np.empty(0, dtype=object)

    # pair the open edges along the cuts across tiles
    if len(grid.cut_x) or len(grid.cut_y):
        t_open, j_open = np.nonzero(nbr < 0)
        a = tri[t_open, (j_open + 1) % 3]
        b = tri[t_open, (j_open + 2) % 3]
        pa, pb = xy[a], xy[b]
        cut = ((pa[:, 0] == pb[:, 0]) & np.isin(pa[:, 0], grid.cut_x)) | (
            (pa[:, 1] == pb[:, 1]) & np.isin(pa[:, 1], grid.cut_y))
        t_open, j_open, a, b = t_open[cut], j_open[cut], a[cut], b[cut]
        key = np.minimum(a, b) * max(len(xy), 1) + np.maximum(a, b)
        order = np.argsort(key, kind="stable")
        sk = key[order]
        if len(sk) % 2 or np.any(sk[0::2] != sk[1::2]) or (
                len(sk) > 2 and np.any(sk[2::2] == sk[1:-1:2])):
            raise TileMismatch
        i0, i1 = order[0::2], order[1::2]
        nbr[t_open[i0], j_open[i0]] = t_open[i1]
        nbr[t_open[i1], j_open[i1]] = t_open[i0]
        nbr_k[t_open[i0], j_open[i0]] = j_open[i1]
        nbr_k[t_open[i1], j_open[i1]] = j_open[i0]

    flat_v = tri.ravel()
    fan_order = np.argsort(flat_v, kind="stable")
    fan_ptr = np.zeros(len(xy) + 1, dtype=np.int64)
    np.cumsum(np.bincount(flat_v, minlength=len(xy)), out=fan_ptr[1:])
    return Triangulation(xy=xy, tri=tri, nbr=nbr, nbr_k=nbr_k, fan_ptr=fan_ptr,
                         fan_tri=fan_order // 3, fan_j=fan_order % 3, polygons=polygons)


def vertex_ids(t: Triangulation, points: np.ndarray) -> np.ndarray:
    """The vertex id of each point (exact coordinates), -1 for a point that is no vertex."""
    points = np.asarray(points, dtype=float).reshape(-1, 2)
    if len(points) == 0 or len(t.xy) == 0:
        return np.full(len(points), -1, dtype=np.int64)
    key = t.xy[:, 0] + 1j * t.xy[:, 1]
    order = np.argsort(key, kind="stable")
    sk = key[order]
    pk = points[:, 0] + 1j * points[:, 1]
    pos = np.minimum(np.searchsorted(sk, pk), len(sk) - 1)
    return np.where(sk[pos] == pk, order[pos], -1).astype(np.int64)
