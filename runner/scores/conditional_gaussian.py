"""The conditional linear Gaussian BIC (``cg-bic``) of a table that mixes discrete and
continuous columns.

The model is the conditional Gaussian (CG) distribution of Lauritzen & Wermuth (1989,
"Graphical models for associations between variables, some of which are qualitative and
some quantitative", Annals of Statistics 17(1)) written as a Bayesian network: a discrete
variable has only discrete parents and a table of probabilities per configuration of them
(the restriction under which the network's joint distribution is CG: Lauritzen 1992,
"Propagation of probabilities, means, and variances in mixed graphical association
models", JASA 87(420)); a continuous variable y with discrete parents D and continuous
parents C is, given configuration i of D, a linear regression

    y = m_i + b_i^T c + e,   e ~ N(0, s2_i),

with its own intercept, coefficients and variance per configuration: the local model of
Bottcher (2001, "Learning Bayesian networks with mixed variables", AISTATS 2001), whose
parameters (m_i, b_i, s2_i) for every configuration i are the ones counted below. (Bottcher
scores a network by its marginal likelihood under his master prior; the BIC here replaces
that by the maximised likelihood and Schwarz's (1978) penalty.)

Family scores (natural logarithms, N the rows):

* a discrete child: the discrete BIC of :mod:`runner.scores.likelihood`, on the counts of
  its configurations: LL - (ln N / 2) (r - 1) q, q the product of its parents' state counts;
* a continuous child: for each configuration i of D that occurs in the data (n_i rows),
  the least-squares fit of y on C with an intercept on those rows, at its maximum-likelihood
  variance RSS_i / n_i:

      LL_i = -(n_i / 2) (ln(2 pi RSS_i / n_i) + 1),
      CG-BIC = sum_i LL_i - (ln N / 2) q_D (|C| + 2),

  q_D the product of the discrete parents' state counts: every possible configuration is
  counted, occurring or not, as the discrete BIC counts q (so a score with no continuous
  column is ``bic`` exactly and one with no discrete column is ``gaussian-bic`` exactly).

A configuration with n_i <= |C| + 1 rows has no residual degree of freedom: its least-squares
fit is exact and its variance would be 0 (an infinite likelihood). Its rows are scored
instead under the child's fit without parents on all N rows (mean and ML variance of y), so
such a configuration earns nothing from its own parameters, which the penalty still counts.
Within a configuration whose continuous parents are linearly dependent (a parent constant
there, say) the dependent ones are left out of that configuration's fit: the residual sum of
squares of least squares is the same (the same column space), the coefficient of a left-out
parent is 0.

A discrete child with a continuous parent is outside the model: the engine never proposes
one (:func:`runner.constraints.build_constraints` with the columns' kinds forbids every edge
continuous -> discrete) and asking for its score is a ``ValueError``.

Score equivalence. Within the DAGs that keep the restriction, reversing a covered edge
between two discrete or two continuous variables keeps the score as long as no configuration
is thin (both families then have the same configurations and the same row sets, where the
Gaussian and the discrete BIC are each score-equivalent); but equivalence-class search scores
a class through members that break the restriction, and the thin-configuration rule breaks
exactness, so the registry does not declare ``cg-bic`` score-equivalent: GES refuses it and
the default search is hill climbing.

Determinism: the means and scatter matrices of the continuous columns within each
configuration are exact (:func:`runner.scores.fixed_order.exact_moments` on the rows of that
configuration, computed once per discrete parent set and cached), fits are the fixed-order
LDL^T solves of :mod:`runner.scores.gaussian`, logarithms our ``ln``, totals ``math.fsum``:
the same bits on every machine and for every order of the rows.
"""

from __future__ import annotations

import math
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from runner.scores.cache import CachedScorer, mask_members
from runner.scores.counts import configuration_codes, family_counts
from runner.scores.elementary import ln_scalar
from runner.scores.fixed_order import NotPositiveDefinite, back_substitute, ldl
from runner.scores.gaussian import (
    GaussianStatistics,
    LinearGaussianFamily,
    family_matrix,
    sufficient_statistics,
)
from runner.scores.likelihood import bic_family, log_likelihood

#: A parent pivot at or below this share of its diagonal entry counts as linearly
#: dependent on the parents before it, within one configuration.
DEPENDENT_PIVOT = 1e-12

#: Discrete parent sets whose per-configuration statistics are kept (least recently used
#: ones are dropped).
STATISTICS_CACHE = 256


@dataclass(frozen=True)
class Configuration:
    """The continuous columns' statistics on the rows of one configuration of a discrete
    parent set: ``states`` the parents' state codes, ``statistics`` over those rows
    (indices are positions among the continuous columns)."""

    code: int
    states: tuple[int, ...]
    statistics: GaussianStatistics


@dataclass(frozen=True)
class ConfigurationFit:
    """One configuration's regression: parameters (coefficients in the order of the
    continuous parents), its rows and log-likelihood; ``thin`` when it had too few rows
    and its rows were scored under the child's fit without parents."""

    states: tuple[int, ...]
    rows: int
    family: LinearGaussianFamily
    log_likelihood: float
    thin: bool


class MixedData:
    """Discrete codes and continuous values of one table, with the statistics a family
    needs: those of all rows (for the fit without parents), and per configuration of a
    discrete parent set (computed on first use, cached)."""

    def __init__(self, codes: np.ndarray, arities: np.ndarray, values: np.ndarray | None,
                 continuous: Sequence[bool]) -> None:
        self.codes = codes
        self.arities = np.asarray(arities, dtype=np.int64)
        self.continuous = tuple(bool(c) for c in continuous)
        self.n_vars = len(self.continuous)
        self.n_rows = int(codes.shape[1])
        self.positions = {v: k for k, v in enumerate(i for i, c in enumerate(self.continuous)
                                                      if c)}
        block = None
        if self.positions:
            if values is None:
                raise ValueError("continuous columns need their values")
            block = np.ascontiguousarray(np.asarray(values, dtype=np.float64)[
                sorted(self.positions)])
        self.values = block
        self.overall = None if block is None else sufficient_statistics(block)
        self._by_parents: OrderedDict[tuple[int, ...], list[Configuration]] = OrderedDict()

    def is_continuous(self, v: int) -> bool:
        return self.continuous[v]

    def configurations(self, discrete: tuple[int, ...]) -> list[Configuration]:
        """The occurring configurations of ``discrete`` (sorted by mixed-radix code) with
        the continuous columns' exact statistics on their rows."""
        cached = self._by_parents.get(discrete)
        if cached is not None:
            self._by_parents.move_to_end(discrete)
            return cached
        assert self.values is not None and self.overall is not None
        if not discrete:
            out = [Configuration(0, (), self.overall)]
        else:
            code, _, _ = configuration_codes(self.codes, self.arities, list(discrete))
            occurring, first, inverse = np.unique(code, return_index=True,
                                                  return_inverse=True)
            order = np.argsort(inverse.reshape(-1), kind="stable")
            bounds = np.searchsorted(inverse.reshape(-1)[order], np.arange(occurring.size + 1))
            out = []
            for k in range(occurring.size):
                rows = order[bounds[k]:bounds[k + 1]]
                states = tuple(int(self.codes[p, first[k]]) for p in discrete)
                out.append(Configuration(int(occurring[k]), states,
                                         sufficient_statistics(self.values[:, rows])))
        self._by_parents[discrete] = out
        if len(self._by_parents) > STATISTICS_CACHE:
            self._by_parents.popitem(last=False)
        return out

    def split(self, parents: Sequence[int]) -> tuple[tuple[int, ...], tuple[int, ...]]:
        """(discrete parents, continuous parents), each sorted."""
        ordered = sorted(parents)
        return (tuple(p for p in ordered if not self.continuous[p]),
                tuple(p for p in ordered if self.continuous[p]))

    def possible(self, discrete: Sequence[int]) -> int:
        """The number of possible configurations of ``discrete`` (1 for none)."""
        return math.prod(int(self.arities[p]) for p in discrete)


def _dependent_free_fit(stats: GaussianStatistics, child: int, parents: list[int]
                        ) -> tuple[list[int], list[list[float]], list[float]]:
    """LDL^T of the family matrix [kept parents..., child], leaving out, one at a time,
    the first parent whose pivot shows it linearly dependent on the parents before it
    (fixed order; with independent parents this is one factorization, as gaussian-bic's)."""
    kept = list(parents)
    while True:
        matrix = family_matrix(stats, [*kept, child])
        try:
            lower, pivots = ldl(matrix, last_pivot_free=True)
        except NotPositiveDefinite:
            kept.pop(_first_dependent(stats, kept))
            continue
        bad = next((a for a in range(len(kept))
                    if not pivots[a] > DEPENDENT_PIVOT * matrix[a][a]), None)
        if bad is None:
            return kept, lower, pivots
        kept.pop(bad)


def _first_dependent(stats: GaussianStatistics, parents: list[int]) -> int:
    """The first of ``parents`` whose pivot fails (non-positive or tiny)."""
    for size in range(1, len(parents) + 1):
        matrix = family_matrix(stats, parents[:size])
        try:
            _, pivots = ldl(matrix, last_pivot_free=True)
        except NotPositiveDefinite:
            return size - 2  # an earlier pivot failed: found at the previous size
        if not pivots[-1] > DEPENDENT_PIVOT * matrix[-1][-1]:
            return size - 1
    return len(parents) - 1


def _floor_rss(rss: float, syy: float) -> float:
    # as runner.scores.gaussian: an exact fit's RSS may round a hair below zero
    return max(rss, syy * 1e-300, np.finfo(np.float64).tiny)


def regression(stats: GaussianStatistics, child: int, parents: Sequence[int]
               ) -> tuple[LinearGaussianFamily, float]:
    """Least-squares fit of column ``child`` on ``parents`` (positions in ``stats``) with
    an intercept, and its RSS; dependent parents get coefficient 0 (see the module). With
    independent parents this is exactly :func:`runner.scores.gaussian.
    linear_gaussian_parameters` (the same operations in the same order)."""
    means = stats.mean_values
    syy = stats.scatter_rows[child][child]
    if not parents:
        return LinearGaussianFamily(means[child], (), syy / stats.n_rows), syy
    kept, lower, pivots = _dependent_free_fit(stats, child, list(parents))
    if not kept:
        return LinearGaussianFamily(means[child], (0.0,) * len(parents),
                                    syy / stats.n_rows), syy
    beta = dict(zip(kept, back_substitute(lower, lower[-1]), strict=True))
    intercept = math.fsum([means[child], *(-beta[q] * means[q] for q in kept)])
    rss = _floor_rss(pivots[-1], syy)
    coefficients = tuple(beta.get(q, 0.0) for q in parents)
    return LinearGaussianFamily(intercept, coefficients, rss / stats.n_rows), rss


def gaussian_log_likelihood(rows: int, rss: float) -> float:
    """-(n / 2)(ln(2 pi RSS / n) + 1): the maximised Gaussian log-likelihood of a
    regression with residual sum of squares RSS on n rows (as gaussian-loglik)."""
    return -0.5 * rows * (ln_scalar(2.0 * math.pi * rss / rows) + 1.0)


def _unconditional(data: MixedData, y: int, config: Configuration
                   ) -> tuple[LinearGaussianFamily, float]:
    """The child's fit without parents on all rows, and the log-likelihood of the
    configuration's rows under it: -(n/2) ln(2 pi s2) - sum_r (y_r - m)^2 / (2 s2), with
    sum_r (y_r - m)^2 = S_yy + n (mean_y - m)^2 over the configuration's rows."""
    overall = data.overall
    assert overall is not None
    mean, s2 = overall.mean_values[y], overall.scatter_rows[y][y] / overall.n_rows
    s2 = max(s2, np.finfo(np.float64).tiny)
    stats = config.statistics
    n = stats.n_rows
    shift = stats.mean_values[y] - mean
    squares = math.fsum([stats.scatter_rows[y][y], n * shift * shift])
    ll = -0.5 * n * ln_scalar(2.0 * math.pi * s2) - squares / (2.0 * s2)
    return LinearGaussianFamily(mean, (), s2), ll


def continuous_fits(data: MixedData, child: int, parents: Sequence[int]
                    ) -> list[ConfigurationFit]:
    """The per-configuration regressions of a continuous ``child`` (column index) on its
    continuous parents, one per occurring configuration of its discrete parents."""
    discrete, continuous = data.split(parents)
    y = data.positions[child]
    c = [data.positions[p] for p in continuous]
    out = []
    for config in data.configurations(discrete):
        n = config.statistics.n_rows
        if n <= len(c) + 1 and discrete:
            base, ll = _unconditional(data, y, config)
            family = LinearGaussianFamily(base.intercept, (0.0,) * len(c), base.variance)
            out.append(ConfigurationFit(config.states, n, family, ll, True))
            continue
        family, rss = regression(config.statistics, y, c)
        out.append(ConfigurationFit(config.states, n, family,
                                    gaussian_log_likelihood(n, rss), False))
    return out


def cg_loglik_family(data: MixedData, child: int, parents: Sequence[int]) -> float:
    """The family's maximised log-likelihood (see the module); a ``ValueError`` for a
    discrete child with a continuous parent."""
    discrete, continuous = data.split(parents)
    if not data.is_continuous(child):
        if continuous:
            raise ValueError(f"cg-bic: discrete variable {child} may not have continuous "
                             f"parents {list(continuous)}")
        table, _ = family_counts(data.codes, data.arities, child, discrete)
        return log_likelihood(table, data.n_rows)
    return math.fsum(fit.log_likelihood for fit in continuous_fits(data, child, parents))


def cg_parameter_count(data: MixedData, child: int, parents: Sequence[int]) -> int:
    """Free parameters of the family: (r - 1) q for a discrete child, q_D (|C| + 2) for a
    continuous one (every possible configuration counted)."""
    discrete, continuous = data.split(parents)
    q = data.possible(discrete)
    if not data.is_continuous(child):
        return (int(data.arities[child]) - 1) * q
    return q * (len(continuous) + 2)


def cg_bic_family(data: MixedData, child: int, parents: Sequence[int]) -> float:
    """The family's CG-BIC: the discrete BIC for a discrete child, else the sum of the
    per-configuration log-likelihoods minus (ln N / 2) q_D (|C| + 2)."""
    discrete, continuous = data.split(parents)
    if not data.is_continuous(child):
        if continuous:
            raise ValueError(f"cg-bic: discrete variable {child} may not have continuous "
                             f"parents {list(continuous)}")
        table, q = family_counts(data.codes, data.arities, child, discrete)
        return bic_family(table, q, data.n_rows)
    penalty = 0.5 * ln_scalar(data.n_rows) * cg_parameter_count(data, child, parents)
    return cg_loglik_family(data, child, parents) - penalty


class ConditionalGaussianScorer(CachedScorer):
    """CG-BIC family scores of a mixed table, cached like every scorer (see
    :class:`~runner.scores.cache.CachedScorer`)."""

    def __init__(self, data: MixedData, cache_limit: int | None = None) -> None:
        super().__init__(data.n_vars, data.n_rows, cache_limit)
        self.data = data

    def _compute(self, child: int, mask: int) -> float:
        return cg_bic_family(self.data, child, mask_members(mask))


def build_cg_scorer(codes: np.ndarray, arities: np.ndarray | Sequence[int],
                    values: np.ndarray | None, continuous: Sequence[bool],
                    cache_limit: int | None = None) -> ConditionalGaussianScorer:
    """A cached CG-BIC scorer: ``codes`` (n_vars x rows, the discrete columns' codes),
    ``values`` (n_vars x rows, the continuous columns' numbers; other rows ignored) and
    which columns are continuous."""
    return ConditionalGaussianScorer(
        MixedData(codes, np.asarray(arities, dtype=np.int64), values, continuous),
        cache_limit)
