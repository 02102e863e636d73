"""End-to-end tests of the ``dagmill`` command: in this process (``cli``), and in
separate processes (``cli_process``) where the process itself is what is tested."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import CliCall, ProcessCall, write_case


def test_rerun_in_separate_processes_is_identical(tmp_path: Path,
                                                  cli_process: ProcessCall) -> None:
    spec = write_case(tmp_path)
    first = cli_process("run", str(spec), "--json", cwd=tmp_path)
    assert first.returncode == 0, first.stderr
    second = cli_process("run", str(spec), "--json", cwd=tmp_path)
    assert second.returncode == 0, second.stderr
    one, two = json.loads(first.stdout)["runs"][0], json.loads(second.stdout)["runs"][0]
    assert one["twin"] is None
    assert two["twin"] == {"run_id": one["run_id"], "identical": True}
    assert one["graph_sha256"] == two["graph_sha256"]
    assert one["score"] == two["score"]
    assert one["run_id"].split("-")[1] == two["run_id"].split("-")[1]
    rec1 = json.loads(((tmp_path / one["folder"]) / "run.json").read_text())
    rec2 = json.loads(((tmp_path / two["folder"]) / "run.json").read_text())
    assert rec1["graph_sha256"] == rec2["graph_sha256"]
    assert ((tmp_path / one["folder"]) / "trace.csv").read_bytes() == (
        (tmp_path / two["folder"]) / "trace.csv").read_bytes()
    # same second, same inputs: both kept
    assert (tmp_path / one["folder"]).exists() and (tmp_path / two["folder"]).exists()


def test_one_byte_of_data_changes_data_hash_and_run_id(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    first = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    data = tmp_path / "data.csv"
    text = data.read_text()
    data.write_text(text[:-3] + ("s0\n" if text[-3:] != "s0\n" else "s1\n"))
    second = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    assert second["twin"] is None
    assert first["run_id"].split("-")[1] != second["run_id"].split("-")[1]
    r1 = json.loads(((tmp_path / first["folder"]) / "run.json").read_text())
    r2 = json.loads(((tmp_path / second["folder"]) / "run.json").read_text())
    assert r1["data"]["sha256"] != r2["data"]["sha256"]


def test_seed_override_changes_the_input_hash(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    one = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    two = json.loads(cli("run", str(spec), "--seed", "4", "--json",
                             cwd=tmp_path).stdout)["runs"][0]
    assert one["run_id"].split("-")[1] != two["run_id"].split("-")[1]


def test_record_has_the_guide_keys(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    out = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    folder = tmp_path / out["folder"]
    text = (folder / "run.json").read_text()
    assert text.endswith("}\n")
    record = json.loads(text)
    for key in ("run_id", "spec_name", "spec_sha256", "input_sha256", "code_version", "data",
                "score", "search", "edges", "graph_sha256", "seconds", "environment"):
        assert key in record, key
    assert set(record["data"]) >= {"path", "sha256", "rows", "columns"}
    assert set(record["score"]) >= {"name", "value", "per_row", "families"}
    assert set(record["search"]) >= {"method", "seed", "stop_reason", "steps", "evaluations",
                                     "converged"}
    assert record["edges"] == sorted(record["edges"])
    assert ["a", "c"] in record["edges"]  # required
    assert sum(record["score"]["families"].values()) == pytest.approx(record["score"]["value"])
    trace = (folder / "trace.csv").read_text().splitlines()
    assert trace[0] == "step,move,from,to,delta,score"
    assert len(trace) - 1 == record["search"]["steps"]
    assert out["run_id"] == record["run_id"] == folder.name
    assert text == json.dumps(record, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def test_show_and_schema(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    out = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    shown = cli("show", out["run_id"][:12], cwd=tmp_path)
    assert shown.returncode == 0, shown.stderr
    assert out["graph_sha256"] in shown.stdout
    assert "not proof of cause" in shown.stdout
    schema = cli("schema", cwd=tmp_path)
    assert schema.returncode == 0
    assert json.loads(schema.stdout)["type"] == "object"


def test_show_unknown_run_is_exit_2(tmp_path: Path, cli: CliCall) -> None:
    result = cli("show", "nope", cwd=tmp_path)
    assert result.returncode == 2
    assert "no run matches 'nope'" in result.stderr
    assert "Traceback" not in result.stderr


def test_bad_arguments_are_exit_2(tmp_path: Path, cli_process: ProcessCall) -> None:
    # in a separate process: the exit codes the interpreter returns, not main's values
    result = cli_process("run", cwd=tmp_path)
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    helped = cli_process("--help", cwd=tmp_path)
    assert helped.returncode == 0 and helped.stderr == ""
    assert all(c in helped.stdout for c in ("validate", "run", "check", "pin", "report"))


def test_hand_edited_record_is_refused(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    out = json.loads(cli("run", str(spec), "--json", cwd=tmp_path).stdout)["runs"][0]
    path = tmp_path / out["folder"] / "run.json"
    record = json.loads(path.read_text())
    record["edges"] = record["edges"][1:]
    path.write_text(json.dumps(record))
    result = cli("show", out["run_id"], cwd=tmp_path)
    assert result.returncode == 2
    assert "run.json" in result.stderr and "graph_sha256" in result.stderr
