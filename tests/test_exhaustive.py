"""Search under a known order and exact search, against brute force enumeration."""

from __future__ import annotations

import itertools
from math import comb

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import Constraints, build_constraints
from runner.graph import is_acyclic
from runner.scores import build_scorer
from runner.search import Budget, MoveEngine, local_search, with_restarts
from runner.search.exact import exact_search
from runner.search.order import order_search
from runner.search.parent_sets import SearchRefused


def all_dags(n: int) -> list[list[tuple[int, ...]]]:
    """Every labelled DAG on n nodes as parent sets (brute force over edge marks)."""
    pairs = list(itertools.combinations(range(n), 2))
    out = []
    for marks in itertools.product((0, 1, 2), repeat=len(pairs)):
        parents: list[list[int]] = [[] for _ in range(n)]
        for (a, b), m in zip(pairs, marks, strict=True):
            if m == 1:
                parents[b].append(a)
            elif m == 2:
                parents[a].append(b)
        if is_acyclic(parents):
            out.append([tuple(sorted(p)) for p in parents])
    return out


DAGS = {n: all_dags(n) for n in range(1, 5)}


def test_dag_counts() -> None:
    # Robinson (1973), OEIS A003024: 1, 3, 25, 543 labelled DAGs on 1..4 nodes
    assert [len(DAGS[n]) for n in range(1, 5)] == [1, 3, 25, 543]


def random_codes(seed: int, n: int, rows: int = 200) -> np.ndarray:
    rng = np.random.default_rng(seed)
    codes = np.zeros((n, rows), dtype=np.uint8)
    for v in range(n):
        base = codes[: v].sum(axis=0) if v else np.zeros(rows, dtype=np.int64)
        codes[v] = np.where(rng.random(rows) < 0.6, base % 2, rng.integers(0, 2, rows))
    return codes


@st.composite
def small_problems(draw: st.DrawFn, low: int = 3, high: int = 4
                   ) -> tuple[np.ndarray, Constraints, list[str]]:
    n = draw(st.integers(low, high))
    names = [f"x{i}" for i in range(n)]
    codes = random_codes(draw(st.integers(0, 10_000)), n)
    perm = draw(st.permutations(names))
    tiers = [list(perm[:1]), list(perm[1:])] if draw(st.booleans()) else []
    forbidden = draw(st.lists(st.tuples(st.sampled_from(names), st.sampled_from(names))
                              .filter(lambda e: e[0] != e[1]), max_size=3, unique=True))
    cap = draw(st.none() | st.integers(1, 2))
    required: list[tuple[str, str]] = []
    if draw(st.booleans()):
        a, b = perm[0], perm[1]
        if (a, b) not in forbidden:
            required = [(a, b)]
    return codes, build_constraints(names, tiers, "allowed", forbidden, required, cap), names


def brute_best(scorer, constraints: Constraints, dags) -> float:  # type: ignore[no-untyped-def]
    return max(scorer.total(d) for d in dags if constraints.admits(d))


@settings(max_examples=30, deadline=None)
@given(small_problems())
def test_exact_equals_brute_force(problem: tuple[np.ndarray, Constraints, list[str]]) -> None:
    codes, constraints, names = problem
    scorer = build_scorer("bic", codes, [2] * len(names))
    outcome, _ = exact_search(scorer, constraints, Budget(), names)
    assert constraints.admits(outcome.parent_sets) and is_acyclic(outcome.parent_sets)
    assert outcome.score == pytest.approx(brute_best(scorer, constraints, DAGS[len(names)]),
                                          rel=1e-12)
    assert outcome.score == pytest.approx(scorer.total(outcome.parent_sets), rel=1e-12)
    assert outcome.stop_reason == "proven_optimal"


@settings(max_examples=30, deadline=None)
@given(small_problems(), st.data())
def test_order_equals_brute_force_over_consistent_dags(
    problem: tuple[np.ndarray, Constraints, list[str]], data: st.DataObject
) -> None:
    codes, constraints, names = problem
    n = len(names)
    order = data.draw(st.permutations(range(n)))
    position = {v: k for k, v in enumerate(order)}
    if any(position[i] > position[j] for i, j in constraints.required):
        with pytest.raises(SearchRefused):
            order_search(build_scorer("bic", codes, [2] * n), constraints, order, Budget(),
                         names)
        return
    scorer = build_scorer("bic", codes, [2] * n)
    outcome, _ = order_search(scorer, constraints, order, Budget(), names)
    consistent = [d for d in DAGS[n]
                  if all(position[p] < position[c] for c, ps in enumerate(d) for p in ps)]
    assert outcome.score == pytest.approx(brute_best(scorer, constraints, consistent),
                                          rel=1e-12)


def test_order_candidate_counts_follow_the_formula() -> None:
    # sum_{k=0}^{d} C(i-1, k) candidate sets for the variable at position i, no other rule
    n, cap = 7, 3
    names = [f"x{i}" for i in range(n)]
    scorer = build_scorer("bic", random_codes(1, n), [2] * n)
    order = [3, 0, 6, 1, 5, 2, 4]
    _, counts = order_search(scorer, build_constraints(names, parent_cap=cap), order,
                             Budget(), names)
    for i, v in enumerate(order, start=1):
        assert counts[names[v]] == sum(comb(i - 1, k) for k in range(cap + 1))


def test_refusals_name_the_limit() -> None:
    names = [f"x{i}" for i in range(6)]
    scorer = build_scorer("bic", random_codes(2, 6), [2] * 6)
    with pytest.raises(SearchRefused, match="limit 5"):
        exact_search(scorer, build_constraints(names), Budget(), names, variable_limit=5)
    with pytest.raises(SearchRefused, match="candidate parent sets"):
        order_search(scorer, build_constraints(names), list(range(6)), Budget(), names,
                     limit=10)


@settings(max_examples=15, deadline=None)
@given(st.integers(5, 8), st.integers(0, 10_000), st.sampled_from(
    ["hill-climb", "first-ascent", "stochastic", "tabu"]), st.none() | st.integers(1, 3))
def test_exact_is_never_beaten_by_a_heuristic(n: int, seed: int, method: str,
                                               cap: int | None) -> None:
    names = [f"x{i}" for i in range(n)]
    scorer = build_scorer("bic", random_codes(seed, n, rows=150), [2] * n)
    constraints = build_constraints(names, parent_cap=cap)
    best, _ = exact_search(scorer, constraints, Budget(), names)
    rng = np.random.default_rng(seed)
    empty: list[list[int]] = [[] for _ in names]
    heuristic, _ = with_restarts(local_search(method, rng), lambda ps: MoveEngine(
        scorer, constraints, ps), empty, Budget(), rng, restarts=1)
    assert heuristic.score <= best.score + 1e-9 * abs(best.score)
