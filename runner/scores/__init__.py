"""Decomposable family scores.

A score here is a function of one family's count table: ``f(table, q, n_rows) -> float``.
The total score of a DAG is the sum of its family scores. :func:`build_scorer` binds a
score to encoded data and returns a :class:`~runner.scores.cache.FamilyScorer`, which
counts and caches families by (child, parent set). The scores of continuous data
(:mod:`runner.scores.gaussian`) work from sufficient statistics instead of counts;
:func:`build_gaussian_scorer` binds them, to the same scorer interface; the mixed score
(:mod:`runner.scores.conditional_gaussian`) is bound by :func:`build_cg_scorer`. Which scores
exist, their parameters and defaults are the registry's (:mod:`runner.registry`).
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial

import numpy as np

from runner import registry
from runner.scores.cache import FamilyScorer
from runner.scores.conditional_gaussian import ConditionalGaussianScorer, build_cg_scorer
from runner.scores.counts import CountScorer
from runner.scores.dirichlet import DEFAULT_ESS
from runner.scores.gaussian import (
    GaussianScorer,
    bge_prior,
    gaussian_family_function,
    sufficient_statistics,
)

FamilyScore = Callable[[np.ndarray, int, int], float]

DISCRETE_SCORES: dict[str, FamilyScore] = {
    entry.name: entry.family.load() for entry in registry.SCORES if entry.family is not None
}
GAUSSIAN_SCORES: tuple[str, ...] = registry.scores_of_kind("continuous")

SCORE_EQUIVALENT = registry.SCORE_EQUIVALENT_SCORES


def family_function(name: str, ess: float = DEFAULT_ESS) -> FamilyScore:
    """The family score called ``name``; ``ess`` is BDeu's equivalent sample size (the
    keys a score does not take are not passed to it)."""
    if name not in DISCRETE_SCORES:
        raise ValueError(f"unknown score {name!r}; known: {', '.join(DISCRETE_SCORES)}")
    arguments = registry.score(name).params.pick({"ess": ess}).arguments()
    function = DISCRETE_SCORES[name]
    return partial(function, **arguments) if arguments else function


def build_scorer(
    name: str,
    codes: np.ndarray,
    arities: np.ndarray | list[int],
    ess: float = DEFAULT_ESS,
    cache_limit: int | None = None,
) -> FamilyScorer:
    """A cached family scorer of score ``name`` over ``codes`` (shape n_vars x n_rows)."""
    return CountScorer(
        family_function(name, ess), codes, np.asarray(arities, dtype=np.int64), cache_limit
    )


def build_gaussian_scorer(
    name: str,
    values: np.ndarray,
    *,
    alpha_mu: float | None = None,
    alpha_w: float | None = None,
    prior_scale: float | None = None,
    cache_limit: int | None = None,
) -> GaussianScorer:
    """A cached scorer of Gaussian score ``name`` over ``values`` (n_vars x n_rows floats).

    The sufficient statistics are computed here, once. BGe's prior keys (None: the
    documented defaults) are ignored by the other scores; ``ValueError`` for bad ones.
    """
    stats = sufficient_statistics(values)
    bge = name in registry.SCORE_NAMES and registry.score(name).params is registry.BGeParams
    prior = bge_prior(stats.n_vars, alpha_mu, alpha_w, prior_scale) if bge else None
    return GaussianScorer(gaussian_family_function(name, prior), stats, cache_limit)


__all__ = [
    "DISCRETE_SCORES",
    "GAUSSIAN_SCORES",
    "SCORE_EQUIVALENT",
    "ConditionalGaussianScorer",
    "FamilyScorer",
    "GaussianScorer",
    "build_cg_scorer",
    "build_gaussian_scorer",
    "build_scorer",
]
