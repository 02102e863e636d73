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

Memory (:func:`memory_estimate`): 16 bytes per (variable, subset) for the best scores and
sets, and at most 33 per subset for the sink tables, the subset sizes and the largest
temporaries of one vectorised pass, plus the scorer's cache of the candidate sets'
scores: (16 n + 33) 2^n bytes plus about 200 per cached score. Before anything is
allocated the estimate is held against the memory available (:func:`available_memory`);
a problem that would not fit is refused.

Budget: checked before each candidate set is scored, after each vectorised pass of step 2
and for each variable of each layer in step 3; a stop returns the required edges only.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

from runner.constraints import Constraints
from runner.registry import ExactParams, default
from runner.scores.cache import DEFAULT_CACHE_LIMIT, FamilyScorer, parent_mask
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


#: Bytes per (variable, subset): the best score inside the subset (float64) and that set.
PER_VARIABLE_SUBSET = 16
#: Bytes per subset: the best network's score and sink (8 + 8), the subset sizes (1), and
#: the largest temporaries of one pass: the indices, scores and masks of one layer of
#: subsets in step 3 (at most 16 per subset, a layer being at most C(n, n/2) of 2^n).
PER_SUBSET = 33
#: Bytes of one cached family score in the scorer's LRU cache (key tuple, float, links).
CACHE_ENTRY = 200


def memory_estimate(n: int, candidate_sets: int = 0) -> int:
    """Bytes the dynamic programme over ``n`` variables needs at its peak, with
    ``candidate_sets`` family scores to cache: ``(16 n + 33) 2^n`` plus 200 per cached
    score (the cache holds at most its limit)."""
    cached = min(candidate_sets, DEFAULT_CACHE_LIMIT)
    return (PER_VARIABLE_SUBSET * n + PER_SUBSET) * (1 << n) + CACHE_ENTRY * cached


def _meminfo_available(path: Path = Path("/proc/meminfo")) -> int | None:
    try:
        for line in path.read_text(encoding="ascii").splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cgroup_room(root: Path = Path("/sys/fs/cgroup")) -> int | None:
    """A cgroup memory limit less the group's usage (v2, then v1); None without one."""
    for limit_file, usage_file in (("memory.max", "memory.current"),
                                   ("memory/memory.limit_in_bytes",
                                    "memory/memory.usage_in_bytes")):
        try:
            limit = (root / limit_file).read_text(encoding="ascii").strip()
            usage = (root / usage_file).read_text(encoding="ascii").strip()
        except OSError:
            continue
        if not limit.isdigit() or not usage.isdigit() or int(limit) >= 1 << 60:
            return None  # "max", or v1's "no limit" (a huge number)
        return max(0, int(limit) - int(usage))
    return None


def _physical_memory() -> int | None:
    try:
        pages, size = os.sysconf("SC_PHYS_PAGES"), os.sysconf("SC_PAGE_SIZE")
    except (AttributeError, ValueError, OSError):
        return None
    return pages * size if pages > 0 and size > 0 else None


def available_memory() -> int | None:
    """Bytes of memory a new allocation can count on: the smaller of the system's
    available memory (``MemAvailable`` in ``/proc/meminfo``) and the room left under a
    cgroup memory limit; the physical memory when neither can be read; None (no check)
    when nothing can."""
    known = [v for v in (_meminfo_available(), _cgroup_room()) if v is not None]
    if known:
        return min(known)
    return _physical_memory()


def _gib(size: float) -> str:
    """A size for a message, in GiB: "about 13.5 GiB", "about 0.004 GiB"."""
    gib = size / 2**30
    if gib >= 0.1:
        return f"about {gib:.1f} GiB"
    return f"about {gib:.3f} GiB" if gib >= 0.001 else "less than 0.001 GiB"


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
            f"need {_gib(memory_estimate(n))} and 2^{n} subsets; use "
            "hill-climb or tabu, or order with a known order"))
    cap = constraints.cap()
    plans = []
    total = 0
    for v in range(n):
        forced, free = candidates_of(v, [u for u in range(n) if u != v], constraints)
        count = candidate_count(len(free), cap, len(forced))
        if count > candidate_limit:
            raise SearchRefused("parent_cap", (
                f"{names[v]!r} has {count:,} candidate parent sets, more than the limit of "
                f"{candidate_limit:,}; lower parent_cap or forbid edges"))
        plans.append((tuple(forced), tuple(free)))
        total += count
    needed, room = memory_estimate(n, total), available_memory()
    if room is not None and needed > room:
        raise SearchRefused("search.method", (
            f"exact search over {n} variables needs {_gib(needed)} of memory for its "
            f"tables (2^{n} subsets, {total:,} candidate parent sets; search.max_variables "
            f"{variable_limit}) but this machine has {_gib(room)} available; use "
            "hill-climb, tabu or ges, order with a known order, or fewer variables"))
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
        reason = _subset_max(best_score[v], best_set[v], n, budget)
        if reason is not None:
            return _stopped(scorer, constraints, budget, reason), counts
        if tick is not None:
            tick()

    # best sinks, layer by layer (sets of equal size)
    sizes = subset_sizes(n)
    network = np.full(1 << n, -np.inf)
    network[0] = 0.0
    sink = np.full(1 << n, -1, dtype=np.int64)
    for size in range(1, n + 1):
        layer = np.flatnonzero(sizes == size)
        for v in range(n):
            reason = budget.out_of_time()
            if reason is not None:
                return _stopped(scorer, constraints, budget, reason), counts
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


def subset_sizes(n: int) -> np.ndarray:
    """The number of members of every subset of ``n`` variables, indexed by bitmask
    (``uint8``; built by doubling, without a Python object per subset)."""
    sizes = np.zeros(1, dtype=np.uint8)
    for _ in range(n):
        sizes = np.concatenate([sizes, sizes + 1])
    return sizes


def _subset_max(score: np.ndarray, chosen: np.ndarray, n: int,
                budget: Budget | None = None) -> str | None:
    """In place: score[S] = max over subsets T of S of score[T], with the argmax in chosen.
    One vectorised pass per bit (a max-plus zeta transform). With ``budget``, its time is
    checked before each pass: the stop reason when it ran out (the arrays then half
    transformed), else None."""
    for u in range(n):
        if budget is not None and budget.out_of_time() is not None:
            return "max_seconds"
        block = 1 << u
        s = score.reshape(-1, 2, block)
        c = chosen.reshape(-1, 2, block)
        take = s[:, 0, :] >= s[:, 1, :]  # ties: the smaller set
        s[:, 1, :] = np.where(take, s[:, 0, :], s[:, 1, :])
        c[:, 1, :] = np.where(take, c[:, 0, :], c[:, 1, :])
    return None


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
