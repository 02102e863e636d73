"""Stochastic hill climbing: an improving move chosen at random, weighted by its gain.

Each step draws one of the improving legal moves with probability proportional to its
delta (a seeded ``numpy.random.Generator``), until no move improves or the budget runs
out. This is the "stochastic hill climbing" of Russell & Norvig (2010, section 4.1.1):
it trades the speed of the steepest ascent for a more varied path to a local optimum.

Complexity per step: O(n^2) to collect the improving moves from the delta table.
"""

from __future__ import annotations

import math
from functools import partial

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.result import SearchOutcome, climb


def weighted_improving_move(engine: MoveEngine, rng: np.random.Generator) -> Move | None:
    """An improving legal move drawn with probability proportional to its gain."""
    tolerance = engine.tolerance()
    improving = [(m, d) for m, d in engine.legal_moves() if d > tolerance]
    if not improving:
        return None
    # Inverse transform with one uniform draw, accumulated left to right in plain floats:
    # no numpy reduction (whose order follows the CPU's SIMD width) decides the move.
    threshold = float(rng.random()) * math.fsum(d for _, d in improving)
    running = 0.0
    for move, gain in improving:
        running += gain
        if running > threshold:
            return move
    return improving[-1][0]


def stochastic_hill_climb(
    engine: MoveEngine, budget: Budget, rng: np.random.Generator
) -> SearchOutcome:
    return climb(engine, budget, partial(weighted_improving_move, rng=rng))
