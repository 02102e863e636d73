"""One learn on several cores (:mod:`runner.scoring_pool`): the main search's batches of
family scores computed by a pool of worker processes over the codes in shared memory.

Everything here runs a real pool (processes, shared memory); nothing is mocked. Where a
test lowers :data:`runner.scoring_pool.POOL_MIN_ROW_FAMILIES` it is so that the small
data sets of a test are pooled at all; the families each worker reports computing
prove that they were."""

from __future__ import annotations

import json
import multiprocessing
import os
import pickle
import signal
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import ALL_SCORES, ROOT, CliCall, kiln_spec_text, write_kiln_data
from hypothesis import given, settings
from hypothesis import strategies as st

import runner.engines
from runner import scoring_pool as pool_module
from runner.errors import EngineFailure
from runner.scores import build_scorer
from runner.scores.cache import ColumnRequest
from runner.scores.counts import CountScorer
from runner.scoring_pool import (
    BLOCK_PREFIX,
    PooledCountScorer,
    ScoringPool,
    pooled_scoring,
    split_requests,
)
from runner.search.engine import MoveEngine

SHM = Path("/dev/shm")
MOMENT_FIELDS = ("created_utc", "run_id", "record_sha256", "seconds")
#: The local search (BDeu's default is GES, which computes no batches ahead).
CLIMB = "  method: hill-climb\n"


def our_blocks() -> set[str]:
    """The shared memory blocks of this process's pools that still exist."""
    if not SHM.is_dir():  # pragma: no cover - not Linux
        return set()
    return {p.name for p in SHM.iterdir() if p.name.startswith(f"{BLOCK_PREFIX}{os.getpid()}-")}


@pytest.fixture
def pools(monkeypatch: pytest.MonkeyPatch) -> Iterator[list[dict[str, Any]]]:
    """What every pool closed in the test reported: its block's name, the families each
    worker computed and its workers' pids (read at close, before the real close runs);
    batches are pooled whatever their size (the threshold at 0)."""
    seen: list[dict[str, Any]] = []
    close = ScoringPool.close

    def spy(self: ScoringPool) -> None:
        seen.append({"block": self.block_name, "families": dict(self.families),
                     "pids": [p.pid for p in self._processes]})
        close(self)

    monkeypatch.setattr(ScoringPool, "close", spy)
    monkeypatch.setattr(pool_module, "POOL_MIN_ROW_FAMILIES", 0)
    monkeypatch.setattr(pool_module, "POOL_MIN_ROWS", 0)
    yield seen


def stored(results: Path) -> dict[str, Any]:
    """The one run under ``results``: run.json without the fields naming the moment of
    the run, and the trace and model files' text."""
    [path] = sorted(results.rglob("run.json"))
    record = json.loads(path.read_text(encoding="utf-8"))
    for key in MOMENT_FIELDS:
        record.pop(key)
    return {"run": record, "trace": (path.parent / "trace.csv").read_text(encoding="utf-8"),
            "model": (path.parent / "model.json").read_text(encoding="utf-8")}


def demo_spec(folder: Path) -> Path:
    """The shipped kiln-line spec (BIC, 12 variables, 20,000 rows) reading the shipped
    data."""
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8").replace(
        "  path: ../datasets/", f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    spec = folder / "kiln-line.yaml"
    spec.write_text(text, encoding="utf-8")
    return spec


def bdeu_bootstrap_spec(folder: Path) -> Path:
    """BDeu (no several-tables form), two restarts and a bootstrap on 4,000 kiln rows."""
    write_kiln_data(folder, 4000)
    spec = folder / "specs" / "kiln.yaml"
    spec.write_text(kiln_spec_text("kiln-boot", "bootstrap: {replicates: 3, seed: 5}\n")
                    + CLIMB + "  restarts: 2\n", encoding="utf-8")
    return spec


# --------------------------------------------------------------------------- whole learns


@pytest.mark.parametrize("make_spec", [demo_spec, bdeu_bootstrap_spec])
def test_one_two_and_four_workers_store_the_same_records(
        make_spec: Any, tmp_path: Path, cli: CliCall, pools: list[dict[str, Any]],
        monkeypatch: pytest.MonkeyPatch) -> None:
    """``--workers 1, 2, 4``: run.json (times aside), trace.csv and model.json are the
    same bytes; with more than one worker the main search's batches were computed by
    every worker of a pool of that many, and its block is gone afterwards."""
    monkeypatch.setattr(runner.engines, "default_workers", lambda: 4)  # 4 is not capped
    spec = make_spec(tmp_path)
    got = {}
    for workers in (1, 2, 4):
        done = cli("run", spec, "--workers", str(workers), "--results",
                   tmp_path / f"r{workers}", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        got[workers] = stored(tmp_path / f"r{workers}")
    assert got[1] == got[2] == got[4]
    assert [len(p["pids"]) for p in pools] == [2, 4]  # one pool per learn with workers
    for seen in pools:
        assert sorted(seen["families"]) == sorted(seen["pids"])  # every worker computed
        assert all(count > 0 for count in seen["families"].values())
        assert os.getpid() not in seen["families"]
        assert not (SHM / seen["block"]).exists()
    assert our_blocks() == set()


#: The command in a fresh process, with the pool's threshold at 0 and the counting
#: kernel's automatic switch after ``sys.argv[1]`` rows x families.
FRESH_COMMAND = """\
import sys
import runner.engines, runner.scores.counts, runner.scoring_pool
runner.scoring_pool.POOL_MIN_ROW_FAMILIES = 0
runner.scoring_pool.POOL_MIN_ROWS = 0
runner.scores.counts.AUTO_AFTER_ROWS = int(sys.argv[1])
runner.engines.default_workers = lambda: 4
from runner.cli import main
raise SystemExit(main(sys.argv[2:]))
"""


@pytest.mark.slow
@pytest.mark.parametrize("switch_after", [1_000_000, 10**12])
def test_fresh_processes_load_the_same_libraries_whatever_the_workers(
        switch_after: int, tmp_path: Path) -> None:
    """In fresh command processes, with the counting kernel loaded mid-search (after 50
    families of the 20,000-row demo: it loads SciPy's BLAS in whichever process counts)
    or never, the records are the same bytes whatever the workers, environment included
    (its BLAS list names numpy's libraries only)."""
    import subprocess
    import sys

    spec = demo_spec(tmp_path)
    got = {}
    for workers in (1, 2, 4):
        done = subprocess.run(
            [sys.executable, "-c", FRESH_COMMAND, str(switch_after), "run", str(spec),
             "--workers", str(workers), "--results", str(tmp_path / f"r{workers}")],
            cwd=tmp_path, capture_output=True, text=True, timeout=600,
            env={**os.environ, "PYTHONPATH": str(ROOT), "DAGMILL_KERNEL": ""})
        assert done.returncode == 0, done.stderr
        got[workers] = stored(tmp_path / f"r{workers}")
    assert got[1] == got[2] == got[4]


def test_a_worker_that_dies_stops_the_learn_in_one_line(
        tmp_path: Path, cli: CliCall, pools: list[dict[str, Any]],
        monkeypatch: pytest.MonkeyPatch) -> None:
    """A scoring worker killed mid-learn: exit 3, one line, nothing stored, the block
    unlinked and the other workers stopped. (The death is the workers' own code calling
    ``os._exit``: forked workers run this process's functions.)"""
    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("no fork here: spawned workers do not run this test's function")
    # forked even when other tests left threads running (the pool would spawn then)
    monkeypatch.setattr(pool_module.ScoringPool, "_method", lambda self: "fork")
    monkeypatch.setattr(pool_module, "compute_pieces", lambda scorer, pieces: os._exit(9))
    write_kiln_data(tmp_path, 500)
    spec = tmp_path / "specs" / "kiln.yaml"
    spec.write_text(kiln_spec_text("kiln-dies") + CLIMB, encoding="utf-8")
    done = cli("run", spec, "--workers", "2", "--results", tmp_path / "r", cwd=tmp_path)
    assert done.returncode == 3
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr
    assert "a scoring worker of the local pool died (exit code 9" in done.stderr
    assert not list((tmp_path / "r").rglob("run.json"))
    [seen] = pools
    assert not (SHM / seen["block"]).exists()
    for pid in seen["pids"]:
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)


def test_an_interrupt_mid_search_stops_the_workers_and_unlinks_the_block(
        tmp_path: Path, cli: CliCall, pools: list[dict[str, Any]],
        monkeypatch: pytest.MonkeyPatch) -> None:
    """Ctrl-C in the search after the pool computed the first fill: exit 130, the block
    unlinked, the workers gone."""
    def interrupted(*_: object, **__: object) -> None:
        raise KeyboardInterrupt

    monkeypatch.setattr(MoveEngine, "best_move", interrupted)
    write_kiln_data(tmp_path, 500)
    spec = tmp_path / "specs" / "kiln.yaml"
    spec.write_text(kiln_spec_text("kiln-stop") + CLIMB, encoding="utf-8")
    done = cli("run", spec, "--workers", "2", "--results", tmp_path / "r", cwd=tmp_path)
    assert done.returncode == 130
    [seen] = pools
    assert sum(seen["families"].values()) > 0  # the fill was pooled before the interrupt
    assert not (SHM / seen["block"]).exists()
    assert our_blocks() == set()
    for pid in seen["pids"]:
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)


# --------------------------------------------------------------------------- the pool


@st.composite
def batches(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, list[ColumnRequest]]:
    """Random codes (2 to 7 variables of 2 to 4 states, 1 to 300 rows) and column
    requests over them, the child itself standing for the base family at times."""
    n = draw(st.integers(2, 7))
    rows = draw(st.integers(1, 300))
    arities = np.array(draw(st.lists(st.integers(2, 4), min_size=n, max_size=n)))
    seed = draw(st.integers(0, 2**32 - 1))
    codes = (np.random.default_rng(seed).integers(0, 1 << 16, (n, rows)) % arities[:, None]
             ).astype(np.uint8)
    requests: list[ColumnRequest] = []
    for _ in range(draw(st.integers(1, 6))):
        child = draw(st.integers(0, n - 1))
        mask = draw(st.integers(0, (1 << n) - 1)) & ~(1 << child)
        candidates = draw(st.lists(st.integers(0, n - 1), min_size=1, max_size=n, unique=True))
        requests.append((child, mask, candidates))
    return codes, arities, requests


@settings(max_examples=25, deadline=None)
@given(case=batches(), score=st.sampled_from(ALL_SCORES), workers=st.integers(1, 3))
def test_pooled_batches_are_the_in_process_bits(
        case: tuple[np.ndarray, np.ndarray, list[ColumnRequest]], score: str,
        workers: int) -> None:
    """A pooled scorer's values of a batch (computed by the workers) equal the command
    process's ``_compute_batch`` bit for bit (the exact float of every family), in
    request order, for any worker count."""
    codes, arities, requests = case
    here = build_scorer(score, codes, arities)
    assert isinstance(here, CountScorer)
    pool = ScoringPool(workers, here.function, codes, arities)
    pooled = PooledCountScorer.over(here, pool)
    threshold = pool_module.POOL_MIN_ROW_FAMILIES
    pool_module.POOL_MIN_ROW_FAMILIES = 0  # every batch to the workers
    try:
        there = pooled._compute_batch(requests)
    finally:
        pool_module.POOL_MIN_ROW_FAMILIES = threshold
        pool.close()
    expected = here._compute_batch(requests)
    assert [np.array(v).tobytes() for v in there] == [np.array(v).tobytes() for v in expected]
    assert sum(pool.families.values()) == sum(len(c) for _, _, c in requests)
    assert not (SHM / str(pool.block_name)).exists()


@given(requests=st.lists(st.tuples(st.integers(0, 5), st.integers(0, 63),
                                   st.lists(st.integers(0, 5), max_size=8)), max_size=8),
       parts=st.integers(1, 5))
def test_chunks_are_the_requests_in_order_and_about_equal(
        requests: list[ColumnRequest], parts: int) -> None:
    """The chunks' families, concatenated, are the requests' families in order (each
    with its child and mask); no chunk is empty and their sizes differ by at most one."""
    chunks = split_requests(requests, parts)
    flat = [(c, m, p) for c, m, ps in requests for p in ps]
    assert [(c, m, p) for chunk in chunks for c, m, ps in chunk for p in ps] == flat
    sizes = [sum(len(ps) for _, _, ps in chunk) for chunk in chunks]
    assert all(sizes) and (not sizes or max(sizes) - min(sizes) <= 1)
    assert len(chunks) == min(parts, len(flat))


@pytest.mark.slow
def test_spawned_workers_compute_the_same_bits() -> None:
    """Workers started fresh (spawn: the score function and setup pickled, the codes
    attached from the block) give the in-process values too."""
    rng = np.random.default_rng(3)
    codes = rng.integers(0, 3, (5, 400)).astype(np.uint8)
    arities = np.full(5, 3)
    for score in ("bdeu", "bic"):
        scorer = build_scorer(score, codes, arities)
        assert isinstance(scorer, CountScorer)
        requests: list[ColumnRequest] = [(c, 1 << ((c + 1) % 5), [p for p in range(5)])
                                         for c in range(5)]
        pool = ScoringPool(2, scorer.function, codes, arities, start_method="spawn")
        try:
            assert pool.compute(requests) == scorer._compute_batch(requests)
        finally:
            pool.close()
        assert len(pool.families) == 2


def test_a_killed_worker_is_an_engine_failure_and_the_block_goes(tmp_path: Path) -> None:
    codes = np.arange(40, dtype=np.uint8).reshape(4, 10) % 2
    arities = np.full(4, 2)
    scorer = build_scorer("bic", codes, arities)
    assert isinstance(scorer, CountScorer)
    pool = ScoringPool(2, scorer.function, codes, arities)
    try:
        requests: list[ColumnRequest] = [(0, 0, [1, 2, 3, 0]), (1, 0b100, [0, 2, 3])]
        assert pool.compute(requests) == scorer._compute_batch(requests)
        os.kill(pool._processes[0].pid or 0, signal.SIGKILL)
        pool._processes[0].join()
        with pytest.raises(EngineFailure, match="scoring worker of the local pool died"):
            pool.compute(requests)
    finally:
        pool.close()
    assert not (SHM / str(pool.block_name)).exists()
    assert not pool._processes


def test_small_batches_and_other_engines_stay_in_process(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """Below the threshold a pooled scorer computes itself (no worker starts); only a
    local pool of several workers and a plain count scorer of enough rows get a pool."""
    codes = np.zeros((3, 5), dtype=np.uint8)
    arities = np.full(3, 2)
    scorer = build_scorer("bic", codes, arities)
    assert isinstance(scorer, CountScorer)
    with pooled_scoring(runner.engines.LocalPool(2), scorer) as same:
        assert same is scorer  # 5 rows: fewer than POOL_MIN_ROWS
    monkeypatch.setattr(pool_module, "POOL_MIN_ROWS", 5)
    with pooled_scoring(runner.engines.LocalPool(2), scorer) as pooled:
        assert isinstance(pooled, PooledCountScorer) and pooled.pool is not None
        assert pooled.prefetch([(0, 0, [1, 2])]) == 3
        assert not pooled.pool.started
        assert pickle.loads(pickle.dumps(pooled)).pool is None  # a copy computes itself
    for engine in (None, runner.engines.InProcess(), runner.engines.LocalPool(1)):
        with pooled_scoring(engine, scorer) as same:
            assert same is scorer
    subclass = PooledCountScorer.over(scorer, None)
    with pooled_scoring(runner.engines.LocalPool(2), subclass) as same:
        assert same is subclass
