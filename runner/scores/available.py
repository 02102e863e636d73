"""Available-case family scores of incomplete discrete data: the penalised node-average
likelihood (Balov 2013).

Under ``dataset.missing: available-case`` every row is kept and a missing cell of a
discrete column carries the reserved code ``r_v`` (the column's number of states; see
:class:`runner.data.Dataset`). A family (child i and its parents) is counted on its
*available rows*: the rows where the child and every parent are present (a product of
the per-column masks ``code != r_v``). Let N be the number of rows of the data set,
N_i the available rows of family i, LL_i the maximised log-likelihood of the family's
count table on those rows (as in :mod:`runner.scores.likelihood`) and k_i = (r_i - 1) q_i
its free parameters.

**What Balov (2013) defines (recalled from memory, not checked against the paper here).**
The node-average log-likelihood of a DAG G is NAL(G) = sum_i LL_i / N_i, each family's
log-likelihood averaged over its own available rows, so families counted on different
numbers of rows are on one scale (a per-row average). The penalised score is
PNAL(G) = NAL(G) - lambda_N |G|, with |G| = sum_i k_i the free parameters and a penalty
coefficient lambda_N -> 0 that must not vanish too fast; under missingness completely
at random (MCAR) the maximiser is then consistent. Which rate the paper requires
(N lambda_N -> infinity as for complete data, or sqrt(N) lambda_N -> infinity) is not
recalled with certainty; the argument under "Caution" suggests the latter. The choice
implemented, as asked, is the BIC-like lambda_N = ln N / (2 N).

**What is implemented here, exactly.** The family score is that form multiplied by the
constant N (which changes no comparison between graphs of the same data):

    s_i = (N / N_i) LL_i - c(N) k_i            (s_i = -c(N) k_i when N_i = 0)

with c(N) = ln N / 2 for ``bic`` (lambda_N = ln N / (2N)), c(N) = 1 for ``aic``
(lambda_N = 1 / N) and c(N) = 0 for ``loglik``. N is the data set's row count, the same
for every family. So s_i / N = LL_i / N_i - lambda_N k_i is Balov's per-family term, and
when no cell is missing (N_i = N for every family) s_i is exactly the complete-data
family score of :mod:`runner.scores.likelihood` (``bic_family`` etc.): the
``(N / N_i)`` factor is skipped when N_i = N, so the bits are the same. A family with
no available row has no likelihood term (its average over no rows is taken as 0).

Determinism: LL_i is the exact fixed-point sum of :func:`runner.scores.likelihood.
log_likelihood` (the k ln k table for N rows, which covers every count <= N_i), rounded
once; the scaling and the penalty are a few correctly rounded float operations on it
and on :func:`runner.scores.elementary.ln_scalar`; the row counts are integers.

Caution (measured, see ``tests/test_available_case.py``): two families' node averages
are taken over different random row sets, and their difference has sampling noise of
order N^-1/2 per row (order sqrt(N) in s_i), well above the ln N / (2N) penalty (ln N / 2
in s_i), so this score tends to add spurious edges, into rare-state columns first. On
ASIA with 8% of cells removed at random it found the true skeleton less often than
``drop-rows``.

Assumption: values missing completely at random (the chance that a cell is missing does
not depend on any value, observed or not). Otherwise the available rows are a biased
sample of the population and the score can prefer a wrong graph.

References
----------
Balov, N. (2013). Consistent model selection of discrete Bayesian networks from
incomplete data. Electronic Journal of Statistics, 7, 1047-1077.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from runner.scores.cache import CachedScorer, mask_members
from runner.scores.counts import family_counts
from runner.scores.elementary import ln_scalar
from runner.scores.likelihood import free_parameters, log_likelihood


def penalty_per_parameter(name: str, n_rows: int) -> float:
    """c(N) of score ``name`` (``loglik``, ``aic`` or ``bic``) for N rows (module doc)."""
    if name == "bic":
        return 0.5 * ln_scalar(n_rows) if n_rows > 0 else 0.0
    if name == "aic":
        return 1.0
    if name == "loglik":
        return 0.0
    raise ValueError(f"score {name!r} has no available-case form; use loglik, aic or bic")


def present_rows(codes: np.ndarray, arities: np.ndarray,
                 variables: Sequence[int]) -> np.ndarray:
    """Mask of the rows where every one of ``variables`` is present (code below its
    arity); all True for no variables. A variable of arity 0 (a continuous column, whose
    codes are all 0) counts as present."""
    mask = np.ones(codes.shape[1], dtype=bool)
    for v in variables:
        if arities[v] > 0:
            mask &= codes[v] < arities[v]
    return mask


def available_family_counts(codes: np.ndarray, arities: np.ndarray, child: int,
                            parents: Sequence[int]) -> tuple[np.ndarray, int, int]:
    """Counts of a family on its available rows: ``(table, q, n_available)``, ``table``
    and ``q`` as :func:`runner.scores.counts.family_counts` returns them."""
    variables = [child, *parents]
    mask = present_rows(codes, arities, variables)
    n_available = int(np.count_nonzero(mask))
    if n_available == codes.shape[1]:
        table, q = family_counts(codes, arities, child, parents)
        return table, q, n_available
    sub = np.ascontiguousarray(codes[np.asarray(variables, dtype=np.intp)][:, mask])
    table, q = family_counts(sub, arities[np.asarray(variables, dtype=np.intp)], 0,
                             list(range(1, len(variables))))
    return table, q, n_available


def available_family_score(table: np.ndarray, q: int, n_available: int, n_rows: int,
                           penalty: float) -> float:
    """s_i = (N / N_i) LL_i - c(N) k_i of one family (module doc); ``penalty`` is c(N)."""
    k = free_parameters(q, table.shape[1])
    if n_available == 0:
        return -penalty * k
    ll = log_likelihood(table, n_rows)
    scaled = ll if n_available == n_rows else ll * (n_rows / n_available)
    return scaled - penalty * k


class AvailableCaseScorer(CachedScorer):
    """Available-case family scores (module doc) of discrete codes with missing cells
    coded as the column's arity; cached like every scorer."""

    def __init__(self, name: str, codes: np.ndarray, arities: np.ndarray,
                 cache_limit: int | None = None) -> None:
        n_vars, n_rows = codes.shape
        super().__init__(int(n_vars), int(n_rows), cache_limit)
        self.name = name
        self.penalty = penalty_per_parameter(name, int(n_rows))
        self.codes = codes
        self.arities = np.asarray(arities, dtype=np.int64)

    def _compute(self, child: int, mask: int) -> float:
        table, q, n_available = available_family_counts(self.codes, self.arities, child,
                                                        mask_members(mask))
        return available_family_score(table, q, n_available, self.n_rows, self.penalty)

    def available_rows(self, child: int, parents: Sequence[int]) -> int:
        """Rows where the child and all ``parents`` are present."""
        return int(np.count_nonzero(present_rows(self.codes, self.arities,
                                                 [child, *parents])))
