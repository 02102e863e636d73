"""BGe checked from first principles: the chain rule of posterior predictive densities.

The BGe score of a DAG is a log marginal likelihood ln p(D) under a normal-Wishart prior.
Instead of a closed formula (tests/test_gaussian.py transcribes one), this file computes
ln p(D) as

    ln p(D) = sum_i ln p(x_i | x_1, ..., x_{i-1}),

each term the multivariate Student-t posterior predictive density of the normal-Wishart
model, evaluated by ``scipy.stats.multivariate_t`` (reference library), with the
posterior updated one row at a time. Sources for the conjugate update and the
predictive (recalled from memory, no copy at hand): DeGroot (1970), "Optimal Statistical
Decisions", ch. 9 (secs. 9.10-9.11); the same prior is the one of Geiger & Heckerman
(1994), "Learning Gaussian networks", sec. 2.

Conventions (those stated in the docstring of runner/scores/gaussian.py):

* rows x_r ~ N(mu, W^{-1}) given the mean mu and the precision matrix W;
* mu | W ~ N(nu, (alpha_mu W)^{-1});
* W ~ Wishart(alpha_w, T^{-1}), i.e. density proportional to
  |W|^{(alpha_w - n - 1) / 2} exp(-tr(T W) / 2), E[W] = alpha_w T^{-1}; T = t I with
  t = ``BgePrior.scale`` (so T is the scale of the inverse-Wishart of the covariance, and
  E[W^{-1}] = T / (alpha_w - n - 1));
* nu = the column means of ALL the data (an empirical prior mean), the same nu in every
  predictive term of the chain.

Sequential update after row x (DeGroot 1970, ch. 9; from memory), starting at
(kappa, dof, m, T) = (alpha_mu, alpha_w, nu, T):

    T    <- T + kappa / (kappa + 1) (x - m)(x - m)^T
    m    <- (kappa m + x) / (kappa + 1)
    kappa <- kappa + 1,   dof <- dof + 1

and the predictive of the next row given the current (kappa, dof, m, T) for l variables
is multivariate t with dof - l + 1 degrees of freedom, location m and shape matrix
T (kappa + 1) / (kappa (dof - l + 1)).

Subsets (Kuipers, Moffa & Heckerman 2014, "Addendum on the scoring of Gaussian directed
acyclic graphical models", Annals of Statistics 42(4)): the marginal of the n-variable
normal-Wishart prior on a set Y of l variables is normal-Wishart with the same alpha_mu,
prior mean nu_Y, scale T_YY and alpha_w - n + l degrees of freedom (the marginal of an
inverse-Wishart on a principal submatrix; a standard matrix-variate result, e.g. Gupta &
Nagar 2000, "Matrix Variate Distributions", Theorem 3.4.1 - recalled from memory). A
family's BGe score is ln p(d_{Z+y}) - ln p(d_Z) with both marginals computed that way.
The one-row test below checks that marginal prior without assuming it: it marginalises
the n-variable Student-t prior predictive directly.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import multivariate_t

from runner.scores import GaussianScorer, build_gaussian_scorer
from runner.scores.gaussian import BgePrior, bge_family, bge_prior, sufficient_statistics

ParentSets = list[tuple[int, ...]]

TOLERANCE = 1e-8  # relative

# (alpha_mu, alpha_w, prior_scale); None: the module's default.
PRIORS = [
    (None, None, None),
    (1.0, None, None),
    (3.0, 9.5, None),
    (0.5, 6.0, 2.0),
    (2.0, 4.5, 0.3),  # alpha_w just above n - 1 for n = 4, explicit scale
    (10.0, 12.0, 5.0),
]


def make_data(seed: int, n_vars: int, rows: int) -> np.ndarray:
    """Correlated, non-degenerate data (n_vars x rows): a mixing of standard normal noise
    with unit-order scales and offsets, so T = t I is not swamped by one column."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(n_vars, rows))
    mixing = np.eye(n_vars) + np.tril(rng.normal(scale=0.6, size=(n_vars, n_vars)), -1)
    data = mixing @ noise + rng.normal(scale=2.0, size=(n_vars, 1))
    scales = rng.uniform(0.5, 2.0, size=(n_vars, 1))
    return data / data.std(axis=1, keepdims=True) * scales


def relative_gap(a: float, b: float) -> float:
    return abs(a - b) / max(1.0, abs(a), abs(b))


def predictive_chain(rows: np.ndarray, nu: np.ndarray, alpha_mu: float, dof: float,
                     scale: np.ndarray) -> float:
    """ln p(rows) = sum of ln p(x_i | x_1..x_{i-1}) under a normal-Wishart prior with
    weight alpha_mu, prior mean ``nu``, ``dof`` Wishart degrees of freedom and scale matrix
    ``scale`` (the T of the module docstring), each term by scipy's multivariate_t."""
    n_rows, l = rows.shape  # noqa: E741 - the papers' symbol
    if l == 0:
        return 0.0
    kappa, location, t_matrix = float(alpha_mu), nu.astype(np.float64).copy(), scale.copy()
    total = 0.0
    for i in range(n_rows):
        x = rows[i]
        t_dof = dof - l + 1
        shape = t_matrix * (kappa + 1) / (kappa * t_dof)
        total += float(multivariate_t(loc=location, shape=shape, df=t_dof).logpdf(x))
        gap = (x - location)[:, None]
        t_matrix = t_matrix + kappa / (kappa + 1) * (gap @ gap.T)
        location = (kappa * location + x) / (kappa + 1)
        kappa += 1
        dof += 1
    return total


def subset_log_marginal(data: np.ndarray, subset: Sequence[int], prior: BgePrior) -> float:
    """ln p(d_Y) by the predictive chain under the marginal prior on Y (Kuipers et al.
    2014): alpha_w - n + l degrees of freedom, scale T_YY = t I_l, prior mean nu_Y = the
    column means of Y over all rows. ``data`` is n_vars x rows."""
    n = data.shape[0]
    ys = list(subset)
    rows = data[ys].T
    nu = data[ys].mean(axis=1)
    return predictive_chain(rows, nu, prior.alpha_mu, prior.alpha_w - n + len(ys),
                            prior.scale * np.eye(len(ys)))


def scorer_and_prior(data: np.ndarray, setting: tuple[float | None, ...]
                     ) -> tuple[GaussianScorer, BgePrior]:
    alpha_mu, alpha_w, scale = setting
    prior = bge_prior(data.shape[0], alpha_mu, alpha_w, scale)
    scorer = build_gaussian_scorer("bge", data, alpha_mu=alpha_mu, alpha_w=alpha_w,
                                   prior_scale=scale)
    return scorer, prior


def complete_dag(order: Sequence[int]) -> ParentSets:
    parents: list[tuple[int, ...]] = [()] * len(order)
    for k, v in enumerate(order):
        parents[v] = tuple(sorted(order[:k]))
    return parents


# --------------------------------------------------------------------------- complete DAG


@pytest.mark.parametrize("setting", PRIORS)
@pytest.mark.parametrize(("seed", "n_vars", "rows"), [(1, 3, 20), (2, 4, 45), (3, 4, 60)])
def test_complete_dag_total_equals_the_predictive_chain(
        setting: tuple[float | None, ...], seed: int, n_vars: int, rows: int) -> None:
    """The complete DAG's BGe total is the joint ln p(D) of all n variables (alpha_w - n + n
    = alpha_w degrees of freedom), whatever the order (BGe is score-equivalent, Geiger &
    Heckerman 1994); ground truth: the predictive chain of DeGroot (1970), ch. 9."""
    if setting[1] is not None and setting[1] <= n_vars - 1:
        pytest.skip("alpha_w too small for this many variables")
    if setting[1] is not None and setting[2] is None and setting[1] <= n_vars + 1:
        pytest.skip("default scale needs alpha_w > n + 1")
    data = make_data(seed, n_vars, rows)
    scorer, prior = scorer_and_prior(data, setting)
    expected = subset_log_marginal(data, range(n_vars), prior)
    rng = np.random.default_rng(seed)
    for _ in range(3):
        order = [int(v) for v in rng.permutation(n_vars)]
        assert relative_gap(scorer.total(complete_dag(order)), expected) < TOLERANCE, order


def test_the_chain_is_a_chain_of_conditionals_on_the_module_convention() -> None:
    """Checks of the reference itself. (a) The default t makes the prior predictive
    covariance the identity, as the module docstring states: the first Student-t term has
    covariance shape dof / (dof - 2) = T (alpha_mu + 1) / (alpha_mu (alpha_w - n - 1)).
    (b) The chain does not depend on the order of the rows (exchangeability): a joint
    density, not an artefact of the update."""
    n = 4
    prior = bge_prior(n)
    t_dof = prior.alpha_w - n + 1
    shape = prior.scale * np.eye(n) * (prior.alpha_mu + 1) / (prior.alpha_mu * t_dof)
    assert np.allclose(shape * t_dof / (t_dof - 2), np.eye(n), rtol=1e-14)
    data = make_data(8, n, 30)
    forward = subset_log_marginal(data, range(n), prior)
    shuffled = data[:, np.random.default_rng(0).permutation(30)]
    assert relative_gap(forward, subset_log_marginal(shuffled, range(n), prior)) < 1e-11


# --------------------------------------------------------------------------- subsets


@pytest.mark.parametrize("setting", PRIORS)
def test_families_of_a_dag_on_a_subset_match_subset_marginals(
        setting: tuple[float | None, ...]) -> None:
    """A DAG whose edges only join {0, 1, 2} of 4 variables (3 isolated): each family score
    is ln p(d_{Z+y}) - ln p(d_Z), both marginals by the predictive chain under the marginal
    prior on the subset, alpha_w - n + l degrees of freedom and scale T_YY (Kuipers, Moffa
    & Heckerman 2014)."""
    data = make_data(21, 4, 40)
    scorer, prior = scorer_and_prior(data, setting)
    dag: ParentSets = [(), (0,), (0, 1), ()]
    for child, parents in enumerate(dag):
        expected = (subset_log_marginal(data, [*parents, child], prior)
                    - subset_log_marginal(data, parents, prior))
        assert relative_gap(scorer.family(child, parents), expected) < TOLERANCE, child
    # the partial DAG's total: the joint of {0, 1, 2} times the marginal of {3}
    expected_total = (subset_log_marginal(data, [0, 1, 2], prior)
                      + subset_log_marginal(data, [3], prior))
    assert relative_gap(scorer.total(dag), expected_total) < TOLERANCE


def test_uncorrected_subset_degrees_of_freedom_would_be_detected() -> None:
    """Sensitivity: with the 1994 paper's alpha_w degrees of freedom for every subset (what
    Kuipers et al. 2014 correct), the chain disagrees with the module far beyond the
    tolerance; the check above can tell the two apart."""
    data = make_data(21, 4, 40)
    scorer, prior = scorer_and_prior(data, PRIORS[0])
    ys = [0, 1]
    uncorrected = predictive_chain(data[ys].T, data[ys].mean(axis=1), prior.alpha_mu,
                                   prior.alpha_w, prior.scale * np.eye(2))
    uncorrected -= predictive_chain(data[[0]].T, data[[0]].mean(axis=1), prior.alpha_mu,
                                    prior.alpha_w, prior.scale * np.eye(1))
    assert relative_gap(scorer.family(1, [0]), uncorrected) > 1e3 * TOLERANCE


@pytest.mark.parametrize("setting", PRIORS)
def test_one_row_subset_marginal_is_the_marginal_of_the_joint_predictive(
        setting: tuple[float | None, ...]) -> None:
    """Without assuming the marginal prior: with one row, p(d_Y) is the Y-marginal of the
    n-variable prior predictive, a Student-t; the marginal of a multivariate t on a subvector
    has the same degrees of freedom and the principal submatrix of the shape (Kotz &
    Nadarajah 2004, "Multivariate t Distributions", ch. 1; recalled from memory). So
    for every subset Y, sum over a DAG on Y of BGe families = that marginal log density.
    With one row, nu is the row itself (the column means), so the density is at the
    location; the gamma ratio and the degrees of freedom are what is checked."""
    n = 4
    row = np.random.default_rng(5).normal(scale=1.5, size=(n, 1))
    prior = bge_prior(n, *setting)
    stats = sufficient_statistics(row)
    t_dof = prior.alpha_w - n + 1
    shape = prior.scale * np.eye(n) * (prior.alpha_mu + 1) / (prior.alpha_mu * t_dof)
    x = row[:, 0]
    for subset in ([2], [0, 3], [1, 2, 3], [0, 1, 2, 3]):
        sub = np.ix_(subset, subset)
        expected = float(multivariate_t(loc=x[subset], shape=shape[sub], df=t_dof)
                         .logpdf(x[subset]))
        # the complete DAG on the subset, in its given order
        got = math.fsum(bge_family(stats, v, subset[:k], prior) for k, v in enumerate(subset))
        assert relative_gap(got, expected) < TOLERANCE, subset


# --------------------------------------------------------------------------- property


@settings(max_examples=12, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_vars=st.integers(2, 4), rows=st.integers(20, 40),
       alpha_mu=st.floats(0.2, 20.0), extra_dof=st.floats(0.1, 6.0),
       scale=st.floats(0.1, 10.0))
def test_random_dag_families_equal_predictive_chain_ratios(
        seed: int, n_vars: int, rows: int, alpha_mu: float, extra_dof: float,
        scale: float) -> None:
    """Any family of any DAG, any prior in range: BGe(y | Z) = chain(Z + y) - chain(Z)."""
    data = make_data(seed, n_vars, rows)
    setting = (alpha_mu, n_vars - 1 + extra_dof, scale)
    scorer, prior = scorer_and_prior(data, setting)
    rng = np.random.default_rng(seed)
    child = int(rng.integers(n_vars))
    others = [v for v in range(n_vars) if v != child]
    parents = sorted(int(p) for p in rng.choice(others, size=int(rng.integers(0, n_vars)),
                                                 replace=False))
    expected = (subset_log_marginal(data, [*parents, child], prior)
                - subset_log_marginal(data, parents, prior))
    assert relative_gap(scorer.family(child, parents), expected) < TOLERANCE
