"""A pool of worker processes scoring batches of discrete families for one learn.

The first fill of a local search and each move's column refresh are batches of
independent family scores (:meth:`~runner.scores.cache.CachedScorer.prefetch`). With
the local engine and more than one worker, :func:`pooled_scoring` gives the main search a
:class:`PooledCountScorer` whose batches of at least :data:`POOL_MIN_ROW_FAMILIES` rows x
families are split across a :class:`ScoringPool`'s workers, in chunks of about equal
families, and reassembled in request order.

The encoded data (the codes matrix) is copied once into a
:class:`multiprocessing.shared_memory.SharedMemory` block that every worker attaches to:
no task carries codes, only ``(child, mask, candidates)`` triples out and floats back.
Each worker holds a :class:`~runner.scores.counts.CountScorer` over the shared codes with
the same score function and arities, so it computes the same bits as the command's
process would (counts are integers; the scores are exact functions of them); a float
travels between processes by pickle unchanged. The record therefore does not depend on
the number of workers, and nothing about them enters it (the record's BLAS list names
numpy's libraries only, whichever process loaded the compiled kernel:
:func:`runner.environment.numpy_uses`).

Workers are started at the first pooled batch (a learn whose batches are all small
starts none), forked when the platform can and this process runs a single thread, else
spawned, as :class:`~runner.engines.LocalPool` does; they end with the command
(:func:`~runner.engines.die_with_parent`) and are stopped, and the block unlinked, when
the pool closes, on success, error or interrupt alike. A worker that dies makes the
learn fail with :class:`~runner.errors.EngineFailure` (one line, exit 3).
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import secrets
import signal
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from multiprocessing.connection import Connection, wait
from multiprocessing.process import BaseProcess
from multiprocessing.shared_memory import SharedMemory
from typing import Any, TypeVar, cast

import numpy as np

from runner.engines import Engine, LocalPool, die_with_parent, start_method
from runner.errors import EngineFailure
from runner.scores.cache import ColumnRequest, by_request
from runner.scores.counts import AUTO_AFTER_ROWS, CountFamilyScore, CountScorer

#: Batches of fewer rows x families than this are computed in the command's process.
#: Measured with ``python -m benchmarks --pool`` (``benchmarks/RESULTS-pool.md``: column
#: batches of ALARM rows in process and on two workers, either counting path, on idle
#: cores): a round trip with its pickling costs about 0.2 to 1.5 ms, and the compiled
#: kernel counts about 2 row-families per ns in process, so two workers only gain on
#: batches of several ms (0.7 to 0.8 of the in-process time at 14 million row-families);
#: ten million keeps a move's column of a few hundred variables at 10,000 rows in process.
POOL_MIN_ROW_FAMILIES = 10_000_000
#: Data of fewer rows than this never start a pool: each family is counted in a few
#: microseconds, less than its share of the pickling, and the workers' start (numba's
#: load in each) is not repaid (PIGS at 5,000 rows: 0.90x the speed of one process with
#: two workers; ALARM at 1,000,000 rows: its search 1.40x faster).
POOL_MIN_ROWS = 50_000

#: The prefix of the shared memory blocks' names (``/dev/shm/`` on Linux).
BLOCK_PREFIX = "dagmill-codes-"
#: Seconds a closing pool waits for a worker to leave before it terminates it.
LEAVE_SECONDS = 2.0


@dataclass(frozen=True)
class WorkerSetup:
    """What a worker needs to build its scorer: the shared block's name, the codes'
    shape and dtype, the score function and arities, and the command's pid."""

    block: str
    shape: tuple[int, int]
    dtype: str
    function: CountFamilyScore
    arities: np.ndarray
    parent: int


def _serve(setup: WorkerSetup, conn: Connection) -> None:
    """A worker's life: attach the codes, then answer batches until told to stop."""
    die_with_parent(setup.parent)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the command handles Ctrl-C and stops us
    block = SharedMemory(name=setup.block)
    try:
        _answer(setup, block, conn)
    finally:
        with contextlib.suppress(BufferError):
            block.close()
        conn.close()


def _answer(setup: WorkerSetup, block: SharedMemory, conn: Connection) -> None:
    codes: np.ndarray = np.ndarray(setup.shape, dtype=np.dtype(setup.dtype), buffer=block.buf)
    scorer = CountScorer(setup.function, codes, setup.arities)
    # A worker only gets batches large enough to pool: unless DAGMILL_KERNEL says numpy,
    # it counts with the compiled kernel from its first count (same tables either way).
    scorer._counted = AUTO_AFTER_ROWS
    pid = os.getpid()
    while True:
        try:
            pieces = conn.recv()
        except (EOFError, OSError):
            return
        if pieces is None:
            return
        try:
            reply: tuple[Any, ...] = (True, pid, compute_pieces(scorer, pieces))
        except Exception as exc:  # reported by the command, which stops the learn
            reply = (False, pid, f"{type(exc).__name__}: {exc}")
        conn.send(reply)


def compute_pieces(scorer: CountScorer, pieces: Sequence[ColumnRequest]) -> list[float]:
    """A worker's chunk: the values of its pieces of columns, flattened in order."""
    return [v for values in scorer._compute_batch(pieces) for v in values]


def row_families(requests: Sequence[ColumnRequest], n_rows: int) -> int:
    """The work of a batch: its families times the rows counted for each."""
    return n_rows * sum(len(candidates) for _, _, candidates in requests)


def split_requests(requests: Sequence[ColumnRequest],
                   parts: int) -> list[list[ColumnRequest]]:
    """The requests cut into at most ``parts`` chunks of about equal families, in order:
    a column is cut between chunks where a boundary falls in it. Concatenated, the
    chunks' families are the requests' families in order; no chunk is empty (no chunk
    at all for no families)."""
    flat = [(k, p) for k, (_, _, candidates) in enumerate(requests) for p in candidates]
    total = len(flat)
    parts = min(parts, total)
    chunks: list[list[ColumnRequest]] = []
    for part in range(parts):
        pieces: list[ColumnRequest] = []
        previous = -1
        column: list[int] = []
        for k, p in flat[part * total // parts:(part + 1) * total // parts]:
            if k != previous:  # a new column (or the rest of one cut at a boundary)
                child, mask, _ = requests[k]
                column = []
                pieces.append((child, mask, column))
                previous = k
            column.append(p)
        chunks.append(pieces)
    return chunks


class ScoringPool:
    """Worker processes scoring families of the codes in one shared memory block.

    Parameters
    ----------
    workers
        How many processes (at least 2 to be worth it).
    function, codes, arities
        What each worker's :class:`~runner.scores.counts.CountScorer` is built from.
    start_method
        ``fork`` or ``spawn``; None: fork when the platform can and this process runs a
        single thread, else spawn.

    Nothing starts until the first :meth:`compute`; :meth:`close` stops the workers and
    unlinks the block (safe to call twice). ``families`` maps each worker's pid to the
    families it computed, as the workers report them.
    """

    def __init__(self, workers: int, function: CountFamilyScore, codes: np.ndarray,
                 arities: np.ndarray, start_method: str | None = None) -> None:
        self.workers = workers
        self.function = function
        self.codes = codes
        self.arities = np.asarray(arities, dtype=np.int64)
        self.start_method = start_method
        self.families: dict[int, int] = {}
        self.block_name: str | None = None
        self._block: SharedMemory | None = None
        self._processes: list[BaseProcess] = []
        self._conns: list[Connection] = []
        self._outstanding = False  # a batch sent and not all answered (an interrupt)

    @property
    def started(self) -> bool:
        return bool(self._processes)

    def _method(self) -> str:
        return self.start_method or start_method()

    def _start(self) -> None:
        codes = np.ascontiguousarray(self.codes)
        name = f"{BLOCK_PREFIX}{os.getpid()}-{secrets.token_hex(6)}"
        self._block = block = SharedMemory(name=name, create=True, size=max(1, codes.nbytes))
        self.block_name = block.name
        shared: np.ndarray = np.ndarray(codes.shape, dtype=codes.dtype, buffer=block.buf)
        shared[...] = codes
        del shared  # the block holds no export of this process: it can close
        setup = WorkerSetup(block.name, (int(codes.shape[0]), int(codes.shape[1])),
                            codes.dtype.str, self.function, self.arities, os.getpid())
        context = multiprocessing.get_context(self._method())
        for _ in range(self.workers):
            mine, theirs = context.Pipe()
            process: BaseProcess = context.Process(  # type: ignore[attr-defined]
                target=_serve, args=(setup, theirs), daemon=True, name="dagmill-scorer")
            process.start()
            theirs.close()  # the worker holds the only other end: its death reads as EOF
            self._processes.append(process)
            self._conns.append(mine)

    def compute(self, requests: Sequence[ColumnRequest]) -> list[list[float]]:
        """The values of ``requests`` (as
        :meth:`~runner.scores.cache.CachedScorer._compute_batch` gives them), computed
        by the workers in chunks of about equal families.

        Raises
        ------
        EngineFailure
            A worker died or failed.
        """
        if not self.started:
            self._start()
        chunks = split_requests(requests, len(self._conns))
        busy = self._conns[:len(chunks)]
        self._outstanding = True
        try:
            for conn, chunk in zip(busy, chunks, strict=True):
                conn.send(chunk)
            replies = [conn.recv() for conn in busy]
            self._outstanding = False
        except (EOFError, OSError, BrokenPipeError):
            raise EngineFailure(
                f"a scoring worker of the local pool died ({self._deaths()}); nothing was "
                "stored. Out of memory? Try fewer --workers") from None
        flat: list[float] = []
        for ok, pid, payload in replies:
            if not ok:
                raise EngineFailure(f"a scoring worker of the local pool failed ({payload}); "
                                    "nothing was stored")
            self.families[pid] = self.families.get(pid, 0) + len(payload)
            flat.extend(payload)
        return by_request(flat, requests)

    def _deaths(self) -> str:
        """The exit codes of the dead workers (given a moment to be reaped)."""
        ended = wait([p.sentinel for p in self._processes], timeout=LEAVE_SECONDS)
        for process in self._processes:
            if process.sentinel in ended:
                process.join(LEAVE_SECONDS)  # a blocking reap: its pipes close before
        codes = [p.exitcode for p in self._processes if p.exitcode is not None]
        return ", ".join(f"exit code {c}" for c in sorted(set(codes))) if codes else (
            "connection lost")

    def close(self) -> None:
        """Stop the workers and unlink the shared block."""
        try:
            if not self._outstanding:  # else the workers may be busy: stop them at once
                for conn in self._conns:
                    with contextlib.suppress(OSError):
                        conn.send(None)
            for process in self._processes:
                process.join(0 if self._outstanding else LEAVE_SECONDS)
                if process.exitcode is None:
                    process.terminate()
                    process.join()
        finally:
            for conn in self._conns:
                conn.close()
            self._conns, self._processes = [], []
            block, self._block = self._block, None
            if block is not None:
                block.close()
                with contextlib.suppress(FileNotFoundError):
                    block.unlink()


class PooledCountScorer(CountScorer):
    """A :class:`~runner.scores.counts.CountScorer` with a batch backend: batches of at
    least :data:`POOL_MIN_ROW_FAMILIES` rows x families go to ``pool`` (None, or smaller
    batches: computed here). The values, and so the cache, the counters and the
    search, are those of a plain CountScorer."""

    batches = True

    def __init__(self, function: CountFamilyScore, codes: np.ndarray, arities: np.ndarray,
                 pool: ScoringPool | None, cache_limit: int | None = None) -> None:
        super().__init__(function, codes, arities, cache_limit)
        self.pool = pool

    @classmethod
    def over(cls, scorer: CountScorer, pool: ScoringPool | None) -> PooledCountScorer:
        """A fresh pooled scorer of the same score, data and cache size as ``scorer``."""
        return cls(scorer.function, scorer.codes, scorer.arities, pool, scorer.cache_limit)

    def _compute_batch(self, requests: Sequence[ColumnRequest]) -> list[list[float]]:
        pool = self.pool
        if pool is None or row_families(requests, self.n_rows) < POOL_MIN_ROW_FAMILIES:
            return super()._compute_batch(requests)
        return pool.compute(requests)

    def __getstate__(self) -> dict[str, object]:
        """A copy for another process computes its batches itself (no pool travels)."""
        state = super().__getstate__()
        state["pool"] = None
        return state


def pools_for(engine: Engine | None, scorer: object) -> bool:
    """Whether a learn's main search scores on a pool: the local engine with more than
    one worker, and a plain :class:`~runner.scores.counts.CountScorer` (the discrete
    scores on complete data; other scorers keep computing in process) of at least
    :data:`POOL_MIN_ROWS` rows."""
    return (isinstance(engine, LocalPool) and engine.workers > 1
            and type(scorer) is CountScorer and scorer.n_rows >= POOL_MIN_ROWS)


S = TypeVar("S")


@contextlib.contextmanager
def pooled_scoring(engine: Engine | None, scorer: S) -> Iterator[S]:
    """The scorer a learn's main search uses: ``scorer`` itself, or (:func:`pools_for`)
    a :class:`PooledCountScorer` of the same score on a :class:`ScoringPool` of the
    engine's workers, closed when the block ends (its scorer then computes in process)."""
    if not pools_for(engine, scorer):
        yield scorer
        return
    assert isinstance(engine, LocalPool) and isinstance(scorer, CountScorer)
    pool = ScoringPool(engine.workers, scorer.function, scorer.codes, scorer.arities,
                       engine.start_method)
    pooled = PooledCountScorer.over(scorer, pool)
    try:
        yield cast(S, pooled)  # a CountScorer, as ``scorer`` is
    finally:
        pooled.pool = None
        pool.close()
