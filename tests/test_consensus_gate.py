"""Gating on the bootstrap consensus network (`gate.graph: consensus`), `show` and `compare`."""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

import pytest
from conftest import BOOT, GATE, CliCall, write_case

from runner.compare import compare_records, evaluate_gate
from runner.graph import graph_sha256
from runner.store import baseline_from_record


def _record(edges: list[list[str]], consensus: list[list[str]] | None,
            inputs: str = "i" * 64) -> dict[str, Any]:
    record: dict[str, Any] = {
        "run_id": "r", "spec_name": "s", "spec_sha256": "s" * 64, "input_sha256": inputs,
        "code_version": "v", "graph_sha256": graph_sha256(edges), "edges": edges,
        "score": {"name": "bic", "value": -10.0, "per_row": -1.0},
        "data": {"sha256": "d" * 64, "rows": 10,
                 "columns": {n: {"kind": "discrete", "states": ["0", "1"]} for n in "abc"}},
    }
    if consensus is not None:
        record["bootstrap"] = {"replicates": 5, "threshold": 0.5, "consensus": {
            "edges": consensus, "graph_sha256": graph_sha256(consensus)}}
    return record


def test_gate_on_consensus_compares_the_consensus_networks() -> None:
    old = baseline_from_record(_record([["a", "b"]], [["a", "b"], ["b", "c"]]), "t")
    new = _record([["a", "b"]], [["a", "b"]], inputs="j" * 64)
    on_run = evaluate_gate(old, new, {**GATE, "graph": "run"})
    assert on_run["ok"]
    on_consensus = evaluate_gate(old, new, {**GATE, "graph": "consensus"})
    assert not on_consensus["ok"] and on_consensus["shd_cpdag"] == 1
    assert "class edge removed b - c" in on_consensus["changes"]
    same = evaluate_gate(old, _record([["a", "b"]], [["a", "b"], ["b", "c"]], inputs="j" * 64),
                         {**GATE, "graph": "consensus"})
    assert same["ok"]


def test_gate_on_consensus_needs_a_consensus_on_both_sides() -> None:
    old = baseline_from_record(_record([["a", "b"]], None), "t")
    report = evaluate_gate(old, _record([["a", "b"]], [["a", "b"]]), {**GATE, "graph": "consensus"})
    assert not report["ok"]
    assert any("has no bootstrap consensus network" in f for f in report["failures"])


def test_same_inputs_with_a_different_consensus_is_non_determinism() -> None:
    old = baseline_from_record(_record([["a", "b"]], [["a", "b"]]), "t")
    new = _record([["a", "b"]], [["b", "a"]])
    report = evaluate_gate(old, new, {**GATE, "graph": "consensus"})
    assert any("non-determinism" in f and "consensus graph" in f for f in report["failures"])


def test_compare_reports_both_consensus_networks() -> None:
    a = _record([["a", "b"]], [["a", "b"], ["b", "c"]])
    b = _record([["a", "b"]], [["a", "b"]])
    result = compare_records(a, b)
    assert result["verdict"] == "identical"
    assert result["consensus"]["edges"]["removed"] == [["b", "c"]]
    assert compare_records(a, _record([["a", "b"]], None))["consensus"] is None


@pytest.mark.slow
def test_show_pin_check_story_on_consensus(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT + "gate: {graph: consensus}\n")
    first = cli("run", str(spec), "--workers", "1", "--json", "--results", "r", cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    run_id = json.loads(first.stdout)["runs"][0]["run_id"]
    shown = cli("show", run_id, "--results", "r", cwd=tmp_path)
    assert shown.returncode == 0
    assert "bootstrap  6 replicates  seed 4  threshold 0.6" in shown.stdout
    assert "run edges with their confidence" in shown.stdout and "directed " in shown.stdout
    record = json.loads(next((tmp_path / "r").glob("*/runs/*/run.json")).read_text())
    cons = record["bootstrap"]["consensus"]
    assert cons["graph_sha256"] == graph_sha256(cons["edges"])
    assert cli("pin", run_id, "--results", "r", cwd=tmp_path).returncode == 0
    baseline = json.loads((tmp_path / "r" / "small-line" / "baseline.json").read_text())
    assert baseline["consensus"]["edges"] == cons["edges"]
    check = cli("check", str(spec), "--workers", "1", "--results", "r", cwd=tmp_path)
    assert check.returncode == 0, check.stdout + check.stderr
    assert "class edge changes (consensus)" in check.stdout
    # A hand-edited consensus in the baseline is refused, as the run's edges are.
    edited = copy.deepcopy(baseline)
    edited["consensus"]["edges"] = edited["consensus"]["edges"][1:]
    (tmp_path / "r" / "small-line" / "baseline.json").write_text(json.dumps(edited))
    refused = cli("check", str(spec), "--workers", "1", "--results", "r", cwd=tmp_path)
    assert refused.returncode == 2 and "consensus edges do not match" in refused.stderr
