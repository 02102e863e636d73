"""Execution engines: where the independent units of a command's work run.

Units are bootstrap replicates (one spec) and whole specs (several specs given to
``run`` or ``check``). A unit is a call ``fn(shared, item)`` of a module-level function:
``shared`` is sent to each worker once, ``item`` is small (an index and its seed). Every
engine returns the results in the order of the items, so what is recorded does not depend
on the engine, the number of workers or the order in which units finish.

* ``local`` (default): a process pool of ``--workers N`` processes (default: the number of
  cores this process may use); ``N = 1`` runs the units in this process. Workers are
  forked when the platform can and this process runs a single thread (they then start
  without importing anything again), else spawned (a fresh interpreter each). ``shared``
  reaches each worker once, through the pool's initializer; no result depends on
  anything else a worker inherits.
* ``dask-local``: a ``distributed.LocalCluster`` on 127.0.0.1 with ``N`` single-threaded
  worker processes, started for the command and closed after it.
* ``dask://HOST:PORT``: the Dask scheduler at that address (Dask's own ``dask scheduler``
  and ``dask worker`` commands start one). ``shared`` is scattered to the cluster once
  (the encoded data travels as one numpy array inside it) and each task names it.

Dask is an optional extra (``pip install -e '.[dask]'``); asking for a Dask engine
without it is bad input (exit 2), as are an unknown engine name and a scheduler that
does not answer within :data:`CONNECT_SECONDS`.
"""

from __future__ import annotations

import os
import re
import signal
import sys
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, TypeVar

from runner.errors import EngineFailure, EnvironmentFault, InputError, Problem
from runner.progress import Progress

if TYPE_CHECKING:  # Dask is an optional extra, imported where it is used
    from distributed import Client, LocalCluster

ENGINE_ENV = "DAGMILL_ENGINE"
CONNECT_SECONDS = 3.0
WORKER_WAIT_SECONDS = 10.0
ENGINE_NAMES = ("local", "dask-local", "dask://HOST:PORT")
_DASK_ADDRESS = re.compile(r"^dask://(?P<host>\[[0-9a-fA-F:.]+\]|[A-Za-z0-9_.-]+):(?P<port>\d{1,5})$")

S = TypeVar("S")
T = TypeVar("T")
R = TypeVar("R")


def default_workers() -> int:
    """The number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class EngineChoice:
    """A checked engine request: ``kind`` is local, dask-local or dask; ``address`` the
    scheduler's ``tcp://HOST:PORT`` for dask."""

    kind: str
    workers: int
    address: str | None = None
    asked: int | None = None  # the --workers asked for, when it was capped to the cores

    @property
    def capped(self) -> str | None:
        """The warning when ``--workers`` asked for more processes than usable cores."""
        if self.asked is None:
            return None
        return (f"warning: --workers {self.asked} is more than the {self.workers} usable "
                f"core(s) of this machine; using {self.workers}")

    @property
    def label(self) -> str:
        if self.kind == "dask":
            return f"dask://{self.address.removeprefix('tcp://') if self.address else ''}"
        return f"{self.kind} ({self.workers} worker{'s' if self.workers != 1 else ''})"


def choose_engine(engine: str | None, workers: int | None,
                  environ: dict[str, str] | None = None) -> EngineChoice:
    """Check ``--engine`` (else ``$DAGMILL_ENGINE``, else local) and ``--workers``."""
    env = os.environ if environ is None else environ
    key, text = "--engine", engine
    if text is None and env.get(ENGINE_ENV):
        key, text = ENGINE_ENV, env[ENGINE_ENV]
    text = (text or "local").strip()
    problems: list[Problem] = []
    if workers is not None and workers < 1:
        problems.append(Problem("command line", "must be at least 1", key="--workers",
                                value=workers))
    count = workers if workers is not None and workers >= 1 else default_workers()
    choice: EngineChoice | None = None
    if text in ("local", "dask-local"):
        cores = default_workers()
        choice = (EngineChoice(text, cores, asked=count) if count > cores
                  else EngineChoice(text, count))
    else:
        match = _DASK_ADDRESS.match(text)
        if match and 0 < int(match["port"]) < 65536:
            choice = EngineChoice("dask", count, f"tcp://{match['host']}:{match['port']}")
        elif text.startswith("dask://"):
            problems.append(Problem("command line" if key == "--engine" else "environment",
                                    "a Dask scheduler address is dask://HOST:PORT with a port "
                                    "in 1-65535", key=key, value=text))
        else:
            problems.append(Problem("command line" if key == "--engine" else "environment",
                                    "unknown engine; known: " + ", ".join(ENGINE_NAMES),
                                    key=key, value=text))
    if problems or choice is None:
        raise InputError(problems)
    if choice.kind != "local":
        _need_dask(key)
    return choice


def _need_dask(key: str) -> None:
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise InputError(Problem("command line", "Dask engines need the dask extra: "
                                 "pip install 'dagmill[dask]'", key=key)) from None


# --------------------------------------------------------------------------- engines


class Engine:
    """Runs ``fn(shared, item)`` for every item; results in item order."""

    label = "engine"
    parallel = False

    def map(self, fn: Callable[[S, T], R], shared: S, items: Sequence[T],
            progress: Progress | None = None) -> list[R]:
        raise NotImplementedError

    def close(self) -> None:
        """Release workers and connections."""

    def __enter__(self) -> Engine:
        return self

    def __exit__(self, *_: object) -> None:
        self.close()


class InProcess(Engine):
    """The units one after another in this process (``--workers 1``, and inside a unit)."""

    label = "in-process"

    def map(self, fn: Callable[[S, T], R], shared: S, items: Sequence[T],
            progress: Progress | None = None) -> list[R]:
        out = []
        for item in items:
            out.append(fn(shared, item))
            if progress is not None:
                progress.advance()
        return out


_WORKER_STATE: dict[str, Any] = {}


WATCH_SECONDS = 0.5  # how often a worker looks whether the process that started it lives


def die_with_parent(parent: int) -> None:
    """Make this worker process end when ``parent`` (the command's process) does, even
    when the parent is killed with SIGKILL and cannot shut its pool down: on Linux the
    kernel's parent-death signal (prctl PR_SET_PDEATHSIG, SIGKILL); everywhere a daemon
    thread that watches the parent's pid and exits the process when it is gone."""
    if sys.platform.startswith("linux"):
        import ctypes

        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
        except (OSError, AttributeError):  # pragma: no cover - no prctl: the thread does
            pass
    if os.getppid() != parent:  # the parent died before the signal was armed
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(WATCH_SECONDS)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="dagmill-parent-watch", daemon=True).start()


def _install(fn: Callable[..., Any], shared: Any, parent: int | None = None) -> None:
    if parent is not None:
        die_with_parent(parent)
    _WORKER_STATE["fn"], _WORKER_STATE["shared"] = fn, shared


def _call(item: Any) -> Any:
    return _WORKER_STATE["fn"](_WORKER_STATE["shared"], item)


def start_method() -> str:
    """How worker processes start here: ``fork`` when the platform can and this process
    runs a single thread (forking a threaded process can copy a held lock), else
    ``spawn``."""
    import multiprocessing

    single = threading.active_count() == 1
    return "fork" if single and "fork" in multiprocessing.get_all_start_methods() else "spawn"


class LocalPool(Engine):
    """A pool of ``workers`` processes, started anew for each :meth:`map`."""

    parallel = True

    def __init__(self, workers: int, start_method: str | None = None) -> None:
        self.workers = workers
        self.start_method = start_method  # None: fork when safe, else spawn
        self.label = f"local ({workers} workers)"

    def map(self, fn: Callable[[S, T], R], shared: S, items: Sequence[T],
            progress: Progress | None = None) -> list[R]:
        if self.workers <= 1 or len(items) <= 1:
            return InProcess().map(fn, shared, items, progress)
        import concurrent.futures as cf  # here: the command's parser imports this module
        import multiprocessing

        context = multiprocessing.get_context(self.start_method or start_method())
        results: list[Any] = [None] * len(items)
        with cf.ProcessPoolExecutor(max_workers=min(self.workers, len(items)),
                                    mp_context=context, initializer=_install,
                                    initargs=(fn, shared, os.getpid())) as pool:
            futures = {pool.submit(_call, item): k for k, item in enumerate(items)}
            try:
                for future in cf.as_completed(futures):
                    results[futures[future]] = future.result()
                    if progress is not None:
                        progress.advance()
            except cf.process.BrokenProcessPool as exc:
                pool.shutdown(wait=False, cancel_futures=True)
                raise EngineFailure(
                    f"a worker process of the local pool died ({exc}); nothing was stored. "
                    "Out of memory? Try fewer --workers") from None
            except BaseException:
                pool.shutdown(wait=False, cancel_futures=True)
                raise
        return results


class DaskEngine(Engine):
    """Units as tasks on a Dask distributed cluster: a given scheduler (checked when the
    engine opens), or a LocalCluster started at the first map of more than one unit (a
    lone unit runs in this process) and closed with the engine."""

    parallel = True
    client: Client | None
    _cluster: LocalCluster | None
    _owned = True  # False for an attached client, which its owner closes

    def __init__(self, choice: EngineChoice) -> None:

        from distributed import Client

        self._cluster = None
        self._local_workers = 0
        if choice.kind == "dask-local":
            # started at the first map with more than one unit: none for a lone unit
            self._local_workers = choice.workers
            self.client = None
            self.label = f"dask-local ({choice.workers} workers)"
            return
        try:
            self.client = Client(choice.address, timeout=CONNECT_SECONDS)
        except (OSError, TimeoutError) as exc:
            raise EnvironmentFault(
                f"no Dask scheduler answers at {choice.label} within "
                f"{CONNECT_SECONDS:g} s ({type(exc).__name__}); start one with `dask scheduler` "
                "and workers with `dask worker tcp://HOST:PORT`, or use --engine local") \
                from None
        self.label = choice.label
        try:
            self.client.wait_for_workers(1, timeout=WORKER_WAIT_SECONDS)
        except (OSError, TimeoutError):
            self.client.close()
            raise EnvironmentFault(
                f"the Dask scheduler at {choice.label} has no workers (none "
                f"joined within {WORKER_WAIT_SECONDS:g} s); start some with `dask worker "
                f"{choice.address}`") from None

    @classmethod
    def attach(cls, client: Any, label: str = "dask") -> DaskEngine:
        """An engine on an existing ``distributed.Client`` (closed by its owner)."""
        engine = cls.__new__(cls)
        engine._cluster, engine.client, engine.label = None, client, label
        engine._owned = False
        return engine

    def map(self, fn: Callable[[S, T], R], shared: S, items: Sequence[T],
            progress: Progress | None = None) -> list[R]:
        from distributed import KilledWorker, as_completed
        from distributed.comm.core import CommClosedError

        if not items:
            return []
        client = self.client
        if client is None:  # dask-local, not started yet
            if len(items) == 1:
                return InProcess().map(fn, shared, items, progress)
            client = self._start_local_cluster()
        handle = client.scatter(shared, broadcast=True, hash=False)
        futures = [client.submit(fn, handle, item, pure=False) for item in items]
        index = {f.key: k for k, f in enumerate(futures)}
        results: list[Any] = [None] * len(items)
        try:
            for future in as_completed(futures):
                results[index[future.key]] = future.result()
                if progress is not None:
                    progress.advance()
        except (KilledWorker, CommClosedError, OSError) as exc:
            raise EngineFailure(
                f"the Dask cluster at {self.label} lost a unit of work ({type(exc).__name__}: "
                f"{exc}); nothing was stored. Check the workers' logs and memory") from None
        finally:
            client.cancel(futures)
            client.cancel([handle])
        return results

    def connected(self) -> Client:
        """The engine's client: the scheduler's, or (``dask-local``) that of a
        LocalCluster started now, closed with the engine."""
        return self.client if self.client is not None else self._start_local_cluster()

    def _start_local_cluster(self) -> Client:
        import logging

        from distributed import Client, LocalCluster

        from runner.worker_watch import DieWithParent

        self._cluster = LocalCluster(n_workers=self._local_workers, threads_per_worker=1,
                                     processes=True, host="127.0.0.1",
                                     dashboard_address=None, silence_logs=logging.ERROR)
        self.client = Client(self._cluster)
        self.client.register_plugin(DieWithParent(os.getpid()))
        return self.client

    def close(self) -> None:
        if self._owned:
            if self.client is not None:
                self.client.close()
            if self._cluster is not None:
                self._cluster.close()


def open_engine(choice: EngineChoice) -> Engine:
    """The engine of a checked choice (connects to, or starts, a Dask cluster)."""
    if choice.kind == "local":
        return LocalPool(choice.workers) if choice.workers > 1 else InProcess()
    return DaskEngine(choice)
