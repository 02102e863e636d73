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
from runner.search.engine import Move, MoveEngine
from runner.search.result import SearchOutcome, climb


def steepest_move(engine: MoveEngine) -> Move | None:
    """The best-improving legal move, or None when no move improves."""
    choice = engine.best_move()
    if choice is None or choice[1] <= engine.tolerance():
        return None
    return choice[0]


def hill_climb(engine: MoveEngine, budget: Budget) -> SearchOutcome:
    """Greedy best-improvement hill climbing from the engine's current graph."""
    return climb(engine, budget, steepest_move)
