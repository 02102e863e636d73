"""Exports of a stored run: GraphML (read back by networkx), DOT and JSON."""

from __future__ import annotations

import json
import re
from pathlib import Path

import networkx as nx
import pytest
from conftest import CliCall, CliResult

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def stored_run(tmp_path_factory: pytest.TempPathFactory,
               cli_session: CliCall) -> tuple[Path, dict]:
    folder = tmp_path_factory.mktemp("export")
    result = cli_session("run", str(ROOT / "specs" / "kiln-line.yaml"), "--results",
                         str(folder / "results"), "--json")
    assert result.returncode == 0, result.stderr
    run = json.loads(result.stdout)["runs"][0]
    return folder, json.loads((Path(run["folder"]) / "run.json").read_text())


@pytest.fixture
def export(cli: CliCall) -> CliCall:
    """``export(folder, record, fmt, *extra)``: ``dagmill export`` of the record's run."""

    def call(folder: Path, record: dict, fmt: str, *extra: str) -> CliResult:
        return cli("export", record["run_id"], "--format", fmt, "--results",
                   str(folder / "results"), *extra)

    return call


def test_graphml_round_trip_through_networkx(stored_run: tuple[Path, dict],
                                             export: CliCall) -> None:
    # reference reader: networkx.read_graphml (GraphML, the open XML graph standard)
    folder, record = stored_run
    out = folder / "model.graphml"
    assert export(folder, record, "graphml", "--out", str(out)).returncode == 0
    graph = nx.read_graphml(out)
    assert sorted(graph.nodes) == sorted(record["data"]["columns"])
    assert sorted(map(list, graph.edges)) == record["edges"]
    # tiers numbered from 1, as in the spec's reading order and the report
    assert graph.nodes["supplier"]["tier"] == 1
    assert graph.nodes["kiln_peak"]["tier"] == 2
    assert graph.nodes["grade"]["tier"] == 4
    assert graph.nodes["grade"]["kind"] == "discrete"
    # the same graph: nodes with the same attributes, edges in the same direction
    from runner.export import learned_graph

    ours = learned_graph(record)
    assert dict(graph.nodes(data=True)) == dict(ours.nodes(data=True))
    assert graph.adj == ours.adj  # edges with their attributes
    assert {k: v for k, v in graph.graph.items() if not k.endswith("_default")} == ours.graph
    assert graph.edges["kiln_peak", "crack"]["required"] is True


def test_dot_has_every_edge(stored_run: tuple[Path, dict], export: CliCall) -> None:
    folder, record = stored_run
    result = export(folder, record, "dot")
    assert result.returncode == 0
    edge_lines = re.findall(r'^\s*"([^"]+)" -> "([^"]+)"(?: \[[^\]]*\])?;$', result.stdout,
                            flags=re.MULTILINE)
    assert sorted(map(list, edge_lines)) == record["edges"]
    assert result.stdout.startswith('digraph "kiln-line" {') and result.stdout.endswith("}\n")


def test_dot_parsed_back_by_pydot(stored_run: tuple[Path, dict], export: CliCall) -> None:
    # reference parser: pydot 4 (Graphviz DOT grammar)
    import pydot

    folder, record = stored_run
    (graph,) = pydot.graph_from_dot_data(export(folder, record, "dot").stdout)
    parsed = sorted([e.get_source().strip('"'), e.get_destination().strip('"')]
                    for e in graph.get_edges())
    assert parsed == record["edges"]
    bold = [e for e in graph.get_edges() if e.get_style() == "bold"]
    assert [(e.get_source(), e.get_destination()) for e in bold] == [('"kiln_peak"',
                                                                      '"crack"')]


def test_tiers_from_one_named_when_the_spec_names_them(stored_run: tuple[Path, dict]) -> None:
    # reference reader: networkx.read_graphml; reference parser: pydot
    import io

    import pydot

    from runner.export import to_dot, to_graphml, to_json

    _, record = stored_run
    tiers = [[n for n in tier if n != "glaze_batch"] for tier in record["spec"]["tiers"]]
    spec = {**record["spec"], "tiers": tiers,
            "tier_names": ["raw", "firing", "defects", "grade"]}
    named = {**record, "spec": spec}
    graph = nx.read_graphml(io.BytesIO(to_graphml(named).encode()))
    assert graph.nodes["supplier"]["tier"] == 1
    assert graph.nodes["supplier"]["tier_name"] == "raw"
    assert graph.nodes["kiln_peak"]["tier"] == 2
    assert graph.nodes["kiln_peak"]["tier_name"] == "firing"
    assert graph.nodes["glaze_batch"]["tier"] == 0  # in no tier
    assert "tier_name" not in graph.nodes["glaze_batch"]
    document = json.loads(to_json(named))
    by_name = {node["name"]: node for node in document["nodes"]}
    assert (by_name["grade"]["tier"], by_name["grade"]["tier_name"]) == (4, "grade")
    dot = to_dot(named)
    assert "  // tier 2 · firing\n  { rank=same;" in dot and "// in no tier" in dot
    assert pydot.graph_from_dot_data(dot) is not None
    # without names: numbers only, no tier_name attribute
    plain = nx.read_graphml(io.BytesIO(to_graphml(record).encode()))
    assert all("tier_name" not in data for _, data in plain.nodes(data=True))
    assert sorted({data["tier"] for _, data in plain.nodes(data=True)}) == [1, 2, 3, 4]
    assert "  // tier 1\n" in to_dot(record)


def with_bootstrap(record: dict) -> dict:
    """The record with a bootstrap block in runner/bootstrap.py's layout, made-up shares."""
    shares = [0.25 + 0.05 * i for i in range(len(record["edges"]))]
    return {**record, "bootstrap": {"replicates": 20, "frequencies": [
        {"edge": [a, b], "directed": f, "class": f, "adjacent": f}
        for (a, b), f in zip(record["edges"], shares, strict=True)]}}


def test_bootstrap_confidence_in_graphml_and_dot(stored_run: tuple[Path, dict]) -> None:
    # reference reader: networkx.read_graphml; reference parser: pydot
    import io

    import pydot

    from runner.export import to_dot, to_graphml

    _, record = stored_run
    boot = with_bootstrap(record)
    graph = nx.read_graphml(io.BytesIO(to_graphml(boot).encode()))
    a, b = record["edges"][1]
    assert graph.edges[a, b]["confidence"] == pytest.approx(0.30)
    (dot,) = pydot.graph_from_dot_data(to_dot(boot))
    labels = {(e.get_source().strip('"'), e.get_destination().strip('"')): e.get_label()
              for e in dot.get_edges()}
    assert labels[(a, b)] == '"0.30"'
    # a record without a bootstrap block has no confidence attribute at all
    plain = nx.read_graphml(io.BytesIO(to_graphml(record).encode()))
    assert all("confidence" not in d for _, _, d in plain.edges(data=True))


def test_json_export(stored_run: tuple[Path, dict], export: CliCall) -> None:
    folder, record = stored_run
    document = json.loads(export(folder, record, "json").stdout)
    assert document["graph_sha256"] == record["graph_sha256"]
    assert sorted([e["from"], e["to"]] for e in document["edges"]) == record["edges"]
    model = json.loads((folder / "results" / "kiln-line" / "runs" / record["run_id"]
                        / "model.json").read_text())
    assert document["parameters"] == model["variables"]
    assert document["fit"] == {"estimator": "dirichlet-posterior-mean", "pseudo_count": 1.0,
                               "rows": record["data"]["rows"]}
    for name, var in document["parameters"].items():
        parents = sorted(a for a, b in record["edges"] if b == name)
        assert sorted(var["parents"]) == parents


def test_export_bad_input(stored_run: tuple[Path, dict], export: CliCall) -> None:
    folder, record = stored_run
    unknown = export(folder, record, "svg")
    assert unknown.returncode == 2 and "invalid choice: 'svg'" in unknown.stderr
    missing = export(folder, record, "dot", "--out", str(folder / "no" / "such" / "x.dot"))
    assert missing.returncode == 2 and "does not exist" in missing.stderr
    assert "Traceback" not in unknown.stderr + missing.stderr
    assert not (folder / "no").exists()


def test_confidence_of_a_real_bootstrap_run_reaches_the_graphml(tmp_path: Path, cli: CliCall,
                                                                export: CliCall) -> None:
    # reference reader: networkx.read_graphml
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8")
    text = text.replace("  path: ../datasets/",  # outside the tmp folder: allowed explicitly
                        f"  allow_outside: true\n  path: {ROOT / 'datasets'}/")
    spec = tmp_path / "kiln-line.yaml"
    spec.write_text(text + "bootstrap: {replicates: 3, seed: 1}\n", encoding="utf-8")
    result = cli("run", str(spec), "--results", str(tmp_path / "results"), "--json",
                 "--workers", "1")
    assert result.returncode == 0, result.stderr
    record = json.loads((Path(json.loads(result.stdout)["runs"][0]["folder"])
                         / "run.json").read_text())
    directed = {tuple(r["edge"]): r["directed"] for r in record["bootstrap"]["frequencies"]}
    out = tmp_path / "boot.graphml"
    assert export(tmp_path, record, "graphml", "--out", str(out)).returncode == 0
    graph = nx.read_graphml(out)
    for a, b in record["edges"]:
        assert graph.edges[a, b]["confidence"] == pytest.approx(directed.get((a, b), 0.0))
