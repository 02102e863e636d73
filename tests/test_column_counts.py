"""The numpy path's column count (``runner.scores.counts.column_counts``: a child's
added parents counted together, by row bitmaps or one stacked ``numpy.bincount``) gives
exactly the tables of ``family_counts`` one family at a time, so every score, tie and
record stays the same bits; removals, tables too large for a dense count and codes out of
range keep the one-family route."""

from __future__ import annotations

import pickle
from unittest import mock

import numpy as np
from conftest import Network
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import build_constraints
from runner.scores import build_scorer
from runner.scores import counts as counts_module
from runner.scores.cache import mask_members
from runner.scores.counts import (
    CountScorer,
    StateBitmaps,
    column_counts,
    configurations,
    family_counts,
)
from runner.search import Budget, MoveEngine, hill_climb


@st.composite
def coded_data(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    """Codes (n_vars x n_rows, uint8 or uint16) below random arities (1 included, so a
    variable may have a single state); no rows at all now and then; some states of a
    variable may never occur."""
    n_vars = draw(st.integers(2, 9))
    n_rows = draw(st.sampled_from([0, 1, 63, 64, 65, 200, 700]))
    arities = np.array([draw(st.integers(1, 6)) for _ in range(n_vars)], dtype=np.int64)
    dtype = draw(st.sampled_from([np.uint8, np.uint16]))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    skew = draw(st.sampled_from([1.0, 3.0]))  # 3: a few frequent states, rare others
    codes = np.stack([(rng.random(n_rows) ** skew * a).astype(np.int64) for a in arities])
    return codes.astype(dtype), arities


#: How the counts are made: (BITMAP_CELLS, COLUMN_CHUNK, bitmaps given): the default, the
#: bitmaps always, the stacked count always, each in chunks of one candidate or word row.
ROUTES = [(None, None, True), (10**9, None, True), (0, None, True), (None, None, False),
          (10**9, 1, True), (0, 1, False)]


@settings(max_examples=200, deadline=None)
@given(data=coded_data(), choice=st.data(), route=st.sampled_from(ROUTES))
def test_a_column_count_equals_each_family_counted_alone(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject,
        route: tuple[int | None, int | None, bool]) -> None:
    """Property: for any codes, arities, child, sorted parents and added candidates
    (wherever they fall among the parents), by either count and in any chunks, each table
    is ``family_counts``' table: the same configurations in the same order, the same
    counts, ``int64``."""
    codes, arities = data
    n_vars = codes.shape[0]
    child = choice.draw(st.integers(0, n_vars - 1))
    others = [v for v in range(n_vars) if v != child]
    parents = sorted(choice.draw(st.lists(st.sampled_from(others), unique=True, max_size=3)))
    rest = [v for v in others if v not in parents]
    added = choice.draw(st.permutations(rest)) if rest else []
    added = added[:choice.draw(st.integers(0, len(added)))]
    cells, chunk, with_bitmaps = route
    bitmaps = StateBitmaps(codes, arities) if with_bitmaps else None
    with mock.patch.multiple(
            counts_module,
            BITMAP_CELLS=counts_module.BITMAP_CELLS if cells is None else cells,
            COLUMN_CHUNK=counts_module.COLUMN_CHUNK if chunk is None else chunk):
        tables = column_counts(codes, arities, child, parents, added, bitmaps)
    assert len(tables) == len(added)
    for extra, table in zip(added, tables, strict=True):
        expected, _ = family_counts(codes, arities, child, sorted([*parents, extra]))
        assert table.dtype == expected.dtype == np.int64
        assert table.shape == expected.shape
        assert np.array_equal(table, expected)


def test_the_bitmaps_hold_each_state_s_rows() -> None:
    """Bit i of a state's bitmap is set exactly when row i is in that state; the bits past
    the last row are clear (a worked case of 70 rows: two words)."""
    codes = np.array([np.arange(70) % 3, np.arange(70) // 35], dtype=np.uint8)
    bitmaps = StateBitmaps(codes, np.array([3, 2]))
    assert bitmaps.words.shape == (5, 2)
    assert StateBitmaps.size(codes, np.array([3, 2])) == bitmaps.words.nbytes
    bits = np.unpackbits(bitmaps.words.view(np.uint8), axis=1, bitorder="little")
    for state in range(3):
        assert np.flatnonzero(bits[state]).tolist() == list(range(state, 70, 3))
    assert np.flatnonzero(bits[3]).tolist() == list(range(35))
    assert np.flatnonzero(bits[4]).tolist() == list(range(35, 70))


@settings(max_examples=100, deadline=None)
@given(data=coded_data(), choice=st.data(), limit=st.sampled_from([None, 1, 12, 40]),
       chunk=st.sampled_from([None, 1, 30]))
def test_a_scorer_s_column_tables_are_those_counted_one_by_one(
        data: tuple[np.ndarray, np.ndarray], choice: st.DataObject, limit: int | None,
        chunk: int | None) -> None:
    """Property: on the numpy path, a column with removals and additions, some tables too
    large for the dense count (a small dense limit), the added ones counted in groups of
    bounded cells (a small chunk), gives each candidate's table and ``q`` as
    :meth:`CountScorer.counts` does alone, in the candidates' order."""
    codes, arities = data
    n_vars = codes.shape[0]
    scorer = CountScorer(lambda t, q, n: 0.0, codes, arities)
    scorer._choice = "numpy"
    if limit is not None:
        scorer._limit = limit
    child = choice.draw(st.integers(0, n_vars - 1))
    mask = choice.draw(st.integers(0, 2**n_vars - 1)) & ~(1 << child)
    others = [v for v in range(n_vars) if v != child]
    candidates = choice.draw(st.permutations(others))
    counted_together: list[int] = []

    def spy(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int],
            added: list[int], bitmaps: StateBitmaps | None) -> list[np.ndarray]:
        counted_together.extend(added)
        return column_counts(codes, arities, child, parents, added, bitmaps)

    with mock.patch.object(counts_module, "column_counts", side_effect=spy), \
            mock.patch.object(counts_module, "COLUMN_CHUNK",
                              counts_module.COLUMN_CHUNK if chunk is None else chunk):
        got = scorer.column_tables(child, mask, candidates)
    # only added parents whose dense table fits go together; the rest one by one
    base = configurations(arities, mask_members(mask)) * int(arities[child])
    assert all(not mask >> p & 1 and base * int(arities[p]) <= scorer._limit
               for p in counted_together)
    for p, (table, q) in zip(candidates, got, strict=True):
        expected, q_alone = family_counts(codes, arities, child, mask_members(mask ^ (1 << p)))
        assert q == q_alone
        assert table.dtype == expected.dtype
        assert np.array_equal(table, expected)


def test_codes_out_of_range_keep_the_one_family_route(asia: Network) -> None:
    """The column count trusts every code to be below its arity (a code at the arity
    would count in the next candidate's block): data where it fails are left to
    ``family_counts`` one family at a time, as before (ASIA, Lauritzen & Spiegelhalter
    1988, pgmpy's sampler)."""
    arities = asia.arities.copy()
    arities[0] = 1  # variable 0 has codes 0 and 1
    scorer = CountScorer(lambda t, q, n: 0.0, asia.codes, arities)
    scorer._choice = "numpy"
    candidates = list(range(2, asia.codes.shape[0]))
    alone = np.zeros((1, 2), dtype=np.int64)
    with mock.patch.object(counts_module, "column_counts",
                           side_effect=AssertionError("the column count was used")), \
            mock.patch.object(counts_module, "family_counts", return_value=(alone, 2)):
        tables = scorer.column_tables(1, 1 << 0, candidates)
    assert all(table is alone for table, _ in tables)
    assert scorer._in_range is False


def test_a_scorer_travels_without_its_bitmaps(asia: Network) -> None:
    """The bitmaps are made again where a scorer is used, not pickled with it."""
    scorer = build_scorer("bic", asia.codes, asia.arities)
    assert isinstance(scorer, CountScorer)
    scorer._choice = "numpy"
    scorer.column_tables(0, 0, list(range(1, asia.codes.shape[0])))
    assert scorer._bitmaps is not None
    copy = pickle.loads(pickle.dumps(scorer))
    assert copy._bitmaps is None
    assert np.array_equal(copy.column_tables(0, 0, [1, 2])[1][0],
                          scorer.column_tables(0, 0, [1, 2])[1][0])
    assert copy._bitmaps is not None


def test_a_search_is_the_same_by_columns_and_by_families(alarm: Network) -> None:
    """A greedy search on the numpy path: the same graph, family scores, evaluations and
    hits whether the columns are counted together or one family at a time (the same
    tables, so the same bits; ALARM, Beinlich et al. 1989, pgmpy's sampler)."""
    outcomes = []
    for together in (True, False):
        scorer = build_scorer("bic", alarm.codes, alarm.arities)
        assert isinstance(scorer, CountScorer)
        scorer._choice = "numpy"
        if not together:
            scorer._in_range = False  # the one-family route
        engine = MoveEngine(scorer, build_constraints(alarm.names))
        outcome = hill_climb(engine, Budget(), rng=np.random.default_rng(0))
        outcomes.append((outcome.parent_sets, engine.family.tolist(), scorer.evaluations,
                         scorer.hits))
    assert outcomes[0] == outcomes[1]
