"""The Dask-local workers' tie to the command's process (only imported with Dask).

A ``LocalCluster``'s worker processes are children of the command's process; when that
process is killed (SIGKILL, out of memory) it cannot close its cluster, so each worker
watches for it itself (:func:`runner.engines.die_with_parent`)."""

from __future__ import annotations

from typing import Any

from distributed.diagnostics.plugin import WorkerPlugin

from runner.engines import die_with_parent


class DieWithParent(WorkerPlugin):
    """Registered on a local cluster: each worker process ends when ``parent`` does."""

    name = "dagmill-die-with-parent"

    def __init__(self, parent: int) -> None:
        self.parent = parent

    def setup(self, worker: Any) -> None:
        die_with_parent(self.parent)
