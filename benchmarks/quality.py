"""Search quality: how good a graph each search method finds, and how close to the truth.

Usage::

    python -m benchmarks --quality [--networks asia,alarm,hailfinder,andes]
        [--sample-seeds 13,14,15] [--search-seeds 0,1,2,3,4] [--reference-timeout 600]
        [--out benchmarks]

For each network (pgmpy's bundled ASIA, ALARM, HAILFINDER and ANDES), 10,000 rows are
sampled under each sample seed (cached as CSV, see :func:`benchmarks.run.sample`). On
each sample, with BIC and a parent cap of 4 for every network, every method runs once
per search seed, seeded as ``run`` seeds it
(``numpy.random.default_rng(numpy.random.SeedSequence(seed))``), each from a fresh
scorer (empty cache): greedy hill climbing, tabu search, greedy hill climbing with 3
perturbed restarts, and greedy equivalence search (GES; skipped, with '-' cells, while
``runner.search.ges`` cannot be imported). Alongside: the generating network's own BIC
on the sample (our scorer, cross-checked against pgmpy's ``BIC``), and pgmpy's
``HillClimbSearch`` (``bic-d``, ``max_indegree=4``) once per sample in its own process
under ``PYTHONHASHSEED=0``, given ``--reference-timeout`` seconds.

Reported per sample and method: median, min and max BIC over the search seeds, the
median time, the median structural Hamming distance between the learned graph's CPDAG
and the generating network's CPDAG, and the targets of the quality issue with whether
each is met. Results go to ``RESULTS-quality.md`` and ``RESULTS-quality.json``.

Run as ``python -m benchmarks.quality CSV CAP``, this module is the reference's child
process: it prints ``{"seconds", "score", "edges"}`` of one pgmpy hill climbing.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import statistics
import subprocess
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from itertools import pairwise
from pathlib import Path
from typing import Any

import numpy as np

from benchmarks.run import encode, machine_line, sample, sample_path
from runner.constraints import Constraints, build_constraints
from runner.graph import (
    Cpdag,
    cpdag,
    cpdag_shd,
    edges_from_parents,
    is_acyclic,
    parents_from_edges,
)
from runner.scores import build_scorer
from runner.search import Budget, MoveEngine, SearchOutcome, local_search, with_restarts

ROWS = 10_000
PARENT_CAP = 4
RESTARTS = 3
NETWORKS = ("asia", "alarm", "hailfinder", "andes")
SAMPLE_SEEDS = (13, 14, 15)
SEARCH_SEEDS = (0, 1, 2, 3, 4)
REFERENCE_TIMEOUT = 600.0
METHODS = ("greedy", "tabu", "restarts", "ges")
LABELS = {"greedy": "greedy hill climbing", "tabu": "tabu search",
          "restarts": f"greedy + {RESTARTS} restarts", "ges": "GES",
          "truth": "generating network", "reference": "pgmpy HillClimbSearch"}
# Scores of the same graph on the same data are equal to the last bits (math.fsum of the
# same family scores); a comparison allows this share of the score for other graphs.
RELATIVE_TOLERANCE = 1e-10


# -- one sample ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Sample:
    """One encoded sample of a network, with the constraints and the true graph."""

    network: str
    seed: int
    names: tuple[str, ...]
    codes: np.ndarray
    arities: np.ndarray
    constraints: Constraints
    true_parents: list[list[int]]
    truth: Cpdag
    identical: list[list[str]]  # groups of columns equal up to a renaming of states


@dataclass(frozen=True)
class Run:
    """One search: its seed, final BIC, seconds, CPDAG SHD to the truth and CPDAG key."""

    seed: int
    score: float
    seconds: float
    shd: int
    cpdag: str
    stop_reason: str
    valid: bool = True  # a DAG the constraints admit, scoring what the search reported


def true_edges(network: str) -> list[tuple[str, str]]:
    from pgmpy.utils import get_example_model

    return sorted((str(a), str(b)) for a, b in get_example_model(network).edges())


def load_sample(network: str, seed: int) -> Sample:
    data = encode(sample(network, ROWS, seed))
    names = tuple(data.names)
    edges = true_edges(network)
    return Sample(network, seed, names, data.codes, data.arities,
                  build_constraints(names, parent_cap=PARENT_CAP),
                  parents_from_edges(names, edges), cpdag(names, edges),
                  identical_columns(names, data.codes))


def identical_columns(names: Sequence[str], codes: np.ndarray) -> list[list[str]]:
    """Groups of columns equal up to a renaming of their states (deterministic copies in
    the sample). Such columns can swap places in a graph without changing its BIC, so
    graphs of different equivalence classes can then score exactly alike."""
    groups: dict[bytes, list[str]] = {}
    for name, column in zip(names, codes, strict=True):
        _, first, inverse = np.unique(column, return_index=True, return_inverse=True)
        relabelled = np.argsort(np.argsort(first))[inverse]  # states by first appearance
        groups.setdefault(relabelled.astype(np.int64).tobytes(), []).append(name)
    return sorted(sorted(g) for g in groups.values() if len(g) > 1)


def cpdag_key(graph: Cpdag) -> str:
    """sha256 of a CPDAG's canonical text (directed, then undirected edges, each sorted):
    equal classes give equal keys."""
    text = json.dumps([sorted(graph.directed), sorted(graph.undirected)], separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# -- our methods ---------------------------------------------------------------------------

def ges_function() -> Callable[..., SearchOutcome] | None:
    """``greedy_equivalence_search``, or None while its module is not there."""
    try:
        from runner.search.ges import greedy_equivalence_search
    except ImportError:
        return None
    return greedy_equivalence_search


def search(method: str, data: Sample, seed: int) -> SearchOutcome:
    """One search of ``method`` on ``data`` from a fresh scorer, seeded with ``seed``."""
    scorer = build_scorer("bic", data.codes, data.arities)
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    budget = Budget()
    if method == "ges":
        ges = ges_function()
        assert ges is not None
        return ges(scorer, data.constraints, budget, rng=rng, start=None)
    local = local_search("tabu" if method == "tabu" else "hill-climb", rng)
    start: list[list[int]] = [[] for _ in data.names]
    outcome, _ = with_restarts(local, lambda ps: MoveEngine(scorer, data.constraints, ps),
                               start, budget, rng, RESTARTS if method == "restarts" else 0)
    return outcome


def valid(outcome: SearchOutcome, data: Sample) -> bool:
    """The outcome is an admitted DAG whose rescored BIC (fresh scorer) is its score."""
    if not is_acyclic(outcome.parent_sets) or not data.constraints.admits(outcome.parent_sets):
        return False
    rescored = build_scorer("bic", data.codes, data.arities).total(outcome.parent_sets)
    return abs(rescored - outcome.score) <= 1e-9 * abs(rescored)


def timed_run(method: str, data: Sample, seed: int) -> Run:
    start = time.perf_counter()
    outcome = search(method, data, seed)
    seconds = time.perf_counter() - start
    graph = cpdag(data.names, edges_from_parents(data.names, outcome.parent_sets))
    return Run(seed, outcome.score, seconds, cpdag_shd(graph, data.truth), cpdag_key(graph),
               outcome.stop_reason, valid(outcome, data))


def method_runs(method: str, data: Sample, seeds: Sequence[int]) -> list[Run] | None:
    """One run per search seed, or None for GES while it is not available."""
    if method == "ges" and ges_function() is None:
        return None
    return [timed_run(method, data, seed) for seed in seeds]


# -- the generating network and the reference ----------------------------------------------

def truth_scores(data: Sample) -> dict[str, float]:
    """The generating network's BIC by our scorer and by pgmpy's ``BIC`` (same formula:
    log-likelihood minus (ln N)/2 per free parameter), and their relative difference."""
    from pgmpy.estimators import BIC
    from pgmpy.utils import get_example_model

    ours = build_scorer("bic", data.codes, data.arities).total(data.true_parents)
    frame = sample(data.network, ROWS, data.seed)
    pgmpy = float(BIC(frame).score(get_example_model(data.network)))
    return {"ours": ours, "pgmpy": pgmpy, "relative_difference": abs(ours - pgmpy) / abs(pgmpy)}


def reference_run(data: Sample, timeout: float) -> tuple[Run | None, str]:
    """pgmpy's hill climbing on the sample's CSV in a child process under
    PYTHONHASHSEED=0; None and the reason when it fails or does not finish within
    ``timeout`` seconds."""
    env = {**os.environ, "PYTHONHASHSEED": "0"}
    try:
        out = subprocess.run(
            [sys.executable, "-m", "benchmarks.quality",
             str(sample_path(data.network, ROWS, data.seed)), str(PARENT_CAP)],
            env=env, capture_output=True, text=True, check=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None, f"did not finish within {timeout:g} s"
    except subprocess.CalledProcessError as error:
        last = (error.stderr.strip().splitlines() or ["no message"])[-1]
        return None, f"failed: {last}"
    result = json.loads(out.stdout)
    graph = cpdag(data.names, [tuple(e) for e in result["edges"]])
    return Run(0, result["score"], result["seconds"], cpdag_shd(graph, data.truth),
               cpdag_key(graph), "reference"), ""


def reference_child(argv: list[str]) -> int:
    """The reference's process: pgmpy HillClimbSearch with bic-d on CSV ``argv[0]``."""
    warnings.filterwarnings("ignore")
    import pandas as pd
    from pgmpy.estimators import BIC, HillClimbSearch

    frame = pd.read_csv(argv[0], dtype=str, keep_default_na=False)
    start = time.perf_counter()
    dag = HillClimbSearch(frame).estimate(scoring_method="bic-d", max_indegree=int(argv[1]),
                                          show_progress=False)
    seconds = time.perf_counter() - start
    print(json.dumps({"seconds": seconds, "score": float(BIC(frame).score(dag)),
                      "edges": sorted([str(a), str(b)] for a, b in dag.edges())}))
    return 0


# -- summaries -----------------------------------------------------------------------------

def summary(runs: list[Run] | None, truth: float) -> dict[str, Any] | None:
    """Median / min / max BIC, median seconds and SHD, gap to the truth, distinct CPDAGs."""
    if not runs:
        return None
    scores = [r.score for r in runs]
    median = statistics.median(scores)
    return {"median": median, "min": min(scores), "max": max(scores),
            "seconds": statistics.median(r.seconds for r in runs),
            "shd": statistics.median(r.shd for r in runs),
            "gap_to_truth": (median - truth) / abs(truth),
            "cpdags": len({r.cpdag for r in runs}),
            "distinct_scores": distinct_scores(runs),
            "invalid": sum(1 for r in runs if not r.valid),
            "stop_reasons": sorted({r.stop_reason for r in runs})}


def distinct_scores(runs: list[Run]) -> int:
    """Scores that differ by more than rounding (``RELATIVE_TOLERANCE``)."""
    scores = sorted(r.score for r in runs)
    return 1 + sum(1 for a, b in pairwise(scores)
                   if b - a > RELATIVE_TOLERANCE * abs(b))


def at_least(a: float, b: float) -> bool:
    """a >= b up to rounding of scores of the size of b."""
    return a >= b - RELATIVE_TOLERANCE * abs(b)


def tabu_wins(tabu: list[Run], greedy: list[Run]) -> int:
    """Search seeds on which tabu's BIC is at least greedy's."""
    greedy_by_seed = {r.seed: r.score for r in greedy}
    return sum(1 for r in tabu if at_least(r.score, greedy_by_seed[r.seed]))


@dataclass
class SampleResult:
    network: str
    seed: int
    truth: dict[str, float]
    identical: list[list[str]]
    runs: dict[str, list[Run] | None] = field(default_factory=dict)
    reference: Run | None = None
    reference_note: str = ""

    def stats(self, method: str) -> dict[str, Any] | None:
        if method == "reference":
            return summary([self.reference] if self.reference else None, self.truth["ours"])
        return summary(self.runs.get(method), self.truth["ours"])

    def to_json(self) -> dict[str, Any]:
        runs = {m: None if r is None else [asdict(x) for x in r] for m, r in self.runs.items()}
        return {"network": self.network, "sample_seed": self.seed, "truth": self.truth,
                "identical_columns": self.identical,
                "runs": runs, "reference": None if self.reference is None
                else asdict(self.reference), "reference_note": self.reference_note,
                "summary": {m: self.stats(m) for m in (*METHODS, "reference")}}


def run_sample(data: Sample, seeds: Sequence[int], reference_timeout: float | None
               ) -> SampleResult:
    """Every method on one sample; the reference only with a timeout (None skips it)."""
    result = SampleResult(data.network, data.seed, truth_scores(data), data.identical)
    for method in METHODS:
        result.runs[method] = method_runs(method, data, seeds)
        print(json.dumps({"network": data.network, "sample_seed": data.seed, "method": method,
                          "summary": result.stats(method)}), flush=True)
    if reference_timeout is None:
        result.reference_note = "skipped"
    else:
        result.reference, result.reference_note = reference_run(data, reference_timeout)
        print(json.dumps({"network": data.network, "sample_seed": data.seed,
                          "method": "reference", "summary": result.stats("reference"),
                          "note": result.reference_note}), flush=True)
    return result


def run_network(network: str, sample_seeds: Sequence[int], seeds: Sequence[int],
                reference_timeout: float) -> list[SampleResult]:
    """Every sample of a network. Once the reference has run out of time on one sample
    (ANDES, typically), it is not tried on the others."""
    results: list[SampleResult] = []
    timeout: float | None = reference_timeout if reference_timeout > 0 else None
    timed_out = None
    for seed in sample_seeds:
        results.append(run_sample(load_sample(network, seed), seeds, timeout))
        if timed_out is not None:
            results[-1].reference_note = f"skipped (out of time on sample {timed_out})"
        elif results[-1].reference_note.startswith("did not finish"):
            timeout, timed_out = None, seed
    return results


# -- targets -------------------------------------------------------------------------------

@dataclass(frozen=True)
class Target:
    case: str
    target: str
    result: str
    met: bool | None  # None: not measured (a network or GES missing)


def of(results: dict[str, list[SampleResult]], network: str) -> list[SampleResult]:
    return results.get(network, [])


def ges_stats(samples: list[SampleResult]) -> list[dict[str, Any]] | None:
    stats = [s.stats("ges") for s in samples]
    if not samples or any(s is None for s in stats):
        return None
    return stats  # type: ignore[return-value]


def alarm_targets(samples: list[SampleResult]) -> list[Target]:
    stats = ges_stats(samples)
    case = f"ALARM 10k, mean over {len(samples)} sample{'s' if len(samples) != 1 else ''}"
    classes = f"ALARM 10k, GES over seeds {seeds_text(samples)}"
    if stats is None:
        return [Target(case, "GES BIC >= generating network's BIC - 0.1%", "-", None),
                Target(case, "GES CPDAG SHD to the truth <= 8", "-", None),
                Target(classes, "one equivalence class on each sample", "-", None)]
    gap = statistics.fmean(s["gap_to_truth"] for s in stats)
    shd = statistics.fmean(s["shd"] for s in stats)
    counts = [s["cpdags"] for s in stats]
    return [Target(case, "GES BIC >= generating network's BIC - 0.1%",
                   f"mean gap {100 * gap:+.3f}%", gap >= -0.001),
            Target(case, "GES CPDAG SHD to the truth <= 8", f"mean of medians {shd:.1f}",
                   shd <= 8),
            Target(classes, "one equivalence class on each sample",
                   "distinct CPDAGs per sample: " + ", ".join(map(str, counts)),
                   all(c == 1 for c in counts))]


def large_targets(results: dict[str, list[SampleResult]]) -> list[Target]:
    targets = []
    for network in ("hailfinder", "andes"):
        samples = of(results, network)
        stats = ges_stats(samples)
        case = f"{network.upper()} 10k (cap 4)"
        goal = "GES BIC >= greedy's best seed (each sample)"
        if stats is None:
            targets.append(Target(case, goal, "-", None))
        else:
            holds = [at_least(g["median"], s.stats("greedy")["max"])  # type: ignore[index]
                     for g, s in zip(stats, samples, strict=True)]
            gaps = [(g["median"] - s.stats("greedy")["max"]) / abs(g["median"])  # type: ignore[index]
                    for g, s in zip(stats, samples, strict=True)]
            targets.append(Target(case, goal, f"{sum(holds)}/{len(holds)} samples; GES median "
                                  "vs greedy best: " + ", ".join(f"{100 * x:+.3f}%" for x in gaps),
                                  all(holds)))
    stats = ges_stats(of(results, "andes"))
    worst = None if stats is None else max(s["seconds"] for s in stats)
    targets.append(Target("ANDES 10k (cap 4)", "GES within 120 s",
                          "-" if worst is None else f"slowest sample's median {worst:.1f} s",
                          None if worst is None else worst <= 120))
    return targets


def tabu_target(results: dict[str, list[SampleResult]]) -> Target:
    wins = total = 0
    for samples in results.values():
        for s in samples:
            tabu, greedy = s.runs.get("tabu"), s.runs.get("greedy")
            if tabu and greedy:
                wins += tabu_wins(tabu, greedy)
                total += len(tabu)
    return Target("every network, every seed", "tabu >= greedy with the same seed",
                  f"{wins}/{total} runs", wins == total if total else None)


def targets(results: dict[str, list[SampleResult]]) -> list[Target]:
    alarm = of(results, "alarm")
    found = alarm_targets(alarm) if alarm else []
    return [*found, *large_targets(results), tabu_target(results)]


def seeds_text(samples: list[SampleResult]) -> str:
    runs = next((r for s in samples for r in s.runs.values() if r), [])
    return ", ".join(str(r.seed) for r in runs) or "-"


# -- the report ----------------------------------------------------------------------------

def better_than_greedy(result: SampleResult) -> int:
    """Search seeds on which restarts beat greedy with the same seed (strictly)."""
    greedy = {r.seed: r.score for r in result.runs.get("greedy") or []}
    return sum(1 for r in result.runs.get("restarts") or []
               if r.score > greedy[r.seed] + RELATIVE_TOLERANCE * abs(r.score))


def check_text(result: SampleResult, method: str) -> str:
    runs = result.runs.get(method)
    if method == "truth":
        t = result.truth
        same = "; identical columns: " + ", ".join(" = ".join(g) for g in result.identical) \
            if result.identical else ""
        return (f"pgmpy BIC {t['pgmpy']:.2f} (relative difference "
                f"{t['relative_difference']:.1e}){same}")
    if method == "reference":
        return result.reference_note or "one run, PYTHONHASHSEED=0"
    if not runs:
        return "runner.search.ges not available" if method == "ges" else "-"
    parts = [f"distinct CPDAGs: {len({r.cpdag for r in runs})} "
             f"({distinct_scores(runs)} distinct BIC)"]
    invalid = sum(1 for r in runs if not r.valid)
    if invalid:
        parts.append(f"**{invalid} invalid graph(s)**")
    if method == "tabu" and result.runs.get("greedy"):
        parts.append(f"tabu >= greedy: {tabu_wins(runs, result.runs['greedy'] or [])}"
                     f"/{len(runs)}")
    if method == "restarts" and result.runs.get("greedy"):
        parts.append(f"better than greedy: {better_than_greedy(result)}/{len(runs)}")
    return "; ".join(parts)


def method_row(result: SampleResult, method: str) -> str:
    if method == "truth":
        cells = f" {result.truth['ours']:.2f} | - | - | - | - | 0"
    elif (s := result.stats(method)) is None:
        cells = " - | - | - | - | - | -"
    else:
        spread = ("- | -" if method == "reference"
                  else f"{s['min']:.2f} | {s['max']:.2f}")
        cells = (f" {s['median']:.2f} | {spread} | {100 * s['gap_to_truth']:+.3f}% | "
                 f"{s['seconds']:.2f} | {s['shd']:g}")
    return f"| {result.seed} | {LABELS[method]} |{cells} | {check_text(result, method)} |"


def overview(results: dict[str, list[SampleResult]]) -> list[str]:
    """Per network and method, means over the samples of the per-sample medians."""
    lines = ["## Overview (means over the samples of each sample's median)", "",
             "| network | method | BIC vs truth | CPDAG SHD | time (s) |",
             "| --- | --- | --- | --- | --- |"]
    for network, samples in results.items():
        for method in (*METHODS, "reference"):
            stats = [s.stats(method) for s in samples]
            found = [x for x in stats if x is not None]
            if not found:
                lines.append(f"| {network.upper()} | {LABELS[method]} | - | - | - |")
                continue
            note = "" if len(found) == len(stats) else f" ({len(found)} of {len(stats)})"
            lines.append(
                f"| {network.upper()} | {LABELS[method]}{note} | "
                f"{100 * statistics.fmean(x['gap_to_truth'] for x in found):+.3f}% | "
                f"{statistics.fmean(x['shd'] for x in found):.1f} | "
                f"{statistics.fmean(x['seconds'] for x in found):.2f} |")
    return [*lines, ""]


def network_section(network: str, samples: list[SampleResult]) -> list[str]:
    info = network_info(network)
    lines = [f"## {network.upper()} ({info['nodes']} nodes, {info['edges']} edges, "
             f"maximum in-degree {info['max_indegree']})", "",
             "| sample | method | BIC median | BIC min | BIC max | median vs truth | "
             "time (s, median) | CPDAG SHD (median) | check |",
             "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for result in samples:
        lines += [method_row(result, m) for m in ("truth", *METHODS, "reference")]
    return [*lines, ""]


def network_info(network: str) -> dict[str, int]:
    from pgmpy.utils import get_example_model

    model = get_example_model(network)
    degrees = [d for _, d in model.in_degree()]
    return {"nodes": model.number_of_nodes(), "edges": model.number_of_edges(),
            "max_indegree": max(degrees),
            "over_cap": sum(1 for d in degrees if d > PARENT_CAP)}


def cap_text(networks: Sequence[str]) -> str:
    parts = []
    for network in networks:
        info = network_info(network)
        over = info["over_cap"]
        parts.append(f"{network.upper()} {info['max_indegree']}" + (
            f" ({over} node{'s' if over != 1 else ''} with more than {PARENT_CAP} parents, so "
            "its generating network lies outside the search space)" if over else ""))
    return (f"Parent cap {PARENT_CAP} for every network (ALARM's maximum in-degree is 4). "
            "Maximum in-degrees: " + "; ".join(parts) + ".")


def met_text(met: bool | None) -> str:
    return {True: "yes", False: "**no**", None: "not measured"}[met]


def header(args: argparse.Namespace, networks: Sequence[str]) -> list[str]:
    return [
        "# Search quality", "",
        f"Machine: {machine_line()}.", "",
        f"Data: {ROWS:,} rows of each network, sampled with pgmpy's sampler under sample "
        f"seeds {', '.join(map(str, args.sample_seeds))}. Score: BIC. " + cap_text(networks),
        "",
        f"Each of our methods runs once per search seed ({', '.join(map(str, args.search_seeds))}"
        "), seeded as `run` seeds a spec's search, from a fresh scorer with an empty cache, "
        "with no budget; the time is the search's wall clock (data encoded beforehand). "
        f"Greedy hill climbing and tabu search (its defaults) start from the empty graph; "
        f"restarts: greedy with {RESTARTS} perturbed restarts; GES: greedy equivalence search. "
        "BIC median / min / max are over the search seeds; 'median vs truth' is (median BIC - "
        "generating network's BIC) / |generating network's BIC|; CPDAG SHD is the structural "
        "Hamming distance between the learned graph's CPDAG and the generating network's "
        "CPDAG (median over the seeds). The check column counts the distinct CPDAGs over "
        "the seeds and their distinct BIC values: columns that are identical in a sample up "
        "to a renaming of states (deterministic nodes; the generating network's row names "
        "them) can trade places in a graph without changing its BIC, so graphs of different "
        "equivalence classes can then score exactly alike.", "",
        "The generating network's BIC is our scorer's total on its edge list. Cross-check: "
        "pgmpy's `bic-d` (`pgmpy.estimators.BIC`) is the same formula as our `bic`, the "
        "maximised log-likelihood minus (ln N)/2 per free parameter, (r - 1) q per family, "
        "with states and parent configurations counted from the states seen in the data; "
        "the check column gives pgmpy's value and the relative difference.", "",
        "Reference: pgmpy `HillClimbSearch(...).estimate(scoring_method='bic-d', "
        f"max_indegree={PARENT_CAP})` (its defaults otherwise, which include a tabu list of "
        "100 moves), one run per sample in its own process under PYTHONHASHSEED=0 (its "
        f"tie-breaking follows string hashing), given {args.reference_timeout:g} s; a network "
        "whose reference runs out of time on one sample is not retried on the others.", "",
    ]


def crosscheck_text(results: dict[str, list[SampleResult]]) -> str:
    """The largest relative difference between our BIC and pgmpy's on the true DAGs."""
    worst = max((s.truth["relative_difference"], s.network, s.seed)
                for samples in results.values() for s in samples)
    return (f"Our BIC and pgmpy's on the generating network: largest relative difference "
            f"{worst[0]:.1e} ({worst[1].upper()}, sample {worst[2]}); within 1e-6 on every "
            f"sample: {'yes' if worst[0] <= 1e-6 else '**no**'}.")


def markdown(args: argparse.Namespace, results: dict[str, list[SampleResult]],
             found: list[Target]) -> str:
    lines = header(args, list(results))
    lines += ["## Targets", "", "| case | target | result | met |", "| --- | --- | --- | --- |"]
    lines += [f"| {t.case} | {t.target} | {t.result} | {met_text(t.met)} |" for t in found]
    lines += ["", crosscheck_text(results), "", *overview(results)]
    for network, samples in results.items():
        lines += network_section(network, samples)
    return "\n".join(lines)


def int_list(text: str) -> list[int]:
    return [int(x) for x in text.split(",") if x.strip()]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The quality suite's options (``python -m benchmarks --quality ...``)."""
    group = parser.add_argument_group("search quality (--quality)")
    group.add_argument("--networks", default=",".join(NETWORKS),
                       help="comma-separated pgmpy example networks")
    group.add_argument("--sample-seeds", type=int_list, default=list(SAMPLE_SEEDS))
    group.add_argument("--search-seeds", type=int_list, default=list(SEARCH_SEEDS))
    group.add_argument("--reference-timeout", type=float, default=REFERENCE_TIMEOUT,
                       help="seconds for each pgmpy reference run (0 skips the reference)")


def run(args: argparse.Namespace) -> int:
    """Run the quality suite and write RESULTS-quality.md and .json under ``args.out``."""
    warnings.filterwarnings("ignore")
    results = {network: run_network(network, args.sample_seeds, args.search_seeds,
                                    args.reference_timeout)
               for network in args.networks.split(",")}
    found = targets(results)
    out = Path(args.out)
    (out / "RESULTS-quality.json").write_text(json.dumps(
        {"machine": machine_line(), "rows": ROWS, "parent_cap": PARENT_CAP,
         "restarts": RESTARTS, "sample_seeds": args.sample_seeds,
         "search_seeds": args.search_seeds, "reference_timeout": args.reference_timeout,
         "networks": {n: network_info(n) for n in results},
         "targets": [asdict(t) for t in found],
         "samples": [s.to_json() for samples in results.values() for s in samples]},
        indent=2, sort_keys=True) + "\n")
    (out / "RESULTS-quality.md").write_text(markdown(args, results, found) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(reference_child(sys.argv[1:]))
