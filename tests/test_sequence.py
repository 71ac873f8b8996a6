"""Tour order against outside references: the exact optimum by brute force over permutations
(itertools) and the LKH-3 heuristic (through elkai, a test-only dependency), on obstacle-free
and obstacle-rich cost matrices; and the constraints (pins, `after:`) against a plain check."""

from __future__ import annotations

import itertools

import elkai
import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks.scenes import random_scene
from planner.config import load_settings
from planner.model import Target
from planner.plan import free_space_and_roadmap
from planner.scene import load_scene_bytes
from planner.sequence import (
    Precedence,
    order_cost,
    precedence_of,
    shortest_order,
)
from tests.helpers import REPO_CONFIG


def euclidean(points: np.ndarray) -> np.ndarray:
    d = points[:, None, :] - points[None, :, :]
    return np.hypot(d[..., 0], d[..., 1])


def random_instance(rng: np.random.Generator, n: int, has_finish: bool) -> np.ndarray:
    """Start, n targets (and a finish) uniformly on a 1000 x 600 table: the Euclidean matrix."""
    pts = rng.uniform((0, 0), (1000, 600), (n + 1 + int(has_finish), 2))
    return euclidean(pts)


def respects(order, level, before) -> bool:
    """The test's own constraint check: levels never go down, each (a, b) has a before b."""
    pos = {t: i for i, t in enumerate(order)}
    if any(level[x] > level[y] for x, y in zip(order, order[1:], strict=False)):
        return False
    return all(pos[a] < pos[b] for a, b in before)


def brute_force(cost: np.ndarray, has_finish: bool, level=None, before=()) -> float:
    """The exact optimum over every permutation of the targets (itertools), constraints kept."""
    n = cost.shape[0] - 1 - int(has_finish)
    level = np.asarray(level or [1] * n)
    perms = np.array(list(itertools.permutations(range(n))), dtype=int).reshape(-1, n)
    ok = np.all(np.diff(level[perms], axis=1) >= 0, axis=1)
    pos = np.argsort(perms, axis=1)  # pos[p, t]: where target t comes in permutation p
    for a, b in before:
        ok &= pos[:, a] < pos[:, b]
    nodes = np.hstack([np.zeros((len(perms), 1), dtype=int), perms + 1])
    if has_finish:
        nodes = np.hstack([nodes, np.full((len(perms), 1), n + 1)])
    totals = cost[nodes[:, :-1], nodes[:, 1:]].sum(axis=1)
    return float(totals[ok].min())


def lkh_order(cost: np.ndarray, has_finish: bool) -> list[int]:
    """LKH-3 (elkai) on the same matrix: the open path from start to finish (or to any target)
    becomes a closed tour by a return edge finish -> start that is the only way back."""
    n = cost.shape[0] - 1 - int(has_finish)
    size = n + 2
    full = np.zeros((size, size))
    full[: n + 1, : n + 1] = cost[: n + 1, : n + 1]
    if has_finish:
        full[: n + 1, n + 1] = cost[: n + 1, n + 1]
    # LKH works on integers, and its ATSP transformation overflows 32 bits on large ones: the
    # longest edge becomes 10,000 and a forbidden edge costs more than any whole tour.
    weights = np.rint(full * (1e4 / full.max())).astype(np.int64)
    big = 10_000 * size + 1
    weights[size - 1, :] = big
    weights[:, 0] = big
    weights[size - 1, 0] = 0
    np.fill_diagonal(weights, 0)
    tour = elkai.DistanceMatrix(weights.tolist()).solve_tsp(runs=1)[:-1]
    k = tour.index(0)
    tour = tour[k:] + tour[:k]
    assert tour[-1] == size - 1
    return [v - 1 for v in tour[1:-1]]


def random_constraints(rng: np.random.Generator, n: int):
    """Some pins and an acyclic set of after-pairs consistent with the pins."""
    level = [1] * n
    for k in rng.choice(n, size=min(n, 2), replace=False):
        level[int(k)] = int(rng.choice([0, 2]))
    order = sorted(range(n), key=lambda t: (level[t], rng.random()))  # one feasible order
    before = []
    for _ in range(int(rng.integers(0, n))):
        i, j = sorted(rng.choice(n, size=2, replace=False))
        before.append((order[i], order[j]))
    return level, before


# Exact optimum by brute force over permutations (itertools), up to 8 targets, with and without
# a finish and with random pins and after-constraints: at most 2% longer on average.
def test_close_to_brute_force_on_average():
    rng = np.random.default_rng(11)
    ratios = []
    for case in range(60):
        n = int(rng.integers(2, 9))
        has_finish = bool(case % 2)
        cost = random_instance(rng, n, has_finish)
        level, before = random_constraints(rng, n) if case % 3 == 0 else ([1] * n, [])
        prec = Precedence(level=tuple(level), before=tuple(before))
        order = shortest_order(cost, has_finish=has_finish, precedence=prec)
        assert sorted(order) == list(range(n))
        assert respects(order, level, before)
        ratios.append(order_cost(cost, order, has_finish) / brute_force(cost, has_finish, level,
                                                                         before))
    assert min(ratios) >= 1 - 1e-9
    assert np.mean(ratios) <= 1.02


# Exact optimum by brute force (itertools) on random instances, asymmetric costs included:
# never more than 10% longer.
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 8),
    has_finish=st.booleans(),
    asymmetric=st.booleans(),
)
def test_never_far_from_brute_force(seed: int, n: int, has_finish: bool, asymmetric: bool):
    rng = np.random.default_rng(seed)
    cost = random_instance(rng, n, has_finish)
    if asymmetric:
        cost = cost * rng.uniform(0.5, 1.5, cost.shape)
    order = shortest_order(cost, has_finish=has_finish)
    assert sorted(order) == list(range(n))
    assert order_cost(cost, order, has_finish) <= 1.10 * brute_force(cost, has_finish) + 1e-9


class _NoAliases(yaml.SafeDumper):
    def ignore_aliases(self, data) -> bool:
        return True


def obstacle_matrix(n_targets: int, seed: int) -> np.ndarray:
    """Shortest collision-free path lengths between start, targets and finish of a seeded
    random scene with obstacles, from the road map (one search per point)."""
    config = load_settings(REPO_CONFIG)
    scene_dict = random_scene(3000, seed=seed, n_targets=n_targets)
    text = yaml.dump(scene_dict, Dumper=_NoAliases)
    scene = load_scene_bytes(text.encode(), "random.yaml", config)
    _, roadmap = free_space_and_roadmap(scene, config.in_units(scene.units))
    pts = np.array([scene.start, *(t.at for t in scene.targets), scene.finish])
    cost = np.array([roadmap.distances_from(tuple(p), pts) for p in pts])
    keep = np.flatnonzero(np.isfinite(cost[0]))  # targets the start can reach
    return cost[np.ix_(keep, keep)]


@pytest.fixture(scope="module")
def lkh_instances():
    rng = np.random.default_rng(5)
    cases = [(random_instance(rng, n, has_finish), has_finish)
             for n, has_finish in ((20, True), (50, False), (100, True), (200, True),
                                   (200, False))]
    cases += [(obstacle_matrix(n, seed), True) for n, seed in ((40, 3), (120, 4))]
    return cases


# LKH-3 (Helsgaun's heuristic, through elkai) on the same cost matrices, obstacle-free and
# obstacle-rich, 20 to 200 targets: our tours at most 3% longer on average.
def test_close_to_lkh_on_average(lkh_instances):
    ratios = []
    for cost, has_finish in lkh_instances:
        order = shortest_order(cost, has_finish=has_finish)
        ref = lkh_order(cost, has_finish)
        ratios.append(order_cost(cost, order, has_finish) / order_cost(cost, ref, has_finish))
    assert np.mean(ratios) <= 1.03, ratios
    assert max(ratios) <= 1.06, ratios


def test_obstacles_make_the_matrix_differ_from_straight_lines(lkh_instances):
    """The obstacle-rich instances really are: some paths bend round obstacles."""
    cost, _ = lkh_instances[-1]
    assert np.all(np.isfinite(cost))
    assert np.allclose(cost, cost.T, rtol=1e-9, atol=1e-6)  # the road map is undirected


def test_same_matrix_same_order():
    rng = np.random.default_rng(2)
    cost = random_instance(rng, 60, True)
    assert shortest_order(cost, has_finish=True) == shortest_order(cost.copy(), has_finish=True)


def test_better_than_given_order_and_endpoints_fixed():
    rng = np.random.default_rng(3)
    cost = random_instance(rng, 30, True)
    order = shortest_order(cost, has_finish=True)
    assert order_cost(cost, order, True) < order_cost(cost, list(range(30)), True)


def test_missing_connections_are_avoided():
    # Hand-made: four targets on a line; the direct 0->2 and 1->3 links are missing (inf).
    pts = np.array([[0.0, 0.0], [1, 0], [2, 0], [3, 0], [4, 0]])
    cost = euclidean(pts)
    cost[1, 3] = cost[3, 1] = np.inf
    order = shortest_order(cost, has_finish=False)
    assert np.isfinite(order_cost(cost, order, False))
    assert order == [0, 1, 2, 3]


def test_pins_and_after_are_kept_on_large_instances():
    rng = np.random.default_rng(8)
    n = 80
    cost = random_instance(rng, n, True)
    level, before = random_constraints(rng, n)
    order = shortest_order(cost, has_finish=True,
                           precedence=Precedence(level=tuple(level), before=tuple(before)))
    assert sorted(order) == list(range(n))
    assert respects(order, level, before)


def targets(*specs) -> tuple[Target, ...]:
    return tuple(Target(id=tid, at=(float(i), 0.0), **kw) for i, (tid, kw) in enumerate(specs))


def test_precedence_of_scene_targets():
    ts = targets(("a", {}), ("b", {"after": "c"}), ("c", {"first": True}), ("d", {"last": True}))
    prec = precedence_of(ts)
    assert prec.level == (1, 1, 0, 2)
    assert prec.before == ((2, 1),)
    assert prec.restricted([1, 2]).before == ((1, 0),)


# ---- through the pipeline: `sequence: shortest` in plan_scene and `sidestep check`

def _pipeline_scene(tmp_path, **overrides):
    from tests.helpers import make_scene_dict, write_scene

    targets = [
        {"id": "a", "at": [900, 400], "first": True},
        [100, 450], [950, 60], [300, 250],
        {"id": "e", "at": [650, 420], "after": "a"},
        [120, 80], [640, 30],
        {"id": "inside", "at": [500, 200]},  # in the block: unreachable
    ]
    data = make_scene_dict(targets=targets, sequence="shortest", **overrides)
    return write_scene(tmp_path, data, "tour.yaml")


def test_plan_orders_reachable_targets_and_reports_the_rest(tmp_path):
    from planner.plan import free_space_and_roadmap, plan_scene
    from planner.scene import load_scene

    config = load_settings(REPO_CONFIG)
    scene = load_scene(_pipeline_scene(tmp_path), config)
    result = plan_scene(scene, config)
    route = result.route
    visited = [leg.to_id for leg in route.legs]
    assert visited[0] == "a" and visited[-1] == "finish"
    assert visited.index("e") > visited.index("a")
    assert sorted(visited[:-1]) == sorted(t.id for t in scene.targets if t.id != "inside")
    assert [u.id for u in route.unreachable] == ["inside"]
    report = result.order
    assert report is not None and report.cost == "length"
    assert report.planned_cost <= report.given_cost
    assert route.length == pytest.approx(report.planned_cost, abs=0.05)

    # Exact optimum by brute force (itertools) over the same road-map lengths.
    _, roadmap = free_space_and_roadmap(scene, config)
    reach = [t for t in scene.targets if t.id != "inside"]
    pts = np.array([scene.start, *(t.at for t in reach), scene.finish])
    cost = np.array([roadmap.distances_from(tuple(p), pts) for p in pts])
    prec = precedence_of(reach)
    best = brute_force(cost, True, list(prec.level), prec.before)
    assert route.length <= 1.02 * best + 0.05


def test_check_prints_times_and_the_saving(tmp_path):
    import subprocess
    import sys

    scene = _pipeline_scene(tmp_path)
    run = subprocess.run([sys.executable, "-m", "planner.cli", "check", str(scene), "--config",
                          str(REPO_CONFIG)], capture_output=True, text=True, timeout=120)
    assert run.returncode == 3, run.stderr
    assert "sequence shortest by length" in run.stdout and "saves" in run.stdout
    assert " s\n" in run.stdout  # per-leg estimated times
    assert list(tmp_path.iterdir()) == [scene]  # nothing written


# Worked example: on a machine whose y axis is ten times slower than x, a 3 x 3 grid of targets
# (columns 600 apart, rows 200 apart) is shortest visited column by column (short y moves) but
# fastest in an order that moves along x wherever it can.
def test_time_cost_changes_the_order():
    from planner.motion import Axis, AxisModel, segment_times

    grid = [[x, y] for x in (0, 600, 1200) for y in (200, 400, 600)]
    pts = np.array([[0, 0], *grid, [0, 0]], dtype=float)  # start, targets, finish
    slow_y = AxisModel(Axis(1000.0, 5000.0), Axis(100.0, 500.0))
    d = pts[None, :, :] - pts[:, None, :]
    lengths = np.hypot(d[..., 0], d[..., 1])
    times = segment_times(d.reshape(-1, 2), slow_y).reshape(lengths.shape)
    by_length = shortest_order(lengths, has_finish=True)
    by_time = shortest_order(times, has_finish=True)
    assert by_length != by_time
    assert order_cost(times, by_time, True) < order_cost(times, by_length, True) - 1.0
    assert order_cost(lengths, by_length, True) < order_cost(lengths, by_time, True)
