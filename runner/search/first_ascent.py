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

from functools import partial

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.result import SearchOutcome, climb


def sample_size(sample: float | int | None, total: int) -> int:
    """Moves tried first in a step: all, a share (float in (0, 1]) or a count (int)."""
    if sample is None:
        return total
    if isinstance(sample, float):
        return max(1, min(total, int(np.ceil(sample * total))))
    return max(1, min(total, sample))


def first_improving_move(engine: MoveEngine, rng: np.random.Generator,
                         sample: float | int | None = None) -> Move | None:
    """The first improving move in a fresh random order, the sampled share tried first."""
    moves = engine.legal_moves()
    order = rng.permutation(len(moves))
    k = sample_size(sample, len(moves))
    tolerance = engine.tolerance()
    for part in (order[:k], order[k:]):
        first = next((moves[i][0] for i in part if moves[i][1] > tolerance), None)
        if first is not None:
            return first
    return None


def first_ascent(
    engine: MoveEngine,
    budget: Budget,
    rng: np.random.Generator,
    sample: float | int | None = None,
) -> SearchOutcome:
    return climb(engine, budget, partial(first_improving_move, rng=rng, sample=sample))
