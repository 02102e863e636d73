"""Speed of learning under the Gaussian scores: the kiln-gauss demo and a larger
synthetic linear-Gaussian network, timed through ``runner.pipeline.prepare`` + ``learn``.

Usage::

    python benchmarks/gaussian_speed.py --trees OLD NEW [--repeats 3]

Each tree (a checkout with a ``runner`` package) is timed in its own subprocess with
``PYTHONPATH`` set to it; the repeats alternate between the trees, and the table gives the
median per case and the ratio NEW / OLD: of the first learn in a fresh process, of the
fastest of four more learns in it ("warm"), and of the sufficient statistics alone. The
synthetic data (20 variables x 50,000 rows of a random linear-Gaussian network, fixed
seed) are written once to a temporary folder.
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

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(tempfile.gettempdir()) / "dagmill-bench-gauss"


def synthetic(n_vars: int = 20, rows: int = 50_000, seed: int = 12) -> Path:
    """A random linear-Gaussian network (each variable has up to 3 earlier parents,
    coefficients in +-[0.3, 1.2], noise sd in [0.5, 1.5], offsets and scales varied)."""
    path = DATA / f"synthetic-{n_vars}x{rows}.csv"
    if path.exists():
        return path
    DATA.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    x = np.zeros((n_vars, rows))
    for v in range(n_vars):
        parents = (rng.choice(v, size=min(v, int(rng.integers(0, 4))), replace=False).tolist()
                   if v else [])
        mean = rng.normal(0, 5)
        for p in parents:
            mean = mean + rng.choice([-1, 1]) * rng.uniform(0.3, 1.2) * x[p]
        x[v] = mean + rng.normal(0, rng.uniform(0.5, 1.5), rows)
    names = [f"v{i:02d}" for i in range(n_vars)]
    with path.open("w", encoding="utf-8") as out:
        out.write(",".join(names) + "\n")
        for row in x.T:
            out.write(",".join(f"{v:.5f}" for v in row) + "\n")
    return path


def specs() -> dict[str, Path]:
    DATA.mkdir(parents=True, exist_ok=True)
    kiln = (ROOT / "specs" / "kiln-gauss.yaml").read_text(encoding="utf-8")
    kiln = kiln.replace("../datasets/", f"{ROOT / 'datasets'}/")
    out = {}
    (DATA / "kiln.yaml").write_text(kiln, encoding="utf-8")
    out["kiln-gauss"] = DATA / "kiln.yaml"
    (DATA / "kiln-ev.yaml").write_text(kiln + "evaluation: {holdout: 0.25, seed: 3}\n",
                                       encoding="utf-8")
    out["kiln-gauss+holdout"] = DATA / "kiln-ev.yaml"
    data = synthetic()
    for score in ("gaussian-bic", "bge"):
        path = DATA / f"synthetic-{score}.yaml"
        path.write_text(f"name: synthetic-{score}\ndataset: {{path: {data}}}\n"
                        f"score: {{name: {score}}}\nsearch: {{method: hill-climb, seed: 1}}\n"
                        "evaluation: {holdout: 0.2, seed: 1}\n", encoding="utf-8")
        out[f"20x50k {score}"] = path
    return out


def time_once(spec: Path) -> dict[str, Any]:
    """Learning ``spec`` in this process (the tree on sys.path), in seconds: the first
    learn after start-up, the fastest of four more (each on a freshly prepared spec, so
    nothing computed is reused), and the sufficient statistics of all rows alone."""
    import runner
    from runner.pipeline import learn, prepare
    from runner.scores.gaussian import sufficient_statistics

    times = []
    for _ in range(5):
        prepared = prepare(spec)
        started = time.perf_counter()
        record, _ = learn(prepared)
        times.append(time.perf_counter() - started)
    values = prepared.dataset.values
    assert values is not None
    started = time.perf_counter()
    sufficient_statistics(values.copy())
    stats = time.perf_counter() - started
    return {"learn": times[0], "learn warm": min(times[1:]), "statistics": stats,
            "score": record["score"]["value"], "edges": len(record["edges"]),
            "runner": str(Path(runner.__file__).resolve())}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--trees", nargs=2, metavar=("OLD", "NEW"))
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--one", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        print(json.dumps(time_once(Path(args.one))))
        return
    cases = specs()
    times: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for _ in range(args.repeats):
        for case, spec in cases.items():
            for tree in args.trees:
                # run as a script (not -m), so that the current folder does not shadow
                # PYTHONPATH: the runner package imported is the tree's
                env = {**os.environ, "PYTHONPATH": tree}
                out = subprocess.run([sys.executable, str(Path(__file__).resolve()),
                                      "--one", str(spec)], env=env, cwd=tree,
                                     capture_output=True, text=True, check=True)
                result = json.loads(out.stdout)
                assert result.pop("runner").startswith(str(Path(tree).resolve())), tree
                times.setdefault((case, tree), []).append(result)
    old, new = args.trees
    print(f"{'case':24} {'part':11} {'old s':>9} {'new s':>9} {'new/old':>8}   score old / new")
    for case in cases:
        for part in ("learn", "learn warm", "statistics"):
            a = statistics.median(t[part] for t in times[(case, old)])
            b = statistics.median(t[part] for t in times[(case, new)])
            scores = (f"{times[(case, old)][0]['score']!r} / {times[(case, new)][0]['score']!r}"
                      if part == "learn" else "")
            print(f"{case:24} {part:11} {a:9.3f} {b:9.3f} {b / a:8.2f}   {scores}")


if __name__ == "__main__":
    main()
