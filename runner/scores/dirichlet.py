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
the occurring configurations are summed.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

_lgamma_ufunc = np.frompyfunc(math.lgamma, 1, 1)


def log_gamma(values: NDArray[np.float64] | float) -> NDArray[np.float64]:
    """Element-wise ln Gamma by the C library's ``lgamma`` (one implementation everywhere,
    so scores are bit-identical whether or not scipy is installed)."""
    return np.asarray(_lgamma_ufunc(values), dtype=np.float64)


def dirichlet_family(table: np.ndarray, a_jk: float) -> float:
    """Log marginal likelihood of a family with one hyperparameter a_jk for every cell."""
    r = table.shape[1]
    a_j = a_jk * r
    n_j = table.sum(axis=1).astype(np.float64)
    cells = table.astype(np.float64)
    config_part = np.sum(log_gamma(a_j) - log_gamma(a_j + n_j))
    cell_part = np.sum(log_gamma(a_jk + cells)) - cells.size * float(log_gamma(a_jk))
    return float(config_part + cell_part)


def bdeu_family(table: np.ndarray, q: int, n_rows: int, ess: float = 1.0) -> float:
    """BDeu family score: Dirichlet hyperparameters ess / (q r) in every cell."""
    return dirichlet_family(table, ess / (q * table.shape[1]))


def k2_family(table: np.ndarray, q: int, n_rows: int) -> float:
    """K2 family score: Dirichlet hyperparameter 1 in every cell (Cooper & Herskovits 1992)."""
    return dirichlet_family(table, 1.0)
