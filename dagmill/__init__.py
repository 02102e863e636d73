"""``import dagmill``: the import name of dagmill's Python API (:mod:`runner.api`): the
same public names as ``runner``, loaded on first use."""

from typing import Any

import runner
from runner import __all__, __version__  # noqa: F401  (re-exported)


def __getattr__(name: str) -> Any:
    return getattr(runner, name)
