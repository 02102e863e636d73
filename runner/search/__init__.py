"""Search methods, all on the shared move engine (:mod:`runner.search.engine`)."""

from runner.search.budget import Budget
from runner.search.engine import Move, MoveEngine
from runner.search.hill_climb import hill_climb
from runner.search.result import SearchOutcome, TraceRow

METHODS = {"hill-climb": hill_climb}

__all__ = ["METHODS", "Budget", "Move", "MoveEngine", "SearchOutcome", "TraceRow", "hill_climb"]
