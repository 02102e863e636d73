"""The conditional linear Gaussian BIC (``cg-bic``) on mixed tables.

External checks and their sources:

* each continuous family's log-likelihood is the sum over the configurations of its
  discrete parents of the maximised log-likelihood of an ordinary least squares regression
  on that configuration's rows: statsmodels' ``OLS(...).fit().llf`` (reference library);
  the per-configuration parameters are statsmodels' ``params`` and ``ssr / nobs``;
* the model: Lauritzen & Wermuth (1989), conditional Gaussian distributions; the
  restriction that a discrete variable has no continuous parent: Lauritzen (1992) and
  Bottcher (2001);
* with no continuous column the score is ``bic`` (Schwarz 1978), with no discrete column
  ``gaussian-bic``: both compared bit for bit with the project's own scores.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from conftest import CliCall, dependent_codes
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from runner import pipeline, registry
from runner.constraints import build_constraints
from runner.errors import InputError
from runner.graph import parents_from_edges
from runner.kinds import make_scorer
from runner.scores import build_gaussian_scorer, build_scorer
from runner.scores.conditional_gaussian import (
    MixedData,
    build_cg_scorer,
    cg_bic_family,
    cg_loglik_family,
    continuous_fits,
)
from runner.spec import normalised_spec

REL = 1e-9
FAST = settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def close(a: float, b: float, rel: float = REL) -> bool:
    return abs(a - b) <= rel * max(1.0, abs(a), abs(b))


# --------------------------------------------------------------------------- data


def mixed_table(rng: np.random.Generator, rows: int, arities: tuple[int, ...],
                n_continuous: int) -> tuple[np.ndarray, np.ndarray, list[bool]]:
    """Codes and values of a table: discrete columns first (arities), continuous after,
    every continuous column depending on the discrete ones and the earlier continuous."""
    d = len(arities)
    n = d + n_continuous
    codes = np.zeros((n, rows), dtype=np.uint8)
    values = np.full((n, rows), np.nan)
    for k, r in enumerate(arities):
        codes[k] = rng.integers(0, r, size=rows)
    for k in range(d, n):
        x = rng.normal(size=rows)
        for p in range(d):
            x += rng.uniform(-2, 2, size=arities[p])[codes[p]]
        for p in range(d, k):
            x += rng.uniform(-1, 1) * values[p] * (1 + 0.5 * (codes[0] if d else 0))
        values[k] = x
    return codes, values, [False] * d + [True] * n_continuous


def statsmodels_family(codes: np.ndarray, values: np.ndarray, child: int,
                       discrete: list[int], continuous: list[int]
                       ) -> tuple[float, list[tuple[tuple[int, ...], np.ndarray, float]]]:
    """Sum over occurring configurations of the discrete parents of statsmodels' OLS
    log-likelihood (intercept + continuous parents), and each configuration's parameters
    and ML variance."""
    keys = [tuple(int(codes[p, r]) for p in discrete) for r in range(codes.shape[1])]
    total, fits = [], []
    for config in sorted(set(keys)):
        rows = np.array([k == config for k in keys])
        y = values[child, rows]
        x = np.ones((int(rows.sum()), 1))
        if continuous:
            x = np.column_stack([x, values[continuous][:, rows].T])
        fit = sm.OLS(y, x).fit()
        total.append(fit.llf)
        fits.append((config, np.asarray(fit.params), fit.ssr / fit.nobs))
    return math.fsum(total), fits


# --------------------------------------------------------------------------- the score


@FAST
@given(seed=st.integers(0, 2**32 - 1), pick=st.integers(0, 2**16))
def test_family_loglik_is_statsmodels_ols_per_configuration(seed: int, pick: int) -> None:
    # statsmodels OLS (reference library): per configuration of the discrete parents, the
    # maximised Gaussian log-likelihood of the least-squares fit with an intercept.
    rng = np.random.default_rng(seed)
    codes, values, continuous = mixed_table(rng, 400, (2, 3), 3)
    data = MixedData(codes, np.array([2, 3, 0, 0, 0]), values, continuous)
    child = 2 + pick % 3
    others = [v for v in range(5) if v != child]
    parents = [v for k, v in enumerate(others) if (pick >> (k + 2)) & 1]
    discrete = [p for p in parents if not continuous[p]]
    cont = [p for p in parents if continuous[p]]
    expected, fits = statsmodels_family(codes, values, child, discrete, cont)
    assert close(cg_loglik_family(data, child, parents), expected), (child, parents)
    # BIC: (ln N / 2) per parameter, q_D (|C| + 2) of them (every possible configuration)
    q = math.prod(int(data.arities[p]) for p in discrete)
    assert close(cg_bic_family(data, child, parents),
                 expected - 0.5 * math.log(400) * q * (len(cont) + 2))
    # the fitted parameters are statsmodels' too
    for fit, (config, params, variance) in zip(continuous_fits(data, child, parents), fits,
                                               strict=True):
        assert fit.states == config and not fit.thin
        assert np.allclose([fit.family.intercept, *fit.family.coefficients], params,
                           rtol=1e-8, atol=1e-10)
        assert close(fit.family.variance, variance, 1e-8)


def test_a_thin_configuration_is_scored_under_the_fit_without_parents() -> None:
    # A configuration with no residual degree of freedom (here: 2 rows, one continuous
    # parent) would have variance 0; its rows get the child's fit without parents.
    rng = np.random.default_rng(5)
    rows = 200
    codes = np.zeros((3, rows), dtype=np.uint8)
    codes[0, :2] = 1  # state 1 occurs in two rows only
    values = np.full((3, rows), np.nan)
    values[1] = rng.normal(size=rows)
    values[2] = values[1] + rng.normal(size=rows)
    data = MixedData(codes, np.array([2, 0, 0]), values, [False, True, True])
    fits = continuous_fits(data, 2, [0, 1])
    assert [f.thin for f in fits] == [False, True]
    y = values[2]
    mean, s2 = y.mean(), y.var()
    thin = y[:2]
    expected = float(np.sum(-0.5 * np.log(2 * np.pi * s2) - (thin - mean) ** 2 / (2 * s2)))
    assert close(fits[1].log_likelihood, expected, 1e-9)
    ols = sm.OLS(y[2:], np.column_stack([np.ones(rows - 2), values[1, 2:]])).fit().llf
    assert close(cg_loglik_family(data, 2, [0, 1]), ols + expected)
    assert math.isfinite(cg_bic_family(data, 2, [0, 1]))


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")
def test_a_parent_constant_within_a_configuration_is_left_out_there() -> None:
    # Within configuration 1 the continuous parent x is constant: the design is rank
    # deficient there. statsmodels' OLS (pseudo-inverse) gives the least-squares fit all
    # the same; the score drops the dependent parent in that configuration, with the same
    # residuals, so the log-likelihoods agree.
    rng = np.random.default_rng(9)
    rows = 300
    codes = np.zeros((4, rows), dtype=np.uint8)
    codes[0, 150:] = 1
    values = np.full((4, rows), np.nan)
    values[1] = np.where(codes[0] == 1, 2.0, rng.normal(size=rows))
    values[2] = rng.normal(size=rows)
    values[3] = 0.7 * values[1] - 0.4 * values[2] + rng.normal(size=rows) + codes[0]
    data = MixedData(codes, np.array([2, 0, 0, 0]), values, [False, True, True, True])
    expected, _ = statsmodels_family(codes, values, 3, [0], [1, 2])
    assert close(cg_loglik_family(data, 3, [0, 1, 2]), expected)
    fits = continuous_fits(data, 3, [0, 1, 2])
    assert fits[1].family.coefficients[0] == 0.0 and fits[0].family.coefficients[0] != 0.0
    # Nearly dependent within configuration 1 (x2 = 3 x1 + 1e-6 noise: a positive pivot
    # of about 1e-13 of its diagonal, below the 1e-12 threshold): x2 is left out there,
    # so configuration 1 is statsmodels' fit on x1 alone, configuration 0 the fit on both.
    values[1] = rng.normal(size=rows)
    values[2] = np.where(codes[0] == 1, 3.0 * values[1] + 1e-6 * rng.normal(size=rows),
                         rng.normal(size=rows))
    data = MixedData(codes, np.array([2, 0, 0, 0]), values, [False, True, True, True])
    both, _ = statsmodels_family(codes[:, :150], values[:, :150], 3, [], [1, 2])
    one, _ = statsmodels_family(codes[:, 150:], values[:, 150:], 3, [], [1])
    assert close(cg_loglik_family(data, 3, [0, 1, 2]), both + one)
    assert continuous_fits(data, 3, [0, 1, 2])[1].family.coefficients[1] == 0.0


def test_a_discrete_child_with_a_continuous_parent_has_no_score() -> None:
    rng = np.random.default_rng(2)
    codes, values, continuous = mixed_table(rng, 100, (2,), 1)
    data = MixedData(codes, np.array([2, 0]), values, continuous)
    with pytest.raises(ValueError, match="may not have continuous parents"):
        cg_bic_family(data, 0, [1])


@FAST
@given(seed=st.integers(0, 2**32 - 1))
def test_the_score_does_not_depend_on_the_order_of_the_rows(seed: int) -> None:
    # exact per-configuration moments: the same bits for any order of the rows
    rng = np.random.default_rng(seed)
    codes, values, continuous = mixed_table(rng, 300, (2, 2), 2)
    order = rng.permutation(300)
    a = build_cg_scorer(codes, [2, 2, 0, 0], values, continuous)
    b = build_cg_scorer(np.ascontiguousarray(codes[:, order]), [2, 2, 0, 0],
                        np.ascontiguousarray(values[:, order]), continuous)
    dag = [(), (0,), (0, 1), (1, 2)]
    assert a.total(dag).hex() == b.total(dag).hex()


# --------------------------------------------------------------------------- bic, gaussian-bic


@FAST
@given(seed=st.integers(0, 2**32 - 1), masks=st.lists(st.integers(0, 15), min_size=4,
                                                     max_size=4))
def test_without_continuous_columns_it_is_bic(seed: int, masks: list[int]) -> None:
    rng = np.random.default_rng(seed)
    codes, _, _ = mixed_table(rng, 250, (2, 3, 2, 4), 0)
    arities = np.array([2, 3, 2, 4])
    cg = build_cg_scorer(codes, arities, None, [False] * 4)
    bic = build_scorer("bic", codes, arities)
    for child, mask in enumerate(masks):
        parents = [p for p in range(4) if mask >> p & 1 and p != child]
        assert cg.family(child, parents).hex() == bic.family(child, parents).hex()


@FAST
@given(seed=st.integers(0, 2**32 - 1), masks=st.lists(st.integers(0, 15), min_size=4,
                                                     max_size=4))
def test_without_discrete_columns_it_is_gaussian_bic(seed: int, masks: list[int]) -> None:
    rng = np.random.default_rng(seed)
    _, values, _ = mixed_table(rng, 250, (), 4)
    cg = build_cg_scorer(np.zeros((4, 250), np.uint8), [0] * 4, values, [True] * 4)
    gauss = build_gaussian_scorer("gaussian-bic", values)
    for child, mask in enumerate(masks):
        parents = [p for p in range(4) if mask >> p & 1 and p != child]
        assert cg.family(child, parents).hex() == gauss.family(child, parents).hex()


def write(folder: Path, frame: pd.DataFrame, spec: dict) -> Path:
    frame.to_csv(folder / "data.csv", index=False, lineterminator="\n")
    path = folder / "spec.yaml"
    path.write_text(json.dumps({"name": "cg", "dataset": {"path": "data.csv"}, **spec}),
                    encoding="utf-8")
    return path


def learned(path: Path) -> dict:
    record, _ = pipeline.learn(pipeline.prepare(path))
    return record


@pytest.mark.parametrize("other", ["bic", "gaussian-bic"])
def test_a_run_under_cg_bic_equals_the_single_kind_score(tmp_path: Path, other: str) -> None:
    # the same spec and data under cg-bic and under bic (all columns discrete) or
    # gaussian-bic (all continuous): the same graph, score bits and family scores
    rng = np.random.default_rng(11)
    if other == "bic":
        codes = dependent_codes([2, 3, 2, 3], 500, rng)
        frame = pd.DataFrame({f"v{k}": [f"s{c}" for c in codes[k]] for k in range(4)})
    else:
        _, values, _ = mixed_table(rng, 500, (), 4)
        frame = pd.DataFrame({f"v{k}": values[k] for k in range(4)})
    records = {}
    for score in ("cg-bic", other):
        folder = tmp_path / score
        folder.mkdir()
        records[score] = learned(write(folder, frame, {
            "score": {"name": score}, "search": {"method": "hill-climb", "seed": 3}}))
    a, b = records["cg-bic"], records[other]
    assert a["edges"] == b["edges"] and a["edges"]
    assert a["score"]["value"].hex() == b["score"]["value"].hex()
    assert a["score"]["families"] == b["score"]["families"]
    assert a["_model"]["variables"] == b["_model"]["variables"]


# --------------------------------------------------------------------------- a mixed network

#: The network the skeleton test samples (coefficients as stated):
#:   A ~ (0.3, 0.5, 0.2) over a0, a1, a2
#:   B | A: P(B = b1) = 0.2, 0.7, 0.5 for a0, a1, a2
#:   E | B: P(E = e1) = 0.25, 0.75 for b0, b1
#:   X | A = (-1, 0.5, 2)[A] + N(0, 1)
#:   Y | B, X = 1.0 + 0.8 X + N(0, 1) for b0;  -1.0 - 0.6 X + N(0, 0.5^2) for b1
#:   Z | E, Y = 0.5 + 1.2 Y + N(0, 1) for e0;   -0.5 + 0.3 Y + N(0, 1) for e1
#:   W | Z = 2.0 - 0.7 Z + N(0, 1)
TRUE_EDGES = {("A", "B"), ("B", "E"), ("A", "X"), ("B", "Y"), ("X", "Y"), ("E", "Z"),
              ("Y", "Z"), ("Z", "W")}


def mixed_network(rows: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    a = rng.choice(3, size=rows, p=[0.3, 0.5, 0.2])
    b = (rng.random(rows) < np.array([0.2, 0.7, 0.5])[a]).astype(int)
    e = (rng.random(rows) < np.array([0.25, 0.75])[b]).astype(int)
    x = np.array([-1.0, 0.5, 2.0])[a] + rng.normal(size=rows)
    y = np.where(b == 0, 1.0 + 0.8 * x + rng.normal(size=rows),
                 -1.0 - 0.6 * x + rng.normal(scale=0.5, size=rows))
    z = np.where(e == 0, 0.5 + 1.2 * y, -0.5 + 0.3 * y) + rng.normal(size=rows)
    w = 2.0 - 0.7 * z + rng.normal(size=rows)
    return pd.DataFrame({"A": [f"a{v}" for v in a], "B": [f"b{v}" for v in b],
                         "E": [f"e{v}" for v in e], "X": x, "Y": y, "Z": z, "W": w})


def skeleton(edges: object) -> set[frozenset[str]]:
    return {frozenset(e) for e in edges}  # type: ignore[attr-defined]


@pytest.mark.parametrize("seed", [7, 8, 9])
def test_the_skeleton_of_a_mixed_network_is_recovered_at_5000_rows(tmp_path: Path,
                                                                   seed: int) -> None:
    # The score's optimum (exact search) on 5,000 rows sampled from the network above
    # has its skeleton, and scores at least as high as the generating graph.
    record = learned(write(tmp_path, mixed_network(5000, seed), {
        "score": {"name": "cg-bic"}, "search": {"method": "exact"}}))
    assert skeleton(record["edges"]) == skeleton(TRUE_EDGES), record["edges"]
    prepared = pipeline.prepare(tmp_path / "spec.yaml")
    scorer = make_scorer({"name": "cg-bic"}, prepared.dataset)
    truth = parents_from_edges(list(prepared.dataset.names), sorted(TRUE_EDGES))
    assert record["score"]["value"] >= scorer.total(truth)
    kinds = {n: c["kind"] for n, c in record["data"]["columns"].items()}
    assert not [e for e in record["edges"] if kinds[e[0]] == "continuous"
                and kinds[e[1]] == "discrete"]
    # the fitted model holds Y's two regressions with the stated coefficients, roughly
    y = record["_model"]["variables"]["Y"]
    by_state = {c["parents"][0]: c for c in y["configurations"]}
    assert abs(by_state["b0"]["coefficients"]["X"] - 0.8) < 0.1
    assert abs(by_state["b1"]["coefficients"]["X"] + 0.6) < 0.1
    assert abs(by_state["b1"]["residual_variance"] - 0.25) < 0.05


# --------------------------------------------------------------------------- the kind rule


def test_the_constraints_forbid_continuous_into_discrete() -> None:
    names = ["d1", "c1", "d2", "c2"]
    kinds = ["discrete", "continuous", "discrete", "continuous"]
    allowed = build_constraints(names, kinds=kinds).allowed
    for i, a in enumerate(kinds):
        for j, b in enumerate(kinds):
            expected = i != j and not (a == "continuous" and b == "discrete")
            assert bool(allowed[i, j]) == expected, (names[i], names[j])
    assert build_constraints(names).allowed.sum() == 12  # without kinds: no rule


ACCEPTING = tuple(m for m in registry.METHOD_NAMES
                  if registry.compatibility(registry.method(m), registry.score("cg-bic")) is None)


def test_ges_refuses_cg_bic_and_the_others_accept_it() -> None:
    assert "ges" not in ACCEPTING and {"hill-climb", "tabu", "order", "exact"} <= set(ACCEPTING)
    assert registry.default_method("cg-bic") == "hill-climb"


@pytest.mark.parametrize("method", ACCEPTING)
@settings(max_examples=6, deadline=None, suppress_health_check=[
    HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 2**32 - 1), n_discrete=st.integers(1, 3),
       n_continuous=st.integers(1, 3), rows=st.integers(80, 300))
def test_no_discrete_child_ever_gets_a_continuous_parent(
        tmp_path: Path, method: str, seed: int, n_discrete: int, n_continuous: int,
        rows: int) -> None:
    # Random mixed data where discrete columns are thresholds of continuous ones (so the
    # data favour continuous -> discrete edges): no search method that accepts cg-bic
    # ever returns one.
    rng = np.random.default_rng(seed)
    cont = {f"c{k}": rng.normal(size=rows) for k in range(n_continuous)}
    names = list(cont)
    for k in range(1, n_continuous):
        cont[f"c{k}"] += rng.uniform(-1, 1) * cont[f"c{k - 1}"]
    disc = {}
    for k in range(n_discrete):
        source = cont[f"c{k % n_continuous}"] + 0.3 * rng.normal(size=rows)
        disc[f"d{k}"] = np.where(source > 0, "hi", "lo")
    frame = pd.DataFrame({**disc, **cont})
    spec: dict = {"score": {"name": "cg-bic"}, "search": {"method": method, "seed": seed % 97},
                  "dataset": {"path": "data.csv", "columns": {
                      n: {"kind": "continuous"} for n in names}}}
    if method == "order":
        spec["search"]["order"] = list(frame.columns)
    folder = tmp_path / f"{method}-{seed}-{n_discrete}-{n_continuous}-{rows}"
    folder.mkdir()
    prepared = pipeline.prepare(write(folder, frame, spec))
    assert pipeline.search_refusal(prepared) is None
    scorer = make_scorer(normalised_spec(prepared.spec)["score"], prepared.dataset)
    rng_search = np.random.default_rng(np.random.SeedSequence(prepared.spec.search.seed))
    outcome, *_ = pipeline.run_search(prepared, scorer, pipeline.spec_budget(prepared.spec),
                                      rng_search)
    kinds = [prepared.dataset.kind(i) for i in range(len(prepared.dataset.names))]
    for child, parents in enumerate(outcome.parent_sets):
        if kinds[child] == "discrete":
            assert all(kinds[p] == "discrete" for p in parents), (method, child, parents)


# --------------------------------------------------------------------------- bad input


def test_a_required_continuous_to_discrete_edge_is_bad_input(tmp_path: Path,
                                                             cli: CliCall) -> None:
    frame = mixed_network(200, 1)
    frame.to_csv(tmp_path / "data.csv", index=False, lineterminator="\n")
    (tmp_path / "spec.yaml").write_text(
        "name: cg\ndataset: {path: data.csv}\nscore: {name: cg-bic}\nrequired:\n"
        "  - [A, X]\n  - [X, B]\n", encoding="utf-8")
    with pytest.raises(InputError) as caught:
        pipeline.prepare(tmp_path / "spec.yaml")
    [problem] = caught.value.problems
    assert problem.key == "required.1" and problem.line == 6
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    text = result.stdout + result.stderr
    assert "spec.yaml:6" in text and "required.1" in text
    assert "X -> B" in text and "may not have continuous parents" in text
    # the same edge under bic (X binned) is fine
    (tmp_path / "spec.yaml").write_text(
        "name: cg\ndataset:\n  path: data.csv\n  columns:\n    X: {kind: continuous, bins: 3}\n"
        "    Y: {kind: continuous, bins: 3}\n    Z: {kind: continuous, bins: 3}\n"
        "    W: {kind: continuous, bins: 3}\nscore: {name: bic}\nrequired:\n  - [X, B]\n",
        encoding="utf-8")
    assert cli("validate", "spec.yaml", cwd=tmp_path).returncode == 0


@pytest.mark.parametrize(("extra", "data", "expected"), [
    ("search: {method: ges}\n", None, ["search.method", "score-equivalent", "cg-bic"]),
    ("evaluation: {holdout: 0.2, seed: 1}\n", None, ["evaluation", "not available"]),
    ("", "constant", ["'K'", "same value", "singular"]),
])
def test_cg_bic_bad_input(tmp_path: Path, cli: CliCall, extra: str, data: str | None,
                          expected: list[str]) -> None:
    frame = mixed_network(120, 2)
    if data == "constant":
        frame["K"] = 1.5
    frame.to_csv(tmp_path / "data.csv", index=False, lineterminator="\n")
    columns = "  columns: {K: {kind: continuous}}\n" if data == "constant" else ""
    (tmp_path / "spec.yaml").write_text(
        f"name: cg\ndataset:\n  path: data.csv\n{columns}score: {{name: cg-bic}}\n{extra}",
        encoding="utf-8")
    result = cli("validate", "spec.yaml", cwd=tmp_path)
    text = result.stdout + result.stderr
    assert result.returncode == 2 and "Traceback" not in text
    for part in expected:
        assert part in text, (part, text)


def test_binned_columns_are_discrete_under_cg_bic(tmp_path: Path) -> None:
    # a continuous column with bins is cut into bins and scored as discrete; the rest
    # stay continuous, and the binned one may then have no continuous parent either
    frame = mixed_network(400, 3)
    path = write(tmp_path, frame, {"score": {"name": "cg-bic"}, "dataset": {
        "path": "data.csv", "columns": {"W": {"kind": "continuous", "bins": 3}}}})
    prepared = pipeline.prepare(path)
    kinds = dict(zip(prepared.dataset.names, (prepared.dataset.kind(i) for i in range(7)),
                     strict=True))
    assert kinds == {"A": "discrete", "B": "discrete", "E": "discrete", "X": "continuous",
                     "Y": "continuous", "Z": "continuous", "W": "discrete"}
    w, z = prepared.dataset.names.index("W"), prepared.dataset.names.index("Z")
    assert not prepared.constraints.allowed[z, w] and prepared.constraints.allowed[w, z]
    record, _ = pipeline.learn(prepared)
    assert record["data"]["columns"]["W"]["binning"]["bins"] == 3
    assert record["_model"]["variables"]["W"]["kind"] == "discrete"


def test_the_model_and_the_exports_hold_the_regressions(tmp_path: Path, cli: CliCall) -> None:
    frame = mixed_network(600, 4)
    path = write(tmp_path, frame, {"score": {"name": "cg-bic"},
                                   "required": [["B", "Y"], ["X", "Y"]]})
    result = cli("run", path, "--results", tmp_path / "results", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    [folder] = (tmp_path / "results" / "cg" / "runs").iterdir()
    model = json.loads((folder / "model.json").read_text())
    y = model["variables"]["Y"]
    assert y["discrete_parents"] == ["B"] and "X" in y["continuous_parents"]
    assert {tuple(c["parents"]) for c in y["configurations"]} == {("b0",), ("b1",)}
    assert all(c["fit"] == "least-squares" and c["rows"] > 0 for c in y["configurations"])
    exported = cli("export", folder.name, "--format", "json", "--results",
                   tmp_path / "results", cwd=tmp_path)
    assert exported.returncode == 0
    assert json.loads(exported.stdout)["parameters"]["Y"] == y
    report = cli("report", folder.name, "--out", tmp_path / "r.html", "--results",
                 tmp_path / "results", cwd=tmp_path)
    assert report.returncode == 0, report.stderr
    html = (tmp_path / "r.html").read_text()
    assert "Continuous variables" in html and "B=b1" in html


def test_builder_without_kinds_reads_finite_columns_as_continuous() -> None:
    rng = np.random.default_rng(1)
    codes, values, _ = mixed_table(rng, 120, (2,), 2)
    scorer = make_scorer({"name": "cg-bic"}, SimpleNamespace(  # type: ignore[arg-type]
        codes=codes, arities=np.array([2, 0, 0]), values=values))
    assert math.isfinite(scorer.total([(), (0,), (0, 1)]))
