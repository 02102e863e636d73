"""Exports of a stored run: GraphML (read back by networkx), DOT and JSON."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import networkx as nx
import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def stored_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    folder = tmp_path_factory.mktemp("export")
    result = subprocess.run([sys.executable, "-m", "runner", "run",
                             str(ROOT / "specs" / "kiln-line.yaml"), "--results",
                             str(folder / "results"), "--json"],
                            capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    run = json.loads(result.stdout)["runs"][0]
    return folder, json.loads((Path(run["folder"]) / "run.json").read_text())


def export(folder: Path, record: dict, fmt: str, *extra: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "runner", "export", record["run_id"],
                           "--format", fmt, "--results", str(folder / "results"), *extra],
                          capture_output=True, text=True, timeout=120)


def test_graphml_round_trip_through_networkx(stored_run: tuple[Path, dict]) -> None:
    # reference reader: networkx.read_graphml (GraphML, the open XML graph standard)
    folder, record = stored_run
    out = folder / "model.graphml"
    assert export(folder, record, "graphml", "--out", str(out)).returncode == 0
    graph = nx.read_graphml(out)
    assert sorted(graph.nodes) == sorted(record["data"]["columns"])
    assert sorted(map(list, graph.edges)) == record["edges"]
    assert graph.nodes["kiln_peak"]["tier"] == 1
    assert graph.nodes["grade"]["kind"] == "discrete"
    assert graph.edges["kiln_peak", "crack"]["required"] is True


def test_dot_has_every_edge(stored_run: tuple[Path, dict]) -> None:
    folder, record = stored_run
    result = export(folder, record, "dot")
    assert result.returncode == 0
    edge_lines = re.findall(r'^\s*"([^"]+)" -> "([^"]+)"(?: \[style=bold\])?;$', result.stdout,
                            flags=re.MULTILINE)
    assert sorted(map(list, edge_lines)) == record["edges"]
    assert result.stdout.startswith('digraph "kiln-line" {') and result.stdout.endswith("}\n")


def test_json_export(stored_run: tuple[Path, dict]) -> None:
    folder, record = stored_run
    document = json.loads(export(folder, record, "json").stdout)
    assert document["graph_sha256"] == record["graph_sha256"]
    assert sorted([e["from"], e["to"]] for e in document["edges"]) == record["edges"]


def test_export_bad_input(stored_run: tuple[Path, dict]) -> None:
    folder, record = stored_run
    unknown = export(folder, record, "svg")
    assert unknown.returncode == 2 and "invalid choice: 'svg'" in unknown.stderr
    missing = export(folder, record, "dot", "--out", str(folder / "no" / "such" / "x.dot"))
    assert missing.returncode == 2 and "does not exist" in missing.stderr
    assert "Traceback" not in unknown.stderr + missing.stderr
