"""Benchmark: bootstrap replicates on 1 and 2 local workers and on a 2-worker LocalCluster.

Usage::

    python -m benchmarks.bootstrap [--replicates 200] [--rows 5000] [--out benchmarks]

Data: ``--rows`` rows of ALARM (Beinlich et al. 1989) sampled once with pgmpy's sampler
(see :func:`benchmarks.run.sample`). The spec is BIC with greedy hill climbing. Timed:
the bootstrap stage alone (``pipeline.learn_bootstrap``), on the in-process engine (1
worker), the local process pool with 2 workers, and a ``distributed.LocalCluster`` with 2
single-threaded worker processes on 127.0.0.1, whose start-up is timed separately. The
three bootstrap sections must be identical; the script stops if they are not. Results
go to ``RESULTS-bootstrap.md`` and ``RESULTS-bootstrap.json``.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import tempfile
import time
import warnings
from pathlib import Path

from benchmarks.run import machine_line, sample_path
from benchmarks.run import sample as sample_frame
from runner.engines import DaskEngine, InProcess, LocalPool
from runner.pipeline import learn_bootstrap, prepare


def _spec(folder: Path, csv: Path, replicates: int) -> Path:
    spec = folder / "alarm-bootstrap.yaml"
    spec.write_text(
        f"name: alarm-bootstrap\ndataset: {{path: {csv}}}\n"
        "score: {name: bic}\nsearch: {method: hill-climb, seed: 0}\n"
        f"bootstrap: {{replicates: {replicates}, seed: 1, threshold: 0.5}}\n",
        encoding="utf-8")
    return spec


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.bootstrap", description=__doc__)
    parser.add_argument("--replicates", type=int, default=200)
    parser.add_argument("--rows", type=int, default=5_000)
    parser.add_argument("--out", default=str(Path(__file__).parent))
    args = parser.parse_args(argv)
    warnings.filterwarnings("ignore")
    sample_frame("alarm", args.rows)
    with tempfile.TemporaryDirectory() as folder:
        prepared = prepare(_spec(Path(folder), sample_path("alarm", args.rows), args.replicates))
    load_before = os.getloadavg()
    timings: dict[str, float] = {}
    blocks = {}
    for name, engine in (("local-1", InProcess()), ("local-2", LocalPool(2))):
        start = time.perf_counter()
        blocks[name] = learn_bootstrap(prepared, engine)
        timings[name] = time.perf_counter() - start
        print(json.dumps({name: timings[name]}), flush=True)
    from distributed import Client, LocalCluster

    start = time.perf_counter()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, silence_logs=logging.ERROR) as cluster, \
            Client(cluster) as client:
        timings["dask-startup"] = time.perf_counter() - start
        start = time.perf_counter()
        blocks["dask-2"] = learn_bootstrap(prepared, DaskEngine.attach(client, "bench"))
        timings["dask-2"] = time.perf_counter() - start
    print(json.dumps({k: timings[k] for k in ("dask-startup", "dask-2")}), flush=True)
    load_after = os.getloadavg()
    identical = blocks["local-1"] == blocks["local-2"] == blocks["dask-2"]
    if not identical:
        raise SystemExit("the bootstrap sections differ between engines")
    result = {
        "machine": machine_line(), "replicates": args.replicates, "rows": args.rows,
        "seconds": timings, "identical": identical,
        "speedup_local_2": timings["local-1"] / timings["local-2"],
        "speedup_dask_2": timings["local-1"] / timings["dask-2"],
        "dask_overhead_vs_local_2": timings["dask-2"] / timings["local-2"] - 1.0,
        "load_average_before": load_before, "load_average_after": load_after,
        "consensus_edges": len(blocks["local-1"]["consensus"]["edges"]),
    }
    out = Path(args.out)
    (out / "RESULTS-bootstrap.json").write_text(json.dumps(result, indent=2, sort_keys=True)
                                                + "\n")
    t = timings
    lines = [
        "# Bootstrap benchmark", "",
        f"Machine: {result['machine']}. {args.replicates} bootstrap replicates on "
        f"{args.rows:,} rows of ALARM (pgmpy's sampler, seed 20261201), BIC, greedy hill "
        "climbing; the bootstrap stage alone, one repeat each. The machine is shared: load "
        f"average (1, 5, 15 min) {load_before[0]:.2f}, {load_before[1]:.2f}, "
        f"{load_before[2]:.2f} before and {load_after[0]:.2f}, {load_after[1]:.2f}, "
        f"{load_after[2]:.2f} after, so the figures were measured under that load.", "",
        "| engine | seconds | speed-up over 1 worker |",
        "| --- | --- | --- |",
        f"| local, 1 worker (in process) | {t['local-1']:.2f} | 1.00 |",
        f"| local pool, 2 workers | {t['local-2']:.2f} | {result['speedup_local_2']:.2f} |",
        f"| Dask LocalCluster, 2 workers | {t['dask-2']:.2f} | {result['speedup_dask_2']:.2f} |",
        "",
        f"LocalCluster start-up (not in the row above): {t['dask-startup']:.2f} s. Dask's "
        f"overhead over the 2-worker local pool on the same work: "
        f"{100 * result['dask_overhead_vs_local_2']:+.1f}%. The local pool's time includes "
        "starting its two worker processes (forked). All three bootstrap sections "
        "(frequency table and consensus network) were identical.",
    ]
    (out / "RESULTS-bootstrap.md").write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
