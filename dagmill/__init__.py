"""``import dagmill``: the import name of dagmill's Python API (:mod:`runner.api`)."""

from runner import __version__
from runner.api import (
    GaussianFamily,
    LearnedNetwork,
    canonical_csv,
    check,
    compare_runs,
    hold_against_baseline,
    learn,
    load_run,
)

__all__ = ["GaussianFamily", "LearnedNetwork", "__version__", "canonical_csv", "check",
           "compare_runs", "hold_against_baseline", "learn", "load_run"]
