"""What a search returns: the graph, its score, why it stopped, and its trace."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from runner.search.budget import Budget
    from runner.search.engine import MoveEngine


@dataclass(frozen=True)
class TraceRow:
    """One applied move: step number, kind, edge (as indices), delta and score after."""

    step: int
    move: str
    source: int
    target: int
    delta: float
    score: float


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
