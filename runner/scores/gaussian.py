"""Family scores for linear-Gaussian networks: gaussian-loglik, gaussian-bic and BGe.

Every score here is a function of the data's sufficient statistics only: the number of
rows N, the column means and the scatter matrix S = sum_r (x_r - mean)(x_r - mean)^T.
They are computed once (:func:`sufficient_statistics`, exactly, from the rows); a family
score then needs the submatrix of S on the family, a small linear solve or
log-determinant, never another pass over the rows.

Linear-Gaussian family (child y, parents Z): y = b0 + b^T z + e, e ~ N(0, sigma^2),
fitted by least squares with the maximum-likelihood variance:

    b       = S_ZZ^{-1} S_Zy,     b0 = mean_y - b^T mean_Z
    RSS     = S_yy - S_yZ S_ZZ^{-1} S_Zy,   sigma^2 = RSS / N
    LL(y|Z) = -(N / 2) (ln(2 pi sigma^2) + 1)
    BIC     = LL - (ln N / 2) k,   k = |Z| + 2

k counts the family's free parameters: the intercept, one coefficient per parent and the
residual variance (Schwarz 1978 for the penalty). Both totals are score-equivalent:
Markov-equivalent DAGs define the same set of multivariate normal distributions, so the
maximised likelihood is the same, and they have the same number of edges, so the same
total parameter count (sum over families of |Z| + 2 = edges + 2 n).

BGe (Geiger & Heckerman 1994, "Learning Gaussian networks"; with the correction of
Kuipers, Moffa & Heckerman 2014, "Addendum on the scoring of Gaussian directed acyclic
graphical models", Annals of Statistics 42(4)): the log marginal likelihood under a
normal-Wishart prior on the mean and precision of all n variables, with

* alpha_mu > 0: the prior mean's weight, in equivalent rows (default 1);
* alpha_w > n - 1: the Wishart degrees of freedom (default n + 2);
* T = t I: the Wishart scale matrix, t > 0 (default t = alpha_mu (alpha_w - n - 1) /
  (alpha_mu + 1), which sets the prior expected covariance to the identity);
* nu: the prior mean, taken to be the column means of the data (so the term
  N alpha_mu / (N + alpha_mu) (nu - mean)(nu - mean)^T of R vanishes).

With R = T + S and, for a set Y of l variables,

    ln p(d_Y) = -(l N / 2) ln pi + (l / 2) ln(alpha_mu / (N + alpha_mu))
                + ln Gamma_l((N + alpha_w - n + l) / 2) - ln Gamma_l((alpha_w - n + l) / 2)
                + ((alpha_w - n + l) / 2) ln det T_YY - ((N + alpha_w - n + l) / 2) ln det R_YY

(Kuipers et al. 2014: the marginal of the Wishart on Y has alpha_w - n + l degrees of
freedom, which the 1994 paper's formula got wrong), the family score of y with parents Z
is ln p(d_{Z+y}) - ln p(d_Z). The multivariate gamma functions cancel to one ordinary
gamma ratio, so with l = |Z| + 1:

    BGe(y|Z) = -(N / 2) ln pi + (1 / 2) ln(alpha_mu / (N + alpha_mu))
               + ln Gamma((N + alpha_w - n + l) / 2) - ln Gamma((alpha_w - n + l) / 2)
               + ((alpha_w - n + l) / 2) l ln t - ((alpha_w - n + l - 1) / 2) (l - 1) ln t
               - ((N + alpha_w - n + l) / 2) ln det R_{Z+y}
               + ((N + alpha_w - n + l - 1) / 2) ln det R_Z

BGe is score-equivalent (Geiger & Heckerman 1994). It depends on the measurement units
through T = t I: columns on very different scales are best standardised first.
Natural logarithms throughout.

Every value here is the same on every machine and for every order of the rows
(:mod:`runner.scores.fixed_order`): the means and the scatter matrix are the correctly
rounded values of the exact sums (:func:`~runner.scores.fixed_order.exact_moments`); a
family's least-squares fit, residual sum of squares and log-determinants come from one
LDL^T factorization of its matrix in plain Python floats in a fixed order, with inner
products by ``math.fsum`` and logarithms by our ``ln`` (runner.scores.elementary); no
LAPACK call, no numpy reduction. For the family matrix A = S_{Z+y} (parents first, the
child last), the last LDL^T pivot is the Schur complement S_yy - S_yZ S_ZZ^{-1} S_Zy,
that is the RSS, the leading pivots are those of S_ZZ, and the coefficients solve L_ZZ^T
b = l (l the child's row of L); for BGe, ln det R_Z and ln det R_{Z+y} are the sums of
the logarithms of the leading and of all the pivots of R_{Z+y}.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from runner.scores.cache import CachedScorer, mask_members
from runner.scores.elementary import ln_scalar, log_gamma
from runner.scores.fixed_order import (
    back_substitute,
    exact_moments,
    ldl,
    log_pivots,
)

#: Names of the scores of this module.
GAUSSIAN_SCORES: tuple[str, ...] = ("gaussian-loglik", "gaussian-bic", "bge")

DEFAULT_ALPHA_MU = 1.0


@dataclass(frozen=True, eq=False)
class GaussianStatistics:
    """Sufficient statistics of continuous data: rows, column means, scatter matrix.

    ``scatter[i, j] = sum_r (x_ir - mean_i)(x_jr - mean_j)`` (not divided by N); it is
    exactly symmetric.
    """

    n_rows: int
    means: np.ndarray
    scatter: np.ndarray

    @property
    def n_vars(self) -> int:
        return int(self.means.shape[0])

    @cached_property
    def scatter_rows(self) -> tuple[tuple[float, ...], ...]:
        """The scatter matrix as Python floats (rows), for the per-family arithmetic."""
        return tuple(tuple(row) for row in self.scatter.tolist())

    @cached_property
    def mean_values(self) -> tuple[float, ...]:
        return tuple(self.means.tolist())


def sufficient_statistics(values: np.ndarray) -> GaussianStatistics:
    """Means and scatter matrix of ``values`` (shape n_vars x n_rows, float64): a pure
    function of the values, computed once per learn and passed to whoever needs them
    (the scorer, the fitted model, the held-out fit).

    Each entry is the correctly rounded value of the exact one (the scatter about the
    exact means): :func:`runner.scores.fixed_order.exact_moments` sums the rows without
    rounding error, so the bits depend on the multiset of rows only, not on their order,
    the CPU or a linear algebra library's kernel and threads. Cost: one matrix product of
    the data's integer limbs (3 to 5 per column for typical data), about 10 to 25 times
    the arithmetic of a plain scatter matrix, and memory for the limbs of 2**15 rows.
    """
    data = np.asarray(values, dtype=np.float64)
    if data.ndim != 2 or data.shape[1] == 0:
        raise ValueError("values must be a 2-D array with at least one row")
    moments = exact_moments(data)
    n = data.shape[0]
    means = np.array([moments.column_mean(i) for i in range(n)], dtype=np.float64)
    scatter = np.empty((n, n), dtype=np.float64)
    for i in range(n):
        for j in range(i, n):
            scatter[i, j] = scatter[j, i] = moments.scatter(i, j)
    means.flags.writeable = False
    scatter.flags.writeable = False
    return GaussianStatistics(int(data.shape[1]), means, scatter)


def statistics_of(data: np.ndarray | GaussianStatistics) -> GaussianStatistics:
    """``data`` itself when it is already the statistics, else
    :func:`sufficient_statistics` of the values (n_vars x n_rows)."""
    return data if isinstance(data, GaussianStatistics) else sufficient_statistics(data)


def family_matrix(stats: GaussianStatistics, members: Sequence[int],
                  ridge: float = 0.0) -> list[list[float]]:
    """The lower triangle (rows) of S restricted to ``members`` in their order, plus
    ``ridge`` on the diagonal (BGe's R = T + S with T = t I); the diagonal sums are one
    rounding each."""
    rows = stats.scatter_rows
    out = []
    for a, i in enumerate(members):
        row_i = rows[i]
        row = [row_i[j] for j in members[:a]]
        row.append(row_i[i] + ridge if ridge else row_i[i])
        out.append(row)
    return out


def _floor_rss(rss: float, syy: float) -> float:
    # Rounding can take an exact fit a hair below zero; keep the logarithm finite.
    return max(rss, syy * 1e-300, np.finfo(np.float64).tiny)


def _family_factors(stats: GaussianStatistics, child: int, parents: Sequence[int]
                    ) -> tuple[list[list[float]], list[float]]:
    """LDL^T of the family matrix [parents..., child]; its last pivot is the RSS."""
    return ldl(family_matrix(stats, [*parents, child]), last_pivot_free=True)


def residual_sum_of_squares(stats: GaussianStatistics, child: int,
                            parents: Sequence[int]) -> float:
    """RSS of the least-squares fit (with intercept) of ``child`` on ``parents``: the last
    LDL^T pivot of the family's scatter matrix (see the module), S_yy without parents."""
    syy = stats.scatter_rows[child][child]
    if not parents:
        return syy
    _, pivots = _family_factors(stats, child, parents)
    return _floor_rss(pivots[-1], syy)


@dataclass(frozen=True)
class LinearGaussianFamily:
    """The fitted conditional of a child on its parents: y = intercept + sum c_p z_p + e,
    e ~ N(0, variance), variance the maximum-likelihood (RSS / N) residual variance."""

    intercept: float
    coefficients: tuple[float, ...]
    variance: float


def linear_gaussian_parameters(stats: GaussianStatistics, child: int,
                               parents: Sequence[int]) -> LinearGaussianFamily:
    """Least-squares parameters of ``child`` on ``parents`` (coefficients in the order of
    ``parents``) and the maximum-likelihood residual variance, from the statistics only.

    b solves S_ZZ b = S_Zy through the family's LDL^T: L_ZZ^T b = l_yZ, the child's row of
    L (since S_Zy = L_ZZ D_Z l_yZ^T); the intercept mean_y - sum_p b_p mean_p by
    ``math.fsum``; the variance RSS / N, one division."""
    p = list(parents)
    means = stats.mean_values
    syy = stats.scatter_rows[child][child]
    if not p:
        return LinearGaussianFamily(means[child], (), syy / stats.n_rows)
    lower, pivots = _family_factors(stats, child, p)
    beta = back_substitute(lower, lower[-1])
    intercept = math.fsum([means[child], *(-b * means[q] for b, q in zip(beta, p,
                                                                        strict=True))])
    rss = _floor_rss(pivots[-1], syy)
    return LinearGaussianFamily(intercept, tuple(beta), rss / stats.n_rows)


def gaussian_parameter_count(parents: Sequence[int]) -> int:
    """Free parameters of a linear-Gaussian family: intercept + one per parent + variance."""
    return len(parents) + 2


def gaussian_loglik_family(stats: GaussianStatistics, child: int,
                           parents: Sequence[int]) -> float:
    """Maximised log-likelihood of the family, -(N/2)(ln(2 pi RSS/N) + 1)."""
    n = stats.n_rows
    rss = residual_sum_of_squares(stats, child, parents)
    return -0.5 * n * (ln_scalar(2.0 * math.pi * rss / n) + 1.0)


def gaussian_bic_family(stats: GaussianStatistics, child: int,
                        parents: Sequence[int]) -> float:
    """Family log-likelihood minus (ln N / 2) per free parameter (|parents| + 2)."""
    penalty = 0.5 * ln_scalar(stats.n_rows) * gaussian_parameter_count(parents)
    return gaussian_loglik_family(stats, child, parents) - penalty


@dataclass(frozen=True)
class BgePrior:
    """BGe's prior hyperparameters, resolved for ``n_vars`` variables (see the module)."""

    alpha_mu: float
    alpha_w: float
    scale: float

    def as_record(self) -> dict[str, float]:
        return {"alpha_mu": self.alpha_mu, "alpha_w": self.alpha_w, "prior_scale": self.scale}


def bge_prior(n_vars: int, alpha_mu: float | None = None, alpha_w: float | None = None,
              prior_scale: float | None = None) -> BgePrior:
    """Defaults filled in and ranges checked (``ValueError`` naming the key)."""
    mu = DEFAULT_ALPHA_MU if alpha_mu is None else float(alpha_mu)
    w = float(n_vars + 2) if alpha_w is None else float(alpha_w)
    if not mu > 0:
        raise ValueError(f"alpha_mu must be above 0, not {mu:g}")
    if not w > n_vars - 1:
        raise ValueError(f"alpha_w must be above n - 1 = {n_vars - 1} for {n_vars} variables "
                         f"(a Wishart prior needs it), not {w:g}")
    if prior_scale is None:
        if not w > n_vars + 1:
            raise ValueError(f"alpha_w must be above n + 1 = {n_vars + 1} for the default "
                             f"prior_scale alpha_mu (alpha_w - n - 1) / (alpha_mu + 1) to be "
                             f"positive, not {w:g}; raise alpha_w or set prior_scale")
        t = mu * (w - n_vars - 1) / (mu + 1)
    else:
        t = float(prior_scale)
        if not t > 0:
            raise ValueError(f"prior_scale must be above 0, not {t:g}")
    return BgePrior(mu, w, t)


def bge_family(stats: GaussianStatistics, child: int, parents: Sequence[int],
               prior: BgePrior) -> float:
    """BGe family score ln p(d_{parents+child}) - ln p(d_parents) (see the module).

    One LDL^T factorization of R_{Z+y} = t I + S_{Z+y} (parents first) gives both
    log-determinants: its leading pivots are those of R_Z."""
    n, big_n = stats.n_vars, stats.n_rows
    l = len(parents) + 1  # noqa: E741 - the papers' symbol
    a = prior.alpha_w - n + l
    _, pivots = ldl(family_matrix(stats, [*parents, child], prior.scale))
    logdet_parents = log_pivots(pivots[:-1])
    logdet_family = log_pivots(pivots)
    log_t = ln_scalar(prior.scale)
    return (-0.5 * big_n * ln_scalar(math.pi)
            + 0.5 * ln_scalar(prior.alpha_mu / (big_n + prior.alpha_mu))
            + float(log_gamma((big_n + a) / 2)) - float(log_gamma(a / 2))
            + 0.5 * a * l * log_t - 0.5 * (a - 1) * (l - 1) * log_t
            - 0.5 * (big_n + a) * logdet_family
            + 0.5 * (big_n + a - 1) * logdet_parents)


GaussianFamilyScore = Callable[[GaussianStatistics, int, Sequence[int]], float]


class GaussianScorer(CachedScorer):
    """Family scores of continuous data from their sufficient statistics, cached (see
    :class:`~runner.scores.cache.CachedScorer`): the same keys and counters as the
    count-based scorer, so every search method uses it unchanged.

    ``statistics`` are those of the learning rows (:func:`sufficient_statistics`); the
    fitted model and the held-out fit of the same learn take the same object.
    """

    def __init__(self, function: GaussianFamilyScore, statistics: GaussianStatistics,
                 cache_limit: int | None = None) -> None:
        super().__init__(statistics.n_vars, statistics.n_rows, cache_limit)
        self.function = function
        self.statistics = statistics

    def _compute(self, child: int, mask: int) -> float:
        return self.function(self.statistics, child, mask_members(mask))


def gaussian_family_function(name: str, prior: BgePrior | None = None) -> GaussianFamilyScore:
    """The family score called ``name``; BGe needs its resolved ``prior``."""
    if name == "gaussian-loglik":
        return gaussian_loglik_family
    if name == "gaussian-bic":
        return gaussian_bic_family
    if name == "bge":
        if prior is None:
            raise ValueError("bge needs its prior (bge_prior)")
        return lambda stats, child, parents: bge_family(stats, child, parents, prior)
    raise ValueError(f"unknown Gaussian score {name!r}; known: {', '.join(GAUSSIAN_SCORES)}")
