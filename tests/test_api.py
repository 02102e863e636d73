"""The Python API (runner/api.py): the same records as the command, DataFrames read as
their canonical CSV, tables and graphs from the stored model, the same spec messages for
a dict as for a file, and the module's doctests (the README's example among them)."""

from __future__ import annotations

import doctest
import hashlib
import io
import json
import os
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import BOOT, ROOT, CliCall, write_case, write_numeric_case
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import runner
import runner.api
from runner.errors import InputError
from runner.pipeline import prepare
from runner.spec import load_spec
from runner.spec.loader import load_spec_dict
from runner.store import VOLATILE_KEYS, dump_json

#: The keys that name where the inputs came from: ``<dict>`` / ``<DataFrame>`` for inputs
#: that were never files; every other key is the same whichever way the inputs came.
ORIGIN = {"spec": ("spec_path",), "data": ("data", "path")}


def _without(record: dict[str, Any], *paths: tuple[str, ...]) -> dict[str, Any]:
    """The record without its volatile keys and the given key paths."""
    out = json.loads(json.dumps({k: v for k, v in record.items() if k not in VOLATILE_KEYS}))
    for path in paths:
        holder = out
        for part in path[:-1]:
            holder = holder[part]
        holder.pop(path[-1])
    return out


def _stored(folder: Path) -> tuple[dict[str, Any], str, str]:
    return (json.loads((folder / "run.json").read_text(encoding="utf-8")),
            (folder / "model.json").read_text(encoding="utf-8"),
            (folder / "trace.csv").read_text(encoding="utf-8"))


def _spec_dict(path: Path) -> dict[str, Any]:
    data = yaml.safe_load(path.read_text(encoding="utf-8"))
    assert isinstance(data, dict)
    return data


@pytest.fixture
def case(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """The small four-variable case (``write_case``) with a bootstrap block, in the
    current folder (so a dict spec's relative path resolves as the file's does)."""
    spec = write_case(tmp_path, rows=600)
    spec.write_text(spec.read_text(encoding="utf-8") + BOOT, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    for name in ("DAGMILL_RESULTS", "DAGMILL_SIGNING_KEY"):
        monkeypatch.delenv(name, raising=False)
    return spec


# --------------------------------------------------------------------------- same records


@pytest.mark.parametrize("spec_as", ["path", "dict"])
@pytest.mark.parametrize("data_as", ["spec", "path", "frame"])
def test_api_stores_the_record_the_command_stores(case: Path, cli: CliCall, spec_as: str,
                                                   data_as: str) -> None:
    """learn + save gives run.json byte for byte as ``dagmill run`` (the volatile keys
    aside), and the same model.json and trace.csv; a dict spec and a DataFrame change
    only the keys that name where the inputs came from."""
    command = ["run", case.name, "--results", "results"]
    if data_as != "spec":
        command += ["--data", "data.csv"]
    done = cli(*command, cwd=case.parent)
    assert done.returncode == 0, done.stderr
    (by_command,) = sorted((case.parent / "results" / "small-line" / "runs").iterdir())

    spec: Any = str(case) if spec_as == "path" else _spec_dict(case)
    data: Any = {"spec": None, "path": "data.csv",
                 "frame": pd.read_csv("data.csv", dtype=str, keep_default_na=False)}[data_as]
    net = runner.learn(spec, data)
    folder = net.save("results")
    assert folder != by_command
    assert net.twin == {"run_id": by_command.name, "identical": True}

    (a, a_model, a_trace), (b, b_model, b_trace) = _stored(by_command), _stored(folder)
    assert (a_model, a_trace) == (b_model, b_trace)
    assert net.record == b
    origin = [ORIGIN[k] for k, v in (("spec", spec_as), ("data", data_as))
              if v in ("dict", "frame")]
    assert dump_json(_without(a, *origin)) == dump_json(_without(b, *origin))
    assert b["spec_path"] == ("<dict>" if spec_as == "dict" else "small.yaml")
    assert b["data"]["path"] == ("<DataFrame>" if data_as == "frame" else "data.csv")


def test_inputs_that_are_not_files_keep_their_names(case: Path,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    """From a folder inside the project, a dict spec and a DataFrame are still named
    ``<dict>`` and ``<DataFrame>`` in the stored record, not as paths."""
    spec = _spec_dict(case)
    spec["dataset"]["path"] = str(case.parent / "data.csv")
    frame = pd.read_csv("data.csv", dtype=str, keep_default_na=False)
    (case.parent / "notebooks").mkdir()
    monkeypatch.chdir(case.parent / "notebooks")
    net = runner.learn(spec, frame)
    net.save(case.parent / "results")
    assert (net.record["spec_path"], net.record["data"]["path"]) == ("<dict>", "<DataFrame>")


def test_the_record_before_saving_is_the_stored_one_unsealed(case: Path) -> None:
    net = runner.learn(case)
    before = dict(net.record)
    assert before["run_id"] is None and "record_sha256" not in before
    net.save("results")
    after = net.record
    assert set(after) - set(before) == {"record_sha256", "previous_record_sha256",
                                        "trace_sha256"}
    same = set(before) - {"run_id", "spec_path", "data", "created_utc", "seconds"}
    assert {k: before[k] for k in same} == {k: after[k] for k in same}


# --------------------------------------------------------------------------- DataFrames


def test_a_frame_hashes_as_its_canonical_csv(case: Path) -> None:
    """The file write_case writes is in canonical form, so the frame read from it as text
    serialises back to its bytes, and both give the file's sha256 (of those bytes)."""
    raw = Path("data.csv").read_bytes()
    frame = pd.read_csv("data.csv", dtype=str, keep_default_na=False)
    assert runner.canonical_csv(frame) == raw
    sha = hashlib.sha256(raw).hexdigest()
    assert runner.learn(case, frame).record["data"]["sha256"] == sha
    assert runner.learn(case, "data.csv").record["data"]["sha256"] == sha
    # The same numbers in another spelling are other bytes, and another hash.
    numbers = pd.read_csv("data.csv").assign(extra=1.5)
    assert runner.canonical_csv(numbers).splitlines()[1].endswith(b",1.5")


TEXT = st.sampled_from(["x", "y", "a,b", 'q"r', " sp", "", "None", "NA", "1", "1.50",
                        "é", "line\nbreak"])
CELL = st.one_of(TEXT, st.none(), st.integers(-3, 3), st.sampled_from([0.1, 1.0, 2.5]))
NAMES = st.lists(st.sampled_from(["a", "b c", "d,e", "f\"g", "h"]), min_size=1, max_size=3,
                 unique=True)


@st.composite
def frames(draw: st.DrawFn, cell: st.SearchStrategy[Any] = CELL) -> pd.DataFrame:
    names = draw(NAMES)
    rows = draw(st.integers(1, 8))
    return pd.DataFrame({n: draw(st.lists(cell, min_size=rows, max_size=rows))
                         for n in names})


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(frame=frames())
def test_a_frame_is_read_by_the_rules_of_its_csv_file(tmp_path: Path,
                                                      frame: pd.DataFrame) -> None:
    """Property: a DataFrame and its canonical CSV as a file are read alike: the same
    names, states, kinds, codes and sha256, or the same problems (bar the file's name)."""
    spec = {"name": "frame", "dataset": {"path": "unused.csv", "missing": "drop-rows"}}
    file = tmp_path / "frame.csv"
    file.write_bytes(runner.canonical_csv(frame))

    def read(data: Any) -> Any:
        try:
            prepared = (prepare(spec, data) if isinstance(data, Path)
                        else runner.api._prepare(spec, data, None))
        except InputError as exc:
            return [(p.line, p.key, p.message.replace(str(file), "<DataFrame>"))
                    for p in exc.problems]
        d = prepared.dataset
        return (d.sha256, d.names, d.states, d.kinds, d.codes.tolist(), d.dropped_rows,
                None if d.values is None else d.values.tolist())

    assert read(frame) == read(file)


@settings(max_examples=60, deadline=None)
@given(frame=frames(TEXT))
def test_a_canonical_file_read_as_text_gives_back_its_bytes(frame: pd.DataFrame) -> None:
    """The README's rule: a file in canonical form, read with dtype=str and
    keep_default_na=False, serialises back to its own bytes (so, to its sha256)."""
    raw = runner.canonical_csv(frame)
    again = pd.read_csv(io.BytesIO(raw), dtype=str, keep_default_na=False)
    assert runner.canonical_csv(again) == raw


def test_frame_problems_name_the_frame_and_its_csv_line(case: Path) -> None:
    frame = pd.read_csv("data.csv", dtype=str, keep_default_na=False)
    frame.loc[3, "b"] = None  # the spec's missing rule is error
    with pytest.raises(InputError) as caught:
        runner.learn(case, frame)
    (problem,) = caught.value.problems
    assert problem.file == "<DataFrame>" and problem.line == 5 and problem.key == "b"
    with pytest.raises(InputError, match="header levels"):
        runner.learn(case, pd.DataFrame([[1, 2]], columns=pd.MultiIndex.from_tuples(
            [("a", "x"), ("a", "y")])))
    with pytest.raises(TypeError, match="DataFrame"):
        runner.learn(case, data=[1, 2])  # type: ignore[arg-type]


# --------------------------------------------------------------------------- the result


def test_tables_agree_with_the_model(case: Path) -> None:
    """Each table row is the model's probabilities for that parent configuration (the
    unseen-configuration row where it does not occur) and sums to 1."""
    spec = _spec_dict(case)
    spec["fit"] = {"pseudo_count": 1.0}
    net = runner.learn(spec)
    assert net.model is not None
    variables = net.model["variables"]
    assert set(net.tables) == set(net.names)
    for child, table in net.tables.items():
        doc = variables[child]
        assert list(table.columns) == doc["states"] and table.columns.name == child
        arities = [len(variables[p]["states"]) for p in doc["parents"]]
        assert len(table) == int(np.prod(arities))  # every configuration, 1 for none
        assert [n for n in table.index.names if n is not None] == doc["parents"]
        np.testing.assert_allclose(table.sum(axis=1), 1.0, rtol=0, atol=1e-12)
        seen = set()
        for config in doc["configurations"]:
            key = (tuple(config["parents"]) if len(config["parents"]) > 1
                   else config["parents"][0] if config["parents"] else 0)
            assert table.loc[key].tolist() == config["probabilities"]
            seen.add(key)
        for key, row in table.iterrows():
            if key not in seen:
                assert row.tolist() == doc["unseen_configuration"]
    assert not net.gaussian_families


def test_tables_under_maximum_likelihood_leave_unseen_rows_empty(case: Path) -> None:
    spec = _spec_dict(case)
    spec["fit"] = {"pseudo_count": 0.0}
    # a, b, c -> d: c follows a + b, so some configurations never occur
    spec["required"] = [["a", "c"], ["a", "d"], ["b", "d"], ["c", "d"]]
    spec["parent_cap"] = 3
    net = runner.learn(spec)
    table = net.tables["d"]
    assert net.model is not None
    occurring = len(net.model["variables"]["d"]["configurations"])
    assert table.notna().all(axis=1).sum() == occurring < len(table)
    assert table.isna().all(axis=1).sum() == len(table) - occurring


def test_graph_nodes_carry_kind_tier_and_states(case: Path) -> None:
    spec = _spec_dict(case)
    spec["tiers"] = [["a", "b"], ["c"]]  # d in no tier
    spec["tier_names"] = ["causes", "middle"]
    net = runner.learn(spec)
    graph = net.graph
    assert list(graph.nodes) == net.names == ["a", "b", "c", "d"]
    assert [graph.nodes[n]["tier"] for n in net.names] == [1, 1, 2, 0]
    assert graph.nodes["c"]["tier_name"] == "middle" and "tier_name" not in graph.nodes["d"]
    for name, column in net.record["data"]["columns"].items():
        assert graph.nodes[name]["kind"] == column["kind"] == "discrete"
        assert graph.nodes[name]["states"] == column["states"]
        assert isinstance(graph.nodes[name]["states"], list)
    assert sorted(graph.edges) == net.edges == [tuple(e) for e in net.record["edges"]]
    assert graph.edges["a", "c"]["required"] is True
    assert net.family_scores == net.record["score"]["families"]
    assert net.score == net.record["score"]["value"]
    cp = net.cpdag
    assert {frozenset(e) for e in cp.directed | cp.undirected} == {
        frozenset(e) for e in net.edges}
    assert ("a", "c") in cp.directed and ("b", "c") in cp.directed  # a v-structure


def test_bootstrap_table(case: Path) -> None:
    net = runner.learn(case)
    table = net.bootstrap
    assert table is not None
    block = net.record["bootstrap"]
    assert list(table.columns) == ["from", "to", "directed", "class", "adjacent",
                                   "consensus"]
    assert [[a, b] for a, b in zip(table["from"], table["to"], strict=True)] == [
        item["edge"] for item in block["frequencies"]]
    assert table["directed"].tolist() == [item["directed"] for item in block["frequencies"]]
    consensus = {tuple(e) for e in block["consensus"]["edges"]}
    assert {(a, b) for a, b, c in zip(table["from"], table["to"], table["consensus"],
                                      strict=True) if c} == consensus
    spec = _spec_dict(case)
    del spec["bootstrap"]
    assert runner.learn(spec).bootstrap is None


def test_gaussian_families_agree_with_the_model(tmp_path: Path,
                                                monkeypatch: pytest.MonkeyPatch) -> None:
    write_numeric_case(tmp_path)
    monkeypatch.chdir(tmp_path)
    net = runner.learn({"name": "numbers", "dataset": {"path": "data.csv"},
                        "score": {"name": "gaussian-bic"}})
    assert net.tables == {} and net.model is not None
    families = net.gaussian_families
    assert set(families) == set(net.names)
    for child, family in families.items():
        doc = net.model["variables"][child]
        assert family.child == child and list(family.parents) == doc["parents"]
        assert family.intercept == doc["intercept"]
        assert family.coefficients == doc["coefficients"]
        assert family.variance == doc["residual_variance"]
    assert all(net.graph.nodes[n]["kind"] == "continuous" for n in net.names)


def test_load_run_round_trips(case: Path) -> None:
    net = runner.learn(case)
    folder = net.save("results")
    for ref in (folder.name, folder.name[:17], str(folder)):
        loaded = runner.load_run(ref, results="results")
        assert loaded.folder == folder or loaded.folder.resolve() == folder.resolve()
        assert loaded.record == net.record == _stored(folder)[0]
        assert loaded.model == net.model and loaded.trace == net.trace
        assert sorted(loaded.graph.edges) == sorted(net.graph.edges)
        for name, table in net.tables.items():
            pd.testing.assert_frame_equal(loaded.tables[name], table)
        pd.testing.assert_frame_equal(loaded.bootstrap, net.bootstrap)
    with pytest.raises(ValueError, match="stored already"):
        loaded.save("results")
    with pytest.raises(InputError, match="no run matches"):
        runner.load_run("20990101", results="results")


# --------------------------------------------------------------------------- dict specs


BROKEN_SPECS: list[dict[str, Any]] = [
    {"name": "Bad Name", "dataset": {"path": "data.csv"}},
    {"name": "x", "dataset": {"path": "data.csv"}, "serach": {"method": "tabu"}},
    {"name": "x", "dataset": {"path": "data.csv"}, "search": {"method": "hill-clim"}},
    {"name": "x", "dataset": {"path": "data.csv", "max_states": "many"}},
    {"name": "x", "dataset": {"path": "data.csv"}, "tiers": [["a"], ["a", "b"]],
     "required": [["b", "a"]], "forbidden": [["a", "a"]]},
    {"name": "x", "dataset": {"path": "data.csv"}, "required": [["a", "b"], ["b", "a"]]},
    {"name": "x", "dataset": {"path": "data.csv"}, "score": {"name": "bdeu", "ess": -1},
     "search": {"budget": {"max_steps": 0}}},
    {"dataset": {"path": "data.csv"}, "gate": {"on": "run"}},
]


def _problems(error: InputError) -> list[tuple[Any, ...]]:
    """Key, message, value and severity of each problem; a message's references to the
    lines of other keys (``(tiers.0.0, line 4)``) left out, as a dict spec has none."""
    return sorted((p.key or "", re.sub(r" \(line \d+\)|, line \d+", "", p.message),
                   repr(p.value), p.severity) for p in error.problems)


@pytest.mark.parametrize("data", BROKEN_SPECS)
def test_a_dict_spec_has_the_problems_of_the_same_file(tmp_path: Path,
                                                       data: dict[str, Any]) -> None:
    file = tmp_path / "spec.yaml"
    file.write_text(yaml.safe_dump(data), encoding="utf-8")
    with pytest.raises(InputError) as from_file:
        load_spec(file)
    with pytest.raises(InputError) as from_dict:
        load_spec_dict(data)
    assert _problems(from_dict.value) == _problems(from_file.value)
    assert all(p.file == "<dict>" and p.line is None for p in from_dict.value.problems)
    assert all(p.key for p in from_dict.value.problems)
    assert (from_dict.value.partial_spec is None) == (from_file.value.partial_spec is None)


def test_a_dict_spec_through_learn(case: Path) -> None:
    spec = _spec_dict(case)
    spec["search"]["methd"] = "tabu"
    with pytest.raises(InputError) as caught:
        runner.learn(spec)
    (problem,) = caught.value.problems
    assert problem.file == "<dict>" and problem.key == "search.methd"
    assert "did you mean 'method'?" in problem.message
    # The data is still checked when the spec's dataset block is sound.
    spec = _spec_dict(case)
    spec["tiers"] = [["a", "nope"]]
    with pytest.raises(InputError, match="nope"):
        runner.learn(spec)
    # Plain Python values a YAML file cannot hold are taken as the YAML ones.
    spec = _spec_dict(case)
    spec["tiers"] = tuple(tuple(t) for t in spec["tiers"])
    spec["dataset"]["path"] = Path("data.csv")
    spec["search"]["seed"] = np.int64(3)
    assert runner.learn(spec).record["spec"] == runner.learn(case).record["spec"]
    loop: dict[str, Any] = {"name": "x"}
    loop["dataset"] = loop
    with pytest.raises(InputError, match="contains itself"):
        load_spec_dict(loop)
    with pytest.raises(InputError, match="top level of a spec must be a mapping"):
        load_spec_dict(["name"])  # type: ignore[arg-type]


# --------------------------------------------------------------------------- compare, check


def test_compare_and_check_match_the_command(case: Path, cli: CliCall) -> None:
    first = runner.learn(case).save("results")
    second = runner.learn(case, seed=9).save("results")
    done = cli("compare", first.name, second.name, "--json", "--results", "results",
               cwd=case.parent)
    assert json.loads(done.stdout) == runner.compare_runs(first.name, second.name,
                                                          results="results")
    missing = runner.check(case, results="results")
    assert missing["ok"] is False and missing["status"] == "no-baseline"
    assert cli("pin", first.name, "--results", "results", cwd=case.parent).returncode == 0
    report = runner.check(case, results="results")
    done = cli("check", case.name, "--json", "--results", "results", cwd=case.parent)
    (by_command,) = json.loads(done.stdout)["checks"]
    assert report["ok"] is True and done.returncode == 0
    volatile = ("run_id", "folder")
    assert ({k: v for k, v in report.items() if k not in volatile}
            == {k: v for k, v in by_command.items() if k not in volatile})
    assert (Path(report["folder"]) / "check.json").is_file()


# --------------------------------------------------------------------------- the module


def test_doctests_run() -> None:
    """The module's examples and the README's (the same example) run as written."""
    found = doctest.testmod(runner.api, optionflags=doctest.ELLIPSIS)
    assert found.attempted > 10 and found.failed == 0
    readme = doctest.testfile(str(ROOT / "README.md"), module_relative=False,
                              optionflags=doctest.ELLIPSIS)
    assert readme.attempted > 10 and readme.failed == 0


def test_the_names_are_public_and_import_lazily() -> None:
    import dagmill

    for name in runner.__all__:
        assert getattr(dagmill, name) is getattr(runner, name)
    assert set(runner.api.__all__) == set(runner.__all__) - {"__version__"}
    with pytest.raises(AttributeError):
        _ = runner.nothing_here  # type: ignore[attr-defined]
    code = "import runner, sys; print(sorted({'pandas', 'numpy', 'runner.api'} & set(sys.modules)))"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(
        p for p in (str(ROOT), os.environ.get("PYTHONPATH")) if p)}
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                         text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.slow
def test_bootstrap_on_a_local_pool_gives_the_same_record(
        case: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """``engine``/``workers`` run the bootstrap replicates on a real local pool of
    processes (its ``map`` is called: a spy around the real method); the record's
    bootstrap block is the in-process one, bit for bit."""
    from runner.engines import LocalPool

    calls = []
    real = LocalPool.map

    def spy(self: LocalPool, *args: Any, **kwargs: Any) -> Any:
        calls.append(len(args[2]))
        return real(self, *args, **kwargs)

    monkeypatch.setattr(LocalPool, "map", spy)
    here = runner.learn(case).record["bootstrap"]
    assert calls == []
    pooled = runner.learn(case, engine="local", workers=2).record["bootstrap"]
    assert calls and pooled == here


def test_a_bad_engine_is_bad_input(case: Path) -> None:
    from runner.errors import InputError

    with pytest.raises(InputError) as caught:
        runner.learn(case, engine="carrier-pigeon")
    assert any(p.key == "--engine" for p in caught.value.problems)
