"""The same searches on two source trees of dagmill, timed in one run: a change's speed
cost as a ratio, measured rather than asserted.

Usage::

    python -m benchmarks.trees OLD_ROOT NEW_ROOT [--repeats 5] [--rows 10000]

OLD_ROOT and NEW_ROOT are checkouts (``git worktree add /tmp/old <commit>``, say). Every
(tree, search, score) timing runs in a fresh process with ``PYTHONPATH`` set to its
tree, so no table or cache is carried over; the trees alternate within each repeat so
that a change in the machine's load falls on both. Data: ALARM sampled by pgmpy (seed
13, cached as CSV by :func:`benchmarks.run.sample`), all columns, no cap. Reported: the
median wall time and process time of each side and their ratio new / old, with both
final scores.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys

CHILD = r'''
import json, sys, time
import numpy as np
from benchmarks.run import sample, encode
from runner.constraints import build_constraints
from runner.scores import build_scorer
from runner.search import Budget, MoveEngine, hill_climb
from runner.search.ges import greedy_equivalence_search
method, score, rows = sys.argv[1], sys.argv[2], int(sys.argv[3])
data = encode(sample("alarm", rows, 13))
constraints = build_constraints(data.names)
rng = np.random.default_rng(np.random.SeedSequence(0))
wall, cpu = time.perf_counter(), time.process_time()
scorer = build_scorer(score, data.codes, data.arities)
if method == "hill-climb":
    outcome = hill_climb(MoveEngine(scorer, constraints), Budget(), rng=rng)
else:
    outcome = greedy_equivalence_search(scorer, constraints, Budget(), rng=rng)
print(json.dumps([time.perf_counter() - wall, time.process_time() - cpu, outcome.score]))
'''

CASES = [(method, score) for method in ("hill-climb", "ges") for score in ("bic", "bdeu")]


def time_case(root: str, method: str, score: str, rows: int) -> list[float]:
    """Wall seconds, process seconds and final score of one search in a fresh process."""
    env = {**os.environ, "PYTHONPATH": root}
    done = subprocess.run([sys.executable, "-c", CHILD, method, score, str(rows)], cwd=root,
                          env=env, capture_output=True, text=True, check=True)
    return [float(v) for v in json.loads(done.stdout)]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.trees", description=__doc__)
    parser.add_argument("old")
    parser.add_argument("new")
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--rows", type=int, default=10_000)
    args = parser.parse_args(argv)
    results: dict[tuple[str, str, str], list[list[float]]] = {}
    for repeat in range(args.repeats):
        for method, score in CASES:
            roots = (args.old, args.new) if repeat % 2 == 0 else (args.new, args.old)
            for root in roots:
                results.setdefault((root, method, score), []).append(
                    time_case(root, method, score, args.rows))
    print(f"ALARM {args.rows:,} rows, median of {args.repeats}; ratio = new / old")
    print("| search | score | old wall (s) | new wall (s) | wall ratio | cpu ratio "
          "| old score | new score |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- |")
    for method, score in CASES:
        old, new = results[(args.old, method, score)], results[(args.new, method, score)]
        ow, nw = (statistics.median(r[0] for r in side) for side in (old, new))
        oc, nc = (statistics.median(r[1] for r in side) for side in (old, new))
        print(f"| {method} | {score} | {ow:.3f} | {nw:.3f} | {nw / ow:.3f} | {nc / oc:.3f} "
              f"| {old[0][2]!r} | {new[0][2]!r} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
