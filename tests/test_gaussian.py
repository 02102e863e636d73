"""The Gaussian scores (gaussian-loglik, gaussian-bic, bge) against outside references.

References: statsmodels OLS (log-likelihood with the maximum-likelihood variance, and the
fitted parameters), pgmpy 1.1.2's ``LogLikelihoodGauss`` and ``BICGauss``, and an
independent implementation of the BGe marginal likelihood written below from Kuipers,
Moffa & Heckerman (2014), "Addendum on the scoring of Gaussian directed acyclic graphical
models", Annals of Statistics 42(4), with the prior of Geiger & Heckerman (1994).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import random_dag
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import build_constraints
from runner.pipeline import run_spec
from runner.scores import build_gaussian_scorer
from runner.scores.gaussian import (
    bge_prior,
    gaussian_parameter_count,
    linear_gaussian_parameters,
    sufficient_statistics,
)
from runner.search import Budget, MoveEngine, hill_climb
from runner.search.exact import exact_search

ParentSets = list[tuple[int, ...]]


def random_data(seed: int, n_vars: int = 5, rows: int = 200) -> np.ndarray:
    """Correlated Gaussian data (n_vars x rows): a random linear mixing of noise."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(n_vars, rows))
    mixing = np.eye(n_vars) + np.tril(rng.normal(scale=0.7, size=(n_vars, n_vars)), -1)
    return mixing @ noise + rng.normal(scale=3.0, size=(n_vars, 1))


def relative_gap(a: float, b: float) -> float:
    return abs(a - b) / max(1.0, abs(a), abs(b))


# --------------------------------------------------------------------------- statsmodels


@pytest.mark.parametrize("seed", range(5))
def test_family_loglik_equals_statsmodels_ols_llf(seed: int) -> None:
    """statsmodels (reference library): OLS ``llf`` is the Gaussian log-likelihood at the
    least-squares fit with the maximum-likelihood variance RSS / N."""
    import statsmodels.api as sm

    values = random_data(seed)
    scorer = build_gaussian_scorer("gaussian-loglik", values)
    rng = np.random.default_rng(100 + seed)
    for _ in range(6):
        child = int(rng.integers(5))
        others = [v for v in range(5) if v != child]
        parents = sorted(int(p) for p in rng.choice(others, size=int(rng.integers(0, 5)),
                                                     replace=False))
        design = sm.add_constant(values[parents].T, has_constant="add") if parents else (
            np.ones((values.shape[1], 1)))
        ols = sm.OLS(values[child], design).fit()
        assert relative_gap(scorer.family(child, parents), float(ols.llf)) < 1e-10
        # the fitted parameters from the sufficient statistics alone
        fitted = linear_gaussian_parameters(sufficient_statistics(values), child, parents)
        assert fitted.intercept == pytest.approx(float(ols.params[0]), rel=1e-9, abs=1e-9)
        assert fitted.coefficients == pytest.approx(list(ols.params[1:]), rel=1e-9, abs=1e-9)
        assert fitted.variance == pytest.approx(float(ols.ssr) / values.shape[1], rel=1e-9)


def test_bic_penalty_counts_intercept_coefficients_and_variance() -> None:
    """BIC = LL - (ln N / 2) k with k = |parents| + 2 (Schwarz 1978)."""
    values = random_data(7, rows=321)
    ll = build_gaussian_scorer("gaussian-loglik", values)
    bic = build_gaussian_scorer("gaussian-bic", values)
    for parents in ([], [1], [1, 2, 4]):
        k = gaussian_parameter_count(parents)
        assert k == len(parents) + 2
        assert bic.family(0, parents) == pytest.approx(
            ll.family(0, parents) - 0.5 * math.log(321) * k, rel=1e-12)


# --------------------------------------------------------------------------- pgmpy


def pgmpy_total(estimator: str, frame: pd.DataFrame, parents: ParentSets) -> float:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import pgmpy.estimators as estimators
    score = getattr(estimators, estimator)(frame)
    names = list(frame.columns)
    return math.fsum(score.local_score(names[c], [names[p] for p in ps])
                     for c, ps in enumerate(parents))


@pytest.mark.parametrize("seed", range(4))
def test_totals_equal_pgmpy_gaussian_scores(seed: int) -> None:
    """pgmpy 1.1.2 (reference library): ``LogLikelihoodGauss`` fits a statsmodels GLM per
    family and returns its ``llf``; ``BICGauss`` subtracts (df_model + 2) / 2 ln N, where
    df_model is the number of parents: the same parameter count as ours (intercept, one
    coefficient per parent, variance) and no different constant term, so the totals are
    compared directly."""
    values = random_data(seed, n_vars=5, rows=150)
    frame = pd.DataFrame(values.T, columns=["va", "vb", "vc", "vd", "ve"])
    rng = np.random.default_rng(seed)
    for _ in range(3):
        dag = random_dag(5, rng)
        for ours, theirs in (("gaussian-loglik", "LogLikelihoodGauss"),
                             ("gaussian-bic", "BICGauss")):
            total = build_gaussian_scorer(ours, values).total(dag)
            assert relative_gap(total, pgmpy_total(theirs, frame, dag)) < 1e-9, (ours, dag)


# --------------------------------------------------------------------------- BGe reference


def reference_log_marginal(data: np.ndarray, subset: Sequence[int], alpha_mu: float,
                           alpha_w: float, t: float) -> float:
    """ln p(d_Y) for the variables ``subset`` of ``data`` (rows x n), straight from the
    formula of Kuipers, Moffa & Heckerman (2014) for a normal-Wishart prior with mean
    nu, precision-of-mean weight alpha_mu, alpha_w degrees of freedom and scale T = t I,
    the Wishart's degrees of freedom for l of n variables being alpha_w - n + l:

        p(d_Y) = pi^(-l N / 2) (alpha_mu / (N + alpha_mu))^(l / 2)
                 Gamma_l((N + alpha_w - n + l) / 2) / Gamma_l((alpha_w - n + l) / 2)
                 det(T_YY)^((alpha_w - n + l) / 2) det(R_YY)^(-(N + alpha_w - n + l) / 2)

    with R = T + S_N + N alpha_mu / (N + alpha_mu) (nu - xbar)(nu - xbar)^T, S_N the
    scatter matrix, nu taken to be the sample mean here. Written on the raw rows, with
    scipy's multivariate log-gamma and its own loops. The formula is transcribed from
    memory of the paper (no copy at hand); the integral test below checks its constants
    and degrees of freedom for one variable from first principles.
    """
    from scipy.special import multigammaln

    big_n, n = data.shape
    l = len(subset)  # noqa: E741
    if l == 0:
        return 0.0
    x = data[:, list(subset)]
    xbar = x.mean(axis=0)
    nu = xbar.copy()
    scatter = np.zeros((l, l))
    for row in x:
        d = (row - xbar)[:, None]
        scatter += d @ d.T
    shift = (nu - xbar)[:, None]
    t_matrix = t * np.eye(l)
    r = t_matrix + scatter + big_n * alpha_mu / (big_n + alpha_mu) * (shift @ shift.T)
    df = alpha_w - n + l
    return (-l * big_n / 2 * math.log(math.pi)
            + l / 2 * math.log(alpha_mu / (big_n + alpha_mu))
            + multigammaln((big_n + df) / 2, l) - multigammaln(df / 2, l)
            + df / 2 * np.linalg.slogdet(t_matrix)[1]
            - (big_n + df) / 2 * np.linalg.slogdet(r)[1])


def reference_bge_total(data: np.ndarray, parents: ParentSets, alpha_mu: float,
                        alpha_w: float, t: float) -> float:
    """The DAG's BGe score, sum over families of ln p(d_{Pa+i}) - ln p(d_Pa)."""
    return sum(reference_log_marginal(data, [*ps, child], alpha_mu, alpha_w, t)
               - reference_log_marginal(data, list(ps), alpha_mu, alpha_w, t)
               for child, ps in enumerate(parents))


@pytest.mark.parametrize(("alpha_mu", "alpha_w", "scale"),
                         [(1.0, None, None), (3.0, 9.5, None), (0.5, 6.0, 2.0)])
def test_bge_equals_an_independent_implementation_of_the_formula(
        alpha_mu: float, alpha_w: float | None, scale: float | None) -> None:
    values = random_data(11, n_vars=4, rows=60)
    prior = bge_prior(4, alpha_mu, alpha_w, scale)
    scorer = build_gaussian_scorer("bge", values, alpha_mu=alpha_mu, alpha_w=alpha_w,
                                   prior_scale=scale)
    rng = np.random.default_rng(5)
    for _ in range(5):
        dag = random_dag(4, rng)
        expected = reference_bge_total(values.T, dag, prior.alpha_mu, prior.alpha_w,
                                       prior.scale)
        assert relative_gap(scorer.total(dag), expected) < 1e-10, dag


def test_bge_of_a_parentless_node_equals_the_prior_integral() -> None:
    """From first principles, by numerical integration (scipy as a reference library): a
    node without parents scores ln p(d_x) with x_r ~ N(mu, 1/w), mu | w ~ N(nu, 1/(alpha_mu
    w)) and w ~ Gamma(shape (alpha_w - n + 1) / 2, rate t / 2), the marginal of the
    n-variable normal-Wishart prior on one variable: the degrees of freedom alpha_w - n + l
    of Kuipers, Moffa & Heckerman (2014), not the alpha_w of the 1994 paper."""
    from scipy import integrate, stats

    rng = np.random.default_rng(3)
    values = rng.normal(size=(3, 6))
    alpha_mu, alpha_w, t, n = 1.5, 6.0, 0.8, 3
    scorer = build_gaussian_scorer("bge", values, alpha_mu=alpha_mu, alpha_w=alpha_w,
                                   prior_scale=t)
    x = values[1]
    shape = (alpha_w - n + 1) / 2

    def density(mu: float, w: float) -> float:
        return float(np.prod(stats.norm.pdf(x, mu, 1 / np.sqrt(w)))
                     * stats.norm.pdf(mu, x.mean(), 1 / np.sqrt(alpha_mu * w))
                     * stats.gamma.pdf(w, shape, scale=2 / t))

    value, error = integrate.dblquad(density, 0, np.inf, -np.inf, np.inf, epsabs=1e-13,
                                     epsrel=1e-8)
    assert error < 1e-5 * value
    assert abs(scorer.family(1, []) - math.log(value)) < 1e-6


def test_bge_defaults() -> None:
    """Defaults as documented: alpha_mu 1, alpha_w n + 2, t = alpha_mu (alpha_w - n - 1) /
    (alpha_mu + 1) (the choice Kuipers et al. 2014 discuss)."""
    prior = bge_prior(6)
    assert (prior.alpha_mu, prior.alpha_w, prior.scale) == (1.0, 8.0, 0.5)
    for bad in ({"alpha_w": 4.0}, {"alpha_w": 7.0}, {"alpha_mu": 0.0},
                {"alpha_w": 6.0, "prior_scale": -1.0}):
        with pytest.raises(ValueError):
            bge_prior(6, **bad)
    assert bge_prior(6, alpha_w=5.5, prior_scale=1.0).scale == 1.0


# --------------------------------------------------------------------------- equivalence


def covered_edges(parents: ParentSets) -> list[tuple[int, int]]:
    """Edges i -> j with pa(j) = pa(i) + {i}: reversing one gives a Markov-equivalent DAG
    (Chickering 1995)."""
    return [(i, j) for j, ps in enumerate(parents) for i in ps
            if set(ps) == set(parents[i]) | {i}]


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n_vars=st.integers(2, 6))
def test_markov_equivalent_dags_score_the_same(seed: int, n_vars: int) -> None:
    """Geiger & Heckerman (1994) prove BGe score-equivalent; the maximised Gaussian
    likelihood and the parameter count (edges + 2 n) are too."""
    rng = np.random.default_rng(seed)
    values = random_data(seed % 1000, n_vars=n_vars, rows=80)
    dag = random_dag(n_vars, rng, density=0.6)
    edges = covered_edges(dag)
    if not edges:
        dag = [(), *[(0,) for _ in range(n_vars - 1)]]  # 0 -> every other: all covered
        edges = covered_edges(dag)
    i, j = edges[int(rng.integers(len(edges)))]
    reversed_ = [set(ps) for ps in dag]
    reversed_[j].discard(i)
    reversed_[i].add(j)
    other = [tuple(sorted(ps)) for ps in reversed_]
    for name in ("bge", "gaussian-bic", "gaussian-loglik"):
        scorer = build_gaussian_scorer(name, values)
        assert relative_gap(scorer.total(dag), scorer.total(other)) < 1e-9, name


# --------------------------------------------------------------------------- recovery

# Linear-Gaussian networks written here; every noise term independent, N(0, sd^2).
# TREE has no v-structure: its skeleton is all the data can identify without
# orientation help, and greedy search from the empty graph reaches it. (With a
# v-structure, greedy search can orient the collider's first edge away from it on a
# tie and then needs an extra edge; that is a local optimum of greedy search, not a
# fault of the score: exact search finds the true graph, see below.)
#   a = N(0, 1)
#   b = 0.9 a + N(0, 1)           c = -0.7 a + N(0, 0.8^2)
#   d = 1.1 b + N(0, 1)           e = 0.6 b + N(0, 0.7^2)
#   f = -0.8 c + N(0, 1)
TREE_EDGES = {("a", "b"), ("a", "c"), ("b", "d"), ("b", "e"), ("c", "f")}
# COLLIDERS: a -> c <- b and a -> e <- d, edges a -> c, b -> c, c -> d, a -> e, d -> e, e -> f:
#   a = N(0, 1);  b = 2 + N(0, 1.5^2)
#   c = 1 + 0.8 a - 0.6 b + N(0, 1)
#   d = -0.9 c + N(0, 0.8^2)
#   e = -0.6 a + 0.7 d + N(0, 1)
#   f = 3 - 1.2 e + N(0, 1.2^2)
COLLIDER_EDGES = {("a", "c"), ("b", "c"), ("c", "d"), ("a", "e"), ("d", "e"), ("e", "f")}
NAMES = ("a", "b", "c", "d", "e", "f")


def simulate_tree(rows: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 1, rows)
    b = 0.9 * a + rng.normal(0, 1, rows)
    c = -0.7 * a + rng.normal(0, 0.8, rows)
    d = 1.1 * b + rng.normal(0, 1, rows)
    e = 0.6 * b + rng.normal(0, 0.7, rows)
    f = -0.8 * c + rng.normal(0, 1, rows)
    return np.vstack([a, b, c, d, e, f])


def simulate(rows: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 1, rows)
    b = rng.normal(2, 1.5, rows)
    c = 1 + 0.8 * a - 0.6 * b + rng.normal(0, 1, rows)
    d = -0.9 * c + rng.normal(0, 0.8, rows)
    e = -0.6 * a + 0.7 * d + rng.normal(0, 1, rows)
    f = 3 - 1.2 * e + rng.normal(0, 1.2, rows)
    return np.vstack([a, b, c, d, e, f])


def skeleton(edges: set[tuple[str, str]]) -> set[frozenset[str]]:
    return {frozenset(e) for e in edges}


def learned_edges(parent_sets: Sequence[Sequence[int]]) -> set[tuple[str, str]]:
    return {(NAMES[p], NAMES[c]) for c, ps in enumerate(parent_sets) for p in ps}


@pytest.mark.parametrize("seed", range(3))
def test_hill_climbing_with_gaussian_bic_recovers_the_skeleton(seed: int) -> None:
    values = simulate_tree(5000, seed=seed)
    scorer = build_gaussian_scorer("gaussian-bic", values)
    constraints = build_constraints(NAMES, [], "allowed", [], [], None)
    engine = MoveEngine(scorer, constraints, [[] for _ in NAMES])
    outcome = hill_climb(engine, Budget(10_000, None, None), rng=np.random.default_rng(seed))
    assert skeleton(learned_edges(outcome.parent_sets)) == skeleton(TREE_EDGES)


def test_with_v_structures_tiers_or_exact_search_recover_the_network() -> None:
    values = simulate(5000, seed=3)
    scorer = build_gaussian_scorer("gaussian-bic", values)
    free = build_constraints(NAMES, [], "allowed", [], [], None)
    outcome, _ = exact_search(scorer, free, Budget(None, None, None), list(NAMES))
    assert learned_edges(outcome.parent_sets) == COLLIDER_EDGES  # v-structures: oriented
    tiers = [["a", "b"], ["c"], ["d"], ["e"], ["f"]]
    tiered = build_constraints(NAMES, tiers, "allowed", [], [], None)
    engine = MoveEngine(scorer, tiered, [[] for _ in NAMES])
    climbed = hill_climb(engine, Budget(10_000, None, None), rng=np.random.default_rng(0))
    assert learned_edges(climbed.parent_sets) == COLLIDER_EDGES


def write_continuous(tmp_path: Path, values: np.ndarray, names: Sequence[str] = NAMES) -> Path:
    lines = [",".join(names)] + [",".join(f"{v:.6f}" for v in row) for row in values.T]
    path = tmp_path / "data.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.mark.parametrize("score", ["gaussian-bic", "bge", "gaussian-loglik"])
def test_every_search_method_runs_on_a_gaussian_score(tmp_path: Path, score: str) -> None:
    """All six methods through the pipeline, unchanged; exact finds the best score, and a
    rerun gives the same record (timings and times aside)."""
    write_continuous(tmp_path, simulate(800, seed=4))
    results = tmp_path / "results"
    totals = {}
    for method in ("hill-climb", "first-ascent", "stochastic", "tabu", "order", "exact"):
        spec = tmp_path / f"{method}.yaml"
        spec.write_text(f"name: g-{method}\ndataset: {{path: data.csv}}\nparent_cap: 2\n"
                        f"tiers: [[a, b], [c], [d], [e], [f]]\n"
                        f"score: {{name: {score}}}\nsearch: {{method: {method}}}\n")
        first = run_spec(spec, results)
        second = run_spec(spec, results)
        assert second.twin_identical
        for key in ("edges", "score", "data", "input_sha256", "search"):
            if key == "search":
                continue
            assert first.record[key] == second.record[key]
        totals[method] = first.record["score"]["value"]
        columns = first.record["data"]["columns"]
        assert {c["kind"] for c in columns.values()} == {"continuous"}
        assert columns["a"]["kind_reason"] == "inferred-numeric-many-values"
    assert all(v <= totals["exact"] + 1e-9 * abs(totals["exact"]) for v in totals.values())


def test_rescoring_a_gaussian_run_under_bge_uses_the_other_runs_prior(tmp_path: Path) -> None:
    from runner.compare.rescore import rescore

    write_continuous(tmp_path, simulate(600, seed=9))
    results = tmp_path / "results"
    records = {}
    for score in ("gaussian-bic", "{name: bge, alpha_mu: 4.0, prior_scale: 2.0}"):
        spec = tmp_path / "spec.yaml"
        block = score if score.startswith("{") else f"{{name: {score}}}"
        spec.write_text(f"name: r\ndataset: {{path: data.csv}}\nscore: {block}\n"
                        "tiers: [[a, b], [c], [d], [e], [f]]\n")
        records["bge" if "bge" in score else "bic"] = run_spec(spec, results).record
    bic, bge = records["bic"], records["bge"]
    assert bic["edges"] == bge["edges"]
    again = rescore(bic, "bge", settings=bge["spec"]["score"], results=results)
    assert again["value"] == pytest.approx(bge["score"]["value"], rel=1e-12)
    back = rescore(bge, "gaussian-bic", results=results)
    assert back["value"] == pytest.approx(bic["score"]["value"], rel=1e-12)


def test_statistics_are_computed_once_then_families_use_submatrices(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """The scatter matrix is (N - 1) times numpy.cov (reference library); after it is made,
    no family score touches the rows again."""
    import runner.scores.gaussian as gaussian

    values = random_data(2, n_vars=6, rows=400)
    stats = sufficient_statistics(values)
    assert np.allclose(stats.scatter, np.cov(values) * 399, rtol=1e-12, atol=1e-9)
    assert np.array_equal(stats.scatter, stats.scatter.T)
    scorer = build_gaussian_scorer("bge", values)

    def no_second_pass(_: np.ndarray) -> None:
        raise AssertionError("the rows were read again")

    monkeypatch.setattr(gaussian, "sufficient_statistics", no_second_pass)
    dag = random_dag(6, np.random.default_rng(0), density=0.5)
    assert math.isfinite(scorer.total(dag))
    assert scorer.evaluations == 6


def test_one_learn_computes_the_statistics_once_and_stores_what_fresh_ones_give(
        monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    """A learn with a held-out split passes the learning rows' statistics, computed once
    (one exact pass over the rows), to the scorer, the fitted model and the held-out
    empty-graph fit; what it stores equals the fit and the held-out totals computed from
    the rows afresh (bit for bit)."""
    import runner.scores.gaussian as gaussian
    from runner.evaluation import gaussian_held_out_fit
    from runner.fit import fit_gaussian
    from runner.pipeline import learn, prepare, split_learning_rows

    root = Path(__file__).resolve().parents[1]
    text = (root / "specs" / "kiln-gauss.yaml").read_text(encoding="utf-8")
    spec = tmp_path / "kiln-gauss.yaml"
    spec.write_text(text.replace("  path: ../datasets/",
                                  f"  allow_outside: true\n  path: {root / 'datasets'}/")
                    + "evaluation: {holdout: 0.25, seed: 4}\n", encoding="utf-8")
    prepared = prepare(spec)
    passes = []
    exact_moments = gaussian.exact_moments

    def counted(values: np.ndarray) -> object:
        passes.append(values.shape)
        return exact_moments(values)

    monkeypatch.setattr(gaussian, "exact_moments", counted)
    record, _ = learn(prepared)
    assert len(passes) == 1
    monkeypatch.undo()

    part, held = split_learning_rows(prepared)
    assert part.dataset.values is not None and held is not None and held.values is not None
    parents = [tuple(sorted(prepared.dataset.names.index(a) for a, b in record["edges"]
                            if b == name)) for name in prepared.dataset.names]
    families = fit_gaussian(part.dataset.values.copy(), parents)
    model = record["_model"]["variables"]
    for name, fam in zip(prepared.dataset.names, families, strict=True):
        assert model[name]["intercept"] == fam.intercept
        assert model[name]["residual_variance"] == fam.variance
    fresh = gaussian_held_out_fit(part.dataset.values.copy(), held.values, families, parents)
    assert record["evaluation"]["log_likelihood"] == fresh["log_likelihood"]
