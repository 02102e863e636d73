"""``dataset.missing: available-case``: each family scored on the rows where its columns
are present, by the penalised node-average likelihood (Balov 2013; see
:mod:`runner.scores.available` for exactly what is implemented)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
import pytest
from conftest import Network, sampled_network
from hypothesis import given, settings
from hypothesis import strategies as st

import runner
from runner.data import encode_frame
from runner.errors import InputError
from runner.kinds import make_scorer
from runner.scores import build_scorer
from runner.scores.available import AvailableCaseScorer

SCORES = ("loglik", "aic", "bic")


def _holes(frame: pd.DataFrame, fraction: float, seed: int) -> pd.DataFrame:
    """``frame`` with each cell removed independently with probability ``fraction``
    (missing completely at random), seeded."""
    rng = np.random.default_rng(seed)
    return frame.astype(object).mask(rng.random(frame.shape) < fraction)


def _spec(missing: str, score: str = "bic", **extra: Any) -> dict[str, Any]:
    return {"name": "gaps", "dataset": {"path": "unused.csv", "missing": missing},
            "score": {"name": score}, "search": {"method": "hill-climb", "seed": 1}, **extra}


@pytest.fixture(scope="module")
def asia_complete(asia: Network) -> Any:
    return encode_frame(asia.frame, missing="available-case")


@settings(max_examples=40, deadline=None)
@given(st.data())
def test_without_missing_cells_it_is_the_complete_data_score(asia: Network, asia_complete: Any,
                                                           data: st.DataObject) -> None:
    """No cell missing: every family has all N rows, and the scaled node-average score
    N x PNAL_i = (N / N_i) LL_i - c(N) k_i is exactly the complete-data score (BIC for
    c(N) = ln N / 2, AIC for 1, loglik for 0), bit for bit, for any family."""
    n = len(asia.names)
    child = data.draw(st.integers(0, n - 1))
    parents = data.draw(st.sets(st.integers(0, n - 1).filter(lambda v: v != child),
                                max_size=3))
    score = data.draw(st.sampled_from(SCORES))
    available = make_scorer({"name": score}, asia_complete)
    assert isinstance(available, AvailableCaseScorer)
    complete = build_scorer(score, asia.codes, asia.arities)
    assert available.family(child, sorted(parents)) == complete.family(child, sorted(parents))
    assert available.available_rows(child, sorted(parents)) == len(asia.frame)


def test_a_family_score_is_the_node_average_likelihood_counted_with_pandas() -> None:
    """On a small table with gaps, s_i = (N / N_i) LL_i - (ln N / 2) k_i with LL_i the
    maximised log-likelihood on the N_i rows where child and parent are present, counted
    here with pandas and math.log (the definition in Balov 2013, scaled by N as the
    module documents)."""
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"x": rng.choice(["a", "b", "c"], 400),
                          "y": rng.choice(["p", "q"], 400)})
    frame["y"] = np.where(rng.random(400) < 0.7, np.where(frame["x"] == "a", "p", "q"),
                          frame["y"])
    gaps = _holes(frame, 0.1, 4)
    dataset = encode_frame(gaps, missing="available-case")
    scorer = make_scorer({"name": "bic"}, dataset)
    rows = gaps.dropna()
    n, n_i = len(gaps), len(rows)
    joint = rows.groupby(["x", "y"]).size()
    margin = rows.groupby("x").size()
    ll = math.fsum(c * math.log(c / margin[x]) for (x, _), c in joint.items())
    expected = (n / n_i) * ll - 0.5 * math.log(n) * (2 - 1) * 3
    y, x = dataset.index("y"), dataset.index("x")
    assert scorer.family(y, [x]) == pytest.approx(expected, rel=1e-12)
    alone = gaps["y"].dropna().value_counts()
    ll_y = math.fsum(c * math.log(c / alone.sum()) for c in alone)
    expected_y = (n / alone.sum()) * ll_y - 0.5 * math.log(n) * 1
    assert scorer.family(y, []) == pytest.approx(expected_y, rel=1e-12)


def test_record_counts_and_fitted_tables_use_each_familys_available_rows(asia: Network) -> None:
    """The record's ``score.available_rows`` and the fitted tables' counts equal counts
    done here with pandas on the rows where the family's columns are all present."""
    gaps = _holes(asia.frame, 0.08, 11)
    net = runner.learn(_spec("available-case"), gaps)
    record = net.record
    parents: dict[str, list[str]] = {name: [] for name in gaps.columns}
    for source, target in record["edges"]:
        parents[target].append(source)
    assert any(parents.values())
    assert record["data"]["rows"] == len(gaps)
    assert record["score"]["score_equivalent"] is False
    for child, ps in parents.items():
        present = gaps[[child, *ps]].notna().all(axis=1)
        assert record["score"]["available_rows"][child] == int(present.sum())
    model = net.model
    assert model is not None
    for child, ps in parents.items():
        rows = gaps[[child, *ps]].dropna()
        expected = {tuple(k) if isinstance(k, tuple) else (k,): v
                    for k, v in rows.groupby([child, *ps]).size().items()}
        fitted = {}
        states = model["variables"][child]["states"]
        for config in model["variables"][child]["configurations"]:
            for state, count in zip(states, config["counts"], strict=True):
                if count:
                    fitted[(state, *config["parents"])] = count
        assert fitted == expected


def test_the_report_says_the_run_kept_rows_with_gaps(asia: Network) -> None:
    from runner.present.report import available_case_line

    net = runner.learn(_spec("available-case"), _holes(asia.frame.iloc[:500], 0.05, 1))
    line = available_case_line(net.record)
    assert line is not None and "missing completely at random" in line
    assert available_case_line(runner.learn(_spec("drop-rows"),
                                            asia.frame.iloc[:500]).record) is None


@pytest.mark.parametrize("score", ["bdeu", "k2", "gaussian-bic", "cg-bic"])
def test_other_scores_are_refused_at_validate(score: str) -> None:
    with pytest.raises(InputError) as caught:
        runner.learn(_spec("available-case", score), pd.DataFrame({"a": ["x", "y"] * 5}))
    messages = " ".join(p.message for p in caught.value.problems)
    assert "dataset.missing: available-case" in messages and "score.name" in messages
    assert any(p.key == "score.name" for p in caught.value.problems)


def test_equivalence_class_search_and_held_out_evaluation_are_refused() -> None:
    frame = pd.DataFrame({"a": ["x", "y"] * 5})
    with pytest.raises(InputError) as caught:
        runner.learn({**_spec("available-case"), "search": {"method": "ges"}}, frame)
    assert any(p.key == "search.method" for p in caught.value.problems)
    with pytest.raises(InputError) as caught:
        runner.learn(_spec("available-case", evaluation={"holdout": 0.2, "seed": 1}), frame)
    assert any(p.key == "evaluation" for p in caught.value.problems)


def test_a_spec_without_a_method_gets_a_dag_search_under_available_case() -> None:
    spec = _spec("available-case")
    del spec["search"]
    net = runner.learn(spec, pd.DataFrame({"a": ["x", "y", None] * 5, "b": ["u", "v", "v"] * 5}))
    assert net.record["search"]["method"] == "hill-climb"


@pytest.mark.slow
def test_asia_skeleton_recovery_against_drop_rows() -> None:
    """ASIA (Lauritzen & Spiegelhalter 1988; pgmpy's example model and sampler), 20,000
    rows (seed 7; all 8 true skeleton edges are found by hill climbing under BIC on the
    complete rows), 8% of cells removed completely at random, 10 seeds (0..9), hill
    climbing under bic.

    Measured (this code, 2026-12-04): drop-rows (about 10,300 complete rows left)
    recovers the exact true skeleton in 6 of 10 seeds (mean skeleton differences 0.4);
    available-case (14,000-18,500 rows per family) in 0 of 10 (mean 7.5: spurious edges,
    most into the rare-state column ``asia``). The asked-for property, "at least as often
    as drop-rows", does NOT hold with the penalty lambda_N = ln N / (2N): the node
    averages of two families are taken over different random row sets, which differ by
    O(N^-1/2) per row, far above a penalty of O(ln N / N). This test asserts what was
    measured, so a change of the score that alters it shows here.
    """
    net = sampled_network("asia", 20_000, 7)
    true = {frozenset(e) for e in net.true_edges()}
    exact = {"available-case": 0, "drop-rows": 0}
    for seed in range(10):
        gaps = _holes(net.frame, 0.08, seed)
        for policy in exact:
            edges = runner.learn(_spec(policy), gaps).record["edges"]
            exact[policy] += {frozenset(e) for e in edges} == true
    assert exact["drop-rows"] >= 5
    assert exact["available-case"] <= exact["drop-rows"]


def test_rescoring_an_available_case_run_under_another_score_is_bad_input(
        asia: Network, tmp_path: Any) -> None:
    from runner.compare.rescore import rescore

    gaps = _holes(asia.frame.iloc[:400], 0.05, 2)
    data = tmp_path / "gaps.csv"
    data.write_bytes(runner.canonical_csv(gaps))
    record = runner.learn(_spec("available-case"), data).record
    assert rescore(record, "bic", data_path=data)["value"] == record["score"]["value"]
    with pytest.raises(InputError) as caught:
        rescore(record, "bdeu", data_path=data)
    assert any(p.key == "score.name" for p in caught.value.problems)
