"""The state of each leg (obstacles present, footprint) against the contract's own wording.

The oracle here reads interface.md, "Scenes that change as the job runs", literally, by leg
index: leg i runs from visited[i] to visited[i+1]; `after: X` is present on every leg that
starts at X or later, `until: X` on every leg that ends at X or earlier, a carry on X holds from
the leg leaving X on. It shares nothing with planner/states.py but the scene model.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from planner.model import FINISH, START, Head, Obstacle, Scene, Target, Travel
from planner.states import (
    StateTracker,
    changes,
    footprint_of,
    has_states,
    leg_extra,
    present_obstacles,
    states_along,
)
from tests._contract_states import contract_leg_state

SQUARE = ((-1.0, -1.0), (1.0, -1.0), (1.0, 1.0), (-1.0, 1.0))
WIDE = ((-3.0, -0.5), (3.0, -0.5), (3.0, 0.5), (-3.0, 0.5))


def make_scene(obstacles, targets, finish=True) -> Scene:
    return Scene(
        file="s.yaml", sha256="0" * 64, units="mm", travel=Travel(0, 100, 0, 100),
        head=Head(None, SQUARE, 0.5), obstacles=tuple(obstacles), start=(1.0, 1.0),
        targets=tuple(targets), finish=(99.0, 99.0) if finish else None,
    )


# -- worked examples from the contract text ------------------------------------------------------


def test_contract_example_after_until_and_carry():
    # interface.md: part-7 `after: exit-7`, blank-stack `until: pick-3`, carry set at pick-1 and
    # dropped at place-1; legs start -> pick-1 -> exit-7 -> pick-3 -> place-1 -> finish.
    scene = make_scene(
        [Obstacle("part-7", polygon=((60, 30), (70, 30), (70, 38)), after="exit-7"),
         Obstacle("blank-stack", polygon=((10, 90), (30, 90), (30, 99)), until="pick-3"),
         Obstacle("clamp", polygon=((0, 50), (5, 50), (5, 55)))],
        [Target("pick-1", (40, 80), carry=WIDE), Target("exit-7", (50, 50)),
         Target("pick-3", (40, 95)), Target("place-1", (80, 40), carry="none")],
    )
    states = states_along(scene, ["pick-1", "exit-7", "pick-3", "place-1", FINISH])
    # leg 0: start -> pick-1: the stack is there, the part not yet, nothing carried
    assert states[0].present == ("blank-stack", "clamp") and states[0].carry is None
    # leg 1: pick-1 -> exit-7: the arriving leg had the old footprint; this one carries WIDE
    assert states[1].present == ("blank-stack", "clamp") and states[1].carry == WIDE
    assert states[1].carry_from == "pick-1"
    # leg 2: exit-7 -> pick-3: part-7 is present from the leg that leaves exit-7 on
    assert states[2].present == ("part-7", "blank-stack", "clamp")
    # leg 3: pick-3 -> place-1: the stack was present up to the leg arriving at pick-3
    assert states[3].present == ("part-7", "clamp") and states[3].carry == WIDE
    # leg 4: place-1 -> finish: carry none
    assert states[4].carry is None
    assert changes(states[1], states[2]) == (["part-7"], [])
    assert changes(states[2], states[3]) == ([], ["blank-stack"])
    assert leg_extra(None, states[0]) == {}
    assert leg_extra(states[2], states[3]) == {"gone": ["blank-stack"],
                                               "carry": [list(p) for p in WIDE]}


def test_after_start_always_and_until_start_never():
    # interface.md: "`after: start` means always present, `until: start` never"
    scene = make_scene([Obstacle("a", polygon=((1, 2), (3, 2), (3, 4)), after=START),
                        Obstacle("u", polygon=((5, 2), (7, 2), (7, 4)), until=START)],
                       [Target("t1", (50, 50))])
    for state in states_along(scene, ["t1", FINISH]):
        assert state.present == ("a",)


def test_unreached_targets_change_nothing():
    # interface.md: "an unreachable target's `after`, `until` and `carry` never take effect":
    # the tracker is only told about reached targets; x is never reached.
    scene = make_scene(
        [Obstacle("after-x", polygon=((1, 2), (3, 2), (3, 4)), after="x"),
         Obstacle("until-x", polygon=((5, 2), (7, 2), (7, 4)), until="x")],
        [Target("x", (50, 50), carry=WIDE), Target("y", (60, 60))],
    )
    tracker = StateTracker(scene)
    tracker.reach("y")
    assert tracker.state.present == ("until-x",) and tracker.state.carry is None
    assert has_states(scene)
    assert not has_states(make_scene([Obstacle("o", polygon=((1, 2), (3, 2), (3, 4)))],
                                     [Target("t", (5, 5))]))


def test_footprint_is_the_union_with_the_carried_outline():
    scene = make_scene([], [Target("p", (50, 50), carry=WIDE)])
    tracker = StateTracker(scene)
    assert footprint_of(scene, tracker.state) == SQUARE
    tracker.reach("p")
    fp = footprint_of(scene, tracker.state)
    # shapely: the union of a 2 x 2 square and a 6 x 1 bar through its middle has area 4 + 6 - 2
    assert abs(fp.area - 8.0) < 1e-12
    assert present_obstacles(scene, tracker.state) == ()


# -- random scenes against the oracle ------------------------------------------------------------


@st.composite
def stateful_scenes(draw):
    n_t = draw(st.integers(1, 6))
    tids = [f"t{k + 1}" for k in range(n_t)]
    names = st.sampled_from([START, *tids])
    targets = []
    for k, tid in enumerate(tids):
        carry = draw(st.sampled_from([None, None, "none", WIDE, SQUARE]))
        targets.append(Target(tid, (10.0 + k, 20.0), carry=carry))
    obstacles = []
    for k in range(draw(st.integers(0, 6))):
        after = draw(st.one_of(st.none(), names))
        until = draw(st.one_of(st.none(), names))
        obstacles.append(Obstacle(f"o{k + 1}", polygon=((k, 1), (k + 1, 1), (k, 2)),
                                  after=after, until=until))
    scene = make_scene(obstacles, targets, finish=draw(st.booleans()))
    reached = draw(st.permutations(tids))
    reached = reached[: draw(st.integers(0, len(reached)))]
    if scene.finish is not None:
        reached = [*reached, FINISH]
    return scene, reached


@settings(max_examples=300, deadline=None)
@given(stateful_scenes())
def test_tracker_matches_the_contract_on_random_scenes(case):
    scene, reached = case
    states = states_along(scene, reached)
    visited = [START, *reached]
    assert len(states) == len(reached)
    for i, state in enumerate(states):
        present, carry = contract_leg_state(scene, visited, i)
        assert state.present == present
        assert state.carry == carry
