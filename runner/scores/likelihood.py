"""Penalised log-likelihood family scores for discrete data: loglik, AIC and BIC.

For a child X_i with r_i states and parents with q_i joint configurations, and counts
N_ijk (configuration j, child state k), N_ij = sum_k N_ijk:

    LL(i)  = sum_j sum_k N_ijk * ln(N_ijk / N_ij)            (0 ln 0 = 0)
    AIC(i) = LL(i) - (r_i - 1) * q_i                         (Akaike 1974)
    BIC(i) = LL(i) - (ln N / 2) * (r_i - 1) * q_i            (Schwarz 1978)

N is the number of rows and (r_i - 1) * q_i the number of free parameters of the
family's conditional probability table; q_i counts every configuration, occurring or
not. All three decompose over families, and all three are score-equivalent: Markov
equivalent DAGs get the same total (Chickering 1995). Natural logarithms throughout.

The values are a deterministic function of the counts, the same bits on every machine:
LL is computed as sum_jk N_jk ln N_jk - sum_j N_j ln N_j from the fixed-point table of
k ln k (:func:`runner.scores.tables.xlogx_table`), summed exactly in integers and
rounded to a float once; ln N is :func:`runner.scores.tables.ln_scalar`, and each
penalty is one float operation on those values.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from runner.scores.elementary import ln_scalar
from runner.scores.tables import to_float, xlogx_table


def log_likelihood(table: np.ndarray, n_rows: int) -> float:
    """Maximised log-likelihood of a family's count table (rows: configurations) over
    ``n_rows`` rows: sum_jk N_jk ln N_jk - sum_j N_j ln N_j, exactly summed."""
    rows = table.sum(axis=1)
    top = int(rows.max()) if rows.size else 0
    xlogx = xlogx_table(n_rows)
    return to_float(xlogx.sum(table, top) - xlogx.sum(rows, top), xlogx.bits)


def free_parameters(q: int, r: int) -> int:
    """Free parameters of a conditional probability table: (r - 1) * q."""
    return (r - 1) * q


def loglik_family(table: np.ndarray, q: int, n_rows: int) -> float:
    """Family log-likelihood, no penalty (always prefers more parents)."""
    return log_likelihood(table, n_rows)


def aic_family(table: np.ndarray, q: int, n_rows: int) -> float:
    """Family AIC: log-likelihood minus the number of free parameters (Akaike 1974)."""
    return log_likelihood(table, n_rows) - free_parameters(q, table.shape[1])


def bic_family(table: np.ndarray, q: int, n_rows: int) -> float:
    """Family BIC: log-likelihood minus (ln N / 2) per free parameter (Schwarz 1978)."""
    return log_likelihood(table, n_rows) - 0.5 * ln_scalar(n_rows) * free_parameters(
        q, table.shape[1])


def log_likelihoods(tables: Sequence[np.ndarray], n_rows: int) -> list[float]:
    """:func:`log_likelihood` of several tables with the same number of columns (one
    child's families), the same bits, in a few numpy calls for all of them (the exact
    integer sums of :meth:`~runner.scores.tables.CountTable.segment_sums`)."""
    if not tables:
        return []
    sizes = [t.shape[0] for t in tables]
    if min(sizes) == 0 or len({t.shape[1] for t in tables}) != 1:
        return [log_likelihood(t, n_rows) for t in tables]
    stacked = np.concatenate(tables, axis=0)
    rows = stacked.sum(axis=1)
    top = int(rows.max())
    starts = np.zeros(len(tables), dtype=np.intp)
    np.cumsum(sizes[:-1], out=starts[1:])
    xlogx = xlogx_table(n_rows)
    cells = xlogx.segment_sums(stacked, starts, top)
    margins = xlogx.segment_sums(rows, starts, top)
    if cells is None or margins is None:
        return [log_likelihood(t, n_rows) for t in tables]
    return [to_float(c - m, xlogx.bits) for c, m in zip(cells.tolist(), margins.tolist(),
                                                          strict=True)]


def loglik_column(tables: Sequence[np.ndarray], qs: Sequence[int], n_rows: int) -> list[float]:
    """:func:`loglik_family` of several tables of one child, the same bits."""
    return log_likelihoods(tables, n_rows)


def aic_column(tables: Sequence[np.ndarray], qs: Sequence[int], n_rows: int) -> list[float]:
    """:func:`aic_family` of several tables of one child, the same bits."""
    return [ll - free_parameters(q, t.shape[1])
            for ll, q, t in zip(log_likelihoods(tables, n_rows), qs, tables, strict=True)]


def bic_column(tables: Sequence[np.ndarray], qs: Sequence[int], n_rows: int) -> list[float]:
    """:func:`bic_family` of several tables of one child, the same bits."""
    per_parameter = 0.5 * ln_scalar(n_rows)  # (0.5 ln N) k, as bic_family rounds it
    return [ll - per_parameter * free_parameters(q, t.shape[1])
            for ll, q, t in zip(log_likelihoods(tables, n_rows), qs, tables, strict=True)]


#: A family score of several count tables of one child at once: ``f(tables, qs, n_rows)``.
CountColumnScore = Callable[[Sequence[np.ndarray], Sequence[int], int], list[float]]

_COLUMN_FORMS: dict[Callable[[np.ndarray, int, int], float], CountColumnScore] = {
    loglik_family: loglik_column, aic_family: aic_column, bic_family: bic_column}


def column_form(function: Callable[[np.ndarray, int, int], float]) -> CountColumnScore | None:
    """The several-tables form of a family score function (None when it has none)."""
    return _COLUMN_FORMS.get(function)
