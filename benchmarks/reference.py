"""Run the reference (pgmpy's HillClimbSearch with its BIC) once, in its own process.

Usage: ``python -m benchmarks.reference CSV [PARENT_CAP]``; prints ``{"seconds", "score"}``.
pgmpy's search breaks ties in an order that follows Python's string hashing, so the
suite runs each repeat under another ``PYTHONHASHSEED`` and reports medians.
"""

from __future__ import annotations

import json
import sys
import time
import warnings

import pandas as pd


def main(argv: list[str]) -> int:
    warnings.filterwarnings("ignore")
    from pgmpy.estimators import BIC, HillClimbSearch

    frame = pd.read_csv(argv[0], dtype=str, keep_default_na=False)
    cap = int(argv[1]) if len(argv) > 1 and argv[1] != "none" else None
    start = time.perf_counter()
    dag = HillClimbSearch(frame).estimate(scoring_method="bic-d", max_indegree=cap,
                                          show_progress=False)
    seconds = time.perf_counter() - start
    print(json.dumps({"seconds": seconds, "score": float(BIC(frame).score(dag))}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
