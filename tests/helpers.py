"""Small builders for tests: a valid scene as a dict, and writing one to a file.

`make_scene_dict()` is a complete, valid scene (inline head, so it needs no named heads); pass
keyword overrides to change top-level keys, or `OMIT` to leave a key out.
"""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np
import shapely
import yaml

__all__ = ["OMIT", "make_scene_dict", "write_scene", "REPO_CONFIG"]

REPO_CONFIG = Path(__file__).resolve().parent.parent / "config"


class _Omit:
    def __repr__(self) -> str:
        return "OMIT"


OMIT: Any = _Omit()

_BASE: dict[str, Any] = {
    "scene": 1,
    "units": "mm",
    "travel": {"x": [0, 1000], "y": [0, 500]},
    "head": {"footprint": [[-10, -10], [10, -10], [10, 10], [-10, 10]], "margin": 1.0},
    "obstacles": [
        {"id": "block", "rect": {"min": [400, 100], "max": [600, 300]}},
        {"polygon": [[700, 50], [800, 50], [750, 150]]},
        {"circle": {"center": [200, 400], "radius": 30}},
    ],
    "start": [50, 50],
    "targets": [[900, 400], {"id": "corner", "at": [950, 50]}],
    "finish": [50, 50],
}


def make_scene_dict(**overrides: Any) -> dict:
    """A fresh valid scene dict; `key=value` replaces a top-level key, `key=OMIT` drops it."""
    data = copy.deepcopy(_BASE)
    for key, value in overrides.items():
        if value is OMIT:
            data.pop(key, None)
        else:
            data[key] = copy.deepcopy(value)
    return data


def write_scene(tmp_path: Path, data: Any, name: str = "job.yaml") -> Path:
    """Write `data` (a dict, YAML text or raw bytes) to `tmp_path / name` and return the path.

    A dict is written as JSON when `name` ends in `.json`, else as YAML.
    """
    path = Path(tmp_path) / name
    if isinstance(data, bytes):
        path.write_bytes(data)
    elif isinstance(data, str):
        path.write_text(data, encoding="utf-8")
    elif name.endswith(".json"):
        path.write_text(json.dumps(data), encoding="utf-8")
    else:
        path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


# A general-purpose reference for shortest lengths: networkx Dijkstra (not this project's
# road map) over every pair of free-space vertices, each pair tested by GEOS.
def reference_length(region: shapely.Geometry, a, b) -> float:
    """networkx Dijkstra on the unpruned visibility graph: all region vertices and the two end
    points, every pair tested on its own with GEOS (region.covers(segment))."""
    if tuple(a) == tuple(b):
        return 0.0 if region.covers(shapely.Point(a)) else math.inf
    pts = [tuple(a), tuple(b)]
    for ring in shapely.get_rings(shapely.get_parts(region)):
        pts.extend(map(tuple, shapely.get_coordinates(ring)[:-1]))
    pts = list(dict.fromkeys(pts))
    shapely.prepare(region)
    g = nx.Graph()
    g.add_nodes_from(range(len(pts)))
    i, j = np.triu_indices(len(pts), 1)
    xy = np.asarray(pts)
    ok = region.covers(shapely.linestrings(np.stack([xy[i], xy[j]], axis=1)))
    for u, v in zip(i[ok], j[ok], strict=True):
        g.add_edge(int(u), int(v), weight=math.dist(pts[u], pts[v]))
    try:
        return nx.dijkstra_path_length(g, 0, 1)
    except nx.NetworkXNoPath:
        return math.inf
