"""Candidate parent sets of one variable under the constraints, for exhaustive methods.

Shared by the search under a known order and the exact search: both score every parent
set a variable may have (among given candidates, with at most ``cap`` members, always
containing the variable's required parents) and keep the best.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator, Sequence
from math import comb

from runner.constraints import Constraints
from runner.registry import CandidateParams, default

DEFAULT_CANDIDATE_LIMIT: int = default(CandidateParams, "max_candidate_sets")


class SearchRefused(Exception):
    """A problem an exhaustive method will not attempt; ``key`` is the spec key to change."""

    def __init__(self, key: str, message: str) -> None:
        super().__init__(message)
        self.key = key
        self.message = message


def candidate_count(free: int, cap: int, forced: int = 0) -> int:
    """How many parent sets contain the ``forced`` parents plus up to ``cap - forced`` of
    ``free`` others: sum_{k=0}^{cap-forced} C(free, k)."""
    room = cap - forced
    if room < 0:
        return 0
    return sum(comb(free, k) for k in range(min(room, free) + 1))


def candidates_of(child: int, pool: Sequence[int], constraints: Constraints
                  ) -> tuple[list[int], list[int]]:
    """Split a pool of possible parents into (forced, free): required ones, allowed others."""
    required = sorted(i for i, j in constraints.required if j == child)
    free = sorted(p for p in pool if constraints.allowed[p, child] and p not in required)
    return required, free


def parent_sets(forced: Sequence[int], free: Sequence[int], cap: int
                ) -> Iterator[tuple[int, ...]]:
    """Every parent set: ``forced`` plus up to ``cap - len(forced)`` of ``free``, smallest
    first, each sorted."""
    room = cap - len(forced)
    for k in range(max(-1, min(room, len(free))) + 1):
        for extra in itertools.combinations(free, k):
            yield tuple(sorted((*forced, *extra)))
