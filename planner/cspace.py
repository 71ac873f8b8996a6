"""Configuration space: each avoided obstacle grown by the reflected, margin-grown footprint.

FreeSpace keeps the union (for planning) and every obstacle's own grown pieces (for explaining
why a point cannot be reached).

Method (exact where cheap, conservative where approximate): the footprint F is reflected (-F),
cut into convex pieces, and each piece is grown by the clearance with a polygon circumscribed
about the disk (Minkowski sums are associative, so growing -F once equals growing every sum).
Polygon outlines first lose inward zig-zags shallower than a tenth of the arc tolerance
(outward only: the rounding noise of finely sampled curves). A convex outline is summed with
each grown footprint piece by the edge merge; a non-convex one by the convolution of the whole
outline with the piece (geometry/convolution.py), checked, and cut into convex pieces only if
that check fails. A circle obstacle is each raw -F piece summed with a circumscribed polygon of
radius (radius + clearance) at its centre. The union of all pieces is `blocked`.
"""

from __future__ import annotations

import hashlib
import struct
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import shapely

from .config import Settings
from .errors import PlanningError
from .geometry import (
    Rings,
    bisect_polygons,
    circumscribed_polygons,
    convex_decomposition,
    convex_mask,
    convex_sums,
    drop_collinear,
    fill_shallow_dents,
    grow_convex,
    orient_ccw,
    polygon_sums,
    signed_areas,
    start_lowest,
)
from .model import Obstacle, Ring, Scene, Travel

__all__ = [
    "CONVOLVE_AT_MOST",
    "DENT_FILL_PER_ARC_TOLERANCE",
    "EPS_PER_RESOLUTION",
    "FreeSpace",
    "build_free_space",
    "free_space_key",
    "obstacle_digest",
    "c_obstacle_pieces",
    "checked_union",
]

# The visibility tests of the road map shrink `blocked` by eps = resolution * this factor: far
# below anything the output can express, far above floating-point noise at table sizes.
EPS_PER_RESOLUTION = 1e-3

# Inward vertices of an outline less deep than this fraction of the arc tolerance are filled
# before growing (outward only): the zig-zag of rounded, finely sampled curves, which would
# otherwise cost a convex piece or a trip through the footprint each for nothing.
DENT_FILL_PER_ARC_TOLERANCE = 0.1

# Outlines longer than this are cut in halves (geometry/bisect.py) before their convolution:
# GEOS's buffer of a long, often self-crossing cycle grows faster than linearly. No source;
# measured (CPU): a 2000-tooth comb under an 80 mm head 0.41 / 0.47 / 0.60 s at 256 / 512 /
# 1024 and 4.0 s uncut; the sparse 100k benchmark scene 0.27 / 0.23 / 0.21 s, 0.22 s uncut.
CONVOLVE_AT_MOST = 512

_KEY_VERSION = b"sidestep-cspace-2"  # bump when the construction changes what it returns

Footprint = Ring | shapely.Polygon | shapely.MultiPolygon


@dataclass(frozen=True, eq=False)
class FreeSpace:
    """The free space of the tool point for one head, margin and set of obstacles.

    `blocked` is the closed union of the C-obstacles (grown by `clearance` = margin plus the
    output-resolution pad); `region` is the travel box minus `blocked`. A segment is collision-free
    when it does not meet the interior of `blocked`; tests use `blocked` shrunk by `eps`.
    `obstacle_ids` are the obstacles that were grown (passed-over ones are not), in scene order;
    `piece_owner[i]` is the index in `obstacle_ids` of the obstacle that `pieces[i]` belongs to.
    """

    units: str
    travel: Travel
    box: shapely.Polygon
    clearance: float
    eps: float
    blocked: shapely.Geometry
    region: shapely.Geometry
    obstacle_ids: tuple[str, ...]
    pieces: np.ndarray  # shapely Polygons: C-obstacle pieces (a whole outline's sum, or convex)
    piece_owner: np.ndarray  # index into obstacle_ids, one per piece
    key: str
    _grown_cache: dict = field(default_factory=dict, repr=False)
    _cache: dict = field(default_factory=dict, repr=False)  # trees, components, id index

    def _index_of(self, obstacle_id: str) -> int:
        index = self._cache.get("index")
        if index is None:
            index = self._cache["index"] = {oid: i for i, oid in enumerate(self.obstacle_ids)}
        try:
            return index[obstacle_id]
        except KeyError:
            raise KeyError(
                f"obstacle {obstacle_id!r} was not grown in this free space "
                "(unknown id, or passed over at the head's ride height)"
            ) from None

    def _piece_tree(self) -> shapely.STRtree:
        tree = self._cache.get("pieces")
        if tree is None:
            tree = self._cache["pieces"] = shapely.STRtree(self.pieces)
        return tree

    def grown(self, obstacle_id: str) -> shapely.Geometry:
        """The C-obstacle of one obstacle: the union of its own pieces (cached)."""
        shape = self._grown_cache.get(obstacle_id)
        if shape is None:
            i = self._index_of(obstacle_id)
            shape = checked_union(self.pieces[self.piece_owner == i], self.eps)
            self._grown_cache[obstacle_id] = shape
        return shape

    def blocking(self, point: tuple[float, float], distance: float = 0.0) -> list[str]:
        """Ids of the obstacles whose grown shape blocks `point`, in scene order.

        With distance 0: shapes that contain the point in their interior (a point on a boundary
        is free). With distance > 0: shapes that come within `distance` of the point.
        """
        pt = shapely.Point(float(point[0]), float(point[1]))
        tree = self._piece_tree()
        if distance > 0:
            hits = tree.query(pt, predicate="dwithin", distance=float(distance))
            return [self.obstacle_ids[i] for i in np.unique(self.piece_owner[hits])]
        inside = np.unique(self.piece_owner[tree.query(pt, predicate="within")])
        touching = np.unique(self.piece_owner[tree.query(pt, predicate="intersects")])
        # On the seam between two pieces of one obstacle the point is inside the obstacle's
        # shape though inside neither piece: ask the obstacle's union for those.
        seams = [
            int(i)
            for i in np.setdiff1d(touching, inside)
            if shapely.contains_properly(self.grown(self.obstacle_ids[i]), pt)
        ]
        owners = np.union1d(inside, np.asarray(seams, dtype=np.int64))
        return [self.obstacle_ids[i] for i in owners]

    def components(self) -> np.ndarray:
        """The connected polygons of `region` (shapely Polygons); `component_of` indexes these."""
        parts = self._cache.get("components")
        if parts is None:
            parts = shapely.get_parts(self.region)
            parts = parts[shapely.get_type_id(parts) == shapely.GeometryType.POLYGON]
            parts = parts[~shapely.is_empty(parts)]
            self._cache["components"] = parts
            self._cache["component_tree"] = shapely.STRtree(parts)
        return parts

    def component_of(self, point: tuple[float, float]) -> int | None:
        """Index of the polygon of `region` holding the point (closed), None if it is blocked."""
        self.components()
        tree = self._cache["component_tree"]
        hits = tree.query(shapely.Point(float(point[0]), float(point[1])), predicate="intersects")
        return int(hits.min()) if len(hits) else None


def _footprint_geometry(footprint: Footprint) -> shapely.Geometry:
    if isinstance(footprint, shapely.Geometry):
        return footprint
    return shapely.Polygon(np.asarray(footprint, dtype=np.float64))


def _reflected_pieces(footprint: Footprint) -> Rings:
    """Convex pieces of -F, canonical for the edge merge."""
    geom = _footprint_geometry(footprint)
    reflected = shapely.transform(geom, lambda c: -c)
    parts = shapely.get_parts(reflected)
    parts = parts[(shapely.get_type_id(parts) == shapely.GeometryType.POLYGON)
                  & (shapely.area(parts) > 0)]
    if len(parts) == 0:
        raise PlanningError("the head's footprint has no area: nothing to grow obstacles by")
    pieces, _ = convex_decomposition(parts)
    return pieces


def c_obstacle_pieces(
    obstacles: Sequence[Obstacle], footprint: Footprint, clearance: float, arc_tolerance: float
) -> tuple[np.ndarray, np.ndarray]:
    """C-obstacle pieces (shapely Polygons) and, per piece, the index of its obstacle.

    A piece is a non-convex outline's whole sum with one footprint piece, or a convex sum
    (convex outlines, circles, and the convex pieces of an outline whose convolution failed its
    check). Every obstacle given is grown (filter passed-over ones before). Exact for polygons
    up to the clearance, whose round corners are approximated from outside within
    arc_tolerance, and the filled hair-thin dents (outward, a tenth of arc_tolerance at most).
    """
    raw = _reflected_pieces(footprint)
    if clearance > 0:
        grown = start_lowest(grow_convex(raw, clearance, arc_tolerance))
    else:
        grown = raw
    nf_raw, nf = len(raw), len(grown)

    poly_idx = np.array([i for i, o in enumerate(obstacles) if o.polygon is not None], np.int64)
    circ_idx = np.array([i for i, o in enumerate(obstacles) if o.polygon is None], np.int64)
    parts: list[Rings] = []
    owners: list[np.ndarray] = []

    whole: list[np.ndarray] = []  # sums of whole outlines (shapely Polygons), by convolution
    whole_owner: list[np.ndarray] = []
    if len(poly_idx):
        rings = drop_collinear(orient_ccw(Rings.from_list(obstacles[i].polygon
                                                          for i in poly_idx)))
        rings = fill_shallow_dents(rings, DENT_FILL_PER_ARC_TOLERANCE * arc_tolerance)
        by_pieces = convex_mask(rings)  # a convex outline is its own piece: the edge merge
        concave = np.flatnonzero(~by_pieces)
        if len(concave):
            sums, good, part_of = _outline_sums(rings.select(concave), grown, clearance,
                                                arc_tolerance)
            by_pieces[concave[~good]] = True  # an outline whose sum failed a check: by pieces
            keep = good[part_of]
            whole.append(sums[:, keep].ravel())
            whole_owner.append(np.tile(poly_idx[concave[part_of[keep]]], nf))
        if by_pieces.any():
            # Cleaning can flatten a sliver to a ring without area: such a one goes as given.
            which = np.flatnonzero(by_pieces)
            outlines = rings.select(which).to_polygons()
            flat = ~(shapely.area(outlines) > 0)
            outlines[flat] = [shapely.Polygon(obstacles[poly_idx[i]].polygon) for i in which[flat]]
            pieces, piece_of = convex_decomposition(outlines)
            p = len(pieces)
            ia = np.repeat(np.arange(p), nf)
            ib = np.tile(np.arange(nf), p)
            parts.append(convex_sums(pieces, grown, ia, ib))
            owners.append(poly_idx[np.flatnonzero(by_pieces)[piece_of[ia]]])

    if len(circ_idx):
        circles = [obstacles[i].circle for i in circ_idx]
        centers = np.array([c.center for c in circles], dtype=np.float64)
        radii = np.array([c.radius for c in circles], dtype=np.float64) + clearance
        disks = circumscribed_polygons(centers, radii, arc_tolerance)
        c = len(disks)
        ia = np.repeat(np.arange(c), nf_raw)
        ib = np.tile(np.arange(nf_raw), c)
        parts.append(convex_sums(disks, raw, ia, ib))
        owners.append(circ_idx[ia])

    if not parts and not whole:
        return np.empty(0, dtype=object), np.zeros(0, dtype=np.int64)
    polygons = Rings.concat(parts).to_polygons() if parts else np.empty(0, dtype=object)
    bad = ~shapely.is_valid(polygons)
    if bad.any():  # a convex piece can only be invalid by rounding: its hull contains it
        polygons[bad] = shapely.convex_hull(polygons[bad])
    polygons = np.concatenate([*whole, polygons])
    owner = np.concatenate([*whole_owner, *owners]).astype(np.int64)
    return polygons, owner


def _outline_sums(rings: Rings, grown: Rings, clearance: float, arc_tolerance: float
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each outline, cut into parts of at most CONVOLVE_AT_MOST vertices, summed part by part
    with each grown footprint piece by convolution. Returns the sums (nf, parts), per outline
    whether every one of its sums passed its checks, and per part the outline it came from.

    A cycle vertex may sit off the result only by GEOS's snapping fallback; a thousandth of the
    arc tolerance is far below what the grown corners already add outside the exact sum.
    """
    tol = 1e-3 * min(arc_tolerance, clearance) if clearance > 0 else 1e-3 * arc_tolerance
    fit = (rings.sizes >= 3) & (signed_areas(rings) > 0)
    whole = np.flatnonzero(fit)
    parts, part_of = bisect_polygons(rings.select(whole).to_polygons(), CONVOLVE_AT_MOST)
    part_of = whole[part_of]
    part_rings = drop_collinear(orient_ccw(Rings.from_polygons(parts)))
    sums, ok = zip(*(polygon_sums(part_rings, grown.ring(f), tol) for f in range(len(grown))),
                   strict=True)
    passed = np.stack(ok).all(axis=0)
    good = fit & (np.bincount(part_of[~passed], minlength=len(rings)) == 0)
    return np.stack(sums), good, part_of


def _polygonal(geom: shapely.Geometry) -> shapely.Geometry:
    """Only the areal parts of a geometry (make_valid may leave collapsed lines and points)."""
    parts = shapely.get_parts(geom)
    parts = parts[np.isin(shapely.get_type_id(parts),
                          [shapely.GeometryType.POLYGON, shapely.GeometryType.MULTIPOLYGON])]
    if len(parts) == 0:
        return shapely.Polygon()
    return shapely.union_all(parts) if len(parts) > 1 else parts[0]


def repair_union(candidate: shapely.Geometry | None, pieces: np.ndarray, eps: float
                 ) -> shapely.Geometry:
    """A valid union of `pieces` from an invalid or failed one, accepted only if conservative.

    Conservative here means it still covers every piece shrunk by `eps` (the tolerance the
    road map's visibility tests use); otherwise PlanningError.
    """
    try:
        if candidate is None:
            candidate = shapely.union_all(shapely.make_valid(pieces))
        repaired = _polygonal(shapely.make_valid(candidate))
    except shapely.errors.GEOSException as exc:
        raise PlanningError(
            f"could not form the union of {len(pieces)} grown obstacle pieces: GEOS failed ({exc})"
        ) from exc
    if not shapely.is_valid(repaired):
        raise PlanningError("the union of the grown obstacles is invalid and could not be repaired")
    shapely.prepare(repaired)
    inner = shapely.buffer(pieces, -eps)
    if not np.all(shapely.covers(repaired, inner)):
        raise PlanningError(
            "repairing the union of the grown obstacles would give up part of an obstacle; "
            "refusing to plan on it"
        )
    return repaired


def checked_union(pieces: np.ndarray, eps: float) -> shapely.Geometry:
    """The union of pieces (GEOS cascaded union), valid, or repaired conservatively."""
    if len(pieces) == 0:
        return shapely.Polygon()
    try:
        union = shapely.union_all(pieces)
    except shapely.errors.GEOSException:
        return repair_union(None, pieces, eps)
    if shapely.is_valid(union):
        return union
    return repair_union(union, pieces, eps)


def _free_region(box: shapely.Polygon, blocked: shapely.Geometry, pieces: np.ndarray,
                 eps: float) -> shapely.Geometry:
    """box minus blocked, valid; a repaired result must still miss every piece's interior."""
    try:
        region = shapely.difference(box, blocked)
        if shapely.is_valid(region):
            return region
        region = _polygonal(shapely.make_valid(region))
    except shapely.errors.GEOSException as exc:
        raise PlanningError(f"could not subtract the grown obstacles from the travel box ({exc})"
                            ) from exc
    if shapely.is_valid(region) and not np.any(
        shapely.intersects(region, shapely.buffer(pieces, -eps))
    ):
        return region
    raise PlanningError("the free region is invalid and could not be repaired conservatively")


def _clearance_and_eps(scene: Scene, settings: Settings) -> tuple[float, float]:
    if settings.units != scene.units:
        raise PlanningError(
            f"settings are in {settings.units} but the scene is in {scene.units}: "
            "convert them with settings.in_units(scene.units) first"
        )
    return scene.head.margin + settings.resolution, settings.resolution * EPS_PER_RESOLUTION


def _avoided(scene: Scene, obstacles: Sequence[Obstacle] | None) -> tuple[Obstacle, ...]:
    given = scene.obstacles if obstacles is None else obstacles
    return tuple(o for o in given if o.is_avoided(scene.head.ride_height))


def obstacle_digest(obstacle: Obstacle) -> bytes:
    """sha256 of one obstacle's id and geometry, as `free_space_key` hashes it (callers that key
    many free spaces over the same obstacles compute these once)."""
    h = hashlib.sha256(obstacle.id.encode() + b"\0")
    if obstacle.polygon is not None:
        h.update(b"P" + np.asarray(obstacle.polygon, dtype=np.float64).tobytes())
    else:
        h.update(b"C" + struct.pack("<3d", *obstacle.circle.center, obstacle.circle.radius))
    return h.digest()


def free_space_key(
    scene: Scene,
    settings: Settings,
    *,
    obstacles: Sequence[Obstacle] | None = None,
    footprint: Footprint | None = None,
    digests: Sequence[bytes] | None = None,
) -> str:
    """sha256 hex over everything `build_free_space` with the same arguments depends on.

    Covers the avoided obstacles' ids and geometry, the footprint, clearance, eps, arc
    tolerance, travel and units; cheap enough to compute before a cache lookup. `digests`, if
    given, are `obstacle_digest` of each obstacle in `obstacles`, in order.
    """
    clearance, eps = _clearance_and_eps(scene, settings)
    fp = scene.head.footprint if footprint is None else footprint
    given = scene.obstacles if obstacles is None else obstacles
    if digests is None:
        digests = [obstacle_digest(o) if o.is_avoided(scene.head.ride_height) else b""
                   for o in given]
    h = hashlib.sha256(_KEY_VERSION)
    h.update(scene.units.encode() + b"\0")
    t = scene.travel
    h.update(struct.pack("<7d", t.xmin, t.xmax, t.ymin, t.ymax, clearance, eps,
                         settings.arc_tolerance))
    h.update(shapely.to_wkb(shapely.normalize(_footprint_geometry(fp))))
    for o, d in zip(given, digests, strict=True):
        if o.is_avoided(scene.head.ride_height):
            h.update(d)
    return h.hexdigest()


def build_free_space(
    scene: Scene,
    settings: Settings,
    *,
    obstacles: Sequence[Obstacle] | None = None,
    footprint: Footprint | None = None,
) -> FreeSpace:
    """The free space of the tool point: travel box minus the union of the C-obstacles.

    `settings` must be in the scene's units. `obstacles` defaults to the scene's and `footprint`
    to the head's (a Ring, or a shapely polygon such as the footprint united with a carried
    part); only obstacles the head does not pass over at its ride height are grown.
    """
    clearance, eps = _clearance_and_eps(scene, settings)
    fp = scene.head.footprint if footprint is None else footprint
    avoided = _avoided(scene, obstacles)
    pieces, owner = c_obstacle_pieces(avoided, fp, clearance, settings.arc_tolerance)
    blocked = checked_union(pieces, eps)
    t = scene.travel
    box = shapely.box(t.xmin, t.ymin, t.xmax, t.ymax)
    region = _free_region(box, blocked, pieces, eps)
    return FreeSpace(
        units=scene.units,
        travel=t,
        box=box,
        clearance=clearance,
        eps=eps,
        blocked=blocked,
        region=region,
        obstacle_ids=tuple(o.id for o in avoided),
        pieces=pieces,
        piece_owner=owner,
        key=free_space_key(scene, settings, obstacles=obstacles, footprint=footprint),
    )
