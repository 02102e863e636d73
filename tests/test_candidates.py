"""Candidate parents (``search.candidates``): the screens' statistics against reference
libraries, MMPC on ASIA, the constraints they keep, the search they narrow, the record
and the spec's checks."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import (
    CliCall,
    DataCase,
    constraint_cases,
    data_cases,
    kiln_spec_text,
    sampled_network,
    write_kiln_data,
    write_numeric_case,
)
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.api import learn
from runner.record import check_record, record_json_schema
from runner.search.budget import Budget
from runner.search.candidates import (
    Screen,
    exp_scalar,
    log_chi2_sf,
    mi_candidates,
    mmpc_candidates,
    mmpc_sets,
    narrowed,
    pair_statistics,
    reestimated,
    screened_search,
    stratified,
)
from runner.search.result import SearchOutcome

# --------------------------------------------------------------------------- statistics


@settings(max_examples=40, deadline=None)
@given(data_cases(n_vars=(2, 6), states=(1, 5), rows=(1, 400)))
def test_pair_statistics_are_the_mutual_information_of_scikit_learn(case: DataCase) -> None:
    """N I(X_i; X_j) from the one-hot pass, divided by N, is the empirical mutual
    information (in nats) of ``sklearn.metrics.mutual_info_score`` (scikit-learn, the
    reference implementation, test-only) for every pair."""
    from sklearn.metrics import mutual_info_score

    mi = pair_statistics(case.codes, case.arities).mutual_information()
    for i in range(case.n_vars):
        for j in range(case.n_vars):
            if i != j:
                expected = mutual_info_score(case.codes[i], case.codes[j])
                assert mi[i, j] == pytest.approx(expected, rel=1e-9, abs=1e-12)


def test_equal_statistics_are_exact_ties_broken_by_the_lowest_index() -> None:
    """Two copies of a column have the same integer statistic with a third, so the
    ranking of the third's candidates keeps the lower-indexed copy (k = 1)."""
    from runner.constraints import build_constraints

    rng = np.random.default_rng(3)
    base = rng.integers(0, 3, 500)
    target = np.where(rng.random(500) < 0.8, base, rng.integers(0, 3, 500))
    codes = np.vstack([rng.integers(0, 2, 500), base, base, target]).astype(np.uint8)
    arities = np.array([2, 3, 3, 3])
    stats = pair_statistics(codes, arities)
    assert stats.fixed[1, 3] == stats.fixed[2, 3]
    sets = mi_candidates(stats, build_constraints(["a", "b", "c", "d"]), 1)
    assert sets[3] == (1,)


@pytest.mark.parametrize(("statistic", "df"), [(0.5, 1), (3.84, 1), (12.0, 4), (80.0, 9),
                                               (1.0, 30), (400.0, 12), (700.0, 2)])
def test_log_p_values_are_those_of_scipy(statistic: float, df: int) -> None:
    """ln P(chi2_df >= G) agrees with ``scipy.stats.chi2.logsf`` (SciPy, reference,
    test-only), far into the tail where the p-value itself underflows."""
    from scipy.stats import chi2

    assert log_chi2_sf(statistic, df) == pytest.approx(chi2.logsf(statistic, df), rel=1e-10)


def test_log_p_values_beyond_the_underflow() -> None:
    """Where SciPy's p-value underflows to 0 the logarithm stays finite: with 2 degrees
    of freedom the chi-square is exponential, ln P(chi2_2 >= G) = -G / 2 exactly."""
    assert log_chi2_sf(2500.0, 2) == pytest.approx(-1250.0, rel=1e-12)


@pytest.mark.parametrize("t", [-700.0, -30.5, -1.0, -1e-9, 0.0, 0.3, 2.0, 50.0])
def test_our_exponential_is_the_exponential(t: float) -> None:
    assert exp_scalar(t) == pytest.approx(math.exp(t), rel=4e-16)


@settings(max_examples=30, deadline=None)
@given(data_cases(n_vars=(3, 5), states=(2, 4), rows=(30, 300)), st.data())
def test_stratified_g_and_df_are_scipy_per_stratum(case: DataCase, data: st.DataObject) -> None:
    """G = 2 N I(X; Y | Z) is the sum over the strata of Z of the G statistic of
    ``scipy.stats.chi2_contingency(lambda_="log-likelihood")`` (SciPy, reference) on
    the stratum's table without empty rows and columns, and the adjusted degrees of
    freedom the sum of (rows - 1)(columns - 1) of those tables."""
    from scipy.stats import chi2_contingency

    x, y = data.draw(st.lists(st.integers(0, case.n_vars - 1), min_size=2, max_size=2,
                              unique=True))
    rest = [v for v in range(case.n_vars) if v not in (x, y)]
    given_ = data.draw(st.lists(st.sampled_from(rest), unique=True, max_size=2))
    found = stratified(case.codes, case.arities, x, given_, [y], 40)
    strata = (np.zeros(case.codes.shape[1], dtype=np.int64) if not given_ else
              np.ravel_multi_index([case.codes[v] for v in given_],
                                   [int(case.arities[v]) for v in given_]))
    g, df = 0.0, 0
    for z in np.unique(strata):
        rows = strata == z
        table = np.zeros((int(case.arities[x]), int(case.arities[y])))
        np.add.at(table, (case.codes[x][rows], case.codes[y][rows]), 1)
        table = table[table.sum(axis=1) > 0][:, table.sum(axis=0) > 0]
        if min(table.shape) > 1:
            g += chi2_contingency(table, correction=False, lambda_="log-likelihood")[0]
        df += (table.shape[0] - 1) * (table.shape[1] - 1)
    assert 2 * int(found.fixed[0]) / 2.0**40 == pytest.approx(g, rel=1e-9, abs=1e-9)
    assert int(found.df[0]) == df


# --------------------------------------------------------------------------- mmpc on asia


@pytest.mark.slow
def test_mmpc_finds_every_neighbour_set_of_asia() -> None:
    """On 50,000 rows sampled from ASIA (Lauritzen & Spiegelhalter 1988; pgmpy's bundled
    model and sampler, seed 3), MMPC with the symmetry correction returns each
    variable's true parents and children, although ``either`` is a deterministic OR of
    ``tub`` and ``lung`` (tests given both say nothing, and are not counted)."""
    net = sampled_network("asia", 50_000, 3)
    found = mmpc_sets(net.codes, net.arities)
    for v, name in enumerate(net.names):
        true = {p for p in net.true_parents[v]} | {
            c for c, ps in enumerate(net.true_parents) if v in ps}
        assert set(found[v]) == true, name


# --------------------------------------------------------------------------- constraints


@settings(max_examples=40, deadline=None)
@given(st.data())
def test_required_are_always_candidates_and_forbidden_never(data: st.DataObject) -> None:
    """Whatever the screen and k: every required parent is a candidate, every candidate
    is an allowed parent, at most k others are kept, and the narrowed constraints allow
    a subset of the pairs the constraints allow, the required edges among them."""
    case = data.draw(data_cases(n_vars=(3, 6), states=(2, 3), rows=(40, 200)))
    cons = data.draw(constraint_cases(case.n_vars)).constraints
    k = data.draw(st.integers(1, case.n_vars))
    stats = pair_statistics(case.codes, case.arities)
    parents = [tuple(sorted(i for i, j in cons.required if j == c)) for c in range(case.n_vars)]
    for sets in (mi_candidates(stats, cons, k), mmpc_candidates(case.codes, case.arities, cons, k),
                 reestimated(case.codes, case.arities, stats, cons, k, parents)):
        for child, chosen in enumerate(sets):
            required = {i for i, j in cons.required if j == child}
            assert required <= set(chosen)
            assert all(cons.allowed[p, child] for p in chosen)
            assert len(set(chosen) - required) <= k
        narrow = narrowed(cons, sets)
        assert not (narrow.allowed & ~cons.allowed).any()
        assert all(narrow.allowed[i, j] for i, j in cons.required)


def test_rounds_start_from_the_graph_before_and_keep_its_parents() -> None:
    """Each re-estimation keeps the current parents as candidates and the next search
    starts from the current graph; the rounds' steps are numbered on."""
    from runner.constraints import build_constraints

    rng = np.random.default_rng(5)
    a = rng.integers(0, 2, 800)
    codes = np.vstack([a, (a + (rng.random(800) < 0.1)) % 2, rng.integers(0, 2, 800)])
    cons = build_constraints(["a", "b", "c"])
    calls: list[tuple[Any, Any]] = []
    graphs = [[(2,), (0,), ()], [(2,), (0,), (1,)]]

    def search(narrow: Any, budget: Any, start: Any) -> tuple[SearchOutcome, int]:
        calls.append((narrow.allowed.copy(), [tuple(s) for s in start]))
        graph = graphs[min(len(calls) - 1, 1)]
        return SearchOutcome(graph, 0.0, "local_optimum", 1, 0, 0, True, 0.0), len(calls)

    found = screened_search(Screen("mutual-information", 1, 3), codes.astype(np.uint8),
                            np.array([2, 2, 2]), cons, Budget(), [(), (), ()], search)
    assert calls[1][1] == graphs[0]  # round 1 starts from round 0's graph
    assert all(calls[-1][0][p, c] for c, ps in enumerate(graphs[0]) for p in ps)
    assert found.outcome.steps == len(calls) and found.rounds == len(calls) - 1


# --------------------------------------------------------------------------- the search


def _kiln_spec(search: dict[str, Any], score: str = "bic") -> dict[str, Any]:
    return {"name": "kiln", "dataset": {"path": "kiln.csv"}, "parent_cap": 3,
            "score": {"name": score}, "search": search}


@pytest.fixture(scope="module")
def kiln_frame(tmp_path_factory: pytest.TempPathFactory) -> Any:
    import pandas as pd

    path = write_kiln_data(tmp_path_factory.mktemp("kiln"), 2000)
    return pd.read_csv(path, dtype=str, keep_default_na=False)


@pytest.mark.parametrize("method", ["hill-climb", "tabu", "first-ascent", "ges"])
def test_k_of_every_variable_gives_the_unrestricted_search(kiln_frame: Any, method: str) -> None:
    """With k >= n - 1 every allowed pair is a candidate and no round changes them: the
    same graph and the same score bits as without candidates."""
    plain = learn(_kiln_spec({"method": method, "seed": 4}), kiln_frame).record
    screened = learn(_kiln_spec({"method": method, "seed": 4, "candidates": {
        "method": "mutual-information", "k": 11}}), kiln_frame).record
    assert screened["graph_sha256"] == plain["graph_sha256"]
    assert screened["score"]["value"].hex() == plain["score"]["value"].hex()
    assert screened["score"]["families"] == plain["score"]["families"]
    assert screened["search"]["candidates"]["rounds"] == 0
    names = list(plain["data"]["columns"])
    assert len(names) == 12  # k = n - 1
    for child, parents in screened["search"]["candidates"]["parents"].items():
        assert sorted(parents) == sorted(n for n in names if n != child)


@pytest.mark.parametrize("screen", [{"method": "mutual-information", "k": 2},
                                    {"method": "mmpc", "k": 3, "alpha": 0.01}])
def test_the_record_carries_the_candidates(kiln_frame: Any, screen: dict[str, Any]) -> None:
    """``search.candidates`` of the record: the screen as used and each variable's
    candidate parents; every learned edge joins a candidate to its child."""
    record = learn(_kiln_spec({"method": "hill-climb", "candidates": screen}),
                   kiln_frame).record
    block = record["search"]["candidates"]
    names = list(record["data"]["columns"])
    assert sorted(block["parents"]) == sorted(names)
    assert all(len(ps) <= screen["k"] for ps in block["parents"].values())
    for parent, child in record["edges"]:
        assert parent in block["parents"][child]
    assert block["method"] == screen["method"] and block["k"] == screen["k"]
    assert block.get("alpha") == screen.get("alpha")


def test_more_rounds_never_score_lower(kiln_frame: Any) -> None:
    """The rounds keep the current parents and start from the current graph, so the
    score after re-estimation is at least the first search's."""
    first = learn(_kiln_spec({"method": "hill-climb", "candidates": {
        "method": "mutual-information", "k": 2, "rounds": 0}}), kiln_frame).record
    more = learn(_kiln_spec({"method": "hill-climb", "candidates": {
        "method": "mutual-information", "k": 2, "rounds": 3}}), kiln_frame).record
    assert more["score"]["value"] >= first["score"]["value"]
    assert more["search"]["steps"] >= first["search"]["steps"]


def test_a_stored_record_with_candidates_is_valid(tmp_path: Path, dagmill: CliCall) -> None:
    write_kiln_data(tmp_path, 1500)
    (tmp_path / "specs" / "wide.yaml").write_text(
        kiln_spec_text("wide") + "  candidates: {method: mutual-information, k: 3}\n")
    done = dagmill("run", "specs/wide.yaml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    path = next((tmp_path / "results" / "wide" / "runs").glob("*/run.json"))
    record = json.loads(path.read_text())
    check_record(record, str(path))
    assert record["search"]["candidates"]["k"] == 3
    assert "CandidateScreen" in json.dumps(record_json_schema())


def test_specs_without_candidates_keep_their_hash() -> None:
    from runner.spec import normalised_spec
    from runner.spec.loader import load_spec_dict

    spec = load_spec_dict(_kiln_spec({"method": "hill-climb"}))
    assert "candidates" not in normalised_spec(spec)["search"]


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(("block", "key", "words"), [
    ("{method: mutual-information, k: 0}", "search.candidates.k", "at least 1"),
    ("{method: mutual-information, k: 2.5}", "search.candidates.k", "whole number"),
    ("{method: pearson, k: 3}", "search.candidates.method", "mutual-information"),
    ("{k: 3}", "search.candidates.method", ""),
    ("{method: mmpc, rounds: 2}", "search.candidates", "'rounds' only applies"),
    ("{method: mutual-information, alpha: 0.1}", "search.candidates", "'alpha' only"),
    ("{method: mmpc, alpha: 1.5}", "search.candidates.alpha", ""),
    ("{method: mutual-information, rounds: -1}", "search.candidates.rounds", ""),
])
def test_bad_candidate_settings_exit_2_naming_the_key(tmp_path: Path, cli: CliCall,
                                                      block: str, key: str, words: str) -> None:
    write_kiln_data(tmp_path, 200)
    (tmp_path / "specs" / "bad.yaml").write_text(kiln_spec_text("bad").replace(
        "search:\n  seed: 2\n", f"search:\n  seed: 2\n  candidates: {block}\n"))
    done = cli("validate", "specs/bad.yaml", cwd=tmp_path)
    assert done.returncode == 2
    assert f"{key}:" in done.stderr + done.stdout
    assert words in done.stderr + done.stdout


@pytest.mark.parametrize(("score", "method", "words"), [
    ("bic", "exact", "'exact' scores every candidate parent set"),
    ("bic", "order", "'order' scores every candidate parent set"),
    ("gaussian-bic", "hill-climb", "not available with a continuous score"),
])
def test_candidates_refused_where_they_cannot_apply(tmp_path: Path, cli: CliCall,
                                                    score: str, method: str,
                                                    words: str) -> None:
    write_numeric_case(tmp_path)
    (tmp_path / "specs").mkdir()
    (tmp_path / "specs" / "x.yaml").write_text(
        "name: x\ndataset: {path: ../data.csv, bins: 3}\ntiers: [[a, b, c, d]]\n"
        f"score: {{name: {score}}}\nsearch:\n  method: {method}\n"
        "  candidates: {method: mutual-information, k: 2}\n")
    for command in (["validate"], ["run", "--results", "results"]):
        done = cli(*command, "specs/x.yaml", cwd=tmp_path)
        assert done.returncode == 2, done.stdout
        assert "Traceback" not in done.stderr
        out = done.stdout + done.stderr
        assert "search.candidates:" in out and words in out


def test_candidates_refused_under_available_case(tmp_path: Path, cli: CliCall) -> None:
    write_kiln_data(tmp_path, 200)
    text = kiln_spec_text("gaps").replace("  path: ../datasets/kiln.csv\n",
                                          "  path: ../datasets/kiln.csv\n"
                                          "  missing: available-case\n")
    (tmp_path / "specs" / "gaps.yaml").write_text(
        text.replace("{name: bdeu}", "{name: bic}")
        + "  method: hill-climb\n  candidates: {method: mmpc}\n")
    done = cli("validate", "specs/gaps.yaml", cwd=tmp_path)
    assert done.returncode == 2
    assert "search.candidates:" in done.stdout and "available-case" in done.stdout


@settings(max_examples=60, deadline=None)
@given(st.data())
def test_the_shielding_measure_from_family_tables_equals_the_stratified_count(
        data: st.DataObject) -> None:
    """N I(X; Y | Z) taken as LL(X | Z, Y) - LL(X | Z) from the scorer's family tables
    (numpy path and compiled kernel alike) is the same integer as the stratified count
    for every Y, so the re-estimation rounds rank the same way."""
    from runner.scores.counts import CountScorer
    from runner.scores.likelihood import loglik_family
    from runner.search.candidates import shielding, stratified

    n = data.draw(st.integers(3, 6))
    rows = data.draw(st.integers(5, 120))
    arities = np.array(data.draw(st.lists(st.integers(1, 4), min_size=n, max_size=n)),
                       dtype=np.int64)
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    codes = (rng.random((n, rows)) * arities[:, None]).astype(np.uint8)
    x = data.draw(st.integers(0, n - 1))
    given = sorted(data.draw(st.sets(st.integers(0, n - 1).filter(lambda v: v != x),
                                     min_size=1, max_size=2)))
    others = [v for v in range(n) if v != x and v not in given]
    if not others:
        return
    bits = 30
    scorer = CountScorer(loglik_family, codes, arities)
    scorer._choice = data.draw(st.sampled_from(["numpy", "numba"]))  # type: ignore[attr-defined]
    expected = stratified(codes, arities, x, given, others, bits).fixed
    assert shielding(scorer, x, given, others, bits).tolist() == expected.tolist()
