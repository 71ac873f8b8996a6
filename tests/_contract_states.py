"""The contract's leg states read literally, for tests (shares nothing with planner/states.py).

interface.md, "Scenes that change as the job runs": leg i of a route runs from visited[i] to
visited[i+1] (visited[0] is start); `after: X` is present on every leg that starts at X or
later, `until: X` on every leg that ends at X or earlier; a carry on X holds from the leg
leaving X on until a later target sets another outline or `none`.
"""

from __future__ import annotations

from planner.model import Scene


def contract_leg_state(scene: Scene, visited: list[str], i: int):
    """(present ids, carried outline or None) of leg i of a route through `visited` (visited[0]
    is start), read off the contract by leg positions."""
    pos = {p: k for k, p in enumerate(visited)}
    present = []
    for o in scene.obstacles:
        on = True
        if o.after is not None:  # present on every leg that starts at X or later
            on = o.after in pos and i >= pos[o.after]
        if on and o.until is not None:  # present on every leg that ends at X or earlier
            on = o.until not in pos or i + 1 <= pos[o.until]
        if on:
            present.append(o.id)
    carry = None
    carry_of = {t.id: t.carry for t in scene.targets}
    for p in visited[: i + 1]:  # from the leg leaving X on, until a later target sets another
        c = carry_of.get(p)
        if c == "none":
            carry = None
        elif c is not None:
            carry = c
    return tuple(present), carry
