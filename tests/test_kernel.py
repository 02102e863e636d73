"""The compiled counting kernel gives the numpy path's tables exactly, a column of
candidates scores as one family at a time would, and the choice of path leaves every
stored value alone (the whole run.json, times aside, under either path)."""

from __future__ import annotations

import json
import os
import pickle
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any
from unittest import mock

import numpy as np
import pytest
from conftest import CliCall, Network
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from runner.errors import EnvironmentFault
from runner.scores import build_scorer
from runner.scores import counts as counts_module
from runner.scores.cache import DEFAULT_CACHE_LIMIT, MAX_CACHE_LIMIT, cache_limit_for
from runner.scores.counts import (
    KERNEL_VARIABLE,
    CountScorer,
    code_dtype,
    dense_limit,
    family_counts,
)

ROOT = Path(__file__).resolve().parents[1]

kernel = pytest.importorskip("runner.scores.kernel")


@st.composite
def coded_data(draw: st.DrawFn, max_arity: int = 40, wide_arity: int = 300,
               max_vars: int = 6, min_rows: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Codes (n_vars x n_rows, uint8, or uint16 with arities up to ``wide_arity``) below
    random arities; a few states of a variable may never occur."""
    n_vars = draw(st.integers(2, max_vars))
    n_rows = draw(st.integers(min_rows, 400))
    wide = draw(st.booleans())
    arities = np.array([draw(st.integers(1, wide_arity if wide else max_arity))
                        for _ in range(n_vars)], dtype=np.int64)
    dtype = np.uint16 if wide else np.uint8
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    codes = np.stack([rng.integers(0, a, n_rows) for a in arities]).astype(dtype)
    return codes, arities


def random_family(draw: Callable[[st.SearchStrategy[Any]], Any], n_vars: int,
                  most: int = 4) -> tuple[int, list[int]]:
    child = draw(st.integers(0, n_vars - 1))
    others = [v for v in range(n_vars) if v != child]
    parents = sorted(draw(st.lists(st.sampled_from(others), unique=True, max_size=most)))
    return child, parents


def cells(arities: np.ndarray, child: int, parents: list[int]) -> int:
    out = int(arities[child])
    for p in parents:
        out *= int(arities[p])
    return out


@settings(max_examples=150, deadline=None)
@given(data=coded_data(), choice=st.data())
def test_kernel_tables_equal_the_numpy_tables(data: tuple[np.ndarray, np.ndarray],
                                              choice: st.DataObject) -> None:
    """Same configurations in the same order, same counts, same dtype, for families whose
    codes take every width of the numpy path (uint8 to uint64 cells): the kernel counts
    those that fit a dense table, the scorer leaves the others to the numpy path."""
    codes, arities = data
    child, parents = random_family(choice.draw, codes.shape[0])
    expected, q = family_counts(codes, arities, child, parents)
    size = cells(arities, child, parents)
    if size <= 1 << 20:
        for room in (size, size * kernel.LANES):  # one lane, and interleaved lanes
            dense = np.zeros(room, np.int64)
            got = kernel.family_table(codes, arities, child, parents, dense,
                                      np.zeros(codes.shape[1], np.int64))
            assert got.dtype == expected.dtype == np.int64
            assert np.array_equal(got, expected)
            assert not dense.any()
    scorer = CountScorer(lambda t, q, n: 0.0, codes, arities)
    scorer._choice = "numba"
    table, q_scorer = scorer.counts(child, parents)
    assert (q_scorer, table.dtype) == (q, expected.dtype)
    assert np.array_equal(table, expected)
    assert scorer._dense is None or not scorer._dense.any()  # the scratch is left zeroed


@settings(max_examples=200, deadline=None)
@given(data=coded_data(max_arity=6, wide_arity=12, max_vars=8, min_rows=0), choice=st.data(),
       narrow=st.booleans())
def test_every_lane_count_and_width_gives_the_numpy_table(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject, narrow: bool) -> None:
    """However the count is spread (one to ``LANES`` lanes, as the rows and the room
    allow, also over fewer rows than lanes or an odd number; the scratch in 32-bit or
    64-bit cells; up to seven parents, past the one-pass cell code of four), the table
    is the numpy path's and the scratch is left zeroed. Zero and one rows included."""
    codes, arities = data
    child, parents = random_family(choice.draw, codes.shape[0], most=7)
    expected, _ = family_counts(codes, arities, child, parents)
    size = cells(arities, child, parents)
    assume(size <= 1 << 16)
    dense = np.zeros(size * choice.draw(st.sampled_from([1, 2, kernel.LANES])), np.int64)
    code = np.zeros(codes.shape[1], np.int64)
    scratch = ((dense.view(np.int32), code.view(np.uint32)) if narrow
               else (dense, code.view(np.uint64)))
    got = kernel._family_into_jit(codes, arities, np.asarray(parents, np.int64), child,
                                  *scratch)
    assert got.dtype == expected.dtype == np.int64
    assert np.array_equal(got, expected)
    assert not dense.any()


def test_the_lanes_follow_the_rows_and_the_room() -> None:
    """Up to ``LANES`` lanes while the lanes of every cell fit half the rows and the
    scratch; one lane for tables large against the rows (the one-lane compaction)."""
    lanes = kernel._lanes  # the Python function the kernel compiles
    assert lanes(10, 10_000, 10_000, 8) == 8
    assert lanes(10, 40, 10_000, 8) == 4
    assert lanes(100, 10_000, 1_000, 8) == 4
    assert lanes(100, 10_000, 199, 8) == 1
    assert lanes(3, 10_000, 0, 8) == 1
    assert lanes(1, 10_000, 10_000, 2) == 2


def test_rows_past_the_narrow_limit_are_counted_in_64_bits(asia: Network) -> None:
    """Above :data:`NARROW_LIMIT` rows or cells the kernel counts in 64-bit scratch: the
    same tables, single families and columns."""
    codes, arities = asia.codes, np.asarray(asia.arities, np.int64)
    dense = np.zeros(1 << 12, np.int64)
    code = np.zeros(codes.shape[1], np.int64)
    narrow = kernel.family_table(codes, arities, 0, [1, 3], dense, code)
    column = kernel.column_tables(codes, arities, 0, [3], [1, 2, 4, 5, 6], dense, code)
    with (mock.patch.object(kernel, "NARROW_LIMIT", 0),  # the 32-bit entries unreachable
          mock.patch.object(kernel, "_family_table_jit", None),
          mock.patch.object(kernel, "_column_tables_jit", None)):
        wide = kernel.family_table(codes, arities, 0, [1, 3], dense, code)
        wide_column = kernel.column_tables(codes, arities, 0, [3], [1, 2, 4, 5, 6], dense,
                                           code)
    assert np.array_equal(narrow, wide)
    assert all(np.array_equal(a, b) for a, b in zip(column, wide_column, strict=True))
    assert np.array_equal(wide, family_counts(codes, arities, 0, [1, 3])[0])
    assert not dense.any()


def test_the_width_cases_are_all_reached() -> None:
    """The property above reaches every code width: these arities give families of
    uint8, uint16, uint32 and uint64 cells."""
    assert [code_dtype(c) for c in (2 * 3, 40 * 40 * 4, 300 * 300 * 3, 300**4 * 40)] == [
        np.uint8, np.uint16, np.uint32, np.uint64]


@settings(max_examples=150, deadline=None)
@given(data=coded_data(max_arity=6, wide_arity=9, max_vars=9, min_rows=0), choice=st.data(),
       narrow=st.booleans())
def test_a_column_of_candidates_equals_its_families_counted_alone(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject, narrow: bool) -> None:
    """Each added parent, wherever it falls among the sorted parents, gives the table of
    its family counted on its own, in 32-bit or 64-bit scratch, from zero rows on."""
    codes, arities = data
    n_vars = codes.shape[0]
    child = choice.draw(st.integers(0, n_vars - 1))
    others = [v for v in range(n_vars) if v != child]
    # up to five parents: past the one-pass cell code of four
    parents = sorted(choice.draw(st.lists(st.sampled_from(others), unique=True, max_size=5)))
    rest = [v for v in others if v not in parents]
    # often four or more: the kernel counts four candidates per pass when they fit
    extras = choice.draw(st.lists(st.sampled_from(rest), unique=True, min_size=min(
        len(rest), choice.draw(st.sampled_from([0, 4]))))) if rest else []
    largest = max([cells(arities, child, [*parents, e]) for e in extras], default=1)
    assume(largest <= 1 << 16)
    # room for: the largest table in one lane; each in lanes; four at once in lanes
    room = choice.draw(st.sampled_from([1, kernel.LANES, 4 * kernel.LANES]))
    dense = np.zeros(largest * room, np.int64)
    with mock.patch.object(kernel, "NARROW_LIMIT", kernel.NARROW_LIMIT if narrow else 0):
        tables = kernel.column_tables(codes, arities, child, parents, extras, dense,
                                      np.zeros(codes.shape[1], np.int64))
    assert len(tables) == len(extras)
    for extra, table in zip(extras, tables, strict=True):
        expected, _ = family_counts(codes, arities, child, sorted([*parents, extra]))
        assert table.dtype == expected.dtype
        assert np.array_equal(table, expected)
    assert not dense.any()


@settings(max_examples=60, deadline=None)
@given(data=coded_data(max_arity=5, wide_arity=5), choice=st.data(), limit=st.integers(1, 40),
       score=st.sampled_from(["bic", "bdeu", "k2"]))
def test_column_scores_equal_one_family_at_a_time(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject, limit: int,
        score: str) -> None:
    """The values, the counters and the cache (its entries and their LRU order) after a
    column are those after one ``family_by_mask`` per candidate, also when the cache is
    small enough to evict."""
    codes, arities = data
    n_vars = codes.shape[0]
    one, column = (build_scorer(score, codes, arities, cache_limit=limit) for _ in range(2))
    column._choice = "numba"  # type: ignore[attr-defined]
    for _ in range(4):
        child = choice.draw(st.integers(0, n_vars - 1))
        mask = choice.draw(st.integers(0, 2**n_vars - 1)) & ~(1 << child)
        others = [v for v in range(n_vars) if v != child]
        candidates = choice.draw(st.lists(st.sampled_from(others), unique=True))
        expected = [one.family_by_mask(child, mask ^ (1 << p)) for p in candidates]
        got = column.column_scores(child, mask, candidates)
        assert got.tolist() == expected
        assert (column.evaluations, column.hits) == (one.evaluations, one.hits)
        assert list(column._cache.items()) == list(one._cache.items())


def test_column_scores_refuse_repeated_candidates(asia: Network) -> None:
    scorer = build_scorer("bic", asia.codes, asia.arities)
    with pytest.raises(ValueError, match="distinct"):
        scorer.column_scores(0, 0, [1, 1])
    with pytest.raises(ValueError, match="distinct"):
        scorer.column_scores(0, 0, [0])


def test_the_default_cache_holds_the_first_sweep_within_a_bound() -> None:
    assert cache_limit_for(37) == DEFAULT_CACHE_LIMIT
    assert cache_limit_for(1000) == 2 * 1000 * 999
    assert cache_limit_for(100_000) == MAX_CACHE_LIMIT
    wide = build_scorer("bic", np.zeros((1000, 1), np.uint8), np.full(1000, 2, np.int64))
    assert wide.cache_limit == 2 * 1000 * 999


# --------------------------------------------------------------------------- choosing the path


def test_the_kernel_variable_chooses_the_path(monkeypatch: pytest.MonkeyPatch,
                                              asia: Network) -> None:
    monkeypatch.setenv(KERNEL_VARIABLE, "numpy")
    scorer = build_scorer("bic", asia.codes, asia.arities)
    scorer.family(0, [1])
    assert scorer._kernel() is None
    monkeypatch.setenv(KERNEL_VARIABLE, "numba")
    forced = build_scorer("bic", asia.codes, asia.arities)
    assert forced.family(0, [1]) == scorer.family(0, [1])
    assert forced._kernel() is kernel
    monkeypatch.setenv(KERNEL_VARIABLE, "fortran")
    with pytest.raises(EnvironmentFault, match=f"{KERNEL_VARIABLE}='fortran'"):
        build_scorer("bic", asia.codes, asia.arities).family(0, [1])


def test_unset_the_kernel_takes_over_after_enough_counting(
        monkeypatch: pytest.MonkeyPatch, asia: Network) -> None:
    """Small searches stay on the numpy path (no numba import); past the threshold the
    kernel counts, with the same scores."""
    monkeypatch.delenv(KERNEL_VARIABLE, raising=False)
    monkeypatch.setattr(counts_module, "AUTO_AFTER_ROWS", 3 * asia.codes.shape[1])
    scorer = build_scorer("bic", asia.codes, asia.arities)
    reference = build_scorer("bic", asia.codes, asia.arities)
    reference._choice = "numpy"  # type: ignore[attr-defined]
    with monkeypatch.context() as fresh:  # as in a process without the kernel loaded
        fresh.setattr(counts_module, "kernel_loaded", lambda: False)
        scorer.family(0, [1])
        assert scorer._kernel() is None
        for parent in range(1, 6):
            assert scorer.family(0, [parent]) == reference.family(0, [parent])
        assert scorer._kernel() is kernel
        assert reference._kernel() is None
    # once loaded in the process, a new scorer counts with it at once
    assert build_scorer("bic", asia.codes, asia.arities)._kernel() is kernel


def test_a_scorer_travels_to_another_process_without_its_kernel(
        monkeypatch: pytest.MonkeyPatch, asia: Network) -> None:
    """Pools and clusters pickle scorers: the copy chooses its path again."""
    monkeypatch.setenv(KERNEL_VARIABLE, "numba")
    scorer = build_scorer("bic", asia.codes, asia.arities)
    value = scorer.family(0, [1, 2])
    assert scorer._kernel() is kernel
    copy = pickle.loads(pickle.dumps(scorer))
    assert copy._kernel_module is None
    assert copy.family(0, [2, 3]) == scorer.family(0, [2, 3])
    assert copy._kernel() is kernel and copy.family_by_mask(0, 0b110) == value


def test_a_missing_numba_falls_back_or_fails_clearly(monkeypatch: pytest.MonkeyPatch,
                                                     asia: Network) -> None:
    monkeypatch.setitem(sys.modules, "numba", None)  # import numba raises ImportError
    monkeypatch.delitem(sys.modules, "runner.scores.kernel")
    monkeypatch.setattr(counts_module, "_kernel", counts_module._kernel.__wrapped__)
    monkeypatch.setenv(KERNEL_VARIABLE, "numba")
    with pytest.raises(EnvironmentFault, match=r"numba does not import.*DAGMILL_KERNEL=numpy"):
        build_scorer("bic", asia.codes, asia.arities).family(0, [1])
    monkeypatch.delenv(KERNEL_VARIABLE)
    monkeypatch.setattr(counts_module, "AUTO_AFTER_ROWS", 0)
    scorer = build_scorer("bic", asia.codes, asia.arities)
    scorer.family(0, [1])
    assert scorer._kernel() is None


def test_codes_out_of_range_stay_on_the_numpy_path(asia: Network) -> None:
    """The kernel writes where the codes point: data whose codes reach an arity (which
    the numpy path refuses or counts apart) never reach it."""
    arities = asia.arities.copy()
    arities[0] = 1
    scorer = CountScorer(lambda t, q, n: 0.0, asia.codes, arities)
    scorer._choice = "numba"
    assert scorer._kernel() is None


def test_importing_the_package_does_not_import_numba() -> None:
    code = ("import sys, runner, runner.cli, runner.pipeline, runner.scores, runner.search;"
            "runner.cli.build_parser() if hasattr(runner.cli, 'build_parser') else None;"
            "print('numba' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)}, check=True)
    assert out.stdout.strip() == "False"


@pytest.mark.slow  # compiles the kernel from nothing in a fresh process (about 7 s)
def test_an_unwritable_cache_folder_does_not_stop_the_kernel(tmp_path: Path) -> None:
    """NUMBA_CACHE_DIR under a regular file cannot be made: numba caches elsewhere or not
    at all, and counting works."""
    blocker = tmp_path / "file"
    blocker.write_text("")
    code = ("import numpy as np; from runner.scores import kernel;"
            "c = np.array([[0, 1, 1], [1, 0, 1]], np.uint8);"
            "print(kernel.family_table(c, np.array([2, 2]), 0, [1], np.zeros(4, np.int64),"
            " np.zeros(3, np.int64)).tolist())")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT),
                              "NUMBA_CACHE_DIR": str(blocker / "cache")}, check=True)
    assert out.stdout.strip() == "[[0, 1], [1, 1]]"


def test_a_function_numba_cannot_cache_is_compiled_uncached() -> None:
    namespace: dict[str, object] = {}
    exec("def twice(x):\n    return 2 * x\n", namespace)  # no source file: no cache locator
    compiled = kernel._compiled(namespace["twice"])
    assert compiled(21) == 42


# --------------------------------------------------------------------------- whole runs


def records_without_times(results: Path) -> list[dict]:
    """Every run.json under ``results`` without the fields that name the moment of the run
    (and the record hash over them), plus each run's trace and model bytes."""
    out = []
    for path in sorted(results.rglob("run.json")):
        record = json.loads(path.read_text(encoding="utf-8"))
        for key in ("created_utc", "run_id", "record_sha256", "seconds"):
            record.pop(key)
        record["trace"] = (path.parent / "trace.csv").read_text(encoding="utf-8")
        out.append(record)
    return out


def learn_both(cli: CliCall, spec: Path, folder: Path) -> tuple[list[dict], list[dict]]:
    records = []
    for choice in ("numpy", "numba"):
        done = cli("run", spec, "--results", folder / choice, env={KERNEL_VARIABLE: choice})
        assert done.returncode == 0, done.stderr
        records.append(records_without_times(folder / choice))
    return records[0], records[1]


def test_the_demo_records_are_the_same_under_either_path(tmp_path: Path,
                                                         cli: CliCall) -> None:
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8").replace(
        "  path: ../datasets/", f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    spec = tmp_path / "kiln-line.yaml"
    spec.write_text(text, encoding="utf-8")
    numpy_records, kernel_records = learn_both(cli, spec, tmp_path)
    assert len(numpy_records) == 1
    assert numpy_records == kernel_records


ALARM_SPEC = """\
name: alarm-sample
dataset: {{path: alarm.csv}}
parent_cap: 4
score: {{name: {score}}}
search:
  method: hill-climb
  seed: 1
  restarts: 1
  budget: {{max_seconds: 600, max_evaluations: {evaluations}}}
"""


@pytest.mark.slow
@pytest.mark.parametrize(("score", "evaluations"), [("bic", "null"), ("bdeu", 700)])
def test_an_alarm_sample_gives_the_same_records_under_either_path(
        tmp_path: Path, cli: CliCall, alarm: Network, score: str, evaluations: str) -> None:
    """ALARM (Beinlich et al. 1989) as bundled with pgmpy, 10,000 rows: the same records,
    also when an evaluation budget stops the first fill inside a column of candidates
    (37 x 36 families: 700 is reached half way)."""
    alarm.frame.to_csv(tmp_path / "alarm.csv", index=False)
    spec = tmp_path / "alarm.yaml"
    spec.write_text(ALARM_SPEC.format(score=score, evaluations=evaluations), encoding="utf-8")
    numpy_records, kernel_records = learn_both(cli, spec, tmp_path)
    assert len(numpy_records) == 1
    assert numpy_records == kernel_records
    if evaluations != "null":
        assert numpy_records[0]["search"]["stop_reason"] == "max_evaluations"


def test_dense_limit_follows_the_rows() -> None:
    assert dense_limit(10) == 1 << 16
    assert dense_limit(100_000) == 400_000


@settings(max_examples=150, deadline=None)
@given(data=coded_data(max_arity=8, wide_arity=40, max_vars=7, min_rows=0), choice=st.data())
def test_family_cells_are_the_nonzero_cells_of_a_bincount(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject) -> None:
    """The kernel's occurring cells (what a partition of the rows sends to be summed)
    are exactly the nonzero cells of numpy's bincount of configuration code x r + child
    state, ascending, with their counts, at one lane and interleaved lanes; the scratch
    is left zeroed."""
    codes, arities = data
    child, parents = random_family(choice.draw, codes.shape[0])
    size = cells(arities, child, parents)
    assume(size <= 1 << 18)
    code = np.zeros(codes.shape[1], np.int64)
    for p in parents:
        code = code * int(arities[p]) + codes[p]
    dense_numpy = np.bincount(code * int(arities[child]) + codes[child], minlength=size)
    expected = np.flatnonzero(dense_numpy)
    for room in (size, size * kernel.LANES):
        dense = np.zeros(room, np.int64)
        keys, counts = kernel.family_cells(codes, arities, child, parents, dense,
                                           np.zeros(codes.shape[1], np.int64))
        assert keys.dtype == np.uint64 and counts.dtype == np.int64
        assert np.array_equal(keys, expected)
        assert np.array_equal(counts, dense_numpy[expected])
        assert not dense.any()
