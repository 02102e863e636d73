"""Greedy Equivalence Search (Chickering 2002, "Optimal structure identification with
greedy search", Journal of Machine Learning Research 3, 507-554).

The search moves between Markov equivalence classes, each held as its CPDAG. The
forward phase applies, while one improves the score, the best valid ``Insert``
operator; the backward phase then applies the best valid ``Delete`` operator while one
improves. With a score-equivalent, consistent score and enough data the result is the
class of the generating network (Chickering 2002, theorem 4). On finite samples a
turning phase follows (edge reversals, after Hauser & Buehlmann 2012, see
:func:`turning_phase`), and the three phases take turns until none changes the class;
each applied step raises the score, so the result never scores below plain GES.

Operators, their validity, score changes, background knowledge and caches live in
:mod:`runner.search.class_engine`; this module is the algorithm. Ties between operators
within the engine's tolerance are broken by the seeded generator.

Complexity: each phase step costs one extension and one CPDAG completion, O(E * max
in-degree), plus the operators of the pairs the step can have changed, each
exponential only in the number of undirected neighbours of its target (bounded by the
parent cap for ``Insert``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace
from functools import partial

import numpy as np

from runner.constraints import Constraints
from runner.scores.cache import FamilyScorer
from runner.search.budget import Budget
from runner.search.class_engine import DELETE, INSERT, ClassEngine, OperatorQueue
from runner.search.engine import MoveEngine
from runner.search.hill_climb import steepest_move
from runner.search.result import PhaseSummary, SearchOutcome, TraceRow, climb

TURN = "turn"
PHASE_NAMES = {INSERT: "forward", DELETE: "backward", TURN: "turning"}


def greedy_phase(engine: ClassEngine, kind: str, budget: Budget, rng: np.random.Generator | None,
                 trace: list[TraceRow]) -> tuple[int, str | None]:
    """Apply the best valid operator of ``kind`` while one improves the score.

    Returns the steps applied and the budget's stop reason (None at a local optimum).
    When the queue runs dry after a change, the pairs set aside by the path condition or
    the knowledge are evaluated once more, so the phase ends only where no operator of its
    kind improves.
    """
    queue = OperatorQueue(engine, kind, budget)
    if queue.stopped is not None:  # the budget ran out while the queue was filled
        return 0, queue.stopped
    fresh = True
    applied = 0
    while True:
        reason = budget.exhausted(len(trace), engine.scorer.evaluations)
        if reason is not None:
            return applied, reason
        chosen = queue.pop(rng)
        if chosen is None:
            if fresh or not queue.revisit():
                return applied, None
            fresh = True
            continue
        move, delta = chosen
        if not engine.apply(move, delta):
            queue.refuse(move)
            continue
        fresh = False
        queue.refresh()
        applied += 1
        trace.append(TraceRow(len(trace) + 1, kind, move.source, move.target, delta,
                              engine.score))


def turning_phase(engine: ClassEngine, budget: Budget, rng: np.random.Generator | None,
                  trace: list[TraceRow]) -> tuple[int, str | None]:
    """Reverse edges of the member DAG while a reversal improves the score, then move to
    the class of the result.

    A restricted form of the turning phase of Hauser & Buehlmann (2012), "Characterization
    and greedy learning of interventional Markov equivalence classes of directed acyclic
    graphs", JMLR 13: theirs turns an edge in any member of the class; this one turns the
    edges of the member held, with the move engine's reversal deltas and legality.
    """
    member = MoveEngine(engine.scorer, engine.constraints, engine.parent_sets(), budget)
    base = budget.spent_steps
    budget.spent_steps = base + len(trace)
    try:
        outcome = climb(member, budget, partial(steepest_move, rng=rng, kinds=("reverse",)))
    finally:
        budget.spent_steps = base
    if outcome.steps:
        engine.adopt(outcome.parent_sets, math.fsum(row.delta for row in outcome.trace))
    trace.extend(replace(row, step=row.step + len(trace), score=engine.score - (
        outcome.score - row.score)) for row in outcome.trace)
    return outcome.steps, None if outcome.stop_reason == "local_optimum" else (
        outcome.stop_reason)


def greedy_equivalence_search(
    scorer: FamilyScorer,
    constraints: Constraints,
    budget: Budget,
    rng: np.random.Generator | None = None,
    start: Sequence[Sequence[int]] | None = None,
) -> SearchOutcome:
    """Greedy Equivalence Search from the class of ``start`` (default: the empty graph).

    Parameters
    ----------
    scorer : FamilyScorer
        A cached scorer of a score-equivalent score.
    constraints : Constraints
        Background knowledge: allowed edges, required edges, the parent cap.
    budget : Budget
        Steps count applied operators.
    rng : numpy.random.Generator, optional
        Breaks ties between operators; without one, the lowest pair wins.
    start : sequence of parent index sequences, optional
        A DAG whose class the search starts from (the required edges, typically).

    Returns
    -------
    SearchOutcome
        A member DAG of the final class that honours the constraints, with one
        :class:`~runner.search.result.PhaseSummary` per phase run.

    Raises
    ------
    ValueError
        When the start's class has no member within the constraints.

    References
    ----------
    Chickering, D. M. (2002). Optimal structure identification with greedy search.
    Journal of Machine Learning Research, 3, 507-554.
    """
    engine = ClassEngine(scorer, constraints, start)
    trace: list[TraceRow] = []
    phases: list[PhaseSummary] = []
    reason: str | None = None
    # The phases take turns until each has run once on the current class without a change.
    kinds = (INSERT, DELETE, TURN)
    settled = 0
    while reason is None and settled < len(kinds):
        kind = kinds[len(phases) % len(kinds)]
        if kind == TURN:
            applied, reason = turning_phase(engine, budget, rng, trace)
        else:
            applied, reason = greedy_phase(engine, kind, budget, rng, trace)
        phases.append(PhaseSummary(PHASE_NAMES[kind], applied, engine.score))
        settled = 1 if applied else settled + 1
    stop_reason = reason or "local_optimum"
    return SearchOutcome(
        parent_sets=engine.parent_sets(),
        score=engine.score,
        stop_reason=stop_reason,
        steps=len(trace),
        evaluations=scorer.evaluations,
        cache_hits=scorer.hits,
        converged=stop_reason == "local_optimum",
        seconds=budget.elapsed(),
        trace=trace,
        phases=phases,
    )
