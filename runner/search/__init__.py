"""Search methods, all on the shared move engine (:mod:`runner.search.engine`).

A local search is a callable ``(engine, budget) -> SearchOutcome``; :func:`local_search`
binds a method's own parameters and its seeded generator.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.first_ascent import first_ascent
from runner.search.hill_climb import hill_climb
from runner.search.restarts import DEFAULT_KICK, RunSummary, with_restarts
from runner.search.result import SearchOutcome, TraceRow
from runner.search.stochastic import stochastic_hill_climb
from runner.search.tabu import DEFAULT_PATIENCE, DEFAULT_TENURE, tabu_search

LocalSearch = Callable[[MoveEngine, Budget], SearchOutcome]

LOCAL_METHODS = ("hill-climb", "first-ascent", "stochastic", "tabu")


def local_search(
    method: str,
    rng: np.random.Generator,
    *,
    sample: float | int | None = None,
    tabu_tenure: int | None = None,
    patience: int | None = None,
) -> LocalSearch:
    """The local search called ``method`` with its parameters bound."""
    if method == "hill-climb":
        return partial(hill_climb, rng=rng)
    if method == "first-ascent":
        return partial(first_ascent, rng=rng, sample=sample)
    if method == "stochastic":
        return partial(stochastic_hill_climb, rng=rng)
    if method == "tabu":
        return partial(tabu_search, tenure=tabu_tenure or DEFAULT_TENURE,
                       patience=patience or DEFAULT_PATIENCE, rng=rng)
    raise ValueError(f"unknown local search {method!r}; known: {', '.join(LOCAL_METHODS)}")


__all__ = [
    "DEFAULT_KICK",
    "DEFAULT_PATIENCE",
    "DEFAULT_TENURE",
    "LOCAL_METHODS",
    "Budget",
    "Move",
    "MoveEngine",
    "RunSummary",
    "SearchOutcome",
    "TraceRow",
    "hill_climb",
    "local_search",
    "with_restarts",
]
