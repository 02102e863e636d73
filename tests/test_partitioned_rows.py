"""Rows counted on Dask workers (``runner.partitioned``): a Parquet folder read, encoded
and counted on a real ``distributed.LocalCluster`` (no mocks) gives the data set, the
record and the fitted model of the one-process learn on the same folder.

The cluster has 2 single-threaded worker processes (``processes=True``: every task and
its data cross a process boundary, as on a real cluster), started once for the module.
The data: the first 6,000 rows of the shipped kiln-line file in three partitions, one of
them without supplier ``east`` (a state that never occurs there), another with missing
cells and a value (``grade: scrap``) that occurs only on a row with a missing cell, so
under ``dataset.missing: drop-rows`` it is not a state at all.
"""

from __future__ import annotations

import json
import socket
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from conftest import ROOT, CliCall

from runner.data import load_dataset, loader_settings
from runner.errors import InputError
from runner.partitioned import REFUSED, PartitionedDataset, RemoteCountScorer, rows_on
from runner.pipeline import learn, prepare, spec_scorer
from runner.spec import normalised_spec
from runner.store import VOLATILE_KEYS, dump_json

pa = pytest.importorskip("pyarrow")
pq = pytest.importorskip("pyarrow.parquet")
distributed = pytest.importorskip("distributed")

#: The tests on the cluster (one of two worker processes for the module) are slow.
on_cluster = pytest.mark.slow


def comparable(record: dict[str, Any]) -> str:
    """A record's bytes without the fields that differ between two runs by nature (run
    id, creation time, timings, the record's own hashes)."""
    return dump_json({k: v for k, v in record.items() if k not in VOLATILE_KEYS})


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    with socket.socket() as s:  # a free port for the scheduler, as dask:// names it
        s.bind(("127.0.0.1", 0))
        port = int(s.getsockname()[1])
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", scheduler_port=port,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as c:
        yield c


def _frame() -> pd.DataFrame:
    return pd.read_csv(ROOT / "datasets" / "kiln-line.csv", dtype=str,
                       keep_default_na=False).iloc[:6000]


def _project(folder: Path, missing: str = "drop-rows", extra: str = "",
             gaps: bool = True) -> Path:
    """``folder/datasets/kiln/part-{0,1,2}.parquet`` and ``folder/specs/kiln.yaml`` (the
    shipped kiln-line spec on that folder, ``missing`` as given); returns the spec."""
    frame = _frame()
    parts = [frame.iloc[0:2000].copy(), frame.iloc[2000:3500].copy(),
             frame.iloc[3500:6000].copy()]
    if gaps:
        parts[1].iloc[5, 3] = ""  # glaze_batch missing
        parts[1].iloc[7, 8] = "NA"  # crack missing
        parts[1].iloc[7, 11] = "scrap"  # on a row that drop-rows drops
    parts[2] = parts[2][parts[2].supplier != "east"]
    data = folder / "datasets" / "kiln"
    data.mkdir(parents=True)
    for i, part in enumerate(parts):
        pq.write_table(pa.Table.from_pandas(part, preserve_index=False),
                       data / f"part-{i}.parquet")
    text = (ROOT / "specs" / "kiln-line.yaml").read_text(encoding="utf-8")
    text = text.replace("../datasets/kiln-line.csv", "../datasets/kiln").replace(
        "missing: error", f"missing: {missing}")
    (folder / "specs").mkdir()
    spec = folder / "specs" / "kiln.yaml"
    spec.write_text(text + extra, encoding="utf-8")
    return spec


@on_cluster
def test_first_pass_gives_the_one_process_data_set(tmp_path: Path, client: Any) -> None:
    """Names, states (``scrap`` not among them), kinds, rows, dropped rows, warnings and
    sha256 equal those of ``load_dataset`` on the folder."""
    spec = _project(tmp_path)
    with rows_on(client):
        prepared = prepare(spec)
    remote = prepared.dataset
    assert isinstance(remote, PartitionedDataset)
    local = load_dataset(tmp_path / "datasets" / "kiln", display_path="../datasets/kiln",
                         **loader_settings(normalised_spec(prepared.spec)["dataset"]))
    assert "scrap" not in remote.states[remote.index("grade")]
    assert remote.dropped_rows == local.dropped_rows == 2
    assert remote.rows == local.rows == 6000 - 2 - int((_frame().iloc[3500:].supplier
                                                        == "east").sum())
    for field in ("names", "states", "kinds", "kind_reasons", "sha256", "warnings"):
        assert getattr(remote, field) == getattr(local, field), field
    assert remote.codes.shape == (len(local.names), 0)  # the codes stay on the workers


@on_cluster
def test_record_and_model_equal_the_one_process_learn(tmp_path: Path, client: Any) -> None:
    """The whole record (times and run ids aside), the trace and model.json are the
    one-process learn's; the counts came in far fewer round trips than families."""
    spec = _project(tmp_path)
    one, one_trace = learn(prepare(spec))
    with rows_on(client):
        prepared = prepare(spec)
        scorer = spec_scorer(normalised_spec(prepared.spec), prepared.dataset)
        assert isinstance(scorer, RemoteCountScorer)
        record, trace = learn(prepared)
    assert comparable(record) == comparable(one)
    assert json.dumps(record["_model"]) == json.dumps(one["_model"])
    assert trace == one_trace
    assert record["search"]["steps"] > 3
    # counting without the search: a fill of every pair is one batch, one round trip
    scorer.prefetch([(c, 0, [p for p in range(scorer.n_vars) if p != c])
                     for c in range(scorer.n_vars)])
    assert scorer.round_trips == 1


@on_cluster
def test_bdeu_and_missing_error_without_gaps(tmp_path: Path, client: Any) -> None:
    """Another score (BDeu, no column form) and ``missing: error`` on gap-free
    partitions: the same record."""
    spec = _project(tmp_path, missing="error", gaps=False)
    spec.write_text(spec.read_text().replace("score: {name: bic}", "score: {name: bdeu}"))
    one, _ = learn(prepare(spec))
    with rows_on(client):
        record, _ = learn(prepare(spec))
    assert record["score"]["name"] == "bdeu"
    assert comparable(record) == comparable(one)


@on_cluster
def test_a_glob_reads_as_the_folder(tmp_path: Path, client: Any) -> None:
    """``dataset.path`` as a glob: the folder's sha256 and record, in one process and on
    the workers."""
    spec = _project(tmp_path)
    folder, _ = learn(prepare(spec))
    spec.write_text(spec.read_text().replace("../datasets/kiln\n",
                                             "../datasets/kiln/*.parquet\n"))
    globbed, _ = learn(prepare(spec))
    with rows_on(client):
        remote, _ = learn(prepare(spec))
    assert globbed["data"]["sha256"] == folder["data"]["sha256"]
    for key in ("edges", "score", "search"):
        assert globbed[key] == folder[key], key
    assert json.dumps(globbed["_model"]) == json.dumps(folder["_model"])
    assert comparable(remote) == comparable(globbed)


@on_cluster
def test_data_problems_are_the_one_process_messages(tmp_path: Path, client: Any) -> None:
    """Missing cells under ``missing: error``: the one-process reader's own problems."""
    spec = _project(tmp_path, missing="error")
    with pytest.raises(InputError) as local:
        prepare(spec)
    with rows_on(client), pytest.raises(InputError) as remote:
        prepare(spec)
    assert [p.format() for p in remote.value.problems] == [
        p.format() for p in local.value.problems]
    assert any("missing value" in p.message for p in remote.value.problems)


@on_cluster
@pytest.mark.parametrize(("extra", "key"), [
    ("bootstrap: {replicates: 4, seed: 1}\n", "bootstrap"),
    ("evaluation: {holdout: 0.2, seed: 1}\n", "evaluation"),
])
def test_refused_keys_exit_2_on_the_command_line(tmp_path: Path, client: Any, cli: CliCall,
                                                  extra: str, key: str) -> None:
    spec = _project(tmp_path, extra=extra)
    address = client.scheduler.address.removeprefix("tcp://")
    done = cli("run", str(spec), "--engine", f"dask://{address}", "--results", "results",
               cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert f"[{key}]" in done.stderr or f" {key}" in done.stderr
    assert REFUSED in done.stderr and "Traceback" not in done.stderr
    assert not (tmp_path / "results").exists() or not any((tmp_path / "results").rglob(
        "run.json"))


@on_cluster
def test_other_refusals_name_their_keys(tmp_path: Path, client: Any) -> None:
    spec = _project(tmp_path, missing="available-case")
    spec.write_text(spec.read_text().replace(
        "  restarts: 0\n", "  restarts: 0\n  candidates: {method: mutual-information, k: 3}\n"
    ).replace("score: {name: bic}", "score: {name: bge}").replace(
        "  columns:", "  bins: 3\n  columns:\n    grade: {kind: continuous}"))
    with rows_on(client), pytest.raises(InputError) as refused:
        prepare(spec)
    mine = [p for p in refused.value.problems if REFUSED in p.message]
    assert {p.key for p in mine} == {"score.name", "dataset.missing", "search.candidates",
                                     "dataset.bins", "dataset.columns.grade"}
    assert all(p.line is not None for p in mine)


@on_cluster
def test_the_command_line_on_a_dask_scheduler(tmp_path: Path, client: Any,
                                              cli: CliCall) -> None:
    """``dagmill run --engine dask://...`` on the folder stores the twin of the local run."""
    spec = _project(tmp_path)
    local = cli("run", str(spec), "--json", "--results", "results", cwd=tmp_path)
    assert local.returncode == 0, local.stderr
    address = client.scheduler.address.removeprefix("tcp://")
    remote = cli("run", str(spec), "--json", "--engine", f"dask://{address}", "--results",
                 "results", cwd=tmp_path)
    assert remote.returncode == 0, remote.stderr
    (run,) = json.loads(remote.stdout)["runs"]
    assert run["twin"] == {"run_id": json.loads(local.stdout)["runs"][0]["run_id"],
                           "identical": True}
    records = [json.loads(p.read_text()) for p in sorted(tmp_path.glob(
        "results/*/runs/*/run.json"))]
    assert len(records) == 2 and comparable(records[0]) == comparable(records[1])
    models = sorted(p.read_bytes() for p in tmp_path.glob("results/*/runs/*/model.json"))
    assert models[0] == models[1]


@on_cluster
def test_two_specs_on_the_workers_in_one_command_exit_2(tmp_path: Path, client: Any,
                                                        cli: CliCall) -> None:
    """Each spec's data would be a second set of partitions on the workers: refused."""
    spec = _project(tmp_path)
    other = spec.with_name("other.yaml")
    other.write_text(spec.read_text().replace("name: kiln-line", "name: kiln-other"))
    address = client.scheduler.address.removeprefix("tcp://")
    done = cli("run", str(spec), str(other), "--engine", f"dask://{address}", "--results",
               "results", cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert "second data set" in done.stderr and REFUSED in done.stderr
    assert "Traceback" not in done.stderr


@on_cluster
def test_dask_local_reads_the_folder_on_its_own_cluster(tmp_path: Path, cli: CliCall) -> None:
    """``--engine dask-local``: the command starts its own 2-worker cluster for the rows
    (closed after it) and stores the twin of the one-process run."""
    spec = _project(tmp_path)
    local = cli("run", str(spec), "--json", "--results", "results", cwd=tmp_path)
    clustered = cli("run", str(spec), "--json", "--engine", "dask-local", "--workers", "2",
                    "--results", "results", cwd=tmp_path)
    assert clustered.returncode == 0, clustered.stderr
    (run,) = json.loads(clustered.stdout)["runs"]
    assert run["twin"] == {"run_id": json.loads(local.stdout)["runs"][0]["run_id"],
                           "identical": True}


def test_the_large_kiln_generator_is_seeded_and_split(tmp_path: Path) -> None:
    """``datasets/make_kiln_large.py``: the partitions' shares of the rows (the first
    ``rows % parts`` one more), the same bytes for the same arguments, other rows for
    another seed; the folder reads as one table of all the rows."""
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "make_kiln_large", ROOT / "datasets" / "make_kiln_large.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.partition_rows(10, 4) == [3, 3, 2, 2]
    one = module.write(1003, 3, 5, tmp_path / "a")
    two = module.write(1003, 3, 5, tmp_path / "b")
    other = module.write(1003, 3, 6, tmp_path / "c")
    assert [p.read_bytes() for p in one] == [p.read_bytes() for p in two]
    assert [p.read_bytes() for p in one] != [p.read_bytes() for p in other]
    data = load_dataset(tmp_path / "a")
    assert data.rows == 1003 and data.names[0] == "supplier"
    assert [pq.read_metadata(p).num_rows for p in one] == [335, 334, 334]
