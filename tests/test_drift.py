"""The drift gate on the same rows (runner/compare/drift.py and the drift rules of
runner/compare/gate.py), on data sampled from a small discrete network written here.

The network (five variables, tiers fixing every direction):

    a (2 states), b (3 states) -> c (3 states) -> d (2 states), c -> e (2 states)

Drops: the same network with another seed (sampling noise only), the network with a
dependency added (a -> e) or removed (a -> c), a shifted drop (the same graph, the table
of d turned round), a drop with only a new state of b, all sampled with numpy's seeded
Generator; baseline and drops have the same number of rows.
"""

from __future__ import annotations

import json
import math
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from conftest import GATE, CliCall, relative_gap, write_numeric_case

from runner.compare import evaluate_gate
from runner.compare.diff import spec_changes
from runner.compare.drift import (
    DriftMeasures,
    DriftSkipped,
    bootstrap_interval,
    measure,
    same_rows,
)
from runner.compare.gate import DEFAULT_EVIDENCE, confident_changes, evidence_grade
from runner.evaluation import split_rows
from runner.graph import graph_sha256
from runner.spec.models import GateSpec
from runner.store import baseline_from_record, read_baseline, read_model, read_run

ROWS = 5000
STATES: dict[str, list[str]] = {"a": ["a0", "a1"], "b": ["b0", "b1", "b2"],
                                "c": ["c0", "c1", "c2"], "d": ["d0", "d1"], "e": ["e0", "e1"]}
ORDER = ["a", "b", "c", "d", "e"]
PARENTS: dict[str, tuple[str, ...]] = {"a": (), "b": (), "c": ("a", "b"), "d": ("c",),
                                       "e": ("c",)}
#: P(c | a, b): c follows (a + b) mod 3 in 80% of the rows.
C_TABLE = {(i, j): tuple(0.8 if k == (i + j) % 3 else 0.1 for k in range(3))
           for i in range(2) for j in range(4)}
TABLES: dict[str, dict[tuple[int, ...], tuple[float, ...]]] = {
    "a": {(): (0.5, 0.5)},
    "b": {(): (0.3, 0.4, 0.3)},
    "c": C_TABLE,
    "d": {(0,): (0.9, 0.1), (1,): (0.2, 0.8), (2,): (0.6, 0.4)},
    "e": {(0,): (0.15, 0.85), (1,): (0.85, 0.15), (2,): (0.5, 0.5)},
}

SPEC = """\
name: toy-drift
dataset:
  path: data.csv
tiers:
  - [a, b]
  - [c]
  - [d, e]
score: {name: bic}
search: {method: hill-climb, seed: 1}
fit: {pseudo_count: 1.0}
evaluation: {holdout: 0.2, seed: 3}
"""


def sample(rows: int, seed: int, parents: Mapping[str, tuple[str, ...]] = PARENTS,
           tables: Mapping[str, Mapping[tuple[int, ...], tuple[float, ...]]] = TABLES,
           states: Mapping[str, Sequence[str]] = STATES) -> pd.DataFrame:
    """Ancestral sampling (numpy Generator, seeded), one uniform draw per cell: the
    state is the first whose cumulative probability exceeds the draw."""
    rng = np.random.default_rng(seed)
    codes: dict[str, np.ndarray] = {}
    for name in ORDER:
        u = rng.random(rows)
        out = np.zeros(rows, dtype=np.int64)
        for key, probs in tables[name].items():
            mask = np.ones(rows, dtype=bool)
            for p, k in zip(parents[name], key, strict=True):
                mask &= codes[p] == k
            cumulative = np.cumsum(probs)
            out[mask] = np.minimum(np.searchsorted(cumulative, u[mask], side="right"),
                                   len(probs) - 1)
        codes[name] = out
    return pd.DataFrame({n: np.asarray(states[n], dtype=object)[codes[n]] for n in ORDER})


def added() -> tuple[dict[str, tuple[str, ...]], dict[str, Any]]:
    """a -> e added: e follows a when c is c2, and a flips e's table otherwise."""
    e = {(c, a): (TABLES["e"][(c,)] if a == 0 else TABLES["e"][(c,)][::-1])
         for c in range(3) for a in range(2)}
    return {**PARENTS, "e": ("c", "a")}, {**TABLES, "e": e}


def removed() -> tuple[dict[str, tuple[str, ...]], dict[str, Any]]:
    """a -> c removed: c follows b alone."""
    c = {(j,): tuple(0.8 if k == j % 3 else 0.1 for k in range(3)) for j in range(3)}
    return {**PARENTS, "c": ("b",)}, {**TABLES, "c": c}


def shifted() -> dict[str, Any]:
    """The same graph, d's table turned round: the baseline's fitted tables fit worse."""
    return {**TABLES, "d": {k: v[::-1] for k, v in TABLES["d"].items()}}


def write(frame: pd.DataFrame, path: Path) -> Path:
    frame.to_csv(path, index=False, lineterminator="\n")
    return path


@pytest.fixture(scope="module")
def case(tmp_path_factory: pytest.TempPathFactory, cli_session: CliCall) -> Path:
    """A pinned run of the spec on 5,000 rows and the drops beside it."""
    root = tmp_path_factory.mktemp("drift")
    write(sample(ROWS, 1), root / "data.csv")
    write(sample(ROWS, 2), root / "same.csv")
    parents, tables = added()
    write(sample(ROWS, 3, parents, tables), root / "added.csv")
    parents, tables = removed()
    write(sample(ROWS, 4, parents, tables), root / "removed.csv")
    write(sample(ROWS, 5, tables=shifted()), root / "shifted.csv")
    states = {**STATES, "b": [*STATES["b"], "b3"]}
    tables_new = {**TABLES, "b": {(): (0.25, 0.3, 0.25, 0.2)}}
    write(sample(ROWS, 6, tables=tables_new, states=states), root / "new-state.csv")
    (root / "spec.yaml").write_text(SPEC)
    (root / "open.yaml").write_text(SPEC + "gate: {allow_new_states: true}\n")
    (root / "tiny.yaml").write_text(SPEC.replace("seed: 1}", "seed: 1, budget: {max_steps: 1}}"))
    done = cli_session("run", "spec.yaml", "--json", "--results", "results", cwd=root)
    assert done.returncode == 0, done.stderr
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    assert cli_session("pin", run_id, "--results", "results", cwd=root).returncode == 0
    return root


def check(cli: CliCall, root: Path, spec: str = "spec.yaml",
          drop: str | None = None) -> tuple[int, dict[str, Any]]:
    args = ["check", spec, "--json", "--results", "results"]
    if drop is not None:
        args += ["--data", drop]
    done = cli(*args, cwd=root)
    assert done.returncode in (0, 1), done.stderr
    assert "Traceback" not in done.stderr
    return done.returncode, json.loads(done.stdout)["checks"][0]


def rules_of(report: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    return {r["rule"]: r for r in report["rules"]}


# --------------------------------------------------------------------------- the gate


def test_same_network_drop_passes(case: Path, cli: CliCall) -> None:
    code, report = check(cli, case, drop="same.csv")
    rules = rules_of(report)
    assert code == 0 and report["ok"], report["failures"]
    assert report["verdict"] == "identical" and report["shd_cpdag"] == 0
    # Same graph on the same rows: no margin either way.
    assert rules["search-regression"]["status"] == "pass"
    assert rules["structural-drift"]["status"] == "pass"
    assert abs(rules["structural-drift"]["measure"]) < 2.0
    assert rules["fit-drift"]["status"] == "pass"
    # The per-row score of different data is shown, never gated.
    assert rules["score"]["status"] == "info"


def test_added_dependency_fails_as_structural_drift(case: Path, cli: CliCall) -> None:
    code, report = check(cli, case, drop="added.csv")
    rules = rules_of(report)
    assert code == 1
    drift = rules["structural-drift"]
    assert drift["status"] == "fail" and drift["measure"] > DEFAULT_EVIDENCE
    assert drift["measure"] == pytest.approx(drift["new"] - drift["baseline"])
    line = next(f for f in report["failures"] if f.startswith("structural-drift: "))
    # The failure names the rule, both numbers, the threshold and the edge.
    assert f"{drift['new']:.6f}" in line and f"{drift['baseline']:.6f}" in line
    assert "gate.evidence 10" in line and "a -> e" in line
    assert ["a", "e"] in report["edges"]["added"]


def test_removed_dependency_fails_as_structural_drift(case: Path, cli: CliCall) -> None:
    code, report = check(cli, case, drop="removed.csv")
    rules = rules_of(report)
    assert code == 1 and rules["structural-drift"]["status"] == "fail"
    line = next(f for f in report["failures"] if f.startswith("structural-drift: "))
    assert "class edge removed a -> c" in line
    assert ["a", "c"] in report["edges"]["removed"]
    # The new graph is better there, so no search regression.
    assert rules["search-regression"]["status"] == "pass"


def test_new_state_drop_passes_when_new_states_are_allowed(case: Path, cli: CliCall) -> None:
    code, report = check(cli, case, "open.yaml", drop="new-state.csv")
    rules = rules_of(report)
    assert code == 0, report["failures"]
    assert any("new states 'b3'" in n for n in report["notes"])
    assert rules["structural-drift"]["status"] == "pass"
    # Rows holding the state the baseline never had are set aside by the fit drift.
    assert rules["fit-drift"]["status"] == "pass"
    assert rules["fit-drift"]["detail"]["unseen"]["new_states"] > 0
    assert any("spec changed: gate.allow_new_states: false -> true" in n
               for n in report["notes"])
    # Under the strict spec only the columns rule fails.
    code, strict = check(cli, case, drop="new-state.csv")
    assert code == 1 and [f.split(":")[0] for f in strict["failures"]] == ["columns"]


def test_fit_drift_fails_on_a_shifted_drop(case: Path, cli: CliCall) -> None:
    code, report = check(cli, case, drop="shifted.csv")
    fit = rules_of(report)["fit-drift"]
    assert code == 1 and fit["status"] == "fail"
    low, high = fit["detail"]["interval"]
    assert low <= fit["new"] <= high < fit["baseline"]
    line = next(f for f in report["failures"] if f.startswith("fit-drift: "))
    assert f"{fit['baseline']:.6f}" in line and f"{high:.6f}" in line
    # The graph itself did not change.
    assert rules_of(report)["structural-drift"]["status"] == "pass"


def test_search_regression_fires_when_the_new_graph_is_worse(case: Path,
                                                             cli: CliCall) -> None:
    # One step of hill climbing on the same data: a worse graph than the pinned one.
    code, report = check(cli, case, "tiny.yaml")
    rule = rules_of(report)["search-regression"]
    assert code == 1 and rule["status"] == "fail"
    assert rule["new"] < rule["baseline"]
    assert rule["measure"] == pytest.approx((rule["baseline"] - rule["new"])
                                            / abs(rule["baseline"]))
    line = next(f for f in report["failures"] if f.startswith("search-regression: "))
    assert "gate.score_tolerance 1e-09" in line
    assert any(n.startswith("spec changed: search.budget.max_steps: 10000 -> 1")
               for n in report["notes"])


# --------------------------------------------------------------------------- references


def pgmpy_bic(frame: pd.DataFrame, edges: Sequence[Sequence[str]]) -> float:
    """reference: pgmpy 1.1.2 ``pgmpy.structure_score.BIC.local_score`` summed over the
    families (log-likelihood minus ln(N)/2 per free parameter, as ours)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import pgmpy.structure_score as structure_score  # type: ignore[import-untyped]
    score = structure_score.BIC(frame)
    parents: dict[str, list[str]] = {n: [] for n in frame.columns}
    for a, b in edges:
        parents[b].append(a)
    return math.fsum(float(score.local_score(n, tuple(sorted(ps))))
                     for n, ps in parents.items())


@pytest.mark.parametrize("drop", ["added.csv", "removed.csv"])
def test_both_graphs_rescored_equal_pgmpy_bic(case: Path, cli: CliCall, drop: str) -> None:
    _, report = check(cli, case, drop=drop)
    record = read_run(case / report["folder"])
    baseline = read_baseline(case / "results", "toy-drift")
    assert baseline is not None
    # The new graph on its own rows is the new run's stored score, bit for bit.
    assert report["drift"]["new_graph"] == record["score"]["value"]
    frame = pd.read_csv(case / drop, dtype=str)
    learn, _ = split_rows(len(frame), 0.2, 3)
    rows = frame.iloc[learn].reset_index(drop=True)
    assert report["drift"]["rows"] == len(rows)
    for graph, edges in (("new_graph", record["edges"]), ("baseline_graph", baseline["edges"])):
        assert relative_gap(report["drift"][graph], pgmpy_bic(rows, edges)) < 1e-9, graph


def test_fit_drift_interval_is_deterministic(case: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    values = np.random.default_rng(4).normal(-3.0, 1.0, 3000)
    first, second = bootstrap_interval(values), bootstrap_interval(values.copy())
    assert repr(first) == repr(second)
    assert first[0] < values.mean() < first[1]
    assert bootstrap_interval(np.full(10, -2.5)) == (-2.5, -2.5)
    assert bootstrap_interval(values, seed=1) != first
    # The whole measurement twice: the same bytes (paths in records are relative to the
    # folder the run was started in).
    monkeypatch.chdir(case)
    root = case / "results"
    baseline = read_baseline(root, "toy-drift")
    assert baseline is not None
    pinned = read_run(root / "toy-drift" / "runs" / baseline["run_id"])
    model = read_model(root / "toy-drift" / "runs" / baseline["run_id"], pinned)
    record = {**pinned, "input_sha256": "x" * 64}
    twice = [same_rows(record, baseline["edges"], model, -1.0, results=root).as_dict()
             for _ in range(2)]
    assert json.dumps(twice[0]) == json.dumps(twice[1])


def test_columns_differ_skips_the_drift_measures(case: Path) -> None:
    root = case / "results"
    baseline = read_baseline(root, "toy-drift")
    assert baseline is not None
    record = {"input_sha256": "y" * 64, "data": {"columns": {
        **baseline["data"]["columns"], "f": {"kind": "discrete", "states": ["0"]}}}}
    found = measure(root, record, baseline, None)
    assert isinstance(found, DriftSkipped) and "new column(s) 'f'" in found.reason
    assert measure(root, {**record, "input_sha256": baseline["input_sha256"]}, baseline,
                   None) is None


# --------------------------------------------------------------------------- units


def _record(edges: list[list[str]], inputs: str, bootstrap: list[dict[str, Any]] | None,
            ) -> dict[str, Any]:
    rec: dict[str, Any] = {
        "run_id": "r", "spec_name": "s", "spec_sha256": "s" * 64, "input_sha256": inputs,
        "code_version": "v", "graph_sha256": graph_sha256(edges), "edges": edges,
        "score": {"name": "bic", "value": -10.0, "per_row": -1.0},
        "data": {"sha256": "d" * 64, "rows": 10,
                 "columns": {n: {"kind": "discrete", "states": ["0", "1"]} for n in "abcd"}}}
    if bootstrap is not None:
        rec["bootstrap"] = {"replicates": 10, "threshold": 0.5, "frequencies": bootstrap,
                            "consensus": {"edges": edges, "graph_sha256": graph_sha256(edges)}}
    return rec


def _freq(a: str, b: str, share: float) -> dict[str, Any]:
    return {"edge": [a, b], "directed": share, "class": share, "adjacent": share}


def test_edge_changes_count_only_confidence_crossing_the_threshold() -> None:
    # Two edges added (a -> b, c -> d); only c -> d crosses 0.5 (0.2 -> 0.9); a -> b was
    # already confident in the baseline (0.8 -> 0.9), so it does not count.
    old = _record([], "i" * 64, [_freq("a", "b", 0.8), _freq("c", "d", 0.2)])
    new = _record([["a", "b"], ["c", "d"]], "j" * 64,
                  [_freq("a", "b", 0.9), _freq("c", "d", 0.9)])
    report = evaluate_gate(baseline_from_record(old, "t"), new, GATE, old)
    edges = rules_of(report)["class-edges"]
    assert (edges["new"], edges["measure"]) == (2, 1) and edges["status"] == "fail"
    assert any("1 of 2 class edge change(s) not counted" in n for n in report["notes"])
    changes = [{"change": "added", "old": "", "new": "a - b"},
               {"change": "added", "old": "", "new": "c - d"}]
    assert confident_changes(changes, old, new, 0.5) == changes[1:]
    # Without bootstrap blocks on both sides every change counts.
    plain = evaluate_gate(baseline_from_record(_record([], "i" * 64, None), "t"),
                          _record([["a", "b"], ["c", "d"]], "j" * 64, None), GATE)
    assert rules_of(plain)["class-edges"]["measure"] == 2


def test_drift_rules_need_measures_and_skip_with_the_reason() -> None:
    old, new = _record([], "i" * 64, None), _record([["a", "b"]], "j" * 64, None)
    report = evaluate_gate(baseline_from_record(old, "t"), new, GATE,
                           drift=DriftSkipped("drift measures skipped: because"))
    rules = rules_of(report)
    assert rules["structural-drift"]["status"] == "skipped"
    assert report["notes"].count("drift measures skipped: because") == 1
    # Numbers without a fit: structural drift judged, fit drift skipped with its note.
    measures = DriftMeasures("bic", "approximate", 10, -50.0, -30.0, None, "no model")
    report = evaluate_gate(baseline_from_record(old, "t"), new,
                           {**GATE, "max_edge_changes": 5}, drift=measures)
    rules = rules_of(report)
    assert rules["structural-drift"]["status"] == "fail"
    assert (rules["structural-drift"]["measure"], rules["structural-drift"]["threshold"]) \
        == (20.0, 10.0)
    assert rules["fit-drift"]["status"] == "skipped" and "fit drift skipped: no model" in \
        report["notes"]
    # A higher evidence threshold passes the same margin.
    assert evaluate_gate(baseline_from_record(old, "t"), new,
                         {**GATE, "max_edge_changes": 5, "evidence": 25.0},
                         drift=measures)["ok"]
    # Under the maximised log-likelihood the difference is no Bayes factor: not judged.
    loglik = DriftMeasures("loglik", None, 10, -50.0, -30.0, None, "no model")
    report = evaluate_gate(baseline_from_record(old, "t"), new,
                           {**GATE, "max_edge_changes": 5}, drift=loglik)
    assert rules_of(report)["structural-drift"]["status"] == "skipped"


def test_default_evidence_cites_kass_and_raftery() -> None:
    field = GateSpec.model_fields["evidence"]
    assert field.default == DEFAULT_EVIDENCE == 10.0
    assert field.description is not None and "Kass & Raftery 1995" in field.description
    # Their grades of 2 ln B (Kass & Raftery 1995, JASA 90: 773-795, section 3.2).
    assert [evidence_grade(x) for x in (0.5, 2.0, 4.0, 6.0, -1.0)] == [
        "not worth more than a bare mention", "positive", "strong", "very strong",
        "favours the baseline graph"]


def test_spec_changes_names_dotted_keys() -> None:
    old = {"gate": {"evidence": 10.0, "max_edge_changes": 0}, "tiers": [["a"], ["b"]],
           "score": {"name": "bic"}}
    new = {"gate": {"evidence": 5.0, "max_edge_changes": 0}, "tiers": [["a", "b"]],
           "score": {"name": "bic", "ess": 2.0}}
    assert spec_changes(old, new) == [
        "gate.evidence: 10.0 -> 5.0", "score.ess: (absent) -> 2.0",
        'tiers: [["a"], ["b"]] -> [["a", "b"]]']
    assert spec_changes(old, old) == []


def test_check_table_shows_the_drift_rules(case: Path, cli: CliCall) -> None:
    done = cli("check", "spec.yaml", "--data", "added.csv", "--results", "results", cwd=case)
    assert done.returncode == 1
    lines = {line.split("  ")[0]: line for line in done.stdout.splitlines()}
    header = next(line for line in done.stdout.splitlines() if line.startswith("gate "))
    assert header.split() == ["gate", "baseline", "new", "difference", "threshold", "result"]
    drift = lines["structural drift (same rows)"]
    assert "log-units (very strong)" in drift and "evidence 10" in drift
    assert drift.rstrip().endswith("FAIL")
    assert lines["search regression (same rows)"].rstrip().endswith("ok")
    assert "held out" in lines["fit drift (per row)"]
    assert lines["score per row, own data (bic)"].rstrip().endswith("info (not gated)")


# --------------------------------------------------------------------------- Gaussian

GAUSS_SPEC = """\
name: toy-gauss
dataset:
  path: data.csv
score: {name: gaussian-bic}
search: {method: hill-climb, seed: 1}
evaluation: {holdout: 0.25, seed: 2}
"""


def test_fit_drift_of_a_linear_gaussian_baseline(tmp_path: Path, cli: CliCall) -> None:
    # conftest's linear-Gaussian chain a -> b -> c, a -> d: baseline seed 9, drops seed 10
    # (the same network) and seed 10 with c shifted by +3 (a level shift, same graph).
    write_numeric_case(tmp_path, rows=800, seed=9)
    (tmp_path / "base.csv").write_bytes((tmp_path / "data.csv").read_bytes())
    write_numeric_case(tmp_path, rows=800, seed=10)
    (tmp_path / "data.csv").rename(tmp_path / "same.csv")
    frame = pd.read_csv(tmp_path / "same.csv")
    frame["c"] = frame["c"] + 3.0
    frame.to_csv(tmp_path / "shifted.csv", index=False, float_format="%.6f",
                 lineterminator="\n")
    (tmp_path / "base.csv").rename(tmp_path / "data.csv")
    (tmp_path / "spec.yaml").write_text(GAUSS_SPEC)
    done = cli("run", "spec.yaml", "--json", "--results", "results", cwd=tmp_path)
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    assert cli("pin", run_id, "--results", "results", cwd=tmp_path).returncode == 0

    _, same = check(cli, tmp_path, drop="same.csv")
    fit = rules_of(same)["fit-drift"]
    assert fit["status"] == "pass" and fit["detail"]["rows"] == 600
    # reference: scipy.stats.norm.logpdf of each family's residual under the baseline's
    # model.json (intercept, coefficients, residual variance), summed per row.
    from scipy.stats import norm

    folder = tmp_path / "results" / "toy-gauss" / "runs" / run_id
    model = read_model(folder, read_run(folder))
    assert model is not None
    rows = pd.read_csv(tmp_path / "same.csv").iloc[split_rows(800, 0.25, 2)[0]]
    total = np.zeros(len(rows))
    for child, var in model["variables"].items():
        mean = var["intercept"] + sum(b * rows[p].to_numpy()
                                      for p, b in var["coefficients"].items())
        total += norm.logpdf(rows[child].to_numpy(), mean, math.sqrt(var["residual_variance"]))
    assert fit["new"] == pytest.approx(float(total.mean()), rel=1e-9)

    code, shifted = check(cli, tmp_path, drop="shifted.csv")
    fit = rules_of(shifted)["fit-drift"]
    assert code == 1 and fit["status"] == "fail"
    assert fit["detail"]["interval"][1] < fit["baseline"]


def test_drift_on_binned_columns_uses_the_baseline_bins(tmp_path: Path, cli: CliCall) -> None:
    # Continuous columns under a discrete score: check cuts the drop at the baseline's bin
    # edges, and the drift measures prepare the drop the same way (else the new graph
    # would not score its stored score there: same_rows checks it).
    write_numeric_case(tmp_path, rows=800, seed=11)
    (tmp_path / "data.csv").rename(tmp_path / "drop.csv")
    write_numeric_case(tmp_path, rows=800, seed=9)
    columns = "".join(f"    {n}: {{kind: continuous, bins: 3, binning: quantile}}\n"
                      for n in "abcd")
    (tmp_path / "spec.yaml").write_text(
        "name: toy-bins\ndataset:\n  path: data.csv\n  columns:\n" + columns
        + "score: {name: bdeu, ess: 5.0}\nsearch: {method: hill-climb, seed: 1}\n"
        + "fit: {pseudo_count: 1.0}\nevaluation: {holdout: 0.2, seed: 4}\n")
    done = cli("run", "spec.yaml", "--json", "--results", "results", cwd=tmp_path)
    run_id = json.loads(done.stdout)["runs"][0]["run_id"]
    assert cli("pin", run_id, "--results", "results", cwd=tmp_path).returncode == 0
    _, report = check(cli, tmp_path, drop="drop.csv")
    record = read_run(tmp_path / report["folder"])
    assert report["drift"]["new_graph"] == record["score"]["value"]
    assert report["drift"]["scale"] == "exact"
    assert {r["rule"]: r for r in report["rules"]}["fit-drift"]["status"] in ("pass", "fail")
