"""Search budgets: steps, family evaluations and wall-clock seconds.

Every loop of a search that can run long checks its budget in bounded slices: the climb
loops between moves, and the long fills and passes inside an engine (the move engine's
first delta table, the class engine's operator queue, the candidate sets of ``order``
and ``exact`` and the exact search's dynamic programme) every few family scores or
vectorised passes, through :meth:`Budget.fill_exhausted` and :meth:`Budget.out_of_time`.
A fill stopped that way leaves its engine holding the start graph, with the stop reason.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

#: The stop reasons a budget gives: a run that stops with one of them was cut short.
BUDGET_REASONS = ("max_steps", "max_evaluations", "max_seconds")

#: A fill checks its budget after this many family scores (computed or cached): with the
#: slowest family scores of a wide, long data set (about a millisecond each) a slice is a
#: few hundredths of a second, and the check itself is negligible beside the scores.
FILL_SLICE = 16


@dataclass
class Budget:
    """Limits on a search; ``None`` means no limit. ``stop_reason`` names the one hit."""

    max_steps: int | None = None
    max_evaluations: int | None = None
    max_seconds: float | None = None
    started: float = field(default_factory=time.perf_counter)
    spent_steps: int = 0  # steps of earlier runs sharing this budget (restarts)

    def elapsed(self) -> float:
        return time.perf_counter() - self.started

    def exhausted(self, steps: int, evaluations: int) -> str | None:
        """The stop reason of the first limit reached, or None while within budget."""
        if self.max_steps is not None and steps + self.spent_steps >= self.max_steps:
            return "max_steps"
        return self.fill_exhausted(evaluations)

    def fill_exhausted(self, evaluations: int) -> str | None:
        """Like :meth:`exhausted` for work that applies no move (filling a table of
        deltas or operators): only the evaluations and the seconds count."""
        if self.max_evaluations is not None and evaluations >= self.max_evaluations:
            return "max_evaluations"
        return self.out_of_time()

    def out_of_time(self) -> str | None:
        """``"max_seconds"`` once the seconds are spent, else None (for passes that score
        nothing, such as the exact search's dynamic programme)."""
        if self.max_seconds is not None and self.elapsed() >= self.max_seconds:
            return "max_seconds"
        return None


class FillCheck:
    """Checks a budget every :data:`FILL_SLICE` calls during a fill; remembers the stop.

    ``check(evaluations)`` returns the stop reason (and keeps returning it) once the
    budget is spent, else None. Without a budget it never stops. The calls at which it
    looks are counted, not timed, so an evaluation limit stops a fill at the same place
    on every machine.
    """

    def __init__(self, budget: Budget | None, every: int = FILL_SLICE) -> None:
        self.budget = budget
        self.every = every
        self.calls = 0
        self.stopped: str | None = None

    def __call__(self, evaluations: int) -> str | None:
        if self.stopped is not None or self.budget is None:
            return self.stopped
        if self.calls % self.every == 0:  # the first call looks too
            self.stopped = self.budget.fill_exhausted(evaluations)
        self.calls += 1
        return self.stopped
