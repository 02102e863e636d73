"""What a search engine and the pipeline ask of a scorer: the :class:`Scorer` protocol.

A scorer binds one decomposable score to one data set. The engines ask for family scores
by (child, parent bitmask) or (child, parents), the pipeline for a DAG's total; both read
the counters for the record and the budget. :class:`~runner.scores.counts.CountScorer`
(discrete data, from count tables) and :class:`~runner.scores.gaussian.GaussianScorer`
(continuous data, from sufficient statistics) implement it, sharing the cache of
:class:`~runner.scores.cache.CachedScorer`.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Protocol, runtime_checkable

import numpy as np


@runtime_checkable
class Scorer(Protocol):
    """A cached decomposable score of one data set.

    ``evaluations`` counts family scores computed (cache misses), ``hits`` the answers
    served from the cache; both only grow.
    """

    @property
    def n_vars(self) -> int:
        """Number of variables (columns) of the data."""
        ...

    @property
    def evaluations(self) -> int:
        ...

    @property
    def hits(self) -> int:
        ...

    def family(self, child: int, parents: Iterable[int]) -> float:
        """Score of ``child`` given exactly ``parents``."""
        ...

    def family_by_mask(self, child: int, mask: int) -> float:
        """Score of ``child`` given the parents whose bits are set in ``mask``."""
        ...

    def column_scores(self, child: int, mask: int, candidates: Sequence[int]) -> np.ndarray:
        """Scores of ``child`` given ``mask`` with each candidate's bit flipped, as
        :meth:`family_by_mask` gives them one by one (the same cache and counters)."""
        ...

    def prefetch(self, requests: Iterable[tuple[int, int, Sequence[int]]]) -> int:
        """Compute ahead, in one batch, the families of these columns ``(child, mask,
        candidates)`` (``mask`` itself and each candidate's bit flipped) for the lookups
        that follow; answers, cache and counters stay those of the lookups alone."""
        ...

    def discard_ready(self) -> None:
        """Forget what :meth:`prefetch` computed and no lookup asked for."""
        ...

    def total(self, parent_sets: Iterable[Iterable[int]]) -> float:
        """Exactly rounded sum of the family scores of a DAG (one parent set per variable)."""
        ...
