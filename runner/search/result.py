"""What a search returns: the graph, its score, why it stopped, and its trace."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from collections.abc import Callable

    from runner.search.budget import Budget
    from runner.search.engine import Move, MoveEngine


@dataclass(frozen=True)
class TraceRow:
    """One applied move: step number, kind, edge (as indices), delta and score after."""

    step: int
    move: str
    source: int
    target: int
    delta: float
    score: float


@dataclass(frozen=True)
class PhaseSummary:
    """One phase of a search that runs in phases: its name, steps applied, score after."""

    phase: str
    steps: int
    end_score: float


@dataclass
class SearchOutcome:
    parent_sets: list[tuple[int, ...]]
    score: float
    stop_reason: str
    steps: int
    evaluations: int
    cache_hits: int
    converged: bool
    seconds: float
    trace: list[TraceRow] = field(default_factory=list)
    phases: list[PhaseSummary] = field(default_factory=list)


def outcome_from(engine: MoveEngine, budget: Budget, steps: int, trace: list[TraceRow],
                 stop_reason: str) -> SearchOutcome:
    """The outcome of a local search that ends on the engine's current graph."""
    return SearchOutcome(
        parent_sets=engine.parent_sets(),
        score=engine.score,
        stop_reason=stop_reason,
        steps=steps,
        evaluations=engine.scorer.evaluations,
        cache_hits=engine.scorer.hits,
        converged=stop_reason == "local_optimum",
        seconds=budget.elapsed(),
        trace=trace,
    )


def climb(engine: MoveEngine, budget: Budget,
          choose: Callable[[MoveEngine], Move | None]) -> SearchOutcome:
    """The loop every improving local search shares: until the budget runs out, ask
    ``choose`` for a move (None at a local optimum), apply it and trace it. An engine
    whose first fill the budget stopped (``engine.stopped``) stops here, before any move."""
    trace: list[TraceRow] = []
    steps = 0
    while True:
        reason = engine.stopped or budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            return outcome_from(engine, budget, steps, trace, reason)
        move = choose(engine)
        if move is None:
            return outcome_from(engine, budget, steps, trace, "local_optimum")
        delta = engine.apply(move)
        steps += 1
        trace.append(TraceRow(steps, move.kind, move.source, move.target, delta, engine.score))
