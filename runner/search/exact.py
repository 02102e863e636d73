"""Exact structure search by dynamic programming over subsets.

The globally best DAG under the constraints, following Silander & Myllymäki (2006),
"A simple approach for finding the globally optimal Bayesian network structure"
(also Koivisto & Sood 2004):

1. local scores: every allowed parent set of every variable (at most ``parent_cap``
   parents, required parents always included) is scored once;
2. best parent sets: for every variable v and every candidate set S, the best parent
   set inside S, by a max-transform over subsets (one vectorised pass per bit);
3. best sinks: for every set W of variables, the best network on W ends in a sink s
   whose parents are the best inside W - {s}: best(W) = max_s best(W - {s}) + bps_s(W - {s});
4. the order and then the parents are read back from the sinks.

Complexity: O(n 2^n) time and memory for steps 2 and 3 (vectorised over the 2^n subsets),
plus one family score per candidate parent set in step 1.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from runner.constraints import Constraints
from runner.registry import ExactParams, default
from runner.scores.cache import FamilyScorer, parent_mask
from runner.search.budget import Budget
from runner.search.parent_sets import (
    DEFAULT_CANDIDATE_LIMIT,
    SearchRefused,
    candidate_count,
    candidates_of,
    parent_sets,
)
from runner.search.result import SearchOutcome

DEFAULT_VARIABLE_LIMIT: int = default(ExactParams, "max_variables")


def memory_estimate(n: int) -> int:
    """Bytes the dynamic programme needs: a float and a mask per (variable, subset), plus
    the sink tables."""
    return n * (1 << n) * (8 + 8) + (1 << n) * (8 + 8)


def exact_plan(constraints: Constraints, names: Sequence[str],
               variable_limit: int = DEFAULT_VARIABLE_LIMIT,
               candidate_limit: int = DEFAULT_CANDIDATE_LIMIT
               ) -> list[tuple[tuple[int, ...], tuple[int, ...]]]:
    """Per variable its forced and free candidate parents. Raises SearchRefused above
    ``variable_limit`` variables or ``candidate_limit`` candidate sets of one variable
    (checked before anything is scored)."""
    n = constraints.n_vars
    if n > variable_limit:
        raise SearchRefused("search.method", (
            f"exact search over {n} variables is refused (limit {variable_limit}): it would "
            f"need about {memory_estimate(n) / 2**30:.1f} GiB and 2^{n} subsets; use "
            "hill-climb or tabu, or order with a known order"))
    cap = constraints.cap()
    plans = []
    for v in range(n):
        forced, free = candidates_of(v, [u for u in range(n) if u != v], constraints)
        count = candidate_count(len(free), cap, len(forced))
        if count > candidate_limit:
            raise SearchRefused("parent_cap", (
                f"{names[v]!r} has {count:,} candidate parent sets, more than the limit of "
                f"{candidate_limit:,}; lower parent_cap or forbid edges"))
        plans.append((tuple(forced), tuple(free)))
    return plans


def exact_search(
    scorer: FamilyScorer,
    constraints: Constraints,
    budget: Budget,
    names: list[str],
    variable_limit: int = DEFAULT_VARIABLE_LIMIT,
    candidate_limit: int = DEFAULT_CANDIDATE_LIMIT,
    tick: Callable[[], None] | None = None,
) -> tuple[SearchOutcome, dict[str, int]]:
    """The optimal DAG; also the candidate parent sets scored per variable. ``tick`` (a
    progress bar's) is called once per variable scored and once per layer of subsets."""
    n = constraints.n_vars
    cap = constraints.cap()
    full = (1 << n) - 1
    plans = exact_plan(constraints, names, variable_limit, candidate_limit)

    counts: dict[str, int] = {}
    best_score = np.full((n, 1 << n), -np.inf)
    best_set = np.zeros((n, 1 << n), dtype=np.int64)
    for v, (forced, free) in enumerate(plans):
        scored = 0
        for candidate in parent_sets(forced, free, cap):
            reason = budget.exhausted(0, scorer.evaluations)
            if reason is not None:
                return _stopped(scorer, constraints, budget, reason), counts
            mask = parent_mask(candidate)
            best_score[v, mask] = scorer.family(v, candidate)
            best_set[v, mask] = mask
            scored += 1
        counts[names[v]] = scored
        _subset_max(best_score[v], best_set[v], n)
        if tick is not None:
            tick()

    # best sinks, layer by layer (sets of equal size)
    sizes = np.array([bin(m).count("1") for m in range(1 << n)])
    network = np.full(1 << n, -np.inf)
    network[0] = 0.0
    sink = np.full(1 << n, -1, dtype=np.int64)
    for size in range(1, n + 1):
        layer = np.flatnonzero(sizes == size)
        for v in range(n):
            bit = 1 << v
            members = layer[(layer & bit) != 0]
            rest = members ^ bit
            candidate = network[rest] + best_score[v, rest]
            better = candidate > network[members]  # strict: lowest v wins ties
            network[members[better]] = candidate[better]
            sink[members[better]] = v
        if tick is not None:
            tick()
    if not np.isfinite(network[full]):
        raise SearchRefused("required", "no DAG satisfies the constraints")
    parents: list[tuple[int, ...]] = [() for _ in range(n)]
    remaining = full
    while remaining:
        v = int(sink[remaining])
        remaining ^= 1 << v
        mask = int(best_set[v, remaining])
        parents[v] = tuple(u for u in range(n) if mask >> u & 1)
    outcome = SearchOutcome(
        parent_sets=parents, score=float(network[full]), stop_reason="proven_optimal",
        steps=0, evaluations=scorer.evaluations, cache_hits=scorer.hits, converged=True,
        seconds=budget.elapsed())
    return outcome, counts


def _subset_max(score: np.ndarray, chosen: np.ndarray, n: int) -> None:
    """In place: score[S] = max over subsets T of S of score[T], with the argmax in chosen.
    One vectorised pass per bit (a max-plus zeta transform)."""
    for u in range(n):
        block = 1 << u
        s = score.reshape(-1, 2, block)
        c = chosen.reshape(-1, 2, block)
        take = s[:, 0, :] >= s[:, 1, :]  # ties: the smaller set
        s[:, 1, :] = np.where(take, s[:, 0, :], s[:, 1, :])
        c[:, 1, :] = np.where(take, c[:, 0, :], c[:, 1, :])


def _stopped(scorer: FamilyScorer, constraints: Constraints, budget: Budget,
             reason: str) -> SearchOutcome:
    """A budget stop before the programme finished: the required edges only, not optimal."""
    start: list[list[int]] = [[] for _ in range(constraints.n_vars)]
    for i, j in sorted(constraints.required):
        start[j].append(i)
    parents = [tuple(ps) for ps in start]
    return SearchOutcome(parent_sets=parents, score=scorer.total(parents), stop_reason=reason,
                         steps=0, evaluations=scorer.evaluations, cache_hits=scorer.hits,
                         converged=False, seconds=budget.elapsed())
