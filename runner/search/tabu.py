"""Tabu search over DAGs (Glover 1989, "Tabu Search — Part I").

Two phases. The first is the greedy climb itself: :func:`runner.search.hill_climb.
hill_climb` with the run's seeded generator, so it draws from the generator exactly as
``hill-climb`` with the same seed does and reaches the same local optimum. The escape
phase then starts there. Each step applies the best legal move that is not tabu, even
when it lowers the score, so the search can walk out of the local optimum. A move is
tabu while the move that undoes it (add <-> delete of the same edge; a reversal <-> the
reversal back) was applied within the last ``tenure`` steps. Glover's aspiration
criterion lifts the ban on a tabu move that would reach a score better than any seen so
far. Moves tied within the engine's tolerance are chosen among by the same generator.
The best graph ever seen (the greedy optimum at least) is kept and returned, so the
result never scores below ``hill-climb`` with the same seed and budget. The escape phase
stops after ``patience`` consecutive steps without a new best or when no legal move is
left; either phase stops at the budget, which both share (steps count across them).

Complexity: the greedy phase as hill climbing; each escape step costs one greedy step
(O(n^2) selection over the delta table, O(n) family scores to refresh the one or two
changed columns), plus a second O(n^2) selection when the best move is tabu. The escape
phase takes at most ``patience`` steps after the last new best.
"""

from __future__ import annotations

from collections import deque

import numpy as np

from runner.registry import TabuParams, default
from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.hill_climb import hill_climb
from runner.search.result import SearchOutcome, TraceRow

DEFAULT_TENURE: int = default(TabuParams, "tabu_tenure")
DEFAULT_PATIENCE: int = default(TabuParams, "patience")


def undo_of(move: Move) -> Move:
    """The move that takes the graph back: delete after add, add after delete, and the
    reversal of the reversed edge after a reversal."""
    if move.kind == "add":
        return Move("delete", move.source, move.target)
    if move.kind == "delete":
        return Move("add", move.source, move.target)
    return Move("reverse", move.target, move.source)


def tabu_search(
    engine: MoveEngine,
    budget: Budget,
    tenure: int = DEFAULT_TENURE,
    patience: int = DEFAULT_PATIENCE,
    rng: np.random.Generator | None = None,
) -> SearchOutcome:
    """Greedy climb, then tabu escape, from the engine's graph; returns the best graph seen.

    With ``rng`` (the run's seeded generator) both phases break ties with it; without,
    by the fixed rule (kind, then source, then target).
    """
    greedy = hill_climb(engine, budget, rng=rng)
    if greedy.stop_reason != "local_optimum":  # the budget stopped the greedy phase
        return greedy
    recent: deque[Move] = deque(maxlen=tenure)
    trace: list[TraceRow] = list(greedy.trace)
    best_score, best_graph = greedy.score, greedy.parent_sets
    steps, since_best = greedy.steps, 0
    stop_reason = "patience"
    while since_best < patience:
        reason = budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            stop_reason = reason
            break
        tabu = {undo_of(m) for m in recent}
        choice = engine.best_move(rng=rng)
        if choice is not None and choice[0] in tabu and not (
            engine.score + choice[1] > best_score + engine.tolerance()
        ):  # the best move is tabu and does not aspire: the best non-tabu one instead
            choice = engine.best_move(exclude=tabu, rng=rng)
        if choice is None:
            stop_reason = "no_legal_move"
            break
        move, _ = choice
        delta = engine.apply(move)
        recent.append(move)
        steps += 1
        trace.append(TraceRow(steps, move.kind, move.source, move.target, delta, engine.score))
        if engine.score > best_score + engine.tolerance():
            best_score, best_graph, since_best = engine.score, engine.parent_sets(), 0
        else:
            since_best += 1
    return SearchOutcome(
        parent_sets=best_graph,
        score=best_score,
        stop_reason=stop_reason,
        steps=steps,
        evaluations=engine.scorer.evaluations,
        cache_hits=engine.scorer.hits,
        converged=stop_reason in ("patience", "no_legal_move"),
        seconds=budget.elapsed(),
        trace=trace,
    )
