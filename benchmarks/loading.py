"""Loading a large CSV: the streaming reader against the reader it replaced.

Usage::

    python -m benchmarks.loading [--megabytes 200] [--columns 30] [--readers old,new]
                                 [--repeats 3] [--traced] [--json FILE]

A file of ``--columns`` discrete columns (two to six short states and one longer one
each, seeded) of about ``--megabytes`` MB is written once under a temporary folder. Each
reader loads it in its own child process; the table gives the seconds, the peak resident
memory of that process (``VmHWM``, the high-water mark of its RSS, not traced Python
memory), the CPU seconds (less sensitive to a shared machine's load), the size of the
encoded codes, the target bound (2x the codes + 200 MB) and the
ratios old / new. The old reader is a frozen copy (``benchmarks/legacy_reader.py``).

With ``--traced`` each reader also loads the file once more, untimed, under
``tracemalloc``: the traced peak is the memory Python and numpy allocated at most at one
time (not pyarrow's own allocations, nor the anonymous maps holding the codes while they
are read; the peak RSS counts everything). The new reader parses quote-free blocks with
pyarrow when it is installed, else with pandas (the same results).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path
from typing import Any

import numpy as np

DATA = Path(tempfile.gettempdir()) / "dagmill-bench-loading"
ROOT = Path(__file__).resolve().parents[1]


def write_csv(megabytes: float, columns: int = 30, seed: int = 1) -> Path:
    """About ``megabytes`` MB of discrete columns, written once (cached by size and seed)."""
    DATA.mkdir(parents=True, exist_ok=True)
    path = DATA / f"discrete-{columns}x{megabytes:g}MB-{seed}.csv"
    if path.exists():
        return path
    rng = np.random.default_rng(seed)
    vocab = [np.array([f"v{k}".encode() for k in range(2 + j % 5)] + [b"level-%d" % j])
             for j in range(columns)]
    target = int(megabytes * 1e6)
    partial = path.with_suffix(".partial")
    with partial.open("wb") as handle:
        written = handle.write(",".join(f"c{j:02d}" for j in range(columns)).encode() + b"\n")
        while written < target:
            parts = [vocab[j][rng.integers(0, len(vocab[j]), 50_000)] for j in range(columns)]
            blob = b"\n".join(b",".join(row) for row in zip(*parts, strict=True)) + b"\n"
            written += handle.write(blob)
    partial.replace(path)
    return path


def _child(reader: str, path: str, traced: bool = False) -> None:
    """Load ``path`` with one reader in this (fresh) process; print seconds, peak RSS and
    the codes' size as JSON (with ``traced``, under tracemalloc, and its peak too)."""
    sys.path.insert(0, str(ROOT))
    if reader == "old":
        from benchmarks.legacy_reader import load_dataset
    else:
        from runner.data import load_dataset
    if traced:
        tracemalloc.start()
    start, cpu = time.perf_counter(), time.process_time()
    dataset = load_dataset(path)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    traced_mb = tracemalloc.get_traced_memory()[1] / 1e6 if traced else None
    status = Path("/proc/self/status").read_text()
    peak_kib = int(next(line.split()[1] for line in status.splitlines()
                        if line.startswith("VmHWM:")))
    print(json.dumps({"reader": reader, "seconds": seconds, "cpu_seconds": cpu,
                      "peak_mb": peak_kib * 1024 / 1e6, "codes_mb": dataset.codes.nbytes / 1e6,
                      "rows": dataset.rows, "traced_mb": traced_mb,
                      "sha256": dataset.sha256}))


def measure(reader: str, path: Path, traced: bool = False) -> dict[str, Any]:
    out = subprocess.run([sys.executable, "-m", "benchmarks.loading", "--child", reader,
                          str(path), *(["--traced"] if traced else [])], cwd=ROOT,
                         capture_output=True, text=True, check=True)
    return dict(json.loads(out.stdout.strip().splitlines()[-1]))


def run(megabytes: float, columns: int, readers: list[str], repeats: int = 1,
        traced: bool = False) -> dict[str, Any]:
    """Each reader ``repeats`` times, alternating (a shared machine's load then falls on
    both alike): median seconds, highest peak RSS; with ``traced``, one more untimed
    load per reader under tracemalloc for its traced peak."""
    path = write_csv(megabytes, columns)
    size_mb = path.stat().st_size / 1e6
    runs: dict[str, list[dict[str, Any]]] = {r: [] for r in readers}
    for _ in range(repeats):
        for reader in readers:
            runs[reader].append(measure(reader, path))
    results = {}
    for reader, rows in runs.items():
        seconds = sorted(r["seconds"] for r in rows)
        results[reader] = {**rows[0], "seconds": statistics.median(seconds),
                           "cpu_seconds": statistics.median(r["cpu_seconds"] for r in rows),
                           "all_seconds": [r["seconds"] for r in rows],
                           "peak_mb": max(r["peak_mb"] for r in rows),
                           "traced_mb": (measure(reader, path, traced=True)["traced_mb"]
                                         if traced else None)}
    report: dict[str, Any] = {"file_mb": size_mb, "columns": columns, "repeats": repeats,
                              "readers": results}
    for row in results.values():
        row["bound_mb"] = 2 * row["codes_mb"] + 200
        row["within_bound"] = row["peak_mb"] <= row["bound_mb"]
    if "old" in results and "new" in results:
        old, new = results["old"], results["new"]
        report["speedup_old_over_new"] = old["seconds"] / new["seconds"]
        report["cpu_ratio_old_over_new"] = old["cpu_seconds"] / new["cpu_seconds"]
        report["peak_ratio_old_over_new"] = old["peak_mb"] / new["peak_mb"]
        report["same_sha256"] = old["sha256"] == new["sha256"]
    return report


def table(report: dict[str, Any]) -> str:
    lines = [f"Loading {report['file_mb']:.0f} MB of {report['columns']} discrete columns "
             f"(median of {report['repeats']} alternating runs):", "",
             "| reader | seconds | CPU seconds | peak RSS (MB) | traced peak (MB) | codes (MB) "
             "| bound 2x codes + 200 (MB) |", "| --- | --- | --- | --- | --- | --- | --- |"]
    for name, r in report["readers"].items():
        traced = "-" if r.get("traced_mb") is None else f"{r['traced_mb']:.0f}"
        lines.append(f"| {name} | {r['seconds']:.2f} | {r['cpu_seconds']:.2f} | "
                     f"{r['peak_mb']:.0f} | {traced} | "
                     f"{r['codes_mb']:.0f} | {r['bound_mb']:.0f} |")
    if "speedup_old_over_new" in report:
        lines += ["", f"Speed-up (old / new seconds): {report['speedup_old_over_new']:.2f}x "
                  f"(CPU seconds: {report['cpu_ratio_old_over_new']:.2f}x); "
                  f"peak RSS old / new: {report['peak_ratio_old_over_new']:.2f}x."]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.loading",
                                     description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--megabytes", type=float, default=200.0)
    parser.add_argument("--columns", type=int, default=30)
    parser.add_argument("--readers", default="old,new")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--traced", action="store_true",
                        help="also load once per reader under tracemalloc (untimed)")
    parser.add_argument("--json", help="also write the figures to this file")
    parser.add_argument("--child", nargs=2, metavar=("READER", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        _child(*args.child, traced=args.traced)
        return 0
    report = run(args.megabytes, args.columns, args.readers.split(","), args.repeats,
                 args.traced)
    print(table(report))
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=2, sort_keys=True) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
