"""Structural EM: structure search on incomplete discrete data (Friedman 1997, 1998).

Each round takes the current DAG's completion weights (:func:`runner.scores.expected.
em_weights`: EM for the DAG's tables, then each completion of an incomplete row weighted
by its posterior) and runs the spec's search method on the expected counts they give,
from the spec's start graph. The proposed DAG is kept when it improves the expected score
under the current weights (the condition under which Friedman 1997 shows the observed-data
score does not decrease); then its own weights are computed and the next round starts.
The rounds end when a round proposes the current DAG again, proposes no improvement, or
after ``max_rounds``.

Each round searches from the spec's start graph rather than from the current DAG: on
ASIA with 8% of cells missing, searches continued from the current DAG kept early edges
between the parents of a deterministic node (2 of 10 seeds exact), searches from the
start found the true skeleton in 10 of 10 (``tests/test_structural_em.py``).

Complexity: rounds x (one EM fit, :func:`~runner.scores.expected.em_weights`, plus one
search on expected-count family scores).

References
----------
Friedman, N. (1997). Learning belief networks in the presence of missing values and
hidden variables. Proceedings of ICML 1997, 125-133.
Friedman, N. (1998). The Bayesian structural EM algorithm. Proceedings of UAI 1998,
129-138.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Generic, TypeVar

from runner.scores.expected import ExpectedCountScorer, SelfWeightedScorer
from runner.search.engine import RELATIVE_TOLERANCE

#: The most rounds of structural EM.
MAX_ROUNDS = 10

T = TypeVar("T")


@dataclass
class EMRun(Generic[T]):
    """The search result kept, the scorer of its DAG's own weights, and one entry per
    round: ``{"round", "expected_score", "em_iterations", "edges", "kept"}``."""

    result: T
    scorer: ExpectedCountScorer
    parent_sets: list[tuple[int, ...]]
    converged: bool
    rounds: list[dict[str, float | int | bool]] = field(default_factory=list)


def _sorted(parent_sets: Sequence[Sequence[int]]) -> list[tuple[int, ...]]:
    return [tuple(sorted(ps)) for ps in parent_sets]


def structural_em(data: SelfWeightedScorer, search: Callable[[ExpectedCountScorer], T],
                  graph_of: Callable[[T], Sequence[Sequence[int]]],
                  start: Sequence[Sequence[int]], max_rounds: int = MAX_ROUNDS) -> EMRun[T]:
    """Alternate EM weights and structure search until the DAG is stable (module doc).

    Parameters
    ----------
    data
        The completions of the data and the score's name.
    search
        Runs the spec's search on one round's scorer (from the spec's start graph).
    graph_of
        The parent sets of a search result.
    start
        The spec's start graph (its required edges), whose weights the first round uses.
    max_rounds
        The most rounds.

    Returns
    -------
    EMRun
        The last kept search result with the scorer under its DAG's own weights.
    """
    current = _sorted(start)
    scorer = data.for_graph(current)
    kept: T | None = None
    rounds: list[dict[str, float | int | bool]] = []
    converged = False
    for number in range(1, max_rounds + 1):
        result = search(scorer)
        proposed = _sorted(graph_of(result))
        before, after = scorer.total(current), scorer.total(proposed)
        improves = after - before > RELATIVE_TOLERANCE * max(1.0, abs(before))
        same = proposed == current
        accept = kept is None or (improves and not same)
        rounds.append({"round": number, "expected_score": after,
                       "em_iterations": scorer.em_iterations,
                       "edges": sum(len(ps) for ps in proposed), "kept": accept})
        if accept:
            kept = result
            if not same:
                current = proposed
                scorer = data.for_graph(current)
        if same or not improves:
            converged = True
            break
    assert kept is not None
    return EMRun(kept, scorer, current, converged, rounds)
