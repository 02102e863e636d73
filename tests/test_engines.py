"""Execution engines: the same record whatever runs the units; bad engine input.

The Dask checks start a real ``distributed.LocalCluster`` on 127.0.0.1 (no mocks) and
close it; Dask is part of the test extra.
"""

from __future__ import annotations

import json
import os
import socket
from pathlib import Path
from typing import Any

import pytest
from conftest import BOOT, CliCall, ProcessCall, write_case

from runner.engines import DaskEngine, InProcess, LocalPool, choose_engine, default_workers
from runner.errors import InputError
from runner.pipeline import learn, prepare
from runner.store import VOLATILE_KEYS, dump_json


def comparable(record: dict[str, Any]) -> str:
    """A record's bytes without the fields that legitimately differ between two runs: the
    creation time, the timings and (for a stored record) the record's own hash, which
    covers those two (the run id is not set before storing)."""
    return dump_json({k: v for k, v in record.items()
                      if k not in VOLATILE_KEYS})


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


# --------------------------------------------------------------------------- choosing


def test_engine_choice_defaults_and_addresses() -> None:
    assert choose_engine(None, None, {}).kind == "local"
    assert choose_engine(None, None, {}).workers == default_workers()
    one = choose_engine("local", 1, {})
    assert (one.workers, one.capped) == (1, None)
    many = choose_engine("local", default_workers() + 1, {})  # capped, with a warning
    assert many.workers == default_workers() and many.asked == default_workers() + 1
    assert many.capped is not None and "usable core" in many.capped
    dask = choose_engine(None, 2, {"DAGMILL_ENGINE": "dask://10.0.0.5:8786"})
    assert (dask.kind, dask.address) == ("dask", "tcp://10.0.0.5:8786")
    assert choose_engine("local", None, {"DAGMILL_ENGINE": "dask://x:1"}).kind == "local"


@pytest.mark.parametrize(("engine", "workers", "env", "key", "words"), [
    ("spark", None, {}, "--engine", "unknown engine"),
    ("dask://nohost", None, {}, "--engine", "dask://HOST:PORT"),
    ("dask://h:70000", None, {}, "--engine", "port in 1-65535"),
    (None, None, {"DAGMILL_ENGINE": "threads"}, "DAGMILL_ENGINE", "unknown engine"),
    ("local", 0, {}, "--workers", "at least 1"),
])
def test_bad_engine_choices(engine: str | None, workers: int | None, env: dict[str, str],
                            key: str, words: str) -> None:
    with pytest.raises(InputError) as caught:
        choose_engine(engine, workers, env)
    (problem,) = caught.value.problems
    assert problem.key == key and words in problem.message


# --------------------------------------------------------------------------- determinism


@pytest.mark.slow
def test_bootstrap_record_is_identical_on_every_engine(tmp_path: Path) -> None:
    # Engines: in process, local pool (fork and spawn), LocalCluster with 2 worker processes.
    # Compared: the whole record as JSON bytes except created_utc and seconds; that
    # includes the graph hash, the frequency table and the consensus network.
    from distributed import Client, LocalCluster

    spec = write_case(tmp_path, rows=1500)
    spec.write_text(spec.read_text() + BOOT)
    prepared = prepare(spec)
    serial, _ = learn(prepared, engine=InProcess())
    pooled, _ = learn(prepared, engine=LocalPool(2))
    spawned, _ = learn(prepared, engine=LocalPool(2, start_method="spawn"))
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as client:
        clustered, _ = learn(prepared, engine=DaskEngine.attach(client, "test cluster"))
    frequencies = serial["bootstrap"]["frequencies"]
    assert frequencies and all(0.0 <= r[k] <= 1.0 for r in frequencies
                               for k in ("directed", "class", "adjacent"))
    assert comparable(serial) == comparable(pooled) == comparable(spawned) == comparable(
        clustered)
    one_worker, _ = learn(prepared, engine=LocalPool(1))
    assert comparable(one_worker) == comparable(serial)


@pytest.mark.slow
def test_several_specs_as_units_match_one_at_a_time(tmp_path: Path,
                                                     cli_process: ProcessCall) -> None:
    # separate processes: a real pool of workers, and nothing at all on stderr
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    other = tmp_path / "other.yaml"
    other.write_text(spec.read_text().replace("small-line", "other-line")
                     .replace("seed: 3", "seed: 9"))
    results = {}
    for workers in ("1", "2"):
        done = cli_process("run", str(spec), str(other), "--workers", workers, "--json",
                       "--results", f"r{workers}", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        assert done.stderr == ""  # not a terminal: no progress bar
        results[workers] = json.loads(done.stdout)["runs"]
    for one, two in zip(results["1"], results["2"], strict=True):
        a = json.loads((tmp_path / one["folder"] / "run.json").read_text())
        b = json.loads((tmp_path / two["folder"] / "run.json").read_text())
        assert comparable({**a, "run_id": None}) == comparable({**b, "run_id": None})
    assert [r["graph_sha256"] for r in results["1"]] == [r["graph_sha256"] for r in results["2"]]


# --------------------------------------------------------------------------- bad input


def _no_runs(folder: Path) -> bool:
    return not any(folder.glob("results/*/runs/*/run.json"))


@pytest.mark.slow
def test_dask_address_that_does_not_answer(tmp_path: Path, cli_process: ProcessCall) -> None:
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    done = cli_process("run", str(spec), "--engine", f"dask://127.0.0.1:{free_port()}",
                       "--results", "results", cwd=tmp_path)
    assert done.returncode == 3
    assert "no Dask scheduler answers at dask://127.0.0.1:" in done.stderr
    assert "Traceback" not in done.stderr
    assert _no_runs(tmp_path)


def test_unknown_engine_and_bad_workers_exit_2(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    for args, env, words in (
        (["--engine", "spark"], {}, "--engine: unknown engine"),
        ([], {"DAGMILL_ENGINE": "spark"}, "DAGMILL_ENGINE: unknown engine"),
        (["--workers", "0"], {}, "--workers: must be at least 1"),
    ):
        done = cli("check", str(spec), *args, "--results", "results", cwd=tmp_path, env=env)
        assert done.returncode == 2, done.stderr
        assert words in done.stderr and "Traceback" not in done.stderr
    assert _no_runs(tmp_path)


def test_bad_bootstrap_in_any_spec_stores_nothing(tmp_path: Path, cli: CliCall) -> None:
    spec = write_case(tmp_path)
    bad = tmp_path / "bad.yaml"
    for text, key in (("bootstrap: {replicates: 0}\n", "bootstrap.replicates"),
                      ("bootstrap: {replicates: 5, threshold: 1.5}\n", "bootstrap.threshold"),
                      ("gate: {graph: consensus}\n", "gate.graph")):
        bad.write_text(spec.read_text().replace("small-line", "bad-line") + text)
        done = cli("run", str(spec), str(bad), "--workers", "1", "--results", "results",
                   cwd=tmp_path)
        assert done.returncode == 2
        assert "bad.yaml:" in done.stderr and key in done.stderr
        assert _no_runs(tmp_path)


def in_process_run(tmp_path: Path, cli_process: ProcessCall) -> tuple[Path, str]:
    """A bootstrap spec learned once in the command's process (``--workers 1``); its run id.

    The command runs in a separate process, as the engine runs it compares with: a
    record's environment block describes its process (the BLAS threads, for one), and
    this test process's may have been changed by earlier tests (a Dask cluster sets
    thread variables)."""
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    local = cli_process("run", str(spec), "--workers", "1", "--json", "--results", "r",
                        cwd=tmp_path)
    assert local.returncode == 0, local.stderr
    return spec, json.loads(local.stdout)["runs"][0]["run_id"]


def assert_twin_of(done: Any, run_id: str) -> None:
    """The run ``done`` stored is an identical twin of the in-process ``run_id``."""
    assert done.returncode == 0, done.stderr
    (run,) = json.loads(done.stdout)["runs"]
    assert run["twin"] == {"run_id": run_id, "identical": True}


@pytest.mark.slow
def test_dask_local_engine_from_the_command_line(tmp_path: Path,
                                                 cli_process: ProcessCall) -> None:
    spec, run_id = in_process_run(tmp_path, cli_process)
    clustered = cli_process("run", str(spec), "--engine", "dask-local", "--workers", "2",
                            "--json", "--results", "r", cwd=tmp_path)
    assert_twin_of(clustered, run_id)
    records = [json.loads(p.read_text()) for p in sorted(tmp_path.glob("r/*/runs/*/run.json"))]
    assert len(records) == 2
    assert comparable({**records[0], "run_id": None}) == comparable({**records[1],
                                                                     "run_id": None})


@pytest.mark.slow
def test_dask_scheduler_without_workers(tmp_path: Path, cli_process: ProcessCall) -> None:
    from distributed import LocalCluster

    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    with LocalCluster(n_workers=0, host="127.0.0.1", dashboard_address=None) as cluster:
        address = cluster.scheduler_address.removeprefix("tcp://")
        done = cli_process("run", str(spec), "--engine", f"dask://{address}", "--results",
                           "results", cwd=tmp_path)
    assert done.returncode == 3
    assert "has no workers" in done.stderr and "Traceback" not in done.stderr
    assert _no_runs(tmp_path)


@pytest.mark.slow
def test_dask_address_from_the_command_line(tmp_path: Path, cli_process: ProcessCall) -> None:
    from distributed import LocalCluster

    spec, run_id = in_process_run(tmp_path, cli_process)
    with LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        address = cluster.scheduler_address.removeprefix("tcp://")
        remote = cli_process("run", str(spec), "--json", "--results", "r", cwd=tmp_path,
                             env={"DAGMILL_ENGINE": f"dask://{address}"})
    assert_twin_of(remote, run_id)


def _die(_shared: object, _item: object) -> None:
    """A unit of work whose worker process dies (as one killed for memory would)."""
    os._exit(3)


def test_a_dead_pool_worker_is_a_clean_engine_failure() -> None:
    from runner.engines import LocalPool
    from runner.errors import EngineFailure

    with pytest.raises(EngineFailure, match="worker process of the local pool died"):
        LocalPool(2, start_method="fork").map(_die, None, [1, 2, 3])


@pytest.mark.slow
def test_a_dead_dask_worker_is_a_clean_engine_failure() -> None:
    # a real LocalCluster on 127.0.0.1; the scheduler gives up on a unit at its first
    # killed worker (allowed-failures 0) instead of retrying it elsewhere
    import dask
    from distributed import Client, LocalCluster

    from runner.engines import DaskEngine
    from runner.errors import EngineFailure

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), LocalCluster(
            n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address=None) as cluster, Client(cluster) as client:
        with pytest.raises(EngineFailure, match="lost a unit of work"):
            DaskEngine.attach(client, "test-cluster").map(_die, None, [1])


def _double(shared: int, item: int) -> int:
    return shared * item


def test_dask_local_starts_no_cluster_for_a_lone_unit() -> None:
    from runner.engines import choose_engine, open_engine

    with open_engine(choose_engine("dask-local", 2, environ={})) as engine:
        assert engine.map(_double, 2, [21]) == [42]
        assert engine._cluster is None  # type: ignore[attr-defined]
