"""Search methods, all on the shared move engine (:mod:`runner.search.engine`).

A local search is a callable ``(engine, budget) -> SearchOutcome``; :func:`local_search`
binds a registered local method (:data:`runner.registry.METHODS`) with its parameters and
its seeded generator.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial
from typing import Any

import numpy as np

from runner import registry
from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.hill_climb import hill_climb
from runner.search.restarts import RunSummary, with_restarts
from runner.search.result import SearchOutcome, TraceRow

LocalSearch = Callable[[MoveEngine, Budget], SearchOutcome]

LOCAL_METHODS: tuple[str, ...] = tuple(m.name for m in registry.METHODS if m.kind == "local")


def local_search(method: str, rng: np.random.Generator, **parameters: Any) -> LocalSearch:
    """The local search called ``method`` with its parameters bound.

    ``parameters`` are ``search:`` keys (e.g. ``tabu_tenure``, ``patience``, ``sample``);
    those the method does not take are ignored, and null ones get their defaults.
    """
    entry = registry.method(method) if method in LOCAL_METHODS else None
    if entry is None:
        raise ValueError(f"unknown local search {method!r}; known: {', '.join(LOCAL_METHODS)}")
    unknown = sorted(set(parameters) - set(registry.search_keys()))
    if unknown:
        raise TypeError(f"unknown search parameters: {', '.join(unknown)}")
    params = entry.params.pick({k: v for k, v in parameters.items() if v is not None})
    return partial(entry.local(), rng=rng, **params.arguments())


__all__ = [
    "LOCAL_METHODS",
    "Budget",
    "LocalSearch",
    "Move",
    "MoveEngine",
    "RunSummary",
    "SearchOutcome",
    "TraceRow",
    "hill_climb",
    "local_search",
    "with_restarts",
]
