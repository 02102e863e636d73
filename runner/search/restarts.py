"""Perturbed restarts around any local search ("iterated local search"; Lourenço,
Martin & Stützle 2003).

After the first local optimum, each of ``restarts`` further runs starts from the best
graph so far perturbed by ``kick`` random legal moves (seeded), and runs the same local
search; the best result over all runs is kept. The budget is shared by all runs.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np

from runner.registry import RestartParams, default
from runner.search.budget import Budget
from runner.search.engine import MoveEngine
from runner.search.result import SearchOutcome, TraceRow

DEFAULT_KICK: int = default(RestartParams, "kick")


@dataclass(frozen=True)
class RunSummary:
    """One run of a restarted search: where it started and ended."""

    run: int
    kicks: int
    start_score: float
    end_score: float
    steps: int
    stop_reason: str


def kick(engine: MoveEngine, moves: int, rng: np.random.Generator) -> list[TraceRow]:
    """Apply ``moves`` legal moves drawn uniformly at random; return their trace rows."""
    rows = []
    for _ in range(moves):
        legal = engine.legal_moves()
        if not legal:
            break
        move, _ = legal[int(rng.integers(len(legal)))]
        delta = engine.apply(move)
        rows.append(TraceRow(0, f"kick-{move.kind}", move.source, move.target, delta,
                             engine.score))
    return rows


def with_restarts(
    local_search: Callable[[MoveEngine, Budget], SearchOutcome],
    make_engine: Callable[[Sequence[Sequence[int]]], MoveEngine],
    start: Sequence[Sequence[int]],
    budget: Budget,
    rng: np.random.Generator,
    restarts: int,
    kick_moves: int = DEFAULT_KICK,
    tick: Callable[[], None] | None = None,
) -> tuple[SearchOutcome, list[RunSummary]]:
    """Run ``local_search`` once from ``start``, then ``restarts`` times from kicked bests.

    ``tick`` (a progress bar's) is called after each run. The runs form a chain (each
    starts from the best graph so far and spends the shared budget), so they run in
    sequence, never as independent units on an engine.
    """
    base = budget.spent_steps  # steps spent before this call (earlier rounds) count too
    engine = make_engine(start)
    start_score = engine.score
    best = local_search(engine, budget)
    runs = [RunSummary(0, 0, start_score, best.score, best.steps, best.stop_reason)]
    trace = list(best.trace)
    steps, stop_reason = best.steps, best.stop_reason
    if tick is not None:
        tick()
    for run in range(1, restarts + 1):
        budget.spent_steps = base
        if budget.exhausted(steps, engine.scorer.evaluations) is not None:
            break
        engine = make_engine(best.parent_sets)
        if engine.stopped is not None:  # the budget ran out while its deltas were filled
            stop_reason = engine.stopped
            break
        kicked = kick(engine, kick_moves, rng)
        start_score = engine.score
        budget.spent_steps = base + steps
        outcome = local_search(engine, budget)
        runs.append(RunSummary(run, len(kicked), start_score, outcome.score, outcome.steps,
                               outcome.stop_reason))
        trace += [replace(r, step=steps) for r in kicked]
        trace += [replace(r, step=r.step + steps) for r in outcome.trace]
        steps += outcome.steps
        stop_reason = outcome.stop_reason
        if outcome.score > best.score + engine.tolerance():
            best = outcome
        if tick is not None:
            tick()
    budget.spent_steps = base
    final = replace(best, steps=steps, trace=trace, stop_reason=stop_reason,
                    evaluations=engine.scorer.evaluations, cache_hits=engine.scorer.hits,
                    seconds=budget.elapsed())
    return final, runs
