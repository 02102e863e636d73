"""A deterministic layered layout for drawing a network: tiers as horizontal bands.

Bands, top to bottom: the spec's tiers in order (labelled from 1, "tier 1", with the
tier's name beside the number when the spec names its tiers), then the variables in no
tier, one band per topological depth in the graph among themselves (depth 0: no untiered
parent). Within a band, variables start in the order the spec lists them (untiered ones
in data order) and are then reordered by barycentre sweeps (Sugiyama, Tagawa & Toda 1981,
"Methods for visual understanding of hierarchical system structures"): a down sweep
orders each band by the mean position of its neighbours in earlier bands, an up sweep by
those in later bands; ties keep the current order. A fixed number of sweeps makes it
deterministic.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

SWEEPS = 4


@dataclass(frozen=True)
class Band:
    label: str
    members: tuple[str, ...]


def untiered_depths(names: Sequence[str], edges: Sequence[Sequence[str]]) -> dict[str, int]:
    """Topological depth of each name within the subgraph on ``names`` (longest path from
    a node without parents among them); nodes on a cycle (not a DAG) get depth 0."""
    inside = set(names)
    parents: dict[str, list[str]] = {n: [] for n in names}
    for a, b in edges:
        if a in inside and b in inside:
            parents[b].append(a)
    depth: dict[str, int] = {}
    for _ in range(len(names) + 1):
        changed = False
        for n in names:
            d = 1 + max((depth.get(p, 0) for p in parents[n]), default=-1)
            if depth.get(n) != d:
                depth[n], changed = d, True
        if not changed:
            break
    else:
        return dict.fromkeys(names, 0)
    return depth


def tier_label(number: int, tier_names: Sequence[str] | None = None) -> str:
    """A tier's label, numbered from 1: ``tier 2``, or ``tier 2 · firing`` when the spec
    names its tiers (``tier_names``, one name per tier)."""
    name = tier_names[number - 1] if tier_names and number <= len(tier_names) else ""
    return f"tier {number}" + (f" · {name}" if name else "")


def bands_of(names: Sequence[str], tiers: Sequence[Sequence[str]],
             edges: Sequence[Sequence[str]],
             tier_names: Sequence[str] | None = None) -> list[Band]:
    """The bands before reordering."""
    present = set(names)
    bands: list[Band] = []
    placed: set[str] = set()
    for t, tier in enumerate(tiers):
        members = tuple(n for n in tier if n in present and n not in placed)
        placed.update(members)
        if members:
            bands.append(Band(tier_label(t + 1, tier_names), members))
    rest = [n for n in names if n not in placed]
    if rest:
        depth = untiered_depths(rest, edges)
        for d in sorted(set(depth.values())):
            bands.append(Band(f"no tier, depth {d}", tuple(n for n in rest if depth[n] == d)))
    return bands


def _sweep(bands: list[list[str]], neighbours: dict[str, set[str]], down: bool) -> None:
    order = range(1, len(bands)) if down else range(len(bands) - 2, -1, -1)
    for i in order:
        fixed = bands[:i] if down else bands[i + 1:]
        pos = {n: (k + 0.5) / len(b) for b in fixed for k, n in enumerate(b)}
        current = {n: (k + 0.5) / len(bands[i]) for k, n in enumerate(bands[i])}

        def key(n: str, pos: dict[str, float] = pos, current: dict[str, float] = current
                ) -> tuple[float, float]:
            near = sorted(pos[m] for m in neighbours[n] if m in pos)
            return (sum(near) / len(near) if near else current[n], current[n])

        bands[i] = sorted(bands[i], key=key)


def layered(names: Sequence[str], tiers: Sequence[Sequence[str]],
            edges: Sequence[Sequence[str]],
            tier_names: Sequence[str] | None = None) -> list[Band]:
    """Bands with their members ordered by :data:`SWEEPS` down-and-up barycentre sweeps.

    Parameters
    ----------
    names : sequence of str
        Every variable to place, in data order.
    tiers : sequence of sequences of str
        The spec's tiers, earliest first.
    edges : sequence of [from, to]
        The edges whose ends pull each other together in the sweeps.
    tier_names : sequence of str, optional
        The spec's names of its tiers (``tier_names``), shown beside the numbers.

    Returns
    -------
    list of Band
        Top to bottom, each with its label and its members left to right.
    """
    bands = bands_of(names, tiers, edges, tier_names)
    neighbours: dict[str, set[str]] = {n: set() for n in names}
    for a, b in edges:
        if a in neighbours and b in neighbours:
            neighbours[a].add(b)
            neighbours[b].add(a)
    members = [list(b.members) for b in bands]
    for _ in range(SWEEPS):
        _sweep(members, neighbours, down=True)
        _sweep(members, neighbours, down=False)
    return [Band(b.label, tuple(m)) for b, m in zip(bands, members, strict=True)]
