"""runner.compare's pure functions (hand-worked examples and properties), baselines in the
store, rescoring, and the bad-input paths of compare/pin/history on the command line."""

from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import GATE, CliCall, random_dag, write_numeric_case
from hypothesis import given, settings
from hypothesis import strategies as st

from runner import compare
from runner.compare.drift import DriftMeasures
from runner.compare.rescore import rescore
from runner.errors import InputError
from runner.graph import graph_sha256
from runner.pipeline import run_spec
from runner.store import read_run

REPO = Path(__file__).resolve().parents[1]
COLUMNS = {n: {"kind": "discrete", "states": ["0", "1"]} for n in "abcd"}


def record(edges: list[list[str]], per_row: float = -1.0, inputs: str = "i" * 64,
           columns: dict[str, Any] | None = None, run_id: str = "20261201T000000Z-0000000000",
           value: float | None = None) -> dict[str, Any]:
    edges = sorted(edges)
    rows = 100
    return {"run_id": run_id, "spec_name": "toy", "spec_sha256": "s" * 64,
            "input_sha256": inputs, "code_version": "0.1.0+x", "edges": edges,
            "graph_sha256": graph_sha256(edges),
            "score": {"name": "bic", "value": per_row * rows if value is None else value,
                      "per_row": per_row, "families": {}},
            "data": {"path": "d.csv", "sha256": "d" * 64, "rows": rows,
                     "columns": COLUMNS if columns is None else columns},
            "search": {"method": "hill-climb", "seed": 1}, "spec": {}}


def baseline(rec: dict[str, Any]) -> dict[str, Any]:
    from runner.store import baseline_from_record

    return baseline_from_record(rec, "2026-12-01T00:00:00Z")


# --------------------------------------------------------------------------- hand-worked


def test_edge_changes_hand_example() -> None:
    old = [["a", "b"], ["b", "c"], ["c", "d"]]
    new = [["a", "b"], ["c", "b"], ["a", "d"]]
    assert compare.edge_changes(old, new) == {
        "added": [["a", "d"]], "removed": [["c", "d"]], "reversed": [["c", "b"]]}


def test_cpdag_changes_chain_versus_collider() -> None:
    # a -> b -> c is undirected a - b - c in its CPDAG; a -> b <- c is a v-structure,
    # compelled both ways (Verma & Pearl 1990): two reoriented pairs, CPDAG SHD 2,
    # while the DAG SHD is 1 (one reversed edge).
    diff = compare.graph_diff(record([["a", "b"], ["b", "c"]]), record([["a", "b"], ["c", "b"]]))
    assert diff["shd_dag"] == 1 and diff["shd_cpdag"] == 2
    assert diff["cpdag_changes"] == [
        {"change": "reoriented", "old": "a - b", "new": "a -> b"},
        {"change": "reoriented", "old": "b - c", "new": "c -> b"}]
    assert diff["verdict"] == "different"


def test_verdicts() -> None:
    assert compare.verdict([["a", "b"]], [["a", "b"]]) == "identical"
    assert compare.verdict([["a", "b"], ["b", "c"]], [["b", "a"], ["b", "c"]]) == "equivalent"
    assert compare.verdict([["a", "b"]], [["a", "c"]]) == "different"


def test_skeleton_precision_recall_hand_example() -> None:
    got = compare.skeleton_precision_recall([["a", "b"], ["b", "c"]],
                                            [["b", "a"], ["c", "d"], ["a", "c"]])
    assert got == {"precision": pytest.approx(1 / 3), "recall": pytest.approx(1 / 2)}
    assert compare.skeleton_precision_recall([], []) == {"precision": 1.0, "recall": 1.0}


def test_column_changes_names_columns_and_states() -> None:
    old = {"a": {"kind": "discrete", "states": ["x", "y"]}, "b": {"kind": "discrete",
                                                                    "states": ["p"]}}
    new = {"a": {"kind": "discrete", "states": ["y", "z"]}, "c": {"kind": "discrete",
                                                                    "states": ["q"]}}
    changes = compare.column_changes(old, new)
    assert changes["new_columns"] == ["c"] and changes["missing_columns"] == ["b"]
    assert changes["states"] == {"a": {"new": ["z"], "vanished": ["x"]}}
    assert compare.describe_columns(changes) == [
        "new column 'c'", "missing column 'b'", "column 'a': new states 'z'; vanished states 'x'"]


# --------------------------------------------------------------------------- gate


def test_gate_same_inputs_identical_passes_and_differing_fails() -> None:
    base = baseline(record([["a", "b"]]))
    same = compare.evaluate_gate(base, record([["a", "b"]]), GATE)
    assert same["ok"] and same["same_inputs"] and same["verdict"] == "identical"
    drifted = compare.evaluate_gate(base, record([["a", "b"]], value=-100.5), GATE)
    assert not drifted["ok"] and "non-determinism" in drifted["failures"][0]
    other = compare.evaluate_gate(base, record([["b", "a"]]), GATE)
    assert not other["ok"] and "different graph" in other["failures"][0]


def test_gate_score_tolerance_is_relative_on_the_same_rows() -> None:
    # Search regression: both graphs scored on the same rows (the drift measures); the
    # new graph may fall short of the baseline graph by score_tolerance, relative.
    base = baseline(record([["a", "b"]], per_row=-2.0))
    new = record([["a", "b"]], per_row=-2.0, inputs="n" * 64)

    def on_rows(new_graph: float) -> DriftMeasures:
        return DriftMeasures("bic", "approximate", 100, -200.0, new_graph, None, "no model")

    assert compare.evaluate_gate(base, new, GATE, drift=on_rows(-200.0 * (1 + 1e-10)))["ok"]
    assert compare.evaluate_gate(base, new, GATE, drift=on_rows(-199.0))["ok"]
    failed = compare.evaluate_gate(base, new, GATE, drift=on_rows(-200.0 * (1 + 1e-3)))
    assert not failed["ok"]
    assert failed["failures"][0].startswith("search-regression: the new graph scores "
                                            "-200.200000")
    assert "(relative 1.000e-03), more than gate.score_tolerance 1e-09" in failed["failures"][0]
    assert compare.evaluate_gate(base, new, {**GATE, "score_tolerance": 1e-2},
                                 drift=on_rows(-200.0 * (1 + 1e-3)))["ok"]


def test_gate_never_gates_the_per_row_score_of_different_data() -> None:
    # A lower per-row score on other data says nothing about the graphs: information only.
    base = baseline(record([["a", "b"]], per_row=-2.0))
    worse = record([["a", "b"]], per_row=-3.0, inputs="n" * 64)
    report = compare.evaluate_gate(base, worse, GATE)
    rules = {r["rule"]: r for r in report["rules"]}
    assert report["ok"] and rules["score"]["status"] == "info"
    assert (rules["score"]["baseline"], rules["score"]["new"]) == (-2.0, -3.0)


def test_gate_counts_class_edge_changes_not_dag_ones() -> None:
    base = baseline(record([["a", "b"], ["b", "c"]]))
    # A covered-edge reversal stays in the class (Chickering 1995): no class change.
    equivalent = record([["b", "a"], ["b", "c"]], inputs="n" * 64)
    report = compare.evaluate_gate(base, equivalent, GATE)
    assert report["ok"] and report["verdict"] == "equivalent"
    assert report["changes"] == ["edge reversed, now b -> a"]
    added = record([["a", "b"], ["b", "c"], ["c", "d"]], inputs="n" * 64)
    report = compare.evaluate_gate(base, added, GATE)
    assert not report["ok"] and "1 class edge change(s)" in report["failures"][0]
    assert "edge added c -> d" in report["changes"]
    assert compare.evaluate_gate(base, added, {**GATE, "max_edge_changes": 1})["ok"]


def test_gate_state_changes_fail_unless_allowed() -> None:
    base = baseline(record([["a", "b"]]))
    columns = {**COLUMNS, "a": {"kind": "discrete", "states": ["0", "2"]}}
    new = record([["a", "b"]], inputs="n" * 64, columns=columns)
    report = compare.evaluate_gate(base, new, GATE)
    assert not report["ok"]
    assert report["failures"] == ["columns: column 'a': new states '2'; vanished states '1' "
                                  "(gate.allow_new_states is false)"]
    allowed = compare.evaluate_gate(base, new, {**GATE, "allow_new_states": True})
    assert allowed["ok"]
    assert any("allowed by gate.allow_new_states" in n for n in allowed["notes"])


def test_gate_reports_each_rule_with_its_numbers_and_threshold() -> None:
    base = baseline(record([["a", "b"]], per_row=-2.0))
    new = record([["a", "b"], ["c", "d"]], per_row=-2.5, inputs="n" * 64)
    # On the same rows the new graph beats the baseline graph by 30 log-units.
    drift = DriftMeasures("bic", "approximate", 100, -250.0, -220.0, None, "no model")
    report = compare.evaluate_gate(base, new, {**GATE, "max_edge_changes": 2}, drift=drift)
    rules = {r["rule"]: r for r in report["rules"]}
    assert [r["rule"] for r in report["rules"]] == [rule.name for rule in compare.RULES]
    assert rules["consensus"]["status"] == rules["reproduce"]["status"] == "skipped"
    # -2.0 -> -2.5 per row on different data: shown, not gated.
    assert rules["score"] == {"rule": "score", "status": "info", "baseline": -2.0,
                              "new": -2.5, "measure": -0.25, "threshold": None}
    # The new graph is better on the same rows: no search regression (shortfall -0.12).
    assert rules["search-regression"]["status"] == "pass"
    assert rules["search-regression"]["measure"] == pytest.approx(-0.12)
    # ... by 30 log-units, more than the default evidence 10: structural drift.
    drifted = rules["structural-drift"]
    assert (drifted["status"], drifted["baseline"], drifted["new"], drifted["measure"],
            drifted["threshold"]) == ("fail", -250.0, -220.0, 30.0, 10.0)
    assert drifted["detail"]["grade"] == "very strong"
    # One class edge added, two allowed: passes.
    assert rules["class-edges"]["status"] == "pass"
    assert (rules["class-edges"]["measure"], rules["class-edges"]["threshold"]) == (1, 2)
    assert report["failures"] == [
        "structural-drift: the new graph beats the baseline graph on the new run's 100 "
        "learning rows (bic) by 30.000 log-units (-220.000000 against -250.000000; "
        "2 ln B = 60.0, very strong on the Kass & Raftery 1995 scale), more than "
        "gate.evidence 10: class edge added c - d"]


def test_gate_takes_extra_rules() -> None:
    # The gate is its list of rules: a rule appended is applied and reported like the rest.
    def never(ctx: compare.GateContext) -> compare.RuleResult:
        return compare.RuleResult("", "fail", 1, 2, 3, 0, failures=("never passes",))

    base = baseline(record([["a", "b"]]))
    rules = (*compare.RULES, compare.Rule("never", never))
    report = compare.evaluate_gate(base, record([["a", "b"]]), GATE, rules=rules)
    assert not report["ok"] and report["failures"] == ["never: never passes"]
    assert report["rules"][-1] == {"rule": "never", "status": "fail", "baseline": 1, "new": 2,
                                   "measure": 3, "threshold": 0}


@st.composite
def dag_pairs(draw: st.DrawFn) -> tuple[list[list[str]], list[list[str]]]:
    n = draw(st.integers(2, 7))
    seeds = draw(st.tuples(st.integers(0, 2**32 - 1), st.integers(0, 2**32 - 1)))
    names = [f"v{i}" for i in range(n)]
    out = []
    for seed in seeds:
        parents = random_dag(n, np.random.default_rng(seed))
        out.append(sorted([names[p], names[c]] for c, ps in enumerate(parents) for p in ps))
    return out[0], out[1]


@settings(max_examples=60, deadline=None)
@given(dag_pairs())
def test_gate_and_diff_properties(pair: tuple[list[list[str]], list[list[str]]]) -> None:
    a, b = pair
    columns = {f"v{i}": {"kind": "discrete", "states": ["0", "1"]} for i in range(7)}
    ra, rb = record(a, columns=columns), record(b, columns=columns, inputs="n" * 64)
    diff = compare.graph_diff(ra, rb)
    e = diff["edges"]
    # Each DAG change is one node pair: added + removed + reversed is the DAG SHD.
    assert len(e["added"]) + len(e["removed"]) + len(e["reversed"]) == diff["shd_dag"]
    assert len(diff["cpdag_changes"]) == diff["shd_cpdag"]
    assert (diff["shd_cpdag"] == 0) == (diff["verdict"] != "different")
    # A run always passes against itself as baseline, and the report is deterministic.
    assert compare.evaluate_gate(baseline(ra), ra, GATE)["ok"]
    assert compare.evaluate_gate(baseline(ra), rb, GATE) == compare.evaluate_gate(
        baseline(ra), rb, GATE)


def test_junit_xml_parses_with_one_case_per_spec() -> None:
    base = baseline(record([["a", "b"]]))
    ok = compare.evaluate_gate(base, record([["a", "b"]]), GATE)
    bad = {**compare.evaluate_gate(base, record([["b", "a"]]), GATE), "spec": "other"}
    root = ET.fromstring(compare.junit_xml([ok, bad], {"toy": 0.5}))
    cases = list(root.iter("testcase"))
    assert [c.get("name") for c in cases] == ["toy", "other"]
    assert cases[0].find("failure") is None
    failure = cases[1].find("failure")
    assert failure is not None and "non-determinism" in failure.get("message", "")
    assert "non-determinism" in (failure.text or "")


# --------------------------------------------------------------------------- store


# --------------------------------------------------------------------------- rescoring


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A copy of the demo spec and data with two stored runs: bic (kiln-line) and k2
    under another spec name (kiln-k2), on the same data."""
    root = tmp_path_factory.mktemp("demo")
    shutil.copytree(REPO / "specs", root / "specs")
    (root / "datasets").mkdir()
    shutil.copy(REPO / "datasets" / "kiln-line.csv", root / "datasets")
    text = (root / "specs" / "kiln-line.yaml").read_text()
    (root / "specs" / "k2.yaml").write_text(
        text.replace("name: kiln-line", "name: kiln-k2").replace("{name: bic}", "{name: k2}"))
    run_spec(root / "specs" / "kiln-line.yaml", root / "results")
    run_spec(root / "specs" / "k2.yaml", root / "results")
    return root


def _runs(demo: Path) -> list[Path]:
    return sorted((demo / "results").glob("*/runs/*"))


def test_rescore_reproduces_the_stored_score_and_refuses_changed_data(demo: Path,
                                                                      tmp_path: Path) -> None:
    rec = read_run(next(p for p in _runs(demo) if "kiln-line" in str(p)))
    results = demo / "results"
    same = rescore(rec, "bic", results=results)
    assert same["value"] == rec["score"]["value"]
    changed = tmp_path / "kiln-line.csv"
    changed.write_bytes((demo / "datasets" / "kiln-line.csv").read_bytes() + b"")
    moved = {**rec, "data": {**rec["data"], "sha256": "0" * 64}}
    with pytest.raises(InputError, match="name the file with --data"):
        rescore(moved, "bic", results=results)
    explicit = rescore(moved, "k2", data_path=changed)
    assert explicit["data_sha256"] == rec["data"]["sha256"] and explicit["score"] == "k2"


#: Specs on the numeric case of ``write_numeric_case``: a discrete score with every column
#: cut into bins (the record's own edges are reused by a rescore), a BDeu ess and a
#: held-out share; and a Gaussian score with a BGe prior of its own and a held-out share.
STORED_SPECS = {
    "discrete": "score: {name: bdeu, ess: 5.0}\ndataset:\n  path: data.csv\n  columns:\n"
                + "".join(f"    {n}: {{kind: continuous, bins: 3, binning: quantile}}\n"
                          for n in "abcd"),
    "gaussian": "score: {name: bge, alpha_mu: 4.0, prior_scale: 2.0}\n"
                "dataset: {path: data.csv}\n",
}


@pytest.mark.parametrize("kind", sorted(STORED_SPECS))
def test_rescoring_a_run_under_its_own_score_gives_its_stored_score_exactly(
        tmp_path: Path, kind: str) -> None:
    # A rescore prepares the data through the pipeline's own steps (reader, column kinds
    # and bins, learning rows, scorer): under the run's own score it must give back the
    # stored score bit for bit, not just nearly.
    write_numeric_case(tmp_path)
    spec = tmp_path / "spec.yaml"
    spec.write_text(f"name: stored-{kind}\n" + STORED_SPECS[kind]
                    + "tiers: [[a], [b, d], [c]]\nfit: {pseudo_count: 1.0}\n"
                    "evaluation: {holdout: 0.25, seed: 3}\n", encoding="utf-8")
    rec = read_run(run_spec(spec, tmp_path / "results").folder)
    assert rec["edges"], "the case should learn some edges"
    again = rescore(rec, rec["score"]["name"], results=tmp_path / "results")
    assert again["value"] == rec["score"]["value"]
    assert again["rows"] == rec["data"]["rows_learned"]
    assert again["data_sha256"] == rec["data"]["sha256"]


# --------------------------------------------------------------------------- command line


def test_compare_two_specs_warns_and_rescores(demo: Path, dagmill: CliCall) -> None:
    b, a = (p.name for p in _runs(demo))  # sorted by spec folder: kiln-k2, kiln-line
    done = dagmill("compare", a, b, "--json", cwd=demo)
    assert done.returncode == 0, done.stderr
    assert "two different specs" in done.stderr
    result = json.loads(done.stdout)
    assert set(result["inputs"]["differ"]) >= {"spec", "score"}
    assert result["rescored"]["a_under_b"]["score"] == "k2"
    assert result["rescored"]["b_under_a"]["score"] == "bic"
    text = dagmill("compare", a, b, cwd=demo)
    assert "verdict" in text.stdout and "rescored" in text.stdout


def test_unknown_and_ambiguous_run_ids(demo: Path, dagmill: CliCall) -> None:
    unknown = dagmill("show", "19990101T000000Z", cwd=demo)
    assert unknown.returncode == 2 and "no run matches '19990101T000000Z'" in unknown.stderr
    names = [p.name for p in _runs(demo)]
    prefix = names[0][:4]  # the year: both runs are stored moments apart
    assert all(n.startswith(prefix) for n in names)
    ambiguous = dagmill("compare", prefix, prefix, cwd=demo)
    assert ambiguous.returncode == 2 and "matches 2 runs" in ambiguous.stderr
    assert "give more of the id" in ambiguous.stderr


def test_pin_of_a_run_whose_folder_is_gone(demo: Path, dagmill: CliCall) -> None:
    source = _runs(demo)[0]
    gone = source.parent / "20200101T000000Z-abcdefabcd"
    shutil.copytree(source, gone)
    shutil.rmtree(gone)
    by_folder = dagmill("pin", str(gone), cwd=demo)
    assert by_folder.returncode == 2 and "run folder does not exist" in by_folder.stderr
    by_id = dagmill("pin", gone.name, cwd=demo)
    assert by_id.returncode == 2 and "no run matches" in by_id.stderr
    assert not (demo / "results" / "kiln-line" / "baseline.json").exists()
    pinned = dagmill("pin", source.name, cwd=demo)
    assert pinned.returncode == 0 and "first baseline" in pinned.stdout
    again = dagmill("pin", source.name, "--json", cwd=demo)
    assert json.loads(again.stdout)["changes"] == [
        "unchanged: the same run was already the baseline"]
    history = dagmill("history", "no-such-spec", cwd=demo)
    assert history.returncode == 2 and "no stored runs of spec 'no-such-spec'" in history.stderr
