"""The benchmark's smoke size (python -m benchmarks.run --smoke) checked for correctness only.

Never a timing: the smoke run must finish with every route verified and every `sidestep plan`
exit status 0 or 3, and every leg the benchmark timed must have the exact shortest length, by a
brute-force visibility graph searched with networkx (as in tests/test_roadmap.py).
"""

from __future__ import annotations

import json
import math

import networkx as nx
import numpy as np
import pytest
import shapely

from benchmarks import run as bench
from planner.config import load_settings
from planner.cspace import build_free_space
from planner.model import FINISH, START
from planner.scene import load_scene


def brute_force_length(region: shapely.Geometry, a, b, bound: float) -> float:
    """Shortest a-b path length in `region` no longer than `bound` (inf if there is none).

    networkx Dijkstra on the unpruned visibility graph of the region's vertices and the two end
    points, every pair tested on its own with GEOS (region.covers(segment)). Only vertices and
    pairs that a path no longer than `bound` could use are tested: by the triangle inequality a
    path through u then v is at least |a-u| + |u-v| + |v-b| long.
    """
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    verts = shapely.get_coordinates(shapely.get_rings(shapely.get_parts(region)))
    pts = np.vstack([a, b, np.unique(verts, axis=0)])
    da, db = np.hypot(*(pts - a).T), np.hypot(*(pts - b).T)
    keep = np.union1d(np.flatnonzero(da + db <= bound), [0, 1])
    p, da, db = pts[keep], da[keep], db[keep]
    i, j = np.triu_indices(len(p), 1)
    dij = np.hypot(*(p[i] - p[j]).T)
    near = np.minimum(da[i] + dij + db[j], da[j] + dij + db[i]) <= bound
    i, j, dij = i[near], j[near], dij[near]
    shapely.prepare(region)
    ok = shapely.covers(region, shapely.linestrings(np.stack([p[i], p[j]], axis=1)))
    g = nx.Graph()
    g.add_nodes_from(range(len(p)))
    g.add_weighted_edges_from(zip(i[ok].tolist(), j[ok].tolist(), dij[ok].tolist(),
                                  strict=True))
    try:
        return nx.dijkstra_path_length(g, 0, 1)
    except nx.NetworkXNoPath:
        return math.inf


def same_component(region: shapely.Geometry, a, b) -> bool:
    """True when one polygon of the region holds both points (GEOS covers)."""
    parts = shapely.get_parts(region)
    return bool(np.any(shapely.covers(parts, shapely.Point(a))
                       & shapely.covers(parts, shapely.Point(b))))


@pytest.fixture(scope="module")
def smoke(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bench")
    code = bench.main(["--smoke", "--keep", str(folder), "--json", str(folder / "bench.json")])
    return code, folder, json.loads((folder / "bench.json").read_text())


def test_smoke_run_plans_and_verifies_every_scene(smoke):
    code, _, res = smoke
    assert code == 0
    assert {r["kind"] for r in res["runs"]} == set(bench.KINDS)
    for run in res["runs"]:
        assert run["size"] == bench.SIZES[0]
        for stage in run["stages"]:
            # planner.verify is the independent check (it shares no code with the planner)
            assert stage["violations"] == 0
            assert stage["legs"] + len(stage["unreachable"]) == len(stage["query_lengths"])
        assert all(e["exit"] in (0, 3) for e in run["e2e"])


@pytest.mark.parametrize("kind", bench.KINDS)
def test_smoke_leg_lengths_are_exact(smoke, kind):
    _, folder, res = smoke
    run = next(r for r in res["runs"] if r["kind"] == kind)
    settings = load_settings(None)
    scene = load_scene(folder / f"{kind}-{run['size']}.yaml", settings)
    region = build_free_space(scene, settings.in_units(scene.units)).region
    stops = [(START, scene.start)] + [(t.id, t.at) for t in scene.targets]
    if scene.finish is not None:
        stops.append((FINISH, scene.finish))
    lengths = run["stages"][0]["query_lengths"]
    assert len(lengths) == len(stops) - 1
    current = scene.start
    checked = 0
    for (_, b), ours in zip(stops[1:], lengths, strict=True):
        if math.isinf(ours):
            # unreachable: the free region has no polygon holding both ends (GEOS covers)
            assert not same_component(region, current, b)
            continue
        bound = ours * (1 + 1e-7) + 1e-6
        # exact reference: brute-force visibility graph + networkx Dijkstra (see above)
        ref = brute_force_length(region, current, b, bound)
        assert ours == pytest.approx(ref, rel=1e-7, abs=1e-6)
        current = b
        checked += 1
    assert checked >= len(lengths) // 2  # the smoke scenes are mostly reachable
