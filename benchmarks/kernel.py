"""The counting kernel against the numpy path, and the move engine's search time.

Usage::

    python -m benchmarks --kernel [--kernel-before TREE] [--kernel-cases alarm-10k,pigs-5k-cap4]
                                  [--kernel-repeats 3]

Two measures, both on this machine in one run:

* counting: rows x families counted per second, on ALARM 10k, by the numpy path
  (:func:`runner.scores.counts.family_counts`) and by the compiled kernel
  (:func:`runner.scores.kernel.family_table`) on the same 2,000 random families (one to
  four parents), and for whole columns (a child, a parent set and every other variable
  added in turn: :func:`runner.scores.kernel.column_tables` against one
  ``family_counts`` each); the kernel timed warm (compiled and loaded first);
* search: BIC hill climbing from the empty graph (``MoveEngine`` + ``hill_climb``, seed 0)
  on each case, each timed in a fresh process: the first search there (numba imported
  and loaded on the way when it is used) and the best of two more with fresh scorers
  ("warm"); for this tree under ``DAGMILL_KERNEL=numpy``, ``numba`` and unset, and for
  ``--kernel-before`` (a checkout of the code before the kernel, e.g. ``git archive
  HEAD``) when given. Each row's score, evaluations and cache hits show that the searches
  agree.

Writes ``RESULTS-kernel.md`` and ``RESULTS-kernel.json`` in ``--out``.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[1]

#: name -> (pgmpy network, rows, parent cap)
CASES = {
    "alarm-10k": ("alarm", 10_000, None),
    "pigs-5k-cap4": ("pigs", 5_000, 4),
    "pathfinder-5k-cap4": ("pathfinder", 5_000, 4),
}
DEFAULT_CASES = "alarm-10k,pigs-5k-cap4"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The kernel benchmark's options (``python -m benchmarks --kernel ...``)."""
    group = parser.add_argument_group("counting kernel (--kernel)")
    group.add_argument("--kernel-cases", default=DEFAULT_CASES)
    group.add_argument("--kernel-repeats", type=int, default=3,
                       help="fresh processes per search row (the median is kept)")
    group.add_argument("--kernel-before", default=None,
                       help="a checkout of the code before the kernel, timed as 'before'")


def best_of(function: Any, repeats: int) -> float:
    """The least seconds of ``repeats`` calls (the machine may be shared: the least is the
    run least disturbed)."""
    seconds = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        seconds.append(time.perf_counter() - start)
    return min(seconds)


def counting(codes: np.ndarray, arities: np.ndarray, families: int = 2000, seed: int = 5,
             repeats: int = 5) -> dict[str, float]:
    """Rows x families per second of the numpy path and of the kernel, single families
    and whole columns; each the best of ``repeats`` passes, the two paths alternating."""
    from runner.scores import kernel
    from runner.scores.counts import dense_limit, family_counts

    rng = np.random.default_rng(seed)
    n, rows = codes.shape
    chosen = []
    for _ in range(families):
        members = rng.choice(n, size=int(rng.integers(2, 6)), replace=False)
        chosen.append((int(members[0]), sorted(int(m) for m in members[1:])))
    dense = np.zeros(dense_limit(rows), dtype=np.int64)
    code = np.zeros(rows, dtype=np.int64)
    arities = np.asarray(arities, dtype=np.int64)
    # whole columns: every variable a child once, with two random parents
    columns = [(c, sorted(int(p) for p in rng.choice([v for v in range(n) if v != c], 2,
                                                     replace=False))) for c in range(n)]
    work = [(c, ps, [v for v in range(n) if v != c and v not in ps]) for c, ps in columns]
    column_families = sum(len(e) for _, _, e in work)

    def numpy_single() -> None:
        for child, parents in chosen:
            family_counts(codes, arities, child, parents)

    def kernel_single() -> None:
        for child, parents in chosen:
            kernel.family_table(codes, arities, child, parents, dense, code)

    def numpy_column() -> None:
        for child, parents, extras in work:
            for extra in extras:
                family_counts(codes, arities, child, sorted([*parents, extra]))

    def kernel_column() -> None:
        for child, parents, extras in work:
            kernel.column_tables(codes, arities, child, parents, extras, dense, code)

    kernel_single()  # compile or load first
    kernel_column()
    seconds = {name: float("inf") for name in ("ns", "ks", "nc", "kc")}
    for _ in range(repeats):
        for name, function in (("ns", numpy_single), ("ks", kernel_single),
                               ("nc", numpy_column), ("kc", kernel_column)):
            seconds[name] = min(seconds[name], best_of(function, 1))
    return {"families": families, "rows": rows, "repeats": repeats,
            "numpy_per_s": rows * families / seconds["ns"],
            "kernel_per_s": rows * families / seconds["ks"],
            "ratio": seconds["ns"] / seconds["ks"],
            "column_families": column_families,
            "column_numpy_per_s": rows * column_families / seconds["nc"],
            "column_kernel_per_s": rows * column_families / seconds["kc"],
            "column_ratio": seconds["nc"] / seconds["kc"]}


def worker(csv: str, cap: int | None) -> dict[str, Any]:
    """One fresh process: three searches with fresh scorers; the first one's seconds
    include reading nothing but the encoding, scoring and search."""
    import pandas as pd

    from runner.constraints import build_constraints
    from runner.data import encode_frame
    from runner.scores import build_scorer
    from runner.search import Budget, MoveEngine, hill_climb

    frame = pd.read_csv(csv, dtype=str, keep_default_na=False)
    data = encode_frame(frame, declared_states={c: sorted(frame[c].unique()) for c in frame})
    times, result = [], {}
    for _ in range(3):
        start = time.perf_counter()
        scorer = build_scorer("bic", data.codes, data.arities)
        engine = MoveEngine(scorer, build_constraints(data.names, parent_cap=cap))
        outcome = hill_climb(engine, Budget(), rng=np.random.default_rng(
            np.random.SeedSequence(0)))
        times.append(time.perf_counter() - start)
        result = {"score": outcome.score, "steps": outcome.steps,
                  "evaluations": outcome.evaluations, "cache_hits": outcome.cache_hits}
    return {"first_s": times[0], "warm_s": min(times[1:]), **result}


def timed(tree: Path, csv: Path, cap: int | None, kernel: str | None, repeats: int
          ) -> dict[str, Any]:
    """Medians over ``repeats`` fresh processes of ``worker`` importing ``tree``."""
    env = {k: v for k, v in os.environ.items() if k != "DAGMILL_KERNEL"}
    env["PYTHONPATH"] = str(tree)
    if kernel is not None:
        env["DAGMILL_KERNEL"] = kernel
    runs = []
    for _ in range(repeats):
        out = subprocess.run([sys.executable, str(Path(__file__)), "--worker", str(csv),
                              "none" if cap is None else str(cap)],
                             env=env, capture_output=True, text=True, check=True)
        runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    return {**runs[0], "first_s": statistics.median(r["first_s"] for r in runs),
            "warm_s": statistics.median(r["warm_s"] for r in runs)}


def run(args: argparse.Namespace) -> int:
    """Run the kernel benchmark; write its tables."""
    from benchmarks.run import encode, machine_line, sample, sample_path

    warnings.filterwarnings("ignore")
    load_before = os.getloadavg()
    throughput = counting(*(lambda d: (d.codes, d.arities))(encode(sample("alarm", 10_000))))
    print(json.dumps(throughput), flush=True)
    trees = [("after", ROOT, k) for k in ("numpy", "numba", None)]
    if args.kernel_before:
        trees.insert(0, ("before", Path(args.kernel_before).resolve(), None))
    rows = []
    for name in args.kernel_cases.split(","):
        network, n_rows, cap = CASES[name]
        sample(network, n_rows)
        for label, tree, kernel in trees:
            row = {"case": name, "tree": label, "kernel": kernel or "unset",
                   **timed(tree, sample_path(network, n_rows), cap, kernel,
                           args.kernel_repeats)}
            print(json.dumps(row), flush=True)
            rows.append(row)
    out = Path(args.out)
    machine = machine_line()
    load = {"before": list(load_before), "after": list(os.getloadavg())}
    (out / "RESULTS-kernel.json").write_text(json.dumps(
        {"machine": machine, "load_average": load, "counting": throughput, "searches": rows,
         "repeats": args.kernel_repeats}, indent=2, sort_keys=True) + "\n")
    t = throughput
    shown = ", ".join(f"{x:.2f}" for x in load["before"])
    lines = ["# Counting kernel and move engine", "", f"Machine: {machine}.", "",
             f"Load average (1, 5, 15 min) at the start: {shown}; at the end: "
             f"{', '.join(f'{x:.2f}' for x in load['after'])} (the machine may be shared: "
             "compare the columns of one run).", "",
             "## Counting (ALARM 10k, rows x families per second)", "",
             "| work | numpy path | kernel | kernel / numpy |", "| --- | --- | --- | --- |",
             f"| {t['families']:,} single families (1-4 parents) | {t['numpy_per_s']:.3g} | "
             f"{t['kernel_per_s']:.3g} | {t['ratio']:.2f} |",
             f"| {t['column_families']:,} families in columns (2 parents + 1) | "
             f"{t['column_numpy_per_s']:.3g} | {t['column_kernel_per_s']:.3g} | "
             f"{t['column_ratio']:.2f} |", "",
             f"## BIC hill climbing from the empty graph (median of {args.kernel_repeats} "
             "fresh processes; first: the process's first search, numba's import and load "
             "included; warm: the best of two more)", "",
             "| case | code | DAGMILL_KERNEL | first (s) | warm (s) | score | steps "
             "| evaluations | cache hits |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        lines.append(f"| {r['case']} | {r['tree']} | {r['kernel']} | {r['first_s']:.2f} | "
                     f"{r['warm_s']:.2f} | {r['score']:.6f} | {r['steps']} | "
                     f"{r['evaluations']:,} | {r['cache_hits']:,} |")
    (out / "RESULTS-kernel.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    if sys.argv[1:2] == ["--worker"]:
        print(json.dumps(worker(sys.argv[2], None if sys.argv[3] == "none" else int(sys.argv[3]))))
    else:
        from benchmarks.run import main
        raise SystemExit(main(["--kernel", *sys.argv[1:]]))
