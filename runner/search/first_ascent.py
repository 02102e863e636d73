"""First-ascent hill climbing: apply the first improving move met, not the best one.

Each step visits the legal moves in a fresh seeded random order and applies the first
whose delta is an improvement ("first improvement" local search; Hansen & Mladenović
2006 compare it with best improvement). With ``sample`` — a share in (0, 1] or a count
of the neighbours — only that many moves, drawn at random, are tried in a step; a step
whose sample holds no improving move tries the remaining moves, so the search still
stops only when a full pass finds no improvement (a true local optimum) or at the budget.

Complexity per step: O(n^2) to list the legal moves; the scan stops at the first gain.
"""

from __future__ import annotations

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import MoveEngine
from runner.search.result import SearchOutcome, TraceRow, outcome_from


def sample_size(sample: float | int | None, total: int) -> int:
    """Moves tried first in a step: all, a share (float in (0, 1]) or a count (int)."""
    if sample is None:
        return total
    if isinstance(sample, float):
        return max(1, min(total, int(np.ceil(sample * total))))
    return max(1, min(total, sample))


def first_ascent(
    engine: MoveEngine,
    budget: Budget,
    rng: np.random.Generator,
    sample: float | int | None = None,
) -> SearchOutcome:
    trace: list[TraceRow] = []
    steps = 0
    while True:
        reason = budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            return outcome_from(engine, budget, steps, trace, reason)
        moves = engine.legal_moves()
        order = rng.permutation(len(moves))
        k = sample_size(sample, len(moves))
        tolerance = engine.tolerance()
        first = next((moves[i][0] for i in order[:k] if moves[i][1] > tolerance), None)
        if first is None:
            first = next((moves[i][0] for i in order[k:] if moves[i][1] > tolerance), None)
        if first is None:
            return outcome_from(engine, budget, steps, trace, "local_optimum")
        delta = engine.apply(first)
        steps += 1
        trace.append(TraceRow(steps, first.kind, first.source, first.target, delta,
                              engine.score))
