"""Greedy hill climbing over DAGs.

At every step the best-improving legal move (add, delete or reverse one edge) is
applied, until no move improves the score or the budget runs out. This is the classic
greedy search of Heckerman, Geiger & Chickering (1995), section 6 ("local search");
ties break deterministically by move kind (add, delete, reverse), then by source and
target in data column order.

Complexity per step: O(n^2) to choose the move from the delta table and O(n) family
scores to refresh the one or two changed columns.
"""

from __future__ import annotations

from runner.search.budget import Budget
from runner.search.engine import MoveEngine
from runner.search.result import SearchOutcome, TraceRow, outcome_from


def hill_climb(engine: MoveEngine, budget: Budget) -> SearchOutcome:
    """Greedy best-improvement hill climbing from the engine's current graph."""
    trace: list[TraceRow] = []
    steps = 0
    while True:
        reason = budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            return outcome_from(engine, budget, steps, trace, reason)
        choice = engine.best_move()
        if choice is None or choice[1] <= engine.tolerance():
            return outcome_from(engine, budget, steps, trace, "local_optimum")
        move, _ = choice
        delta = engine.apply(move)
        steps += 1
        trace.append(TraceRow(steps, move.kind, move.source, move.target, delta, engine.score))
