"""Greedy hill climbing over DAGs.

At every step the best-improving legal move (add, delete or reverse one edge) is
applied, until no move improves the score or the budget runs out. This is the classic
greedy search of Heckerman, Geiger & Chickering (1995), section 6 ("local search");
moves whose deltas agree within the engine's tolerance (the two directions of a
score-equivalent edge, typically) are tied, and ties are broken by the seeded generator
of the run, or by move kind, source and target when none is given.

Complexity per step: O(n^2) to choose the move from the delta table and O(n) family
scores to refresh the one or two changed columns.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import partial

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import KINDS, Move, MoveEngine
from runner.search.result import SearchOutcome, climb


def steepest_move(engine: MoveEngine, rng: np.random.Generator | None = None,
                  kinds: Sequence[str] = KINDS) -> Move | None:
    """The best-improving legal move of one of ``kinds``, or None when none improves."""
    choice = engine.best_move(rng=rng, kinds=kinds)
    if choice is None or choice[1] <= engine.tolerance():
        return None
    return choice[0]


def hill_climb(engine: MoveEngine, budget: Budget,
               rng: np.random.Generator | None = None) -> SearchOutcome:
    """Greedy best-improvement hill climbing from the engine's current graph.

    With ``rng``, moves tied within the engine's tolerance are chosen among by the seeded
    generator; without, by the fixed rule (kind, then source, then target).
    """
    return climb(engine, budget, partial(steepest_move, rng=rng))
