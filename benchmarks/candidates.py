"""Candidate parents on wide data: the search with ``search.candidates`` against the
unrestricted search, on rows sampled from a wide bundled network.

Usage::

    python -m benchmarks.candidates [--network pigs] [--rows 5000] [--cap 4]
                                    [--out benchmarks]

Each setting is learned once through the Python API (``runner.api.learn``: the same
pipeline as ``dagmill run``), greedy hill climbing under BIC, no budget. The table
reports the search seconds of the record (the screen and its rounds included), the
seconds of the first screen alone, the family scores computed, the BIC and its
relative gap to the unrestricted search (positive: above it). Writes
``RESULTS-candidates.md`` and ``RESULTS-candidates.json`` to ``--out``.
"""

from __future__ import annotations

import argparse
import json
import platform
import time
from pathlib import Path
from typing import Any

from benchmarks.run import encode, sample
from runner.api import learn
from runner.search.candidates import pair_statistics

SETTINGS: tuple[tuple[str, dict[str, Any] | None], ...] = (
    ("unrestricted", None),
    ("mutual-information k=10", {"method": "mutual-information", "k": 10}),
    ("mutual-information k=10 rounds=0", {"method": "mutual-information", "k": 10,
                                          "rounds": 0}),
)


def run(network: str, rows: int, cap: int) -> list[dict[str, Any]]:
    frame = sample(network, rows)
    frame = frame[sorted(frame.columns)]
    data = encode(frame)
    started = time.perf_counter()
    pair_statistics(data.codes, data.arities)
    screen_seconds = time.perf_counter() - started
    out = []
    for label, screen in SETTINGS:
        search: dict[str, Any] = {"method": "hill-climb",
                                  "budget": {"max_steps": None, "max_seconds": None}}
        if screen is not None:
            search["candidates"] = screen
        spec = {"name": "bench", "dataset": {"path": "bench.csv"}, "parent_cap": cap,
                "score": {"name": "bic"}, "search": search}
        record = learn(spec, frame).record
        out.append({"setting": label, "search_seconds": record["seconds"]["search"],
                    "screen_seconds": None if screen is None else round(screen_seconds, 3),
                    "evaluations": record["search"]["evaluations"],
                    "steps": record["search"]["steps"],
                    "rounds": (record["search"].get("candidates") or {}).get("rounds"),
                    "bic": record["score"]["value"], "edges": len(record["edges"])})
    base = out[0]["bic"]
    for row in out:
        row["gap"] = (row["bic"] - base) / abs(base)
    return out


def table(rows: list[dict[str, Any]], network: str, n_rows: int, cap: int) -> str:
    lines = [f"# Candidate parents: {network}, {n_rows:,} rows, parent cap {cap}, "
             "hill-climb, BIC", "",
             f"Machine: {platform.platform()}, {platform.processor() or 'cpu'}", "",
             "| setting | search s | screen s | family scores | steps | rounds | BIC | "
             "gap to unrestricted |", "| --- | --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        screen = "-" if r["screen_seconds"] is None else f"{r['screen_seconds']:.2f}"
        lines.append(
            f"| {r['setting']} | {r['search_seconds']:.1f} | {screen} | "
            f"{r['evaluations']:,} | {r['steps']} | "
            f"{'-' if r['rounds'] is None else r['rounds']} | {r['bic']:,.1f} | "
            f"{100 * r['gap']:+.2f}% |")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.candidates")
    parser.add_argument("--network", default="pigs")
    parser.add_argument("--rows", type=int, default=5000)
    parser.add_argument("--cap", type=int, default=4)
    parser.add_argument("--out", type=Path, default=Path("benchmarks"))
    args = parser.parse_args(argv)
    rows = run(args.network, args.rows, args.cap)
    text = table(rows, args.network, args.rows, args.cap)
    args.out.mkdir(parents=True, exist_ok=True)
    (args.out / "RESULTS-candidates.md").write_text(text)
    (args.out / "RESULTS-candidates.json").write_text(json.dumps(rows, indent=2) + "\n")
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
