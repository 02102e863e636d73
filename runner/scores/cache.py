"""A family scorer: counts, scores and caches families by (child, parent bitmask)."""

from __future__ import annotations

import math
from collections import OrderedDict
from collections.abc import Callable, Iterable

import numpy as np

from runner.scores.counts import family_counts

# Default bound on cached family scores (entries); least recently used ones are evicted.
DEFAULT_CACHE_LIMIT = 1_000_000


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


class FamilyScorer:
    """Scores families of one data set under one score, with a bounded LRU cache.

    ``evaluations`` counts family scores actually computed (cache misses); ``hits``
    counts answers served from the cache.
    """

    def __init__(
        self,
        function: Callable[[np.ndarray, int, int], float],
        codes: np.ndarray,
        arities: np.ndarray,
        cache_limit: int | None = None,
    ) -> None:
        self.function = function
        self.codes = codes
        self.arities = arities
        self.n_vars, self.n_rows = codes.shape
        self._start_cache(cache_limit)

    def _start_cache(self, cache_limit: int | None) -> None:
        self.cache_limit = DEFAULT_CACHE_LIMIT if cache_limit is None else cache_limit
        self._cache: OrderedDict[tuple[int, int], float] = OrderedDict()
        self.evaluations = 0
        self.hits = 0

    def _compute(self, child: int, mask: int) -> float:
        """The family score itself (a cache miss); other data kinds override this."""
        table, q = family_counts(self.codes, self.arities, child, mask_members(mask))
        return self.function(table, q, self.n_rows)

    def family(self, child: int, parents: Iterable[int]) -> float:
        """Score of ``child`` given exactly ``parents``."""
        return self.family_by_mask(child, parent_mask(parents))

    def family_by_mask(self, child: int, mask: int) -> float:
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
        return [self.family(child, ps) for child, ps in enumerate(parent_sets)]
