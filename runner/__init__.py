"""dagmill: learn Bayesian network structures from tabular data under declarative specs.

The Python API (:mod:`runner.api`) is available from here, and as ``import dagmill``:
``runner.learn``, ``runner.load_run``, ``runner.compare_runs``, ``runner.check``, ... It is
imported on first use, so ``import runner`` (and the command's start) stays cheap.
"""

from __future__ import annotations

__version__ = "0.1.0"

TYPE_CHECKING = False  # not imported from typing: `import runner` stays cheap (mypy knows it)
if TYPE_CHECKING:
    from typing import Any

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

#: The public names of :mod:`runner.api`, loaded lazily by :func:`__getattr__`.
API_NAMES = frozenset(__all__) - {"__version__"}


def __getattr__(name: str) -> Any:
    if name in API_NAMES:
        from runner import api

        return getattr(api, name)
    raise AttributeError(f"module 'runner' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted({*globals(), *API_NAMES})
