"""Search budgets: steps, family evaluations and wall-clock seconds."""

from __future__ import annotations

import time
from dataclasses import dataclass, field


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
        if self.max_evaluations is not None and evaluations >= self.max_evaluations:
            return "max_evaluations"
        if self.max_seconds is not None and self.elapsed() >= self.max_seconds:
            return "max_seconds"
        return None
