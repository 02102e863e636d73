"""Bayesian Dirichlet family scores for discrete data: BDeu and K2.

The marginal likelihood of a family under a Dirichlet prior with hyperparameters
a_ijk (a_ij = sum_k a_ijk) is, in logs (Heckerman, Geiger & Chickering 1995, eq. 8;
Cooper & Herskovits 1992):

    sum_j [ lnG(a_ij) - lnG(a_ij + N_ij) ] + sum_j sum_k [ lnG(a_ijk + N_ijk) - lnG(a_ijk) ]

with lnG the log-gamma function.

* K2 (Cooper & Herskovits 1992): a_ijk = 1. Not score-equivalent.
* BDeu (Buntine 1991; Heckerman, Geiger & Chickering 1995): a_ijk = ess / (q_i r_i),
  where ess is the equivalent sample size. Score-equivalent.

A parent configuration that never occurs (N_ij = 0) contributes exactly zero, so only
the occurring configurations are summed; so does a cell with N_ijk = 0.

The values are a deterministic function of the counts, the same bits on every machine:
both sums come from fixed-point tables of lnG(a + k) - lnG(a), one per hyperparameter
a (:func:`runner.scores.tables.rising_log_table`, our own log-gamma), summed exactly in
integers, and the family score is rounded to a float once.
"""

from __future__ import annotations

import numpy as np

from runner.registry import BDeuParams, default
from runner.scores.tables import rising_log_table, to_float

DEFAULT_ESS: float = default(BDeuParams, "ess")


def dirichlet_family(table: np.ndarray, a_jk: float, a_j: float, n_rows: int) -> float:
    """Log marginal likelihood of a family with hyperparameter ``a_jk`` in every cell and
    ``a_j`` (= r a_jk) per configuration, over ``n_rows`` rows."""
    rows = table.sum(axis=1)
    top = int(rows.max()) if rows.size else 0
    cell_table = rising_log_table(a_jk, n_rows)
    row_table = rising_log_table(a_j, n_rows)
    cells = cell_table.sum(table, top)
    configurations = row_table.sum(rows, top)
    bits = max(cell_table.bits, row_table.bits)
    total = (cells << (bits - cell_table.bits)) - (configurations << (bits - row_table.bits))
    return to_float(total, bits)


def bdeu_family(table: np.ndarray, q: int, n_rows: int, ess: float = DEFAULT_ESS) -> float:
    """BDeu family score: Dirichlet hyperparameters ess / (q r) in every cell, so ess / q
    per parent configuration."""
    return dirichlet_family(table, ess / (q * table.shape[1]), ess / q, n_rows)


def k2_family(table: np.ndarray, q: int, n_rows: int) -> float:
    """K2 family score: Dirichlet hyperparameter 1 in every cell (Cooper & Herskovits 1992)."""
    return dirichlet_family(table, 1.0, float(table.shape[1]), n_rows)
