"""The result store: stable JSON, atomic writes, run ids, lookup."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from runner.errors import InputError
from runner.graph import graph_sha256
from runner.store import (
    atomic_write_text,
    dump_json,
    find_twin,
    read_run,
    resolve_run,
    trace_csv,
    write_run,
)


def record(run_id: str, inputs: str = "ab" * 32) -> dict:
    edges = [["a", "b"]]
    return {"run_id": run_id, "spec_name": "demo", "input_sha256": inputs, "edges": edges,
            "graph_sha256": graph_sha256(edges), "score": {"value": -1.5}}


def test_dump_json_is_stable() -> None:
    text = dump_json({"b": 1, "a": [1.25, {"d": 2, "c": 3}]})
    assert text == (
        '{\n  "a": [\n    1.25,\n    {\n      "c": 3,\n      "d": 2\n    }\n  ],\n  "b": 1\n}\n'
    )


def test_same_second_same_inputs_keeps_both(tmp_path: Path) -> None:
    rid = "20261201T000000Z-ababababab"
    first, _ = write_run(tmp_path, record(rid), trace_csv([]))
    second, f2 = write_run(tmp_path, record(rid), trace_csv([]))
    assert first == rid and second == rid + "-2"
    assert json.loads((f2 / "run.json").read_text())["run_id"] == second
    assert not [p for p in (tmp_path / "demo" / "runs").iterdir() if p.name.startswith(".")]


def test_twin_and_lookup(tmp_path: Path) -> None:
    write_run(tmp_path, record("20261201T000000Z-ababababab"), trace_csv([]))
    write_run(tmp_path, record("20261201T000001Z-ababababab"), trace_csv([]))
    twin = find_twin(tmp_path, "demo", "ab" * 32, exclude="")
    assert twin is not None and twin["run_id"] == "20261201T000000Z-ababababab"
    assert resolve_run(tmp_path, "20261201T000001").name == "20261201T000001Z-ababababab"
    with pytest.raises(InputError, match="matches 2 runs"):
        resolve_run(tmp_path, "20261201")
    with pytest.raises(InputError, match="no run matches"):
        resolve_run(tmp_path, "1999")


def test_hand_edit_is_refused(tmp_path: Path) -> None:
    _, folder = write_run(tmp_path, record("20261201T000000Z-ababababab"), trace_csv([]))
    data = json.loads((folder / "run.json").read_text())
    data["edges"] = [["b", "a"]]
    (folder / "run.json").write_text(json.dumps(data))
    with pytest.raises(InputError, match="graph_sha256"):
        read_run(folder)


def test_atomic_write_leaves_old_file_on_failure(tmp_path: Path) -> None:
    target = tmp_path / "x.json"
    atomic_write_text(target, "old\n")


    with pytest.raises(TypeError):
        atomic_write_text(target, 123)  # type: ignore[arg-type]
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["x.json"]


def test_trace_floats_round_trip() -> None:
    text = trace_csv([(1, "add", "a", "b", 0.1 + 0.2, -12.000000000000002)])
    assert text.splitlines()[1] == "1,add,a,b,0.30000000000000004,-12.000000000000002"


def test_any_hand_edit_of_the_record_or_trace_is_refused(tmp_path: Path) -> None:
    _, folder = write_run(tmp_path, record("20261201T000000Z-cdcdcdcdcd"),
                          trace_csv([(1, "add", "a", "b", 1.5, -10.0)]))
    original = (folder / "run.json").read_text()
    assert read_run(folder)["record_sha256"]
    data = json.loads(original)
    data["seconds"] = {"search": 0.0, "total": 0.0}  # any key, not only the edges
    (folder / "run.json").write_text(json.dumps(data))
    with pytest.raises(InputError, match="record_sha256"):
        read_run(folder)
    (folder / "run.json").write_text(original)
    (folder / "trace.csv").write_text("step,move,from,to,delta,score\n")
    with pytest.raises(InputError, match="trace_sha256"):
        read_run(folder)
    (folder / "trace.csv").unlink()
    with pytest.raises(InputError, match="trace"):
        read_run(folder)


def test_a_record_without_the_newer_hashes_is_still_read(tmp_path: Path) -> None:
    _, folder = write_run(tmp_path, record("20261201T000000Z-efefefefef"), trace_csv([]))
    data = json.loads((folder / "run.json").read_text())
    del data["record_sha256"], data["trace_sha256"]
    (folder / "run.json").write_text(json.dumps(data))
    assert read_run(folder)["run_id"] == "20261201T000000Z-efefefefef"
