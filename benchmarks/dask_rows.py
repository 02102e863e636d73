"""Rows counted on Dask workers: ALARM as Parquet partitions, one process against a
2-worker ``distributed.LocalCluster``, the same record asserted.

Usage::

    python -m benchmarks --dask-rows [--dask-rows-rows 10000000] [--dask-rows-parts 8]
                                     [--repeats 1] [--out benchmarks]

The rows are drawn from ALARM (Beinlich et al. 1989; the network bundled with pgmpy
1.1.2) by vectorised ancestral sampling of its probability tables here (pgmpy's own
sampler is too slow for ten million rows), partition ``k`` with the ``k``-th child of
``numpy.random.SeedSequence(20261201)``, written once as Parquet (each column an Arrow
dictionary of the variable's states) under a temporary folder. The spec: BIC, greedy hill
climbing seeded 0, no budget, the folder as ``dataset.path``.

Each learn is the ``dagmill run`` command in a fresh process: first ``--engine local
--workers 1`` (the folder read and counted in that one process), then ``--engine
dask://...`` on a LocalCluster of 2 single-threaded worker processes started here (rows
read, encoded and counted on the workers, :mod:`runner.partitioned`), into the same
results folder, so that the second run must be the identical twin of the first (the
command says so; asserted, and the two ``run.json`` compared without times and ids).
Reported: the whole command's seconds, the search seconds of the record, the command
process's peak RSS (the workers' memory is their own), and the machine's load.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
CACHE = Path(tempfile.gettempdir()) / "dagmill-bench-data"
SEED = 20261201
VOLATILE = ("run_id", "created_utc", "seconds", "record_sha256", "previous_record_sha256",
            "signature")
#: Also set aside in the comparison: what the command's process had loaded (the
#: one-process learn loads the compiled counting kernel, and numba's BLAS with it; the
#: Dask client counts nothing itself), reported beside the result.
PROCESS = ("environment",)
ENVIRONMENT_DIFFERS = ("different (the one-process learn loads the compiled counting kernel, "
                       "and the BLAS library numba brings; the Dask client counts nothing "
                       "itself)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--dask-rows-rows", type=int, default=10_000_000,
                        help="rows of ALARM for --dask-rows")
    parser.add_argument("--dask-rows-parts", type=int, default=8,
                        help="Parquet partitions for --dask-rows")


def write_alarm(rows: int, parts: int, seed: int = SEED) -> Path:
    """ALARM rows as ``parts`` Parquet partitions (written once, then reused)."""
    import warnings

    import pyarrow as pa
    import pyarrow.parquet as pq

    folder = CACHE / f"alarm-{rows}-{parts}-{seed}-parquet"
    if folder.is_dir() and len(list(folder.glob("*.parquet"))) == parts:
        return folder
    warnings.filterwarnings("ignore")
    import networkx as nx
    from pgmpy.utils import get_example_model

    model = get_example_model("alarm")
    order = list(nx.lexicographical_topological_sort(model))
    cpds = {v: model.get_cpds(v) for v in order}
    states = {v: list(cpds[v].state_names[v]) for v in order}
    tables = {}
    for v in order:
        cpd = cpds[v]
        parents = list(cpd.variables[1:])
        # values: (child states, parent 1 states, ...) with the first parent slowest
        matrix = cpd.values.reshape(len(states[v]), -1).T
        cumulative = np.cumsum(matrix, axis=1)
        cumulative[:, -1] = 1.0
        radix = [len(cpd.state_names[p]) for p in parents]
        # the parents' state orders in the table may differ from their own lists
        remap = [np.array([cpd.state_names[p].index(s) for s in states[p]]) for p in parents]
        tables[v] = (parents, radix, remap, cumulative)
    folder.mkdir(parents=True, exist_ok=True)
    counts = [rows // parts + (1 if k < rows % parts else 0) for k in range(parts)]
    for k, (count, child) in enumerate(zip(counts, np.random.SeedSequence(seed).spawn(parts),
                                           strict=True)):
        rng = np.random.default_rng(child)
        codes: dict[str, np.ndarray] = {}
        for v in order:
            parents, radix, remap, cumulative = tables[v]
            config = np.zeros(count, dtype=np.int64)
            for p, r, m in zip(parents, radix, remap, strict=True):
                config = config * r + m[codes[p]]
            draw = rng.random(count)
            codes[v] = (draw[:, None] >= cumulative[config]).sum(axis=1).astype(np.int8)
        columns = {v: pa.DictionaryArray.from_arrays(pa.array(codes[v]), pa.array(states[v]))
                   for v in sorted(order)}
        path = folder / f"part-{k:03d}.parquet"
        partial = path.with_suffix(".partial")
        pq.write_table(pa.table(columns), partial)
        partial.replace(path)
    return folder


def _spec(folder: Path, name: str) -> str:
    import yaml

    return yaml.safe_dump({
        "name": name, "dataset": {"path": str(folder), "missing_values": [],
                                  "max_states": 64, "allow_outside": True},
        "score": {"name": "bic"},
        "search": {"method": "hill-climb", "seed": 0,
                   "budget": {"max_steps": None, "max_evaluations": None,
                              "max_seconds": None}}})


def _command(args: list[str], cwd: Path) -> dict[str, Any]:
    """``dagmill ARGS`` in a fresh process: its wall seconds, its peak RSS (``wait4``'s
    usage of that process alone) and its one run."""
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        process = subprocess.Popen([sys.executable, "-m", "runner", *args], cwd=cwd,
                                   stdout=out, stderr=err,
                                   env={**os.environ, "PYTHONPATH": str(ROOT)})
        _, status, usage = os.wait4(process.pid, 0)
        seconds = time.perf_counter() - start
        process.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        stdout, stderr = out.read().decode(), err.read().decode()
    if process.returncode != 0:
        raise RuntimeError(f"dagmill {' '.join(args)} exited {process.returncode}: "
                           f"{stderr[-800:]}")
    (run,) = json.loads(stdout)["runs"]
    return {"whole_s": seconds, "run": run, "peak_rss_mb": usage.ru_maxrss * 1024 / 1e6}


def _comparable(record: dict[str, Any]) -> str:
    return json.dumps({k: v for k, v in record.items() if k not in VOLATILE + PROCESS},
                      sort_keys=True)


def run(args: argparse.Namespace) -> int:
    import logging

    from distributed import LocalCluster

    rows, parts = args.dask_rows_rows, args.dask_rows_parts
    started = time.perf_counter()
    folder = write_alarm(rows, parts)
    print(f"data: {folder} ({time.perf_counter() - started:.1f} s)", flush=True)
    work = Path(tempfile.mkdtemp(prefix="dagmill-dask-rows-"))
    (work / "specs").mkdir()
    spec = work / "specs" / "alarm.yaml"
    spec.write_text(_spec(folder, f"dask-rows-alarm-{rows}"))
    loads = [os.getloadavg()]
    local, remote = [], []
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, silence_logs=logging.ERROR) as cluster:
        address = cluster.scheduler_address.removeprefix("tcp://")
        for repeat in range(args.repeats):
            one = _command(["run", str(spec), "--engine", "local", "--workers", "1",
                            "--json", "--results", "results"], work)
            local.append(one)
            print(json.dumps({"repeat": repeat, "engine": "local", "whole_s": one["whole_s"]}),
                  flush=True)
            loads.append(os.getloadavg())
            two = _command(["run", str(spec), "--engine", f"dask://{address}", "--json",
                            "--results", "results"], work)
            remote.append(two)
            print(json.dumps({"repeat": repeat, "engine": "dask", "whole_s": two["whole_s"],
                              "twin": two["run"]["twin"]}), flush=True)
            loads.append(os.getloadavg())
            # the twin is an earlier run with the same inputs: this repeat's one-process run
            # or, from the second repeat on, possibly an earlier one
            twin = two["run"]["twin"]
            assert twin is not None and twin["identical"] is True, twin
            if repeat == 0:
                assert twin["run_id"] == one["run"]["run_id"], twin
    records = {p.parent.name: json.loads(p.read_text())
               for p in (work / "results").rglob("run.json")}
    first, second = records[local[0]["run"]["run_id"]], records[remote[0]["run"]["run_id"]]
    assert _comparable(first) == _comparable(second), "the records differ"
    result = {
        "rows": rows, "partitions": parts, "network": "alarm", "variables": 37,
        "machine": f"{platform.machine()} {os.cpu_count()} cores, {platform.platform()}, "
                   f"Python {platform.python_version()}, numpy {np.__version__}",
        "uptime_load_1_5_15": [list(map(float, load)) for load in loads],
        "same_record": True,
        "same_environment_block": first["environment"] == second["environment"],
        "graph_sha256": first["graph_sha256"], "score": first["score"]["value"],
        "data_sha256": first["data"]["sha256"], "steps": first["search"]["steps"],
        "evaluations": first["search"]["evaluations"], "edges": len(first["edges"]),
        "one_process": {"whole_s": statistics.median(r["whole_s"] for r in local),
                        "search_s": first["seconds"]["search"],
                        "total_s": first["seconds"]["total"],
                        "peak_rss_mb": max(r["peak_rss_mb"] for r in local)},
        "dask_2_workers": {"whole_s": statistics.median(r["whole_s"] for r in remote),
                           "search_s": second["seconds"]["search"],
                           "total_s": second["seconds"]["total"],
                           "peak_rss_mb": max(r["peak_rss_mb"] for r in remote)},
        "repeats": args.repeats,
    }
    out = Path(args.out)
    (out / "RESULTS-dask-rows.json").write_text(json.dumps(result, indent=2) + "\n")
    (out / "RESULTS-dask-rows.md").write_text(_markdown(result))
    print(json.dumps(result, indent=2))
    return 0


def _markdown(r: dict[str, Any]) -> str:
    one, two = r["one_process"], r["dask_2_workers"]
    loads = ", ".join("/".join(f"{x:.2f}" for x in load) for load in r["uptime_load_1_5_15"])
    return (
        f"# Rows on Dask workers: ALARM {r['rows']:,} rows, {r['partitions']} Parquet "
        "partitions\n\n"
        f"Machine: {r['machine']}. Load averages (1/5/15 min) before and after each command: "
        f"{loads} (other work shared the machine).\n\n"
        "Both learns are the `dagmill run` command in a fresh process (median of "
        f"{r['repeats']}), on the same spec (BIC, hill climbing seeded 0, no budget) and the "
        "same folder; the Dask run is the identical twin of the one-process run (same data "
        "sha256, graph, score, families, model; the records compared without times, ids "
        "and the process's `environment` block).\n\n"
        "| learn | whole command (s) | search (s, record) | learn total (s, record) | "
        "command's peak RSS (MB) |\n"
        "| --- | --- | --- | --- | --- |\n"
        f"| one process (`--engine local --workers 1`) | {one['whole_s']:.1f} | "
        f"{one['search_s']:.1f} | {one['total_s']:.1f} | {one['peak_rss_mb']:.0f} |\n"
        f"| 2-worker LocalCluster (`--engine dask://...`) | {two['whole_s']:.1f} | "
        f"{two['search_s']:.1f} | {two['total_s']:.1f} | {two['peak_rss_mb']:.0f} |\n\n"
        f"Same record: {r['same_record']}; the `environment` block (what the command's "
        "process had loaded) compared aside: "
        f"{'the same' if r['same_environment_block'] else ENVIRONMENT_DIFFERS} "
        f"(graph {r['graph_sha256'][:12]}, {r['edges']} edges, "
        f"BIC {r['score']:.6f}, {r['steps']} steps, {r['evaluations']:,} family scores; data "
        f"sha256 {r['data_sha256'][:12]}). The whole command includes reading the folder "
        "(in the command's process, or on the workers) and storing; the peak RSS is the "
        "command's process alone (the workers' memory is their own).\n")
