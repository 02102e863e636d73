"""The several-tables forms of the log-likelihood scores (``runner.scores.likelihood.
column_form``) give the bits of the one-table functions, and a scorer gives the same
scores, cache and counters with and without them."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.scores import build_scorer
from runner.scores.likelihood import (
    aic_family,
    bic_family,
    column_form,
    log_likelihood,
    log_likelihoods,
    loglik_family,
)
from runner.scores.tables import DENSE_LIMIT


@st.composite
def column_of_tables(draw: st.DrawFn) -> tuple[list[np.ndarray], list[int], int]:
    r = draw(st.integers(1, 4))
    n_tables = draw(st.integers(1, 6))
    big = draw(st.booleans())
    high = DENSE_LIMIT + 5_000 if big else 60
    tables, qs, total = [], [], 0
    for _ in range(n_tables):
        rows = draw(st.integers(1, 5))
        cells = draw(st.lists(st.integers(0, high), min_size=rows * r, max_size=rows * r))
        table = np.array(cells, dtype=np.int64).reshape(rows, r)
        table[table.sum(axis=1) == 0, 0] = 1  # every configuration occurs
        tables.append(table)
        qs.append(rows * draw(st.integers(1, 3)))
        total = max(total, int(table.sum()))
    return tables, qs, total + draw(st.integers(0, 100))


@settings(max_examples=150, deadline=None)
@given(column_of_tables())
def test_column_forms_give_the_bits_of_the_one_table_functions(
        case: tuple[list[np.ndarray], list[int], int]) -> None:
    """Property: for any tables of one child (also with counts above the dense table,
    which go table by table), each column form equals its family function bit for bit."""
    tables, qs, n_rows = case
    assert log_likelihoods(tables, n_rows) == [log_likelihood(t, n_rows) for t in tables]
    for function in (loglik_family, aic_family, bic_family):
        column = column_form(function)
        assert column is not None
        assert column(tables, qs, n_rows) == [function(t, q, n_rows)
                                              for t, q in zip(tables, qs, strict=True)]


def test_a_scorer_without_the_column_form_answers_the_same(alarm: object) -> None:
    """The same child's columns scored with and without the several-tables form: the
    same values, evaluations and hits (ALARM, Beinlich et al. 1989, pgmpy's sampler)."""
    codes, arities = alarm.codes, alarm.arities  # type: ignore[attr-defined]
    with_form = build_scorer("bic", codes, arities)
    without = build_scorer("bic", codes, arities)
    without.column_function = None  # type: ignore[attr-defined]
    rng = np.random.default_rng(3)
    n = codes.shape[0]
    for _ in range(30):
        child = int(rng.integers(n))
        others = [v for v in range(n) if v != child]
        parents = rng.choice(others, size=int(rng.integers(0, 3)), replace=False)
        mask = sum(1 << int(p) for p in parents)
        assert (with_form.column_scores(child, mask, others).tolist()
                == without.column_scores(child, mask, others).tolist())
    assert (with_form.evaluations, with_form.hits) == (without.evaluations, without.hits)
