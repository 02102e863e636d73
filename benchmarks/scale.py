"""Scale: wide networks with and without candidate parents, and a million rows.

Usage::

    python -m benchmarks --scale [--scale-cases alarm-10k,pigs-5k,...] [--repeats 1]

Every case runs in its own child process, so its peak resident memory (``VmHWM``, the
high-water mark of the process's RSS) is its own; the traced Python peak
(``tracemalloc``) is reported beside it for the cases small enough to trace (tracing slows
allocation, so the timed run is a second, untraced one). Data are sampled once per case
with pgmpy's sampler (seed 20261201) and cached as CSV under a temporary folder; the
networks are the example networks bundled with pgmpy 1.1.2 (ALARM: Beinlich et al. 1989;
PIGS; LINK: Jensen & Kong 1999; MUNIN: Andreassen et al. 1989; HAILFINDER: Abramson et
al. 1996; ANDES: Conati et al. 1997). Our learning goes through the public API
(:func:`runner.learn`) with a spec written here: BIC, greedy hill climbing seeded 0,
the parent cap of the case, every column's states declared by the data (no spelling is
missing), and ``search.candidates`` where the case says so. The "whole run" case runs
the ``dagmill run`` command itself on a spec file.

The table gives the search seconds and the whole learn's seconds (medians over
``--repeats``), the BIC, the peak RSS, and the growth exponents of the search time in the
number of variables (with and without candidates) and in rows.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
CACHE = Path(tempfile.gettempdir()) / "dagmill-bench-data"


@dataclass(frozen=True)
class ScaleCase:
    name: str
    network: str
    rows: int
    parent_cap: int | None = None
    candidates: int | None = None  # k of a mutual-information screen; None: unrestricted
    command: bool = False  # the whole `dagmill run` command on a spec file
    trace: bool = False  # also report the traced Python peak (a second, traced run)


SCALE_CASES = {c.name: c for c in (
    ScaleCase("alarm-10k", "alarm", 10_000, trace=True),
    ScaleCase("alarm-100k", "alarm", 100_000),
    ScaleCase("alarm-1m-run", "alarm", 1_000_000, command=True),
    ScaleCase("alarm-10k-cand", "alarm", 10_000, candidates=10, trace=True),
    ScaleCase("hailfinder-10k", "hailfinder", 10_000),
    ScaleCase("andes-10k-cap4", "andes", 10_000, parent_cap=4),
    ScaleCase("pigs-5k-cap4", "pigs", 5_000, parent_cap=4),
    ScaleCase("pigs-5k-cap4-cand", "pigs", 5_000, parent_cap=4, candidates=10, trace=True),
    ScaleCase("andes-10k-cap4-cand", "andes", 10_000, parent_cap=4, candidates=10),
    ScaleCase("link-10k-cap4-cand", "link", 10_000, parent_cap=4, candidates=10, trace=True),
    ScaleCase("munin-10k-cap4-cand", "munin", 10_000, parent_cap=4, candidates=10,
              trace=True),
)}
DEFAULT_SCALE_CASES = ",".join(SCALE_CASES)
#: Variables of the networks (pgmpy 1.1.2's example models).
VARIABLES = {"asia": 8, "alarm": 37, "hailfinder": 56, "andes": 223, "pigs": 441,
             "link": 724, "munin": 1041}


def sample_path(network: str, rows: int, seed: int = 20261201) -> Path:
    """Rows sampled from a bundled pgmpy example network, written once as CSV."""
    CACHE.mkdir(parents=True, exist_ok=True)
    path = CACHE / f"{network}-{rows}-{seed}.csv"
    if not path.exists():
        import warnings

        warnings.filterwarnings("ignore")
        from pgmpy.utils import get_example_model

        model = get_example_model(network)
        frame = model.simulate(rows, seed=seed, show_progress=False)
        partial = path.with_suffix(".partial")
        frame[sorted(frame.columns)].astype(str).to_csv(partial, index=False)
        partial.replace(path)
    return path


def spec_for(case: ScaleCase, path: Path) -> dict[str, Any]:
    search: dict[str, Any] = {"method": "hill-climb", "seed": 0,
                              "budget": {"max_steps": None, "max_evaluations": None,
                                         "max_seconds": None}}
    if case.candidates is not None:
        search["candidates"] = {"method": "mutual-information", "k": case.candidates}
    spec: dict[str, Any] = {"name": f"scale-{case.name}",
                            "dataset": {"path": str(path), "missing_values": [],
                                        "max_states": 64, "allow_outside": True},
                            "score": {"name": "bic"}, "search": search}
    if case.parent_cap is not None:
        spec["parent_cap"] = case.parent_cap
    return spec


def _peak_rss_mb() -> float:
    status = Path("/proc/self/status").read_text()
    kib = int(next(line.split()[1] for line in status.splitlines()
                   if line.startswith("VmHWM:")))
    return kib * 1024 / 1e6


def _child(name: str, repeat: int) -> None:
    """One case in this fresh process: print its measurements as JSON."""
    sys.path.insert(0, str(ROOT))
    case = SCALE_CASES[name]
    path = sample_path(case.network, case.rows)
    spec = spec_for(case, path)
    if case.command:
        import yaml

        folder = Path(tempfile.mkdtemp(prefix="dagmill-scale-"))
        spec_file = folder / "specs" / "scale.yaml"
        spec_file.parent.mkdir()
        spec_file.write_text(yaml.safe_dump(spec))
        start = time.perf_counter()
        done = subprocess.run([sys.executable, "-m", "runner", "run", str(spec_file),
                               "--results", str(folder / "results")],
                              capture_output=True, text=True)
        seconds = time.perf_counter() - start
        import resource

        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024 / 1e6
        runs = sorted((folder / "results").rglob("run.json"))
        record = json.loads(runs[-1].read_text()) if runs else {}
        print(json.dumps({"case": name, "exit": done.returncode,
                          "stderr": done.stderr[-400:] if done.returncode else "",
                          "whole_s": seconds, "search_s": record.get("seconds", {}).get(
                              "search"), "score": record.get("score", {}).get("value"),
                          "peak_rss_mb": peak, "traced_mb": None,
                          "evaluations": record.get("search", {}).get("evaluations")}))
        return
    import runner

    if repeat < 0:  # the traced run alone, in a process of its own (tracing holds memory)
        import tracemalloc

        tracemalloc.start()
        runner.learn(spec)
        print(json.dumps({"case": name, "traced_mb": tracemalloc.get_traced_memory()[1] / 1e6}))
        tracemalloc.stop()
        return
    traced = None
    start = time.perf_counter()
    net = runner.learn(spec)
    whole = time.perf_counter() - start
    record = net.record
    print(json.dumps({"case": name, "exit": 0, "whole_s": whole,
                      "search_s": record["seconds"]["search"],
                      "score": record["score"]["value"], "peak_rss_mb": _peak_rss_mb(),
                      "traced_mb": traced, "evaluations": record["search"]["evaluations"],
                      "edges": len(record["edges"])}))


def measure(name: str, repeats: int) -> dict[str, Any]:
    results = []
    for repeat in range(repeats):
        out = subprocess.run([sys.executable, "-m", "benchmarks.scale", "--child", name,
                              str(repeat)], cwd=ROOT, capture_output=True, text=True)
        if out.returncode != 0:
            return {"case": name, "exit": out.returncode, "error": out.stderr[-600:]}
        results.append(json.loads(out.stdout.strip().splitlines()[-1]))
    row = dict(results[0])
    for key in ("whole_s", "search_s"):
        values = [r[key] for r in results if r.get(key) is not None]
        row[key] = statistics.median(values) if values else None
    row["peak_rss_mb"] = max(r["peak_rss_mb"] for r in results)
    if SCALE_CASES[name].trace:
        out = subprocess.run([sys.executable, "-m", "benchmarks.scale", "--child", name, "-1"],
                             cwd=ROOT, capture_output=True, text=True)
        if out.returncode == 0:
            row["traced_mb"] = json.loads(out.stdout.strip().splitlines()[-1])["traced_mb"]
    return row


def exponent(sizes: list[float], seconds: list[float]) -> float:
    import numpy as np

    return float(np.polyfit(np.log(sizes), np.log(seconds), 1)[0])


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--scale-cases", default=DEFAULT_SCALE_CASES,
                        help="comma-separated cases of --scale")


def run(args: argparse.Namespace) -> int:
    rows = []
    for name in args.scale_cases.split(","):
        row = measure(name, args.repeats)
        rows.append(row)
        print(json.dumps(row), flush=True)
    by = {r["case"]: r for r in rows if r.get("exit") == 0}
    scaling: dict[str, float] = {}

    def fit(label: str, names: list[str], size: Any) -> None:
        if all(n in by and by[n].get("search_s") for n in names):
            scaling[label] = exponent([size(SCALE_CASES[n]) for n in names],
                                      [by[n]["search_s"] for n in names])

    fit("variables, unrestricted (ALARM, HAILFINDER, ANDES 10k; cap 4 on ANDES)",
        ["alarm-10k", "hailfinder-10k", "andes-10k-cap4"],
        lambda c: VARIABLES[c.network])
    fit("variables, candidates k=10 (ALARM, ANDES, LINK, MUNIN 10k; cap 4 on the wide)",
        ["alarm-10k-cand", "andes-10k-cap4-cand", "link-10k-cap4-cand",
         "munin-10k-cap4-cand"], lambda c: VARIABLES[c.network])
    fit("rows (ALARM 10k, 100k)", ["alarm-10k", "alarm-100k"], lambda c: c.rows)
    out = Path(args.out)
    (out / "RESULTS-scale.json").write_text(json.dumps(
        {"cases": rows, "scaling": scaling, "repeats": args.repeats}, indent=2,
        sort_keys=True) + "\n")
    lines = ["# Scale results", "",
             f"Medians of {args.repeats} repeat(s), each case in its own process; peak RSS "
             "is the process's VmHWM (for the whole-run case: the `dagmill run` child's "
             "maxrss); traced = tracemalloc peak of a separate traced run in its own process.", "",
             "| case | variables | rows | search (s) | whole (s) | BIC | evaluations | "
             "peak RSS MB | traced MB |", "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]

    def f(v: Any, fmt: str) -> str:
        return "-" if v is None else format(v, fmt)

    for r in rows:
        c = SCALE_CASES[r["case"]]
        if r.get("exit") != 0:
            lines.append(f"| {c.name} | {VARIABLES[c.network]} | {c.rows:,} | failed: "
                         f"{(r.get('error') or r.get('stderr') or '').strip().splitlines()[-1:]} "
                         "| | | | | |")
            continue
        lines.append(f"| {c.name} | {VARIABLES[c.network]} | {c.rows:,} | "
                     f"{f(r.get('search_s'), '.2f')} | {f(r.get('whole_s'), '.2f')} | "
                     f"{f(r.get('score'), '.1f')} | {f(r.get('evaluations'), ',')} | "
                     f"{r['peak_rss_mb']:.0f} | {f(r.get('traced_mb'), '.0f')} |")
    if "pigs-5k-cap4" in by and "pigs-5k-cap4-cand" in by:
        full, cand = by["pigs-5k-cap4"], by["pigs-5k-cap4-cand"]
        lines += ["", f"PIGS 5k: candidates k=10 BIC {cand['score']:.1f} against "
                  f"{full['score']:.1f} unrestricted (gap "
                  f"{100 * (cand['score'] - full['score']) / abs(full['score']):+.3f}%); "
                  f"search {full['search_s'] / cand['search_s']:.1f}x faster."]
    if scaling:
        lines += ["", "Growth exponents of the search time (slope of log time on log size):",
                  ""] + [f"- {k}: {v:.2f}" for k, v in scaling.items()]
    (out / "RESULTS-scale.md").write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    if len(sys.argv) >= 3 and sys.argv[1] == "--child":
        _child(sys.argv[2], int(sys.argv[3]) if len(sys.argv) > 3 else 0)
        raise SystemExit(0)
    raise SystemExit("run through: python -m benchmarks --scale")
