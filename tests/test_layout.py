"""The report's layered layout: every variable once, tiers in order, untiered variables
by depth, and the same input always gives the same layout."""

from __future__ import annotations

import numpy as np
from conftest import random_dag
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.layout import layered
from runner.svg import nice_ticks


@settings(max_examples=60, deadline=None)
@given(n=st.integers(1, 9), seed=st.integers(0, 2**16), tiers=st.integers(0, 3))
def test_every_variable_once_tiers_in_order(n: int, seed: int, tiers: int) -> None:
    rng = np.random.default_rng(seed)
    names = [f"v{i}" for i in range(n)]
    parents = random_dag(n, rng)
    edges = [[names[p], names[c]] for c, ps in enumerate(parents) for p in ps]
    tier_of = rng.integers(-1, tiers, size=n) if tiers else np.full(n, -1)
    spec_tiers = [[names[i] for i in range(n) if tier_of[i] == t] for t in range(tiers)]
    spec_tiers = [t for t in spec_tiers if t]
    bands = layered(names, spec_tiers, edges)
    placed = [m for b in bands for m in b.members]
    assert sorted(placed) == sorted(names)
    assert [set(b.members) for b in bands[:len(spec_tiers)]] == [set(t) for t in spec_tiers]
    # untiered bands: a variable's untiered parents sit in earlier bands (depth order)
    band_of = {m: k for k, b in enumerate(bands) for m in b.members}
    untiered = {names[i] for i in range(n) if tier_of[i] == -1}
    for a, b in edges:
        if a in untiered and b in untiered:
            assert band_of[a] < band_of[b]
    assert layered(names, spec_tiers, edges) == bands


def test_ticks_cover_the_range() -> None:
    ticks = nice_ticks(-144291.7, -132342.8)
    assert ticks[0] <= -144291.7 and ticks[-1] >= -132342.8
    assert ticks == [-145000.0, -140000.0, -135000.0, -130000.0]


@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 12), seed=st.integers(0, 2**16))
def test_long_edges_pass_between_the_nodes_of_the_bands_they_cross(n: int, seed: int) -> None:
    from runner.svg import _positions, _waypoints, node_width

    rng = np.random.default_rng(seed)
    names = [f"v{i}" + "x" * int(rng.integers(0, 8)) for i in range(n)]
    parents = random_dag(n, rng)
    edges = [[names[p], names[c]] for c, ps in enumerate(parents) for p in ps]
    bands = layered(names, [], edges)
    pos, _ = _positions(bands)
    rows = [(pos[b.members[0]][1], [(pos[m][0], node_width(m) / 2) for m in b.members])
            for b in bands]
    for a, b in edges:
        via = _waypoints(pos[a], pos[b], rows)
        crossed = [r for r in rows if min(pos[a][1], pos[b][1]) < r[0] < max(pos[a][1],
                                                                          pos[b][1])]
        assert len(via) == len(crossed)  # one waypoint per band strictly between
        for (x, y), (row_y, nodes) in zip(sorted(via, key=lambda p: p[1]), sorted(crossed),
                                          strict=True):
            assert y == row_y
            assert all(abs(x - nx) >= hw for nx, hw in nodes)  # clear of every node box
