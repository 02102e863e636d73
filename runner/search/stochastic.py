"""Stochastic hill climbing: an improving move chosen at random, weighted by its gain.

Each step draws one of the improving legal moves with probability proportional to its
delta (a seeded ``numpy.random.Generator``), until no move improves or the budget runs
out. This is the "stochastic hill climbing" of Russell & Norvig (2010, section 4.1.1):
it trades the speed of the steepest ascent for a more varied path to a local optimum.

Complexity per step: O(n^2) to collect the improving moves from the delta table.
"""

from __future__ import annotations

import numpy as np

from runner.search.budget import Budget
from runner.search.engine import MoveEngine
from runner.search.result import SearchOutcome, TraceRow, outcome_from


def stochastic_hill_climb(
    engine: MoveEngine, budget: Budget, rng: np.random.Generator
) -> SearchOutcome:
    trace: list[TraceRow] = []
    steps = 0
    while True:
        reason = budget.exhausted(steps, engine.scorer.evaluations)
        if reason is not None:
            return outcome_from(engine, budget, steps, trace, reason)
        tolerance = engine.tolerance()
        improving = [(m, d) for m, d in engine.legal_moves() if d > tolerance]
        if not improving:
            return outcome_from(engine, budget, steps, trace, "local_optimum")
        gains = np.array([d for _, d in improving])
        move = improving[int(rng.choice(len(improving), p=gains / gains.sum()))][0]
        delta = engine.apply(move)
        steps += 1
        trace.append(TraceRow(steps, move.kind, move.source, move.target, delta, engine.score))
