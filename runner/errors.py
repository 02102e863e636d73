"""Problems with a location, collected and reported together.

Every bad input (spec, data, arguments) becomes one or more :class:`Problem` values.
They are gathered into an :class:`InputError`, which the command line turns into a
list of messages and exit code 2, never a traceback.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Problem:
    """One thing wrong with an input, and where it is.

    ``file`` is the path as the user gave it; ``line`` is 1-based or ``None`` when the
    problem has no line (a missing file, say); ``key`` is the dotted key path in a spec
    (``search.budget.max_steps``, ``tiers.2.0``) or a column name in a data file.
    """

    file: str
    message: str
    line: int | None = None
    key: str | None = None
    value: Any = None
    severity: str = "error"  # "error" | "warning"

    def format(self) -> str:
        where = self.file if self.line is None else f"{self.file}:{self.line}"
        parts = [where]
        if self.key:
            parts.append(self.key)
        text = ": ".join(parts) + ": " + ("warning: " if self.severity == "warning" else "")
        text += self.message
        if self.value is not None:
            text += f" (got {self.value!r})"
        return text


class InputError(Exception):
    """Bad input: carries every problem found, so all are reported at once (exit 2)."""

    def __init__(self, problems: list[Problem] | Problem):
        if isinstance(problems, Problem):
            problems = [problems]
        self.problems = [p for p in problems if p.severity == "error"] or list(problems)
        self.partial_spec: object | None = None  # set by the spec loader when it can
        super().__init__("\n".join(p.format() for p in self.problems))


class EnvironmentFault(Exception):
    """A fault of the environment, not of the input: permissions, a full disk, memory, a
    lost worker, a scheduler that does not answer. Reported in one line naming the path
    or resource and what to do, exit 3 (a traceback only with ``--debug``)."""


class EngineFailure(EnvironmentFault):
    """The execution engine lost work (a worker process died, the cluster went away):
    reported in one line, exit 3, and nothing is stored, since runs are stored only
    after every unit has come back."""


class GateFailure(Exception):
    """A check or gate failed (exit 1): regression, non-determinism, missing baseline."""
