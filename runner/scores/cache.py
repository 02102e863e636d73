"""The family cache every scorer shares: family scores by (child, parent bitmask).

:class:`CachedScorer` keeps a bounded least-recently-used cache of family scores and the
counters of the :class:`~runner.scores.protocol.Scorer` protocol; a concrete scorer
(:class:`~runner.scores.counts.CountScorer`, :class:`~runner.scores.gaussian.GaussianScorer`)
only says how one family is scored (:meth:`CachedScorer._compute`).
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections import OrderedDict
from collections.abc import Iterable

from runner.scores.protocol import Scorer

# Default bound on cached family scores (entries); least recently used ones are evicted.
DEFAULT_CACHE_LIMIT = 1_000_000

#: The former name of a scorer's type, kept for annotations: the protocol.
FamilyScorer = Scorer


def parent_mask(parents: Iterable[int]) -> int:
    """Bitmask of a parent set (bit p set for parent p)."""
    mask = 0
    for p in parents:
        mask |= 1 << p
    return mask


def mask_members(mask: int) -> tuple[int, ...]:
    """Sorted members of a bitmask."""
    out = []
    while mask:
        low = mask & -mask
        out.append(low.bit_length() - 1)
        mask ^= low
    return tuple(out)


class CachedScorer(ABC):
    """Family scores of ``n_vars`` variables over ``n_rows`` rows, cached by (child,
    parent bitmask) in a bounded LRU cache (``cache_limit`` entries, default
    :data:`DEFAULT_CACHE_LIMIT`).

    ``evaluations`` counts family scores actually computed (cache misses); ``hits``
    counts answers served from the cache. Subclasses implement :meth:`_compute`.
    """

    def __init__(self, n_vars: int, n_rows: int, cache_limit: int | None = None) -> None:
        self.n_vars = n_vars
        self.n_rows = n_rows
        self.cache_limit = DEFAULT_CACHE_LIMIT if cache_limit is None else cache_limit
        self._cache: OrderedDict[tuple[int, int], float] = OrderedDict()
        self.evaluations = 0
        self.hits = 0

    @abstractmethod
    def _compute(self, child: int, mask: int) -> float:
        """The family score itself (a cache miss)."""

    def family(self, child: int, parents: Iterable[int]) -> float:
        """Score of ``child`` given exactly ``parents``."""
        return self.family_by_mask(child, parent_mask(parents))

    def family_by_mask(self, child: int, mask: int) -> float:
        """Score of ``child`` given the parents whose bits are set in ``mask``."""
        key = (child, mask)
        cached = self._cache.get(key)
        if cached is not None:
            self.hits += 1
            self._cache.move_to_end(key)
            return cached
        value = self._compute(child, mask)
        self.evaluations += 1
        self._cache[key] = value
        if len(self._cache) > self.cache_limit:
            self._cache.popitem(last=False)
        return value

    def total(self, parent_sets: Iterable[Iterable[int]]) -> float:
        """Sum of family scores of a DAG given as one parent set per variable, exactly
        rounded (``math.fsum``), so it does not depend on summation order."""
        return math.fsum(self.family(child, ps) for child, ps in enumerate(parent_sets))

    def families(self, parent_sets: Iterable[Iterable[int]]) -> list[float]:
        """Each variable's family score, in column order."""
        return [self.family(child, ps) for child, ps in enumerate(parent_sets)]
