"""Speed benchmarks: dagmill's engine against pgmpy's hill climbing on the same data.

Usage::

    python -m benchmarks [--cases alarm-10k,asia-10k] [--repeats 3] [--out benchmarks]

Data are sampled once per case with pgmpy's sampler and a fixed seed, cached as CSV
under a temporary folder (never committed). Each case is timed ``--repeats`` times for
both tools; the table reports medians and the ratio reference / ours. pgmpy is a test
and benchmark dependency only (``pip install -e '.[test]'``).
"""

from __future__ import annotations

import argparse
import json
import platform
import statistics
import tempfile
import time
import tracemalloc
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from functools import partial
from pathlib import Path

import numpy as np
import pandas as pd
from runner.data import encode_frame

from runner.constraints import build_constraints
from runner.scores import build_scorer
from runner.search import Budget, MoveEngine, hill_climb

CACHE = Path(tempfile.gettempdir()) / "dagmill-bench-data"


@dataclass(frozen=True)
class Case:
    name: str
    network: str
    rows: int
    parent_cap: int | None = None
    reference: bool = True


CASES = {
    c.name: c
    for c in (
        Case("asia-10k", "asia", 10_000),
        Case("alarm-10k", "alarm", 10_000),
        Case("alarm-100k", "alarm", 100_000),
        Case("andes-10k-cap4", "andes", 10_000, parent_cap=4, reference=False),
    )
}


def sample(network: str, rows: int, seed: int = 20261201) -> pd.DataFrame:
    """Rows sampled from a bundled pgmpy example network, cached as CSV."""
    CACHE.mkdir(parents=True, exist_ok=True)
    path = CACHE / f"{network}-{rows}-{seed}.csv"
    if not path.exists():
        from pgmpy.utils import get_example_model

        model = get_example_model(network)
        frame = model.simulate(rows, seed=seed, show_progress=False)
        frame.astype(str).to_csv(path, index=False)
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def ours(frame: pd.DataFrame, parent_cap: int | None) -> tuple[float, float]:
    start = time.perf_counter()
    data = encode_frame(frame)
    scorer = build_scorer("bic", data.codes, data.arities)
    engine = MoveEngine(scorer, build_constraints(data.names, parent_cap=parent_cap))
    outcome = hill_climb(engine, Budget())
    return time.perf_counter() - start, outcome.score


def reference(frame: pd.DataFrame, parent_cap: int | None) -> tuple[float, float]:
    from pgmpy.estimators import BIC, HillClimbSearch

    start = time.perf_counter()
    dag = HillClimbSearch(frame).estimate(scoring_method="bic-d", max_indegree=parent_cap,
                                          show_progress=False)
    seconds = time.perf_counter() - start
    return seconds, float(BIC(frame).score(dag))


def measure(fn: Callable[[], tuple[float, float]], repeats: int) -> tuple[float, float, int]:
    """Median seconds, the score, and the peak traced memory of the first repeat (bytes)."""
    times, score, peak = [], 0.0, 0
    for i in range(repeats):
        if i == 0:
            tracemalloc.start()
        seconds, score = fn()
        if i == 0:
            peak = tracemalloc.get_traced_memory()[1]
            tracemalloc.stop()
            seconds, score = fn()  # time an untraced run: tracing slows allocation
        times.append(seconds)
    return statistics.median(times), score, peak


def machine_line() -> str:
    import os

    return (f"{platform.machine()} {os.cpu_count()} cores, {platform.platform()}, "
            f"Python {platform.python_version()}, numpy {np.__version__}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__)
    parser.add_argument("--cases", default="asia-10k,alarm-10k,alarm-100k")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--out", default=str(Path(__file__).parent))
    args = parser.parse_args(argv)
    warnings.filterwarnings("ignore")
    rows = []
    for name in args.cases.split(","):
        case = CASES[name]
        frame = sample(case.network, case.rows)
        our_s, our_score, our_peak = measure(partial(ours, frame, case.parent_cap), args.repeats)
        row = {"case": name, "ours_s": our_s, "our_score": our_score,
               "our_peak_mib": our_peak / 2**20, "reference_s": None, "reference_score": None,
               "ratio": None}
        if case.reference:
            ref_s, ref_score, _ = measure(partial(reference, frame, case.parent_cap),
                                          args.repeats)
            row.update(reference_s=ref_s, reference_score=ref_score, ratio=ref_s / our_s)
        rows.append(row)
        print(json.dumps(row), flush=True)
    out = Path(args.out)
    machine = machine_line()
    (out / "RESULTS.json").write_text(json.dumps({"machine": machine, "cases": rows,
                                                  "repeats": args.repeats},
                                                 indent=2, sort_keys=True) + "\n")
    lines = [
        "# Benchmark results", "", f"Machine: {machine}. Medians of {args.repeats} repeats; "
        "reference: pgmpy HillClimbSearch with its BIC (default settings). Ratio = reference "
        "seconds / our seconds (higher is better for us).", "",
        "| case | ours (s) | reference (s) | ratio | our BIC | reference BIC | our peak MiB |",
        "| --- | --- | --- | --- | --- | --- | --- |",
    ]
    for r in rows:
        def f(v: float | None, fmt: str) -> str:
            return "-" if v is None else format(v, fmt)
        lines.append(f"| {r['case']} | {r['ours_s']:.3f} | {f(r['reference_s'], '.3f')} | "
                     f"{f(r['ratio'], '.1f')} | {r['our_score']:.2f} | "
                     f"{f(r['reference_score'], '.2f')} | {r['our_peak_mib']:.1f} |")
    (out / "RESULTS.md").write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
