"""Benchmark: how closely a search keeps ``search.budget.max_seconds`` on wide data.

Usage::

    python -m benchmarks --budget [--budget-columns 300] [--budget-rows 5000]
        [--budget-seconds 2] [--budget-methods hill-climb,ges] [--budget-label after]

Data: ``--budget-columns`` independent binary columns (states ``a``/``b``, each a fair
coin, seeded) of ``--budget-rows`` rows, written once as CSV under a temporary folder.
Each method learns it through ``pipeline.learn`` (BIC, the method's defaults) with
``max_seconds`` set; measured are the wall time of the learn (loading excluded), the
recorded search seconds, the stop reason and the family evaluations. The bound the
searches keep is ``max(1.1 * max_seconds, max_seconds + 1)`` seconds of search.

Results are kept per ``--budget-label`` (``before``/``after`` a change, say) in
``RESULTS-budget.json``; ``RESULTS-budget.md`` shows every label kept there.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from benchmarks.run import machine_line

DATA = Path(tempfile.gettempdir()) / "dagmill-bench-data"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The budget case's options (``python -m benchmarks --budget ...``)."""
    group = parser.add_argument_group("budget keeping (--budget)")
    group.add_argument("--budget-columns", type=int, default=300)
    group.add_argument("--budget-rows", type=int, default=5_000)
    group.add_argument("--budget-seconds", type=float, default=2.0)
    group.add_argument("--budget-methods", default="hill-climb,ges")
    group.add_argument("--budget-label", default="current",
                       help="the name these figures are kept under (before, after, ...)")


def wide_csv(columns: int, rows: int, seed: int = 20261204) -> Path:
    """``columns`` fair binary columns of ``rows`` rows, cached as CSV."""
    DATA.mkdir(parents=True, exist_ok=True)
    path = DATA / f"wide-{columns}x{rows}-{seed}.csv"
    if not path.exists():
        bits = np.random.default_rng(seed).integers(0, 2, size=(rows, columns))
        letters = np.array(["a", "b"])[bits]
        header = ",".join(f"v{i:03d}" for i in range(columns))
        body = "\n".join(",".join(row) for row in letters.tolist())
        path.write_text(header + "\n" + body + "\n", encoding="utf-8")
    return path


def measure(csv: Path, method: str, seconds: float) -> dict[str, Any]:
    """One learn of ``method`` under ``max_seconds = seconds``: its figures."""
    from runner.pipeline import learn, prepare

    spec = csv.parent / f"{csv.stem}-{method}.yaml"  # beside the data: no outside path
    spec.write_text(
        f"name: wide\ndataset: {{path: {csv.name}}}\nscore: {{name: bic}}\n"
        f"search: {{method: {method}, seed: 0, budget: {{max_seconds: {seconds}}}}}\n",
        encoding="utf-8")
    prepared = prepare(spec)
    start = time.perf_counter()
    record, _ = learn(prepared)
    wall = time.perf_counter() - start
    search = record["search"]
    n = len(record["data"]["columns"])
    return {"method": method, "max_seconds": seconds, "wall_s": wall,
            "search_s": record["seconds"]["search"], "ratio": wall / seconds,
            "bound_s": max(1.1 * seconds, seconds + 1.0),
            "stop_reason": search["stop_reason"], "steps": search["steps"],
            "evaluations": search["evaluations"], "pair_families": n * (n - 1),
            "edges": len(record["edges"])}


def run(args: argparse.Namespace) -> int:
    """Run the budget case; keep its figures under ``--budget-label``; write the tables."""
    warnings.filterwarnings("ignore")
    csv = wide_csv(args.budget_columns, args.budget_rows)
    rows = []
    for method in args.budget_methods.split(","):
        row = measure(csv, method, args.budget_seconds)
        print(json.dumps(row), flush=True)
        rows.append(row)
    out = Path(args.out)
    path = out / "RESULTS-budget.json"
    kept = json.loads(path.read_text()) if path.exists() else {"labels": {}}
    kept["labels"][args.budget_label] = {
        "machine": machine_line(), "columns": args.budget_columns, "rows": args.budget_rows,
        "cases": rows}
    path.write_text(json.dumps(kept, indent=2, sort_keys=True) + "\n")
    lines = ["# Budget keeping on wide data", "",
             "Independent fair binary columns, BIC, `search.budget.max_seconds` set; wall = "
             "seconds of `pipeline.learn` (loading excluded); ratio = wall / max_seconds; "
             "bound = max(1.1 x max_seconds, max_seconds + 1).", "",
             "| label | columns x rows | method | max_seconds | wall (s) | ratio | bound (s) "
             "| stop reason | evaluations | n(n-1) |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for label, block in sorted(kept["labels"].items()):
        for r in block["cases"]:
            lines.append(
                f"| {label} | {block['columns']} x {block['rows']} | {r['method']} | "
                f"{r['max_seconds']:g} | {r['wall_s']:.2f} | {r['ratio']:.2f} | "
                f"{r['bound_s']:.1f} | {r['stop_reason']} | {r['evaluations']:,} | "
                f"{r['pair_families']:,} |")
    machines = sorted({b["machine"] for b in kept["labels"].values()})
    lines += ["", "Machine: " + "; ".join(machines) + "."]
    (out / "RESULTS-budget.md").write_text("\n".join(lines) + "\n")
    return 0
