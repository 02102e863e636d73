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
from collections.abc import Iterable, Sequence
from typing import TypeVar

import numpy as np

from runner.scores.protocol import Scorer

# Default bound on cached family scores (entries); least recently used ones are evicted.
DEFAULT_CACHE_LIMIT = 1_000_000
# The default grows with the problem to hold the move engine's first sweep twice over
# (2 n (n - 1) families), but never past this many entries: at about 250 bytes an entry
# (measured with tracemalloc, 400-bit masks), about half a GiB.
MAX_CACHE_LIMIT = 2_000_000


def cache_limit_for(n_vars: int) -> int:
    """The default cache bound of ``n_vars`` variables: :data:`DEFAULT_CACHE_LIMIT`, or
    room for 2 n (n - 1) families when that is more, at most :data:`MAX_CACHE_LIMIT`."""
    return min(max(DEFAULT_CACHE_LIMIT, 2 * n_vars * (n_vars - 1)), MAX_CACHE_LIMIT)

#: A column of families: ``(child, mask, candidates)``, the child given ``mask`` with each
#: candidate's bit flipped.
ColumnRequest = tuple[int, int, Sequence[int]]

T = TypeVar("T")

def by_request(values: Sequence[T], requests: Sequence[ColumnRequest]) -> list[list[T]]:
    """``values`` given one per family of ``requests`` in order, cut into one list per
    request (its candidates' values)."""
    out: list[list[T]] = []
    at = 0
    for _, _, candidates in requests:
        out.append(list(values[at:at + len(candidates)]))
        at += len(candidates)
    return out


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
    :func:`cache_limit_for` the number of variables).

    ``evaluations`` counts family scores actually computed (cache misses); ``hits``
    counts answers served from the cache. Subclasses implement :meth:`_compute`, and
    may implement :meth:`_compute_column` (several families of one child at once) and
    :meth:`_compute_batch` (several columns at once: on a pool's workers, or where the
    rows live).

    Batches ahead. :meth:`prefetch` computes the misses of columns a search is about to
    ask for in one :meth:`_compute_batch` and keeps them aside (not in the cache, not
    counted); a later lookup takes a kept value instead of computing it, and only then
    caches and counts it. So the answers, the cache, the counters and a budget's stopping
    place are exactly those of the lookups alone, whatever was computed ahead.
    ``batches`` says whether a prefetch pays (False here: the lookups compute the same).
    """

    #: Whether :meth:`prefetch` computes anything (a scorer with a batch backend).
    batches = False

    def __init__(self, n_vars: int, n_rows: int, cache_limit: int | None = None) -> None:
        self.n_vars = n_vars
        self.n_rows = n_rows
        self.cache_limit = cache_limit_for(n_vars) if cache_limit is None else cache_limit
        self._cache: OrderedDict[tuple[int, int], float] = OrderedDict()
        self.evaluations = 0
        self.hits = 0
        self._ready: dict[tuple[int, int], float] = {}

    @abstractmethod
    def _compute(self, child: int, mask: int) -> float:
        """The family score itself (a cache miss)."""

    def _compute_column(self, child: int, mask: int, candidates: Sequence[int]) -> list[float]:
        """The scores of ``child`` given ``mask`` with each candidate's bit flipped (cache
        misses all); one :meth:`_compute` each unless a subclass does better."""
        return [self._compute(child, mask ^ (1 << p)) for p in candidates]

    def _compute_batch(self, requests: Sequence[ColumnRequest]) -> list[list[float]]:
        """The scores of several columns' families (cache misses all): for each request
        ``(child, mask, candidates)``, ``child`` given ``mask`` with each candidate's bit
        flipped, in order; one :meth:`_compute_column` each unless a subclass does better.
        A candidate equal to the child stands for ``mask`` itself (the column's base)."""
        return [self._column_with_base(child, mask, candidates)
                for child, mask, candidates in requests]

    def _column_with_base(self, child: int, mask: int, candidates: Sequence[int]) -> list[float]:
        """:meth:`_compute_column`, with the child itself standing for ``mask`` unflipped."""
        flips = [p for p in candidates if p != child]
        values = iter(self._compute_column(child, mask, flips))
        return [self._compute(child, mask) if p == child else next(values) for p in candidates]

    def prefetch(self, requests: Iterable[ColumnRequest]) -> int:
        """Compute ahead, in one batch, the families of these columns (each ``child``
        given ``mask`` itself and with each candidate's bit flipped) that are neither
        cached nor kept aside already; keep them aside for the lookups that follow.
        Returns how many were computed (none unless :attr:`batches`)."""
        if not self.batches:
            return 0
        cache, ready = self._cache, self._ready
        todo: list[tuple[int, int, list[int]]] = []
        for child, mask, candidates in requests:
            wanted = [p for p in (child, *candidates)
                      if (key := (child, mask if p == child else mask ^ (1 << p))) not in cache
                      and key not in ready]
            if wanted:
                todo.append((child, mask, wanted))
        if not todo:
            return 0
        computed = 0
        for (child, mask, wanted), values in zip(todo, self._compute_batch(todo), strict=True):
            for p, value in zip(wanted, values, strict=True):
                ready[(child, mask if p == child else mask ^ (1 << p))] = value
            computed += len(wanted)
        return computed

    def discard_ready(self) -> None:
        """Forget the values computed ahead and not asked for (a search that stopped)."""
        self._ready.clear()

    def _take(self, child: int, mask: int) -> float:
        """A miss: the value computed ahead, else computed now."""
        value = self._ready.pop((child, mask), None)
        return self._compute(child, mask) if value is None else value

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
        value = self._take(child, mask)
        self.evaluations += 1
        self._cache[key] = value
        if len(self._cache) > self.cache_limit:
            self._cache.popitem(last=False)
        return value

    def column_scores(self, child: int, mask: int, candidates: Sequence[int]) -> np.ndarray:
        """Scores of ``child`` given ``mask`` with the bit of each of ``candidates``
        (distinct variables other than ``child``) flipped: a parent removed, another
        added. The answers, the cache and the counters are exactly those of
        :meth:`family_by_mask` called for each candidate in turn; the misses are computed
        together (:meth:`_compute_column`).
        """
        keys = [(child, mask ^ (1 << p)) for p in candidates]
        if len(set(keys)) != len(keys) or any(p == child for p in candidates):
            raise ValueError("the candidates must be distinct variables other than the child")
        cache = self._cache
        if len(cache) + len(keys) > self.cache_limit:
            # evictions could interleave with the lookups: ask one family at a time
            return np.array([self.family_by_mask(c, m) for c, m in keys], dtype=np.float64)
        missing = [p for p, key in zip(candidates, keys, strict=True) if key not in cache]
        computed: dict[int, float] = {}
        ready = self._ready
        if ready:
            for p in missing:
                value = ready.pop((child, mask ^ (1 << p)), None)
                if value is not None:
                    computed[p] = value
            missing = [p for p in missing if p not in computed]
        computed.update(zip(missing, self._compute_column(child, mask, missing), strict=True))
        out = np.empty(len(keys), dtype=np.float64)
        for i, (p, key) in enumerate(zip(candidates, keys, strict=True)):
            value = computed.get(p)
            if value is None:  # a hit: refreshed in the order the lookups make
                value = cache[key]
                cache.move_to_end(key)
                self.hits += 1
            else:
                cache[key] = value
                self.evaluations += 1
            out[i] = value
        return out

    def total(self, parent_sets: Iterable[Iterable[int]]) -> float:
        """Sum of family scores of a DAG given as one parent set per variable, exactly
        rounded (``math.fsum``), so it does not depend on summation order."""
        return math.fsum(self.family(child, ps) for child, ps in enumerate(parent_sets))

    def families(self, parent_sets: Iterable[Iterable[int]]) -> list[float]:
        """Each variable's family score, in column order."""
        return [self.family(child, ps) for child, ps in enumerate(parent_sets)]
