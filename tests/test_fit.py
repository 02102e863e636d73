"""Fitted tables (runner/fit.py) against pgmpy and the published ASIA tables; the
pseudo-count rule; held-out log-likelihood counting of unseen states."""

from __future__ import annotations

import math
import warnings
from typing import Any

import numpy as np
import pytest
from conftest import DataCase, Network, data_cases, random_dag, sampled_network
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.fit import discrete_family, fit_discrete, log_likelihood_rows, model_document
from runner.scores.counts import family_counts


def cpd_value(cpd: Any, child: str, state: str, given: dict[str, str]) -> float:
    """P(child = state | given) from a pgmpy TabularCPD, by state names."""
    index = []
    for var in cpd.variables:
        value = state if var == child else given[var]
        index.append(cpd.state_names[var].index(value))
    return float(cpd.values[tuple(index)])


def our_model(net: Network, pseudo_count: float) -> dict[str, Any]:
    states = [sorted(set(net.frame[n])) for n in net.names]
    families = fit_discrete(net.codes, net.arities, net.true_parents)
    return model_document(families, net.names, states, pseudo_count, net.codes.shape[1],
                          "0" * 64, "0" * 64)


def test_maximum_likelihood_tables_equal_pgmpy(asia: Network) -> None:
    # Reference: pgmpy 1.1.2 MaximumLikelihoodEstimator on the true ASIA graph
    # (Lauritzen & Spiegelhalter 1988, pgmpy's bundled example model), same 5,000 rows.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from pgmpy.estimators import MaximumLikelihoodEstimator
        from pgmpy.models import DiscreteBayesianNetwork

        graph = DiscreteBayesianNetwork(asia.true_edges())
        graph.add_nodes_from(asia.names)
        estimator = MaximumLikelihoodEstimator(graph, asia.frame)
        cpds = {n: estimator.estimate_cpd(n) for n in asia.names}
    model = our_model(asia, 0.0)
    assert model["estimator"] == "maximum-likelihood"
    compared = 0
    for name, var in model["variables"].items():
        assert var["parents"] == sorted(asia.model.get_parents(name))
        for config in var["configurations"]:
            given = dict(zip(var["parents"], config["parents"], strict=True))
            for state, p in zip(var["states"], config["probabilities"], strict=True):
                assert p == pytest.approx(cpd_value(cpds[name], name, state, given),
                                          abs=1e-12)
                compared += 1
    assert compared >= 30


@pytest.mark.slow
def test_many_rows_approach_the_published_tables() -> None:
    # Reference: the published ASIA tables (Lauritzen & Spiegelhalter 1988) as bundled in
    # pgmpy 1.1.2's example model, which generated the rows. Tolerance: 3 standard errors
    # of a proportion, sqrt(p (1 - p) / N_j) with the true p and the configuration's rows
    # N_j (common practice: about 0.3% of cells of a correct estimator fall outside; the
    # seed is fixed, so the test is deterministic). Deterministic cells (p = 0 or 1, as
    # in 'either') must be met exactly.
    net = sampled_network("asia", 200_000, 3)
    model = our_model(net, 0.0)
    worst = 0.0
    for name, var in model["variables"].items():
        truth = net.model.get_cpds(name)
        for config in var["configurations"]:
            given = dict(zip(var["parents"], config["parents"], strict=True))
            rows = sum(config["counts"])
            for state, p in zip(var["states"], config["probabilities"], strict=True):
                true_p = cpd_value(truth, name, state, given)
                se = math.sqrt(true_p * (1 - true_p) / rows)
                assert abs(p - true_p) <= 3 * se + 1e-12, (name, given, state, p, true_p)
                if se:
                    worst = max(worst, abs(p - true_p) / se)
    print(f"ASIA 200k rows: largest deviation {worst:.2f} standard errors")


@settings(max_examples=40, deadline=None)
@given(case=data_cases(), seed=st.integers(0, 2**16), a=st.sampled_from([0.0, 0.5, 1.0, 3.0]))
def test_tables_are_counts_plus_pseudo_count(case: DataCase, seed: int, a: float) -> None:
    # The Dirichlet posterior mean (Heckerman, Geiger & Chickering 1995, eq. 9):
    # theta_jk = (N_jk + a) / (N_j + r a); the counts agree with the scores' counting.
    parents = random_dag(case.n_vars, np.random.default_rng(seed))
    for child, ps in enumerate(parents):
        fam = discrete_family(case.codes, case.arities, child, ps)
        table, q = family_counts(case.codes, case.arities, child, ps)
        assert np.array_equal(fam.counts, table) and fam.possible == q
        probs = fam.probabilities(a)
        r = int(case.arities[child])
        n_j = fam.counts.sum(axis=1, keepdims=True)
        assert np.allclose(probs, (fam.counts + a) / (n_j + r * a), rtol=1e-13, atol=0)
        assert np.allclose(probs.sum(axis=1), 1.0)
        # each stored configuration's parent states reproduce its code's rows
        for j, states in enumerate(fam.parent_states):
            rows = np.all(case.codes[list(ps)].T == states, axis=1) if ps else \
                np.ones(case.codes.shape[1], bool)
            assert int(rows.sum()) == int(fam.counts[j].sum())


def test_unseen_states_and_configurations_are_counted() -> None:
    # learning rows: a in {0, 1}, b copies a; held-out rows bring a = 2 (unseen state of a,
    # and an unseen parent configuration of b) and b = 1 under a = 0 (a zero count).
    arities = np.array([3, 2])
    learn = np.array([[0, 0, 1, 1, 0, 1], [0, 0, 1, 1, 0, 1]], dtype=np.uint8)
    held = np.array([[2, 0, 1], [0, 1, 1]], dtype=np.uint8)
    fams = fit_discrete(learn, arities, [(), (0,)])
    ll, unseen = log_likelihood_rows(fams, held, 1.0)
    assert unseen["configurations"] == 1 and unseen["states"] == 2
    assert unseen["by_variable"] == {0: {"configurations": 0, "states": 1},
                                     1: {"configurations": 1, "states": 1}}
    # by hand: P(a) = (3+1, 3+1, 0+1)/9; P(b | a=0) = (3+1, 0+1)/5; P(b | a=1) = (1, 4)/5;
    # P(b | a=2) unseen: 1/2
    expected = [math.log(1 / 9) + math.log(1 / 2), math.log(4 / 9) + math.log(1 / 5),
                math.log(4 / 9) + math.log(4 / 5)]
    assert ll.tolist() == pytest.approx(expected, rel=1e-13)
    ml, _ = log_likelihood_rows(fams, held, 0.0)
    assert ml[1] == -math.inf  # why held-out evaluation refuses pseudo_count 0


@settings(max_examples=80, deadline=None)
@given(st.data())
def test_a_family_table_equals_the_groupby_counts(data: st.DataObject) -> None:
    """Property: each family's occurring parent configurations (ascending mixed-radix
    codes, first parent most significant), their parents' states and counts equal those
    of ``pandas.DataFrame.groupby`` (reference library), for small code spaces (one
    dense count) and large ones (the sorted-unique path) alike."""
    import pandas as pd

    n_vars = data.draw(st.integers(2, 5))
    rows = data.draw(st.integers(1, 60))
    wide = data.draw(st.booleans())
    arities = np.array(data.draw(st.lists(st.integers(1, 300 if wide else 4),
                                          min_size=n_vars, max_size=n_vars)), dtype=np.int64)
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    codes = (rng.random((n_vars, rows)) * arities[:, None]).astype(np.uint16)
    child = data.draw(st.integers(0, n_vars - 1))
    parents = sorted(data.draw(st.sets(st.integers(0, n_vars - 1).filter(
        lambda v: v != child), max_size=3)))
    fam = discrete_family(codes, arities, child, parents)
    frame = pd.DataFrame(codes.T.astype(np.int64), columns=[f"v{i}" for i in range(n_vars)])
    keys = [f"v{p}" for p in parents]
    if keys:
        groups = frame.groupby(keys, sort=True)[f"v{child}"].value_counts().unstack(
            fill_value=0).reindex(columns=range(int(arities[child])), fill_value=0)
        states = np.array([k if isinstance(k, tuple) else (k,) for k in groups.index])
        assert np.array_equal(fam.parent_states, states)
        assert np.array_equal(fam.counts, groups.to_numpy())
        radix = np.ones(len(parents), dtype=np.int64)
        for i in range(len(parents) - 2, -1, -1):
            radix[i] = radix[i + 1] * arities[parents[i + 1]]
        assert fam.configs.tolist() == (states @ radix).tolist()
    else:
        counts = np.bincount(codes[child], minlength=int(arities[child]))
        assert fam.counts.tolist() == [counts.tolist()]
