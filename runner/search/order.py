"""Search under a known total order of the variables.

When the variables are totally ordered, every DAG consistent with the order is chosen
by picking each variable's parents among its predecessors independently, and because
the score decomposes, the best DAG for the order takes each variable's best parent set.
This is the setting of K2 (Cooper & Herskovits 1992), done here exactly: every
candidate set of at most ``parent_cap`` predecessors is scored, rather than grown
greedily. For the variable at position i (1-based) with no other constraint that is
sum_{k=0}^{d} C(i - 1, k) candidate sets, d the cap.

Complexity: sum over variables of their candidate-set counts, each one family score.

Budget: checked before each variable and every few candidate sets within one; a variable
cut short keeps the best set scored so far (its required parents at least), the later
ones their required parents.
"""

from __future__ import annotations

from collections.abc import Sequence

from runner.constraints import Constraints
from runner.scores.cache import FamilyScorer
from runner.search.budget import FILL_SLICE, Budget
from runner.search.parent_sets import (
    DEFAULT_CANDIDATE_LIMIT,
    SearchRefused,
    candidate_count,
    candidates_of,
    parent_sets,
)
from runner.search.result import SearchOutcome


def order_plan(constraints: Constraints, order: Sequence[int], names: Sequence[str],
               limit: int = DEFAULT_CANDIDATE_LIMIT
               ) -> list[tuple[int, tuple[int, ...], tuple[int, ...]]]:
    """Per variable in ``order``: its forced and free candidate parents among its
    predecessors. Raises SearchRefused when a required parent comes later or a variable
    has more than ``limit`` candidate sets (checked before anything is scored)."""
    cap = constraints.cap()
    plan = []
    for position, child in enumerate(order):
        forced, free = candidates_of(child, order[:position], constraints)
        missing = [p for p in forced if p not in order[:position]]
        if missing:
            raise SearchRefused("search.order", f"required parent {names[missing[0]]!r} of "
                                f"{names[child]!r} comes after it in the order")
        count = candidate_count(len(free), cap, len(forced))
        if count > limit:
            raise SearchRefused("search.method", f"{names[child]!r} has {count:,} candidate "
                                f"parent sets under this order, more than the limit of "
                                f"{limit:,}; lower parent_cap or forbid edges")
        plan.append((child, tuple(forced), tuple(free)))
    return plan


def order_search(
    scorer: FamilyScorer,
    constraints: Constraints,
    order: Sequence[int],
    budget: Budget,
    names: Sequence[str],
    limit: int = DEFAULT_CANDIDATE_LIMIT,
) -> tuple[SearchOutcome, dict[str, int]]:
    """The best DAG consistent with ``order``; also the candidate sets scored per variable."""
    cap = constraints.cap()
    plan = order_plan(constraints, order, names, limit)
    best: list[tuple[int, ...]] = [() for _ in order]
    for child, forced, _ in plan:
        best[child] = tuple(forced)
    counts: dict[str, int] = {}
    score = 0.0
    stop_reason = "exhaustive"
    for child, forced, free in plan:
        scored = 0
        top, top_set = float("-inf"), tuple(forced)
        for candidate in parent_sets(forced, free, cap):
            if scored % FILL_SLICE == 0:
                reason = budget.exhausted(0, scorer.evaluations)
                if reason is not None:
                    stop_reason = reason
                    break
            value = scorer.family(child, candidate)
            scored += 1
            if value > top:  # strict: the first (smallest, then lexicographic) set wins ties
                top, top_set = value, candidate
        if scored or stop_reason == "exhaustive":
            best[child] = top_set
            counts[names[child]] = scored
        if stop_reason != "exhaustive":
            break
        score += top
    if stop_reason != "exhaustive":
        score = scorer.total(best)
    return SearchOutcome(
        parent_sets=best, score=score, stop_reason=stop_reason, steps=0,
        evaluations=scorer.evaluations, cache_hits=scorer.hits,
        converged=stop_reason == "exhaustive", seconds=budget.elapsed(),
    ), counts
