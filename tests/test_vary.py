"""``vary``: one run per combination of values, each an ordinary record with the concrete
values in its normalised spec, plus a sealed summary of edge shares over the
combinations; bad ``vary`` sections are refused at ``validate`` with file:line."""

from __future__ import annotations

import json
import shutil
from collections import deque
from pathlib import Path
from typing import Any

import networkx as nx
import pytest
from conftest import CliCall, CliResult, ProcessCall, kiln_spec_text, write_kiln_data

from runner.store import VOLATILE_KEYS, list_variations, read_variation

ROWS = 2000
NAME = "kiln-vary"
FAST = ("--quiet", "--workers", "1")

SPEC = kiln_spec_text(NAME, extra="required:\n  - [kiln_peak, crack]\n")
VARY = """\
vary:
  score.ess: [1, 10, 50]
  parent_cap: [1, 3]
"""
#: the combinations in the documented order: keys sorted (parent_cap, score.ess), the
#: last key changing fastest
COMBINATIONS = [(cap, ess) for cap in (1, 3) for ess in (1, 10, 50)]


def _project(folder: Path, spec: str = SPEC + VARY, file: str = "vary.yaml") -> Path:
    write_kiln_data(folder, ROWS)
    (folder / "specs" / file).write_text(spec, encoding="utf-8")
    return folder


def _json(done: CliResult) -> dict[str, Any]:
    assert "Traceback" not in done.stderr
    return json.loads(done.stdout)  # type: ignore[no-any-return]


def _summary(project: Path) -> dict[str, Any]:
    return read_variation(list_variations(project / "results", NAME)[-1])


def _run_files(project: Path, run_id: str) -> tuple[dict[str, Any], str, str]:
    folder = project / "results" / NAME / "runs" / run_id
    record = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    return (record, (folder / "trace.csv").read_text(encoding="utf-8"),
            (folder / "model.json").read_text(encoding="utf-8"))


#: record keys that differ between a combination and a hand-written spec by design: the
#: volatile ones (time, timings, the seals over them and the chain), and the spec file's
#: path (the hand-written specs are other files)
DIFFERENT = (*VOLATILE_KEYS, "spec_path")


def _stable(record: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in record.items() if k not in DIFFERENT}


@pytest.fixture(scope="module")
def varied(tmp_path_factory: pytest.TempPathFactory, cli_session: CliCall) -> Path:
    project = _project(tmp_path_factory.mktemp("varied"))
    done = cli_session("run", "specs/vary.yaml", *FAST, cwd=project)
    assert done.returncode == 0, done.stderr
    return project


def test_combinations_give_records_with_the_concrete_values(varied: Path) -> None:
    summary = _summary(varied)
    assert summary["keys"] == ["parent_cap", "score.ess"]
    combos = summary["combinations"]
    assert [(c["values"]["parent_cap"], c["values"]["score.ess"]) for c in combos] == \
        COMBINATIONS
    runs = sorted((varied / "results" / NAME / "runs").iterdir())
    assert len(runs) == 6
    for combo, (cap, ess) in zip(combos, COMBINATIONS, strict=True):
        record, _, _ = _run_files(varied, combo["run_id"])
        assert record["spec"]["parent_cap"] == cap
        assert record["spec"]["score"]["ess"] == ess
        assert "vary" not in record["spec"] and "vary_limit" not in record["spec"]
        assert combo["graph_sha256"] == record["graph_sha256"]
        assert combo["edges"] == len(record["edges"])
        assert combo["score"]["value"] == record["score"]["value"]


def test_records_equal_those_of_hand_written_specs(varied: Path, tmp_path: Path,
                                                   cli: CliCall) -> None:
    combos = _summary(varied)["combinations"]
    for k, (cap, ess) in enumerate(COMBINATIONS):
        hand = _project(tmp_path / f"hand{k}", SPEC.replace(
            "score: {name: bdeu}", f"score: {{name: bdeu, ess: {ess}}}")
            + f"parent_cap: {cap}\n", file="hand.yaml")
        done = cli("run", "specs/hand.yaml", "--json", *FAST, cwd=hand)
        assert done.returncode == 0, done.stderr
        (run,) = _json(done)["runs"]
        mine = _run_files(varied, combos[k]["run_id"])
        theirs = _run_files(hand, run["run_id"])
        assert json.dumps(_stable(mine[0]), sort_keys=True) == \
            json.dumps(_stable(theirs[0]), sort_keys=True)
        assert mine[1:] == theirs[1:]  # trace.csv and model.json, byte for byte
        assert mine[0]["input_sha256"] == theirs[0]["input_sha256"]


def _equivalence_class(edges: set[tuple[str, str]]) -> set[frozenset[tuple[str, str]]]:
    """Every DAG equivalent to ``edges``, by reversing covered edges from it: two DAGs
    are equivalent exactly when a sequence of covered-edge reversals joins them
    (Chickering 1995, "A transformational characterization of equivalent Bayesian
    network structures", UAI, Theorem 2); an edge a -> b is covered when the parents of
    b are those of a plus a."""
    start = frozenset(edges)
    seen = {start}
    todo = deque([start])
    while todo:
        dag = nx.DiGraph(list(todo.popleft()))
        for a, b in list(dag.edges):
            if set(dag.predecessors(b)) == set(dag.predecessors(a)) | {a}:
                turned = frozenset((set(dag.edges) - {(a, b)}) | {(b, a)})
                if turned not in seen:
                    seen.add(turned)
                    todo.append(turned)
    return seen


def test_edge_shares_equal_a_count_over_the_graphs(varied: Path) -> None:
    summary = _summary(varied)
    graphs = [nx.DiGraph([tuple(e) for e in _run_files(varied, c["run_id"])[0]["edges"]])
              for c in summary["combinations"]]
    classes = [_equivalence_class(set(g.edges)) for g in graphs]
    seen = {e for cls in classes for dag in cls for e in dag}
    expected = {
        (a, b): (sum(g.has_edge(a, b) for g in graphs) / 6,
                 sum(any((a, b) in dag for dag in cls) for cls in classes) / 6,
                 sum(g.has_edge(a, b) or g.has_edge(b, a) for g in graphs) / 6)
        for a, b in seen
    }
    found = {tuple(s["edge"]): (s["directed"], s["class"], s["adjacent"])
             for s in summary["shares"]}
    assert found == expected
    assert {tuple(e) for e in summary["stable_core"]["directed"]} == {
        e for e in seen if all(g.has_edge(*e) for g in graphs)}
    assert {tuple(e) for e in summary["stable_core"]["class"]} == {
        e for e, (_, share, _) in expected.items() if share == 1.0}
    assert 0 < len(summary["stable_core"]["directed"]) < len(found)  # the values matter


def test_show_prints_the_shares_and_a_run_names_its_variation(
        varied: Path, cli: CliCall) -> None:
    summary = _summary(varied)
    shown = cli("show", summary["summary_id"], cwd=varied)
    assert shown.returncode == 0, shown.stderr
    assert "edge shares over the combinations" in shown.stdout
    assert f"stable core: {len(summary['stable_core']['directed'])} directed edges" \
        in shown.stdout
    for share in summary["shares"]:
        a, b = share["edge"]
        assert any(line.startswith(f"{a} -> {b} ") for line in shown.stdout.splitlines())
    as_json = cli("show", summary["summary_id"], "--json", cwd=varied)
    assert _json(as_json) == summary
    run = summary["combinations"][4]
    of_run = cli("show", run["run_id"], cwd=varied)
    assert (f"variation  {summary['summary_id']}: combination parent_cap=3, score.ess=10 "
            "of 6") in of_run.stdout


def test_an_edited_summary_is_refused(varied: Path, tmp_path: Path, cli: CliCall) -> None:
    copy = tmp_path / "copy"
    shutil.copytree(varied, copy)
    path = list_variations(copy / "results", NAME)[-1]
    doc = json.loads(path.read_text(encoding="utf-8"))
    doc["shares"][0]["directed"] = 0.5
    path.write_text(json.dumps(doc), encoding="utf-8")
    done = cli("show", path.stem, cwd=copy)
    assert done.returncode == 2
    assert "does not match its summary_sha256" in done.stdout + done.stderr


def _comparable(summary: dict[str, Any]) -> dict[str, Any]:
    """A summary without what differs between two runs of the same inputs: its id,
    time and seal, the run ids and the record seals (time, chain)."""
    out = {k: v for k, v in summary.items()
           if k not in ("summary_id", "created_utc", "summary_sha256", "signature")}
    out["combinations"] = [{k: v for k, v in c.items() if k not in ("run_id", "record_sha256")}
                           for c in summary["combinations"]]
    return out


def test_one_and_two_workers_give_the_same_summary(varied: Path, cli: CliCall) -> None:
    one = _comparable(_summary(varied))
    done = cli("run", "specs/vary.yaml", "--json", "--quiet", "--workers", "2", cwd=varied)
    assert done.returncode == 0, done.stderr
    doc = _json(done)
    assert all(r["twin"] is not None and r["twin"]["identical"] for r in doc["runs"])
    assert _comparable(_summary(varied)) == one
    assert len(list_variations(varied / "results", NAME)) == 2


@pytest.mark.slow
def test_a_dask_local_cluster_gives_the_same_summary(
        varied: Path, tmp_path: Path, cli_process: ProcessCall) -> None:
    copy = tmp_path / "dask"
    shutil.copytree(varied, copy)
    done = cli_process("run", "specs/vary.yaml", "--quiet", "--engine", "dask-local",
                       "--workers", "2", cwd=copy)
    assert done.returncode == 0, done.stderr
    assert _comparable(_summary(copy)) == _comparable(_summary(varied))


def test_a_project_run_skips_an_up_to_date_variation(tmp_path: Path, cli: CliCall) -> None:
    project = _project(tmp_path, SPEC + "vary:\n  score.ess: [1, 10]\n")
    first = _json(cli("run", "--json", *FAST, cwd=project))
    assert [s["status"] for s in first["specs"]] == ["learned"] * 2
    again = _json(cli("run", "--json", *FAST, cwd=project))
    assert [s["status"] for s in again["specs"]] == ["up_to_date"] * 2
    assert [s["run_id"] for s in again["specs"]] == [s["run_id"] for s in first["specs"]]
    (row,) = _json(cli("overview", "--json", cwd=project))["rows"]
    assert row["state"] == "up_to_date"
    spec = project / "specs" / "vary.yaml"
    spec.write_text(spec.read_text().replace("[1, 10]", "[1, 20]"))
    (row,) = _json(cli("overview", "--json", cwd=project))["rows"]
    assert row["state"] == "stale"
    third = _json(cli("run", "--json", *FAST, cwd=project))
    assert [s["status"] for s in third["specs"]] == ["learned"] * 2
    assert third["specs"][0]["variation"]["summary_id"] != \
        first["specs"][0]["variation"]["summary_id"]


@pytest.mark.parametrize(("vary", "line", "message"), [
    ("vary:\n  score.nope: [1, 2]\n", 15,
     "vary.score.nope: 'score.nope' cannot be varied: unknown key 'nope' in score"),
    ("vary:\n  score.ess: []\n", 15, "vary.score.ess: must have at least 1 item"),
    ("vary:\n  score.ess: [1, -2]\n", 15,
     "vary.score.ess.1: with score.ess=-2: score.ess: must be greater than 0.0 (got -2)"),
    ("vary:\n  search.method: [hill-climb, hill-climbing]\n", 15,
     "vary.search.method.1: with search.method=\"hill-climbing\": search.method: must be "
     "one of"),
    ("vary:\n  name: [a, b]\n", 15,
     "vary.name: 'name' cannot be varied: it is not a setting of one run"),
    ("vary_limit: 5\nvary:\n  score.ess: [1, 2, 3]\n  search.seed: [1, 2]\n", 15,
     "vary: 6 combinations (3 x 2) are more than vary_limit (5)"),
])
def test_a_bad_vary_section_is_bad_input_with_its_line(
        tmp_path: Path, cli: CliCall, vary: str, line: int, message: str) -> None:
    project = _project(tmp_path, SPEC + vary)
    done = cli("validate", "specs/vary.yaml", cwd=project)
    assert done.returncode == 2, done.stdout
    first = done.stdout.splitlines()[0]
    assert first.startswith(f"specs/vary.yaml:{line}"), first
    assert message in first, first
