"""One learn on several cores: the scoring pool (:mod:`runner.scoring_pool`).

Usage::

    python -m benchmarks --pool [--pool-cases alarm-1m,pigs-5k-cap4] [--repeats 1]

Two parts, written to ``RESULTS-pool.md`` and ``RESULTS-pool.json``:

* ``threshold``: one batch of one child's column (the size of a move's refresh) computed
  in this process and on a two-worker :class:`~runner.scoring_pool.ScoringPool`, at
  growing rows x families, on ALARM 100k rows, with either counting path; where the pool
  starts to pay is what :data:`runner.scoring_pool.POOL_MIN_ROW_FAMILIES` is chosen from.
* ``learn``: the whole ``dagmill run`` command with ``--workers 1`` and ``--workers 2``
  side by side (same data, same spec), its search seconds and wall time, and the two
  records asserted equal apart from their times and run ids.

The machine's load (``os.getloadavg``) is reported beside the figures: other processes
on a two-core machine take cores the pool would use.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from benchmarks.scale import ROOT, SCALE_CASES, ScaleCase, sample_path, spec_for

POOL_CASES = {
    "alarm-1m": ScaleCase("alarm-1m", "alarm", 1_000_000),
    "pigs-5k-cap4": SCALE_CASES["pigs-5k-cap4"],
    "alarm-100k": SCALE_CASES["alarm-100k"],
}
DEFAULT_POOL_CASES = "alarm-1m,pigs-5k-cap4"
#: Fields of a record that name the moment of the run (and the hash over them).
MOMENT_FIELDS = ("created_utc", "run_id", "record_sha256", "seconds")


def load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def _threshold_child(kernel: str) -> list[dict[str, Any]]:
    """Times of one column batch in process and pooled, in this fresh process."""
    sys.path.insert(0, str(ROOT))
    import numpy as np

    from runner.data import load_dataset
    from runner.scores import build_scorer
    from runner.scoring_pool import ScoringPool, row_families

    data = load_dataset(sample_path("alarm", 100_000), missing_values=[])
    arities = np.asarray(data.arities)
    n = data.codes.shape[0]
    out = []
    for rows in (10_000, 100_000):
        codes = np.ascontiguousarray(data.codes[:, :rows])
        local = build_scorer("bic", codes, arities)
        pool = ScoringPool(2, local.function, codes, arities)
        try:
            for families in (1, 2, 4, 8, 16, 35, 70, 140):
                # columns of children 0, 1, ... given parent n - 1, up to 35 candidates each
                requests = [(c, 1 << (n - 1), [p for p in range(n - 1) if p != c][:families])
                            for c in range(max(1, families // 35))]
                work = row_families(requests, rows)
                local._compute_batch(requests)  # warm: the kernel loaded, workers started
                pool.compute(requests)
                here, there = [], []
                for _ in range(7):
                    start = time.perf_counter()
                    a = local._compute_batch(requests)
                    here.append(time.perf_counter() - start)
                    start = time.perf_counter()
                    b = pool.compute(requests)
                    there.append(time.perf_counter() - start)
                    assert a == b
                out.append({"kernel": kernel, "rows": rows, "families": families,
                            "row_families": work,
                            "in_process_ms": 1e3 * statistics.median(here),
                            "pooled_ms": 1e3 * statistics.median(there)})
        finally:
            pool.close()
    return out


def threshold(kernel: str) -> list[dict[str, Any]]:
    before = load()
    done = subprocess.run([sys.executable, "-m", "benchmarks.pool", "--threshold", kernel],
                          cwd=ROOT, capture_output=True, text=True,
                          env={**os.environ, "DAGMILL_KERNEL": kernel})
    if done.returncode != 0:
        raise SystemExit(done.stderr[-2000:])
    rows: list[dict[str, Any]] = json.loads(done.stdout.strip().splitlines()[-1])
    after = load()
    for row in rows:
        row.update(load_before=before, load_after=after)
    return rows


def _record(folder: Path) -> dict[str, Any]:
    path = next(folder.rglob("run.json"))
    record: dict[str, Any] = json.loads(path.read_text())
    seconds = record["seconds"]
    for key in MOMENT_FIELDS:
        record.pop(key, None)
    record["trace"] = (path.parent / "trace.csv").read_text()
    record["model"] = (path.parent / "model.json").read_text()
    return {"record": record, "seconds": seconds}


def learn(case: ScaleCase, workers: int) -> dict[str, Any]:
    """The whole command on ``case`` with ``--workers``: wall time, search seconds, the
    record without its times."""
    import yaml

    folder = Path(tempfile.mkdtemp(prefix="dagmill-pool-"))
    spec_file = folder / "specs" / "pool.yaml"
    spec_file.parent.mkdir()
    spec_file.write_text(yaml.safe_dump(spec_for(case, sample_path(case.network, case.rows))))
    before = load()
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "runner", "run", str(spec_file),
                           "--workers", str(workers), "--results", str(folder / "results")],
                          cwd=ROOT, capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    wall = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"{case.name} --workers {workers}: {done.stderr[-1000:]}")
    got = _record(folder / "results")
    return {"wall_s": wall, "search_s": got["seconds"]["search"], "load_before": before,
            "load_after": load(), "record": got["record"]}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--pool", action="store_true",
                        help="one learn on 1 and 2 workers (the scoring pool)")
    parser.add_argument("--pool-cases", default=DEFAULT_POOL_CASES,
                        help="comma-separated cases of --pool")


def run(args: argparse.Namespace) -> int:
    thresholds = [row for kernel in ("numba", "numpy") for row in threshold(kernel)]
    for row in thresholds:
        print(json.dumps(row), flush=True)
    cases = []
    for name in args.pool_cases.split(","):
        case = POOL_CASES[name]
        runs: dict[int, list[dict[str, Any]]] = {1: [], 2: []}
        for _ in range(args.repeats):
            for workers in (1, 2):
                runs[workers].append(learn(case, workers))
        one, two = runs[1][0], runs[2][0]
        same = all(r["record"] == one["record"] for w in (1, 2) for r in runs[w])
        assert same, f"{name}: the records differ between 1 and 2 workers"
        row = {"case": name, "same_record": same,
               "evaluations": one["record"]["search"]["evaluations"],
               "score": one["record"]["score"]["value"]}
        for workers in (1, 2):
            row[f"search_s_{workers}"] = statistics.median(r["search_s"] for r in runs[workers])
            row[f"wall_s_{workers}"] = statistics.median(r["wall_s"] for r in runs[workers])
            row[f"load_{workers}"] = [r["load_before"] for r in runs[workers]]
        row["search_ratio"] = row["search_s_1"] / row["search_s_2"]
        row["wall_ratio"] = row["wall_s_1"] / row["wall_s_2"]
        cases.append(row)
        print(json.dumps(row), flush=True)
        del two
    out = Path(args.out)
    (out / "RESULTS-pool.json").write_text(json.dumps(
        {"threshold": thresholds, "cases": cases, "repeats": args.repeats,
         "load_at_end": load()}, indent=2, sort_keys=True) + "\n")
    lines = ["# One learn on several cores (scoring pool)", "",
             f"Medians of {args.repeats} repeat(s) of the whole `dagmill run`; the records "
             "of 1 and 2 workers asserted equal apart from their times and run ids. Load "
             "averages (1, 5, 15 min) before each run: the machine has 2 cores shared with "
             "other work.", "",
             "| case | evaluations | search 1 worker (s) | search 2 workers (s) | ratio | "
             "wall 1 (s) | wall 2 (s) | ratio | same record | load before (1 / 2 workers) |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in cases:
        lines.append(
            f"| {r['case']} | {r['evaluations']:,} | {r['search_s_1']:.2f} | "
            f"{r['search_s_2']:.2f} | {r['search_ratio']:.2f}x | {r['wall_s_1']:.2f} | "
            f"{r['wall_s_2']:.2f} | {r['wall_ratio']:.2f}x | {r['same_record']} | "
            f"{r['load_1'][0]} / {r['load_2'][0]} |")
    loads = {t["kernel"]: f"{t['load_before']} before, {t['load_after']} after"
             for t in thresholds}
    lines += ["", "Column batches (children 0, 1, ... of ALARM given one parent, k "
              "candidates in all), median of 7, in process and on a 2-worker pool (warm). "
              "Load averages: " + "; ".join(f"{k} {v}" for k, v in sorted(loads.items()))
              + ".", "",
              "| path | rows | families | row-families | in process (ms) | pooled (ms) | "
              "pooled / in process |", "| --- | --- | --- | --- | --- | --- | --- |"]
    for t in sorted(thresholds, key=lambda t: (t["kernel"], t["row_families"])):
        lines.append(f"| {t['kernel']} | {t['rows']:,} | {t['families']} | "
                     f"{t['row_families']:,} | {t['in_process_ms']:.2f} | "
                     f"{t['pooled_ms']:.2f} | {t['pooled_ms'] / t['in_process_ms']:.2f} |")
    lines += ["", f"Load at the end: {load()}."]
    (out / "RESULTS-pool.md").write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    if len(sys.argv) >= 3 and sys.argv[1] == "--threshold":
        print(json.dumps(_threshold_child(sys.argv[2])))
        raise SystemExit(0)
    raise SystemExit("run through: python -m benchmarks --pool")
