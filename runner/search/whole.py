"""The whole-graph searches (ges, order, exact) behind one signature, for the registry.

Each method's ``run(params, task) -> Found`` takes its parameter model (see
:mod:`runner.registry`) and a :class:`SearchTask`, and returns the outcome with the
record's ``search.parameters`` and its extra ``search`` fields. A ``plan(params,
context)`` hook says, before any score is computed, why a problem would be refused
(a :class:`~runner.registry.Refusal`), or None.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from runner.constraints import Constraints
from runner.registry import ExactParams, OrderParams, Params, Refusal
from runner.scores.cache import FamilyScorer
from runner.search.budget import Budget
from runner.search.exact import exact_plan, exact_search
from runner.search.ges import greedy_equivalence_search
from runner.search.order import order_plan, order_search
from runner.search.parent_sets import SearchRefused
from runner.search.result import SearchOutcome


@dataclass(frozen=True)
class PlanContext:
    """What a search may know before any score is computed."""

    names: tuple[str, ...]
    tiers: tuple[tuple[str, ...], ...]
    constraints: Constraints


@dataclass(frozen=True)
class SearchTask:
    """A search to run: the context, the scorer, the budget, the seeded generator, the
    start graph (the required edges) and an optional progress tick."""

    context: PlanContext
    scorer: FamilyScorer
    budget: Budget
    rng: np.random.Generator
    start: Sequence[Sequence[int]]
    tick: Callable[[], None] | None = None


@dataclass(frozen=True)
class Found:
    """A search's outcome, its recorded parameters and extra ``search`` record fields."""

    outcome: SearchOutcome
    parameters: dict[str, Any]
    extra: dict[str, Any]


def _order_params(params: Params) -> OrderParams:
    assert isinstance(params, OrderParams)
    return params


def _exact_params(params: Params) -> ExactParams:
    assert isinstance(params, ExactParams)
    return params


def total_order(order: Sequence[str] | None, context: PlanContext) -> list[int]:
    """The variable order for ``order`` search: ``search.order`` when given, else the
    tiers in sequence, each tier's variables in the order the spec lists them (the
    documented refinement of a tier with several variables). Every variable must appear.
    """
    names = context.names
    index = {n: i for i, n in enumerate(names)}
    listed = list(order) if order else [v for t in context.tiers for v in t]
    key = "search.order" if order else "tiers"
    missing = [n for n in names if n not in listed]
    if missing:
        raise SearchRefused(key, (
            f"search method 'order' needs a total order of all variables; {key} misses "
            + ", ".join(repr(m) for m in missing)
            + ("" if order else "; list them in tiers or give search.order")))
    repeated = sorted({n for n in listed if listed.count(n) > 1})
    if repeated:
        raise SearchRefused(key, f"{key} lists {', '.join(map(repr, repeated))} more than once")
    return [index[n] for n in listed]


def _refusal(refused: SearchRefused) -> Refusal:
    return Refusal(refused.key, refused.message)


# --------------------------------------------------------------------------- ges


def run_ges(params: Params, task: SearchTask) -> Found:
    """Greedy Equivalence Search (Chickering 2002) from the class of the start graph."""
    outcome = greedy_equivalence_search(task.scorer, task.context.constraints, task.budget,
                                        task.rng, task.start)
    return Found(outcome, {}, {"proven_optimal": False, "phases": [
        {"phase": p.phase, "steps": p.steps, "end_score": p.end_score}
        for p in outcome.phases]})


# --------------------------------------------------------------------------- order


def plan_order(params: Params, context: PlanContext) -> Refusal | None:
    p = _order_params(params)
    try:
        order_plan(context.constraints, total_order(p.order, context), context.names,
                   p.max_candidate_sets)
    except SearchRefused as refused:
        return _refusal(refused)
    return None


def run_order(params: Params, task: SearchTask) -> Found:
    """The best DAG for a known total order (Cooper & Herskovits 1992, done exactly)."""
    p, names = _order_params(params), task.context.names
    order = total_order(p.order, task.context)
    outcome, counts = order_search(task.scorer, task.context.constraints, order, task.budget,
                                   list(names), limit=p.max_candidate_sets)
    return Found(outcome, {"order": [names[v] for v in order],
                           "max_candidate_sets": p.max_candidate_sets},
                 {"candidate_sets": counts, "proven_optimal": False,
                  "optimal_for_order": outcome.converged})


# --------------------------------------------------------------------------- exact


def plan_exact(params: Params, context: PlanContext) -> Refusal | None:
    p = _exact_params(params)
    try:
        exact_plan(context.constraints, context.names, p.max_variables, p.max_candidate_sets)
    except SearchRefused as refused:
        return _refusal(refused)
    return None


def run_exact(params: Params, task: SearchTask) -> Found:
    """The optimal DAG by dynamic programming over subsets (Silander & Myllymäki 2006)."""
    p = _exact_params(params)
    outcome, counts = exact_search(task.scorer, task.context.constraints, task.budget,
                                   list(task.context.names), variable_limit=p.max_variables,
                                   candidate_limit=p.max_candidate_sets, tick=task.tick)
    return Found(outcome, dict(p.effective()),
                 {"candidate_sets": counts, "proven_optimal": outcome.converged})
