"""Tabu search over DAGs (Glover 1989, "Tabu Search — Part I").

Each step applies the best legal move that is not tabu, even when it lowers the score,
so the search can walk out of a local optimum. A move is tabu while the move that
undoes it (add <-> delete of the same edge; a reversal <-> the reversal back) was
applied within the last ``tenure`` steps. Glover's aspiration criterion lifts the ban
on a tabu move that would reach a score better than any seen so far. The best graph
ever seen is kept and returned. The search stops after ``patience`` consecutive steps
without a new best, when no legal move is left, or at the budget.

Complexity per step: that of one greedy step (O(n^2) selection, O(n) family scores).
"""

from __future__ import annotations

from collections import deque

from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.result import SearchOutcome, TraceRow

DEFAULT_TENURE = 10
DEFAULT_PATIENCE = 50


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
) -> SearchOutcome:
    """Tabu search from the engine's graph; returns the best graph seen."""
    recent: deque[Move] = deque(maxlen=tenure)
    trace: list[TraceRow] = []
    best_score, best_graph = engine.score, engine.parent_sets()
    steps = since_best = 0
    stop_reason = "patience"
    while since_best < patience:
        reason = budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            stop_reason = reason
            break
        tabu = {undo_of(m) for m in recent}
        choice = engine.best_move(exclude=tabu)
        aspirant = engine.best_move()
        if aspirant is not None and aspirant[0] in tabu and (
            engine.score + aspirant[1] > best_score + engine.tolerance()
        ):
            choice = aspirant
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
