"""Structural constraints as index arrays: which edges may exist, which must, the cap.

Built from the spec's tiers, ``within_tier``, ``forbidden``, ``required`` and
``parent_cap`` once the data's variable order is known, and, under the mixed score
(cg-bic), from the columns' kinds: a discrete variable may not have a continuous parent
(conditional Gaussian networks: Lauritzen 1992, JASA 87(420); Bottcher 2001), so every edge
continuous -> discrete is forbidden in the allowed-edge matrix, which every search method
reads. The move engine reads only this object, never the spec.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Constraints:
    """``allowed[i, j]`` is True when the edge i -> j may be present."""

    allowed: np.ndarray
    required: frozenset[tuple[int, int]]
    parent_cap: int | None

    @property
    def n_vars(self) -> int:
        return int(self.allowed.shape[0])

    def required_matrix(self) -> np.ndarray:
        out = np.zeros_like(self.allowed)
        for i, j in self.required:
            out[i, j] = True
        return out

    def cap(self) -> int:
        """The parent cap as a number (n - 1 when there is none)."""
        return self.n_vars - 1 if self.parent_cap is None else self.parent_cap

    def admits(self, parent_sets: Sequence[Sequence[int]]) -> bool:
        """True when a DAG (as parent sets) honours every constraint (acyclicity aside)."""
        for child, parents in enumerate(parent_sets):
            if len(parents) > self.cap():
                return False
            if any(not self.allowed[p, child] for p in parents):
                return False
        return all(i in parent_sets[j] for i, j in self.required)


def build_constraints(
    names: Sequence[str],
    tiers: Sequence[Sequence[str]] = (),
    within_tier: str = "allowed",
    forbidden: Sequence[Sequence[str]] = (),
    required: Sequence[Sequence[str]] = (),
    parent_cap: int | None = None,
    kinds: Sequence[str] | None = None,
) -> Constraints:
    """Constraints over ``names`` from tier lists and edge lists given by name.

    A variable in no tier is unconstrained by tiers. Edges from a later tier to an
    earlier one are never allowed; edges within a tier only when ``within_tier`` is
    ``"allowed"``. With ``kinds`` (one per name, ``"discrete"`` or ``"continuous"``: the
    mixed score's columns) no edge goes from a continuous variable into a discrete one.
    """
    index = {name: i for i, name in enumerate(names)}
    n = len(names)
    allowed = ~np.eye(n, dtype=bool)
    tier_of = np.full(n, -1, dtype=np.int64)
    for t, tier in enumerate(tiers):
        for name in tier:
            tier_of[index[name]] = t
    tiered = tier_of >= 0
    both = tiered[:, None] & tiered[None, :]
    later_to_earlier = tier_of[:, None] > tier_of[None, :]
    allowed &= ~(both & later_to_earlier)
    if within_tier == "forbidden":
        same = tier_of[:, None] == tier_of[None, :]
        allowed &= ~(both & same)
    for a, b in forbidden:
        allowed[index[a], index[b]] = False
    if kinds is not None:
        allowed &= ~kind_forbidden(kinds)
    required_idx = frozenset((index[a], index[b]) for a, b in required)
    return Constraints(allowed=allowed, required=required_idx, parent_cap=parent_cap)


def kind_forbidden(kinds: Sequence[str]) -> np.ndarray:
    """``out[i, j]`` True when ``i`` is continuous and ``j`` discrete: the edges a
    conditional Gaussian network may not have (a discrete child with a continuous
    parent)."""
    continuous = np.array([k == "continuous" for k in kinds], dtype=bool)
    return continuous[:, None] & ~continuous[None, :]
