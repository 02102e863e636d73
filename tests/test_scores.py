"""Family scores: against pgmpy, against closed forms, score equivalence, and counts."""

from __future__ import annotations

import math
from unittest import mock

import numpy as np
import pandas as pd
import pytest
from conftest import (
    Network,
    covered_edges,
    dependent_codes,
    pgmpy_dag,
    random_dag,
    relative_gap,
)
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import gammaln

from runner.graph import topological_order
from runner.scores import DISCRETE_SCORES, SCORE_EQUIVALENT, build_scorer
from runner.scores import counts as counts_module
from runner.scores.counts import CountScorer, family_counts
from runner.scores.gaussian import GaussianScorer, gaussian_bic_family, sufficient_statistics
from runner.scores.likelihood import bic_family
from runner.scores.protocol import Scorer

# (our name, our ess, pgmpy estimator class name, its keyword arguments)
PGMPY_SCORES = [
    ("bic", 1.0, "BIC", {}),
    ("aic", 1.0, "AIC", {}),
    ("k2", 1.0, "K2", {}),
    ("bdeu", 1.0, "BDeu", {"equivalent_sample_size": 1}),
    ("bdeu", 10.0, "BDeu", {"equivalent_sample_size": 10}),
]
RANDOM_DAGS = 25


# --------------------------------------------------------------------------- (a) pgmpy


@pytest.mark.parametrize(("ours", "ess", "theirs", "kwargs"), PGMPY_SCORES,
                         ids=["bic", "aic", "k2", "bdeu-1", "bdeu-10"])
def test_totals_equal_pgmpy_on_asia(
    asia: Network, ours: str, ess: float, theirs: str, kwargs: dict[str, float]
) -> None:
    """reference: pgmpy 1.1.2 BIC / AIC / K2 / BDeu ``score`` on 5,000 rows sampled by
    pgmpy from ASIA (Lauritzen & Spiegelhalter 1988), for the true graph and 25 random
    DAGs (random order, random edge subset; seeded)."""
    import pgmpy.estimators as estimators

    reference = getattr(estimators, theirs)(asia.frame, **kwargs)
    scorer = build_scorer(ours, asia.codes, asia.arities, ess=ess)
    rng = np.random.default_rng(20240601)
    graphs = [asia.true_parents] + [random_dag(len(asia.names), rng) for _ in range(RANDOM_DAGS)]
    assert len({tuple(g) for g in graphs}) > 20  # the random DAGs really differ
    for parent_sets in graphs:
        expected = reference.score(pgmpy_dag(asia.names, parent_sets))
        got = scorer.total(parent_sets)
        assert relative_gap(got, expected) <= 1e-6, (parent_sets, got, expected)


# --------------------------------------------------------------------------- (b) closed forms

# A hand-sized table: X (parent) with 2 observed states, Y (child) with 3.
# Rows are x, columns y.
TABLE = np.array([[3, 1, 0],
                  [2, 5, 4]])


def table_codes(table: np.ndarray) -> np.ndarray:
    """Codes (row 0: X, row 1: Y) holding exactly ``table[x, y]`` rows of each (x, y)."""
    xs, ys = [], []
    for x in range(table.shape[0]):
        for y in range(table.shape[1]):
            xs += [x] * int(table[x, y])
            ys += [y] * int(table[x, y])
    return np.ascontiguousarray(np.array([xs, ys], dtype=np.uint8))


def bdeu_closed_form(counts: np.ndarray, ess: float) -> float:
    """BDeu log marginal likelihood of one family from its full (q x r) count table, every
    configuration listed, unseen ones too (Heckerman, Geiger & Chickering 1995, with
    a_ijk = ess / (q r)):

        sum_j [lnG(ess/q) - lnG(ess/q + N_j)] + sum_jk [lnG(ess/(q r) + N_jk) - lnG(ess/(q r))]
    """
    q, r = counts.shape
    a_j, a_jk = ess / q, ess / (q * r)
    n_j = counts.sum(axis=1)
    return float(np.sum(gammaln(a_j) - gammaln(a_j + n_j))
                 + np.sum(gammaln(a_jk + counts) - gammaln(a_jk)))


def k2_closed_form(counts: np.ndarray) -> float:
    """K2 log marginal likelihood in Cooper & Herskovits' (1992) factorial form,
    in exact integer arithmetic before the one logarithm:

        prod_j (r - 1)! / (N_j + r - 1)! * prod_k N_jk!
    """
    r = counts.shape[1]
    numerator, denominator = 1, 1
    for row in counts:
        numerator *= math.factorial(r - 1) * math.prod(math.factorial(int(c)) for c in row)
        denominator *= math.factorial(int(row.sum()) + r - 1)
    return math.log(numerator) - math.log(denominator)


@pytest.mark.parametrize("ess", [0.5, 1.0, 10.0])
@pytest.mark.parametrize("parent_arity", [2, 3])
def test_bdeu_family_matches_closed_form(ess: float, parent_arity: int) -> None:
    """reference: closed form of Heckerman, Geiger & Chickering (1995), by
    ``scipy.special.gammaln``. With ``parent_arity`` 3 X has a declared state that never
    occurs: it still counts in q (so in the prior) and its row contributes zero."""
    full = np.zeros((parent_arity, 3), dtype=np.int64)
    full[:2] = TABLE
    codes = table_codes(full)
    scorer = build_scorer("bdeu", codes, [parent_arity, 3], ess=ess)
    child_expected = bdeu_closed_form(full, ess)
    root_expected = bdeu_closed_form(full.sum(axis=1).reshape(1, -1), ess)
    assert scorer.family(1, [0]) == pytest.approx(child_expected, rel=1e-12)
    assert scorer.family(0, []) == pytest.approx(root_expected, rel=1e-12)
    # The reversed direction too: Y as X's parent (the full table transposed).
    assert scorer.family(0, [1]) == pytest.approx(bdeu_closed_form(full.T, ess), rel=1e-12)
    assert scorer.family(1, []) == pytest.approx(
        bdeu_closed_form(full.sum(axis=0).reshape(1, -1), ess), rel=1e-12)


def test_bdeu_root_family_hand_worked() -> None:
    """Hand-worked: with ess = r = 2, BDeu's a_jk = 1 and a root family with counts (a, b)
    has marginal likelihood a! b! / (a + b + 1)!, the integral of p^a (1 - p)^b over
    [0, 1] (the Beta function B(a + 1, b + 1)). X has counts (4, 11) in TABLE."""
    codes = table_codes(TABLE)
    scorer = build_scorer("bdeu", codes, [2, 3], ess=2.0)
    expected = math.log(math.factorial(4) * math.factorial(11) / math.factorial(16))
    assert scorer.family(0, []) == pytest.approx(expected, rel=1e-12)


def test_k2_family_matches_closed_form() -> None:
    """reference: Cooper & Herskovits (1992) K2 formula, factorials in exact arithmetic."""
    codes = table_codes(TABLE)
    scorer = build_scorer("k2", codes, [2, 3])
    assert scorer.family(1, [0]) == pytest.approx(k2_closed_form(TABLE), rel=1e-12)
    assert scorer.family(0, []) == pytest.approx(
        k2_closed_form(TABLE.sum(axis=1).reshape(1, -1)), rel=1e-12)
    assert scorer.family(0, [1]) == pytest.approx(k2_closed_form(TABLE.T), rel=1e-12)
    assert scorer.family(1, []) == pytest.approx(
        k2_closed_form(TABLE.sum(axis=0).reshape(1, -1)), rel=1e-12)


def test_likelihood_scores_hand_worked() -> None:
    """The penalised log-likelihoods on TABLE from their definitions: LL = sum N_jk ln
    (N_jk / N_j); AIC subtracts (r - 1) q (Akaike 1974); BIC (ln N / 2) (r - 1) q
    (Schwarz 1978). N = 15, Y | X has (3 - 1) * 2 = 4 free parameters."""
    codes = table_codes(TABLE)
    ll = sum(c * math.log(c / row.sum()) for row in TABLE for c in row if c > 0)
    assert build_scorer("loglik", codes, [2, 3]).family(1, [0]) == pytest.approx(ll, rel=1e-12)
    assert build_scorer("aic", codes, [2, 3]).family(1, [0]) == pytest.approx(ll - 4, rel=1e-12)
    assert build_scorer("bic", codes, [2, 3]).family(1, [0]) == pytest.approx(
        ll - 0.5 * math.log(15) * 4, rel=1e-12)


# --------------------------------------------------------------------------- (c) equivalence


@st.composite
def dags_with_a_covered_edge(
    draw: st.DrawFn,
) -> tuple[np.ndarray, np.ndarray, list[tuple[int, ...]], tuple[int, int]]:
    """Random data, a random DAG, and a covered edge of it.

    One pair (i, j) with i before j in a topological order of the random DAG is picked,
    and pa(j) is set to pa(i) + {i}: every member of it comes before j, so the graph stays
    acyclic and the edge i -> j is covered by construction."""
    n = draw(st.integers(2, 6))
    arities = draw(st.lists(st.integers(2, 4), min_size=n, max_size=n))
    rows = draw(st.integers(20, 300))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    codes = dependent_codes(arities, rows, rng)
    parents = random_dag(n, rng)
    order = topological_order(parents)
    assert order is not None
    a, b = sorted(draw(st.lists(st.integers(0, n - 1), min_size=2, max_size=2, unique=True)))
    i, j = order[a], order[b]
    parents[j] = tuple(sorted(set(parents[i]) | {i}))
    return codes, np.asarray(arities), parents, (i, j)


@settings(max_examples=60, deadline=None)
@given(case=dags_with_a_covered_edge(), ess=st.sampled_from([0.5, 1.0, 10.0]))
def test_covered_reversal_keeps_equivalent_scores(
    case: tuple[np.ndarray, np.ndarray, list[tuple[int, ...]], tuple[int, int]], ess: float
) -> None:
    """Chickering (1995): reversing a covered edge gives a Markov-equivalent DAG, and a
    score-equivalent score gives both the same total."""
    codes, arities, parents, (i, j) = case
    assert (i, j) in covered_edges(parents)
    reversed_ = [set(ps) for ps in parents]
    reversed_[j].discard(i)
    reversed_[i].add(j)
    after = [tuple(sorted(ps)) for ps in reversed_]
    for name in sorted(SCORE_EQUIVALENT & DISCRETE_SCORES.keys()):
        scorer = build_scorer(name, codes, arities, ess=ess)
        before_total, after_total = scorer.total(parents), scorer.total(after)
        assert relative_gap(before_total, after_total) <= 1e-9, (name, before_total, after_total)


def test_k2_is_not_score_equivalent() -> None:
    """X -> Y and Y -> X are Markov equivalent (a covered edge), yet K2 scores them
    differently on TABLE, since its prior a_ijk = 1 is not a BDe prior (Heckerman, Geiger
    & Chickering 1995); BDeu gives them one total."""
    codes = table_codes(TABLE)
    forward, backward = [(), (0,)], [(1,), ()]
    k2 = build_scorer("k2", codes, [2, 3])
    gap = k2.total(forward) - k2.total(backward)
    assert abs(gap) > 1e-6
    # Exact, from the factorial form: the gap is the same difference of closed forms.
    expected = (k2_closed_form(TABLE.sum(axis=1).reshape(1, -1)) + k2_closed_form(TABLE)
                - k2_closed_form(TABLE.sum(axis=0).reshape(1, -1)) - k2_closed_form(TABLE.T))
    assert gap == pytest.approx(expected, rel=1e-9)
    bdeu = build_scorer("bdeu", codes, [2, 3])
    assert bdeu.total(forward) == pytest.approx(bdeu.total(backward), rel=1e-12)


# --------------------------------------------------------------------------- (d) counts


def crosstab_counts(codes: np.ndarray, arities: np.ndarray, child: int,
                    parents: list[int]) -> np.ndarray:
    """reference: ``pandas.crosstab`` of the parents (rows, lexicographic, first parent
    most significant) against the child (every declared state a column)."""
    r = int(arities[child])
    if not parents:
        return np.bincount(codes[child], minlength=r).reshape(1, r)
    frame = pd.DataFrame({f"p{k}": codes[p] for k, p in enumerate(parents)})
    table = pd.crosstab([frame[c] for c in frame.columns], pd.Series(codes[child], name="c"))
    return table.reindex(columns=range(r), fill_value=0).to_numpy()


@st.composite
def family_cases(
    draw: st.DrawFn, states: tuple[int, int], n_parents: tuple[int, int], rows: tuple[int, int]
) -> tuple[np.ndarray, np.ndarray, int, list[int]]:
    k = draw(st.integers(*n_parents))
    n = k + draw(st.integers(1, 2))
    arities = np.asarray(draw(st.lists(st.integers(*states), min_size=n, max_size=n)))
    n_rows = draw(st.integers(*rows))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    # Skewed draws so that some configurations repeat and some states never occur.
    codes = np.vstack([np.minimum(rng.geometric(rng.uniform(0.2, 0.9), n_rows) - 1, a - 1)
                       for a in arities]).astype(np.uint8)
    codes = np.ascontiguousarray(codes)
    child = draw(st.integers(0, n - 1))
    others = [v for v in range(n) if v != child]
    parents = draw(st.permutations(others))[:k]
    return codes, arities, child, list(parents)


def check_counts(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int]) -> None:
    table, q = family_counts(codes, arities, child, parents)
    assert q == math.prod(int(arities[p]) for p in parents)
    assert table.shape[1] == arities[child]
    assert int(table.sum()) == codes.shape[1]
    assert (table.sum(axis=1) >= 1).all()
    np.testing.assert_array_equal(table, crosstab_counts(codes, arities, child, parents))


@settings(max_examples=60, deadline=None)
@given(case=family_cases(states=(1, 6), n_parents=(0, 4), rows=(1, 200)))
def test_family_counts_dense_path_equals_crosstab(
    case: tuple[np.ndarray, np.ndarray, int, list[int]],
) -> None:
    codes, arities, child, parents = case
    check_counts(codes, arities, child, parents)


@settings(max_examples=40, deadline=None)
@given(case=family_cases(states=(40, 60), n_parents=(3, 4), rows=(20, 500)))
def test_family_counts_sparse_path_equals_crosstab(
    case: tuple[np.ndarray, np.ndarray, int, list[int]],
) -> None:
    """Many parent configurations: past the dense threshold, so the numpy.unique branch."""
    codes, arities, child, parents = case
    cells = math.prod(int(arities[p]) for p in parents) * int(arities[child])
    threshold = max(counts_module.DENSE_CELLS_PER_ROW * codes.shape[1],
                    counts_module.DENSE_CELLS_FLOOR)
    assert cells > threshold  # really the sparse branch
    check_counts(codes, arities, child, parents)


@settings(max_examples=40, deadline=None)
@given(case=family_cases(states=(1, 6), n_parents=(1, 4), rows=(1, 200)))
def test_sparse_and_dense_paths_agree(case: tuple[np.ndarray, np.ndarray, int, list[int]]) -> None:
    """The same family counted by both branches (the threshold patched to force each)."""
    codes, arities, child, parents = case
    with mock.patch.object(counts_module, "DENSE_CELLS_FLOOR", 1 << 62):
        dense, q_dense = family_counts(codes, arities, child, parents)
    with (mock.patch.object(counts_module, "DENSE_CELLS_FLOOR", 0),
          mock.patch.object(counts_module, "DENSE_CELLS_PER_ROW", 0)):
        sparse, q_sparse = family_counts(codes, arities, child, parents)
    assert q_dense == q_sparse
    np.testing.assert_array_equal(dense, sparse)

def test_family_counts_past_uint64_cells() -> None:
    """64 binary parents and a binary child make 2**65 family cells, more than uint64
    holds. Two rows that differ in parent 0 (and the child) are two configurations; the
    counts must say so, or the call must refuse, never merge them silently."""
    n_parents = 64
    codes = np.zeros((n_parents + 1, 2), dtype=np.uint8)
    codes[0, 1] = 1
    codes[n_parents, 1] = 1
    arities = np.full(n_parents + 1, 2)
    try:
        table, _ = family_counts(codes, arities, n_parents, list(range(n_parents)))
    except (ValueError, OverflowError):
        return
    np.testing.assert_array_equal(table, [[1, 0], [0, 1]])


@settings(max_examples=30, deadline=None)
@given(case=family_cases(states=(40, 60), n_parents=(12, 14), rows=(1, 120)))
def test_family_counts_past_64_bits_equals_crosstab(
    case: tuple[np.ndarray, np.ndarray, int, list[int]],
) -> None:
    """More possible family cells than 64 bits hold (at least 40**13 > 2**69): the counts
    still equal the crosstab, and q is still the exact product."""
    codes, arities, child, parents = case
    assert math.prod(int(arities[p]) for p in [*parents, child]) > 2**64
    check_counts(codes, arities, child, parents)


# --------------------------------------------------------------------------- the cache


def test_scorer_caches_by_parent_set() -> None:
    rng = np.random.default_rng(3)
    codes = dependent_codes([2, 3, 2, 4], 100, rng)
    scorer = build_scorer("bic", codes, [2, 3, 2, 4])
    first = scorer.family(0, [1, 2])
    assert (scorer.evaluations, scorer.hits) == (1, 0)
    assert scorer.family(0, (2, 1)) == first  # parent order does not matter
    assert (scorer.evaluations, scorer.hits) == (1, 1)
    scorer.family(0, [1])
    assert (scorer.evaluations, scorer.hits) == (2, 1)
    fresh = build_scorer("bic", codes, [2, 3, 2, 4])
    assert fresh.family(0, [2, 1]) == first


def test_unknown_score_name_is_refused() -> None:
    codes = np.zeros((1, 3), dtype=np.uint8)
    with pytest.raises(ValueError, match="unknown score"):
        build_scorer("mdl", codes, [1])


# --------------------------------------------------------------------------- the protocol


def family_through(scorer: Scorer, child: int, parents: tuple[int, ...]) -> float:
    """A family score asked the way the engines ask: only through the protocol."""
    by_mask = scorer.family_by_mask(child, sum(1 << p for p in parents))
    assert scorer.family(child, reversed(parents)) == by_mask
    return by_mask


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_vars=st.integers(2, 5))
def test_both_scorers_implement_the_protocol_with_the_direct_family_values(
        seed: int, n_vars: int) -> None:
    """Property: the count-based and the Gaussian scorer are instances of the runtime
    ``Scorer`` protocol, and a family asked through it (by mask, by parents in any order)
    is bit for bit the family function applied directly to the count table or to the
    sufficient statistics; a repeated question is a cache hit, not a new evaluation."""
    rng = np.random.default_rng(seed)
    arities = [int(a) for a in rng.integers(2, 5, size=n_vars)]
    codes = dependent_codes(arities, 150, rng)
    values = rng.normal(size=(n_vars, 150)) + codes
    statistics = sufficient_statistics(values)
    count_scorer = build_scorer("bic", codes, arities)
    gaussian_scorer = GaussianScorer(gaussian_bic_family, statistics)
    assert isinstance(count_scorer, CountScorer)
    families = [(c, tuple(p for p in range(n_vars) if p != c and rng.random() < 0.5))
                for c in range(n_vars)]
    for scorer in (count_scorer, gaussian_scorer):
        assert isinstance(scorer, Scorer)
        assert scorer.n_vars == n_vars
        for child, parents in families:
            got = family_through(scorer, child, parents)
            if scorer is count_scorer:
                table, q = family_counts(codes, np.asarray(arities), child, parents)
                assert got == bic_family(table, q, 150)
            else:
                assert got == gaussian_bic_family(statistics, child, parents)
        assert (scorer.evaluations, scorer.hits) == (n_vars, n_vars)
        assert scorer.total([p for _, p in families]) == math.fsum(
            scorer.family(c, p) for c, p in families)


def test_an_object_without_the_counters_is_not_a_scorer() -> None:
    """The protocol names what the engines read: a family function alone is not enough."""

    class FamiliesOnly:
        n_vars = 2

        def family(self, child: int, parents: object) -> float:
            return 0.0

        def family_by_mask(self, child: int, mask: int) -> float:
            return 0.0

        def total(self, parent_sets: object) -> float:
            return 0.0

    assert not isinstance(FamiliesOnly(), Scorer)
