"""Bootstrap edge confidence (Friedman, Goldszmidt & Wyner 1999, "Data analysis with
Bayesian networks: a bootstrap approach", UAI).

The spec's score and search learn a graph on each of ``replicates`` resamples of the
rows (drawn with replacement, as many as the data has). Each edge then gets:

* ``directed``: the share of replicates whose DAG holds ``a -> b``;
* ``class``: the share whose equivalence class (CPDAG, Chickering 1995) holds ``a -> b``
  directed or ``a - b`` undirected: an undirected CPDAG edge counts for both directions,
  because the data cannot tell them apart there;
* ``adjacent``: the share in which ``a`` and ``b`` are joined either way.

Seeding: replicate ``k`` gets child ``k`` of ``numpy.random.SeedSequence(seed).spawn(R)``;
that child spawns two more, one for drawing the rows and one for the search's own
randomness (tie-breaks, restarts). A replicate is therefore a pure function of the data,
the spec and ``k``, whichever engine or worker runs it.

Budget: ``bootstrap.budget.max_seconds`` bounds all replicates together. The deadline is
fixed once, as a wall-clock time (``time.time()``), when the replicates start, and goes
to every replicate with the job, so replicates running in parallel (a process pool, Dask
workers on this machine) all stop by it: each replicate's search gets the time left
until the deadline (or its own ``search.budget.max_seconds`` when that is less). A
replicate stopped by a limit counts as not converged; a replicate that starts after the
deadline stops before its first move (its graph is the start graph). Time-limited
replicates depend on the machine's speed, as any ``max_seconds`` stop does.

Consensus network (the documented rule): a node pair enters when it is adjacent in at
least ``threshold`` of the replicates. Pairs are taken required edges first, then by
adjacency share (high first), then by the larger directed share, then by name. Each is
oriented the way it was directed more often (ties: the direction whose class share is
higher, then the alphabetically first source), and falls back to the other direction when
the preferred one would close a cycle, break a constraint (tiers, forbidden) or exceed the
parent cap. A pair that fits neither way is skipped and listed with the reason.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from runner.constraints import Constraints
from runner.graph import cpdag, edges_from_parents, graph_sha256

Edge = tuple[str, str]
ParentSets = Sequence[Sequence[int]]

RULE = ("pairs adjacent in at least `threshold` of the replicates, required edges first, "
        "then by adjacency share, larger directed share and name; each oriented as most "
        "often directed (ties: higher class share, then alphabetical source), else the "
        "other way; skipped when neither way keeps the graph acyclic and within the "
        "constraints and parent cap")


@dataclass(frozen=True)
class ReplicateJob:
    """What every replicate needs, sent to each worker once: the prepared spec (with its
    data), the function that learns a graph on a resampled dataset (given the deadline)
    and the wall-clock deadline (``time.time()``) of all replicates, or None."""

    prepared: Any  # runner.pipeline.Prepared
    search_on: Callable[[Any, Any, np.random.Generator, float | None],
                        tuple[ParentSets, bool]]
    deadline: float | None = None


@dataclass(frozen=True)
class Replicate:
    """One replicate's learned DAG (parent index sets) and whether its search converged."""

    index: int
    parent_sets: tuple[tuple[int, ...], ...]
    converged: bool


def replicate_seeds(seed: int, replicates: int) -> list[np.random.SeedSequence]:
    """Child ``k`` of ``SeedSequence(seed)`` for replicate ``k``."""
    return np.random.SeedSequence(seed).spawn(replicates)


def resample_rows(rows: int, rng: np.random.Generator) -> np.ndarray:
    """``rows`` row positions drawn uniformly with replacement."""
    return rng.integers(0, rows, size=rows)


def run_replicate(job: ReplicateJob, item: tuple[int, np.random.SeedSequence]) -> Replicate:
    """Learn replicate ``item = (k, seed)``: resample the rows, run the spec's search."""
    index, seed = item
    draw, search = (np.random.default_rng(s) for s in seed.spawn(2))
    dataset = job.prepared.dataset
    resampled = dataset.take_rows(resample_rows(dataset.rows, draw))
    parent_sets, converged = job.search_on(job.prepared, resampled, search, job.deadline)
    return Replicate(index, tuple(tuple(sorted(int(p) for p in ps)) for ps in parent_sets),
                     bool(converged))


# --------------------------------------------------------------------------- frequencies


def edge_frequencies(names: Sequence[str],
                     graphs: Sequence[Iterable[Sequence[str]]]) -> list[dict[str, Any]]:
    """Per directed edge seen in any replicate's DAG or CPDAG: its ``directed``,
    ``class`` and ``adjacent`` shares over the replicates, sorted by edge."""
    total = len(graphs)
    directed: Counter[Edge] = Counter()
    in_class: Counter[Edge] = Counter()
    adjacent: Counter[tuple[str, str]] = Counter()
    for edges in graphs:
        dag = {(str(a), str(b)) for a, b in edges}
        directed.update(dag)
        adjacent.update({tuple(sorted(e)) for e in dag})  # type: ignore[misc]
        klass = cpdag(names, dag)
        in_class.update(klass.directed)
        in_class.update({(a, b) for a, b in klass.undirected}
                        | {(b, a) for a, b in klass.undirected})
    return [
        {"edge": [a, b], "directed": directed[(a, b)] / total,
         "class": in_class[(a, b)] / total,
         "adjacent": adjacent[tuple(sorted((a, b)))] / total}  # type: ignore[index]
        for a, b in sorted(in_class)
    ]


def _reaches(parents: list[set[int]], source: int, target: int) -> bool:
    """Whether a directed path source -> ... -> target exists (parents as sets)."""
    children: dict[int, list[int]] = {}
    for child, ps in enumerate(parents):
        for p in ps:
            children.setdefault(p, []).append(child)
    seen, todo = {source}, [source]
    while todo:
        node = todo.pop()
        if node == target:
            return True
        for nxt in children.get(node, ()):
            if nxt not in seen:
                seen.add(nxt)
                todo.append(nxt)
    return False


def _why_not(parents: list[set[int]], i: int, j: int, constraints: Constraints) -> str | None:
    if not constraints.allowed[i, j]:
        return "forbidden by the constraints"
    if len(parents[j]) >= constraints.cap():
        return "parent cap reached"
    if _reaches(parents, j, i):
        return "would close a cycle"
    return None


def consensus(names: Sequence[str], frequencies: Sequence[Mapping[str, Any]], replicates: int,
              threshold: float, constraints: Constraints) -> dict[str, Any]:
    """The consensus DAG at ``threshold`` by the rule in the module docstring."""
    index = {n: i for i, n in enumerate(names)}
    share = {tuple(r["edge"]): r for r in frequencies}
    required = {(names[i], names[j]) for i, j in constraints.required}
    pairs: dict[tuple[str, str], float] = {}
    for (a, b), row in share.items():
        if row["adjacent"] >= threshold - 1e-12 or (a, b) in required:
            pairs[(min(a, b), max(a, b))] = row["adjacent"]

    def directed(e: Edge) -> float:
        return share[e]["directed"] if e in share else 0.0

    def klass(e: Edge) -> float:
        return share[e]["class"] if e in share else 0.0

    def preferred(pair: tuple[str, str]) -> tuple[Edge, Edge]:
        a, b = pair
        forward, backward = (a, b), (b, a)
        for e in (forward, backward):
            if e in required:
                return e, e
        if (directed(backward), klass(backward)) > (directed(forward), klass(forward)):
            return backward, forward
        return forward, backward

    ordered = sorted(pairs, key=lambda p: (
        not any(e in required for e in (p, p[::-1])), -pairs[p],
        -max(directed(p), directed(p[::-1])), p))
    parents: list[set[int]] = [set() for _ in names]
    skipped = []
    for pair in ordered:
        first, second = preferred(pair)
        reasons = []
        for a, b in dict.fromkeys((first, second)):
            reason = _why_not(parents, index[a], index[b], constraints)
            if reason is None:
                parents[index[b]].add(index[a])
                break
            reasons.append(f"{a} -> {b}: {reason}")
        else:
            skipped.append({"pair": list(pair), "adjacent": pairs[pair],
                            "reason": "; ".join(reasons)})
    edges = edges_from_parents(names, parents)
    return {"edges": [list(e) for e in edges], "graph_sha256": graph_sha256(edges),
            "skipped": skipped, "rule": RULE}


def bootstrap_block(names: Sequence[str], results: Sequence[Replicate], seed: int,
                    threshold: float, constraints: Constraints) -> dict[str, Any]:
    """The record's ``bootstrap`` section from the replicates (in index order)."""
    graphs = [edges_from_parents(names, r.parent_sets) for r in results]
    table = edge_frequencies(names, graphs)
    return {
        "replicates": len(results),
        "seed": seed,
        "threshold": threshold,
        "seeding": "replicate k: child k of numpy SeedSequence(seed).spawn(replicates), "
                   "which spawns one child for drawing rows and one for the search",
        "not_converged": sum(1 for r in results if not r.converged),
        "frequencies": table,
        "consensus": consensus(names, table, len(results), threshold, constraints),
    }


# --------------------------------------------------------------------------- reading


def consensus_view(doc: Mapping[str, Any]) -> dict[str, Any] | None:
    """A record or baseline with its consensus edges in place of its run's edges (for
    the gate and ``compare``), or None when it has no bootstrap consensus."""
    block = doc.get("bootstrap") or doc.get("consensus")
    if not isinstance(block, Mapping):
        return None
    found = block.get("consensus", block)
    if not isinstance(found, Mapping) or "edges" not in found:
        return None
    return {**doc, "edges": [list(e) for e in found["edges"]],
            "graph_sha256": found["graph_sha256"]}


SHARES = ("directed", "class", "adjacent")


def edge_confidence(record: Mapping[str, Any], share: str = "directed") -> dict[Edge, float]:
    """Directed edge -> its ``share`` of bootstrap replicates; empty without bootstrap."""
    if share not in SHARES:
        raise ValueError(f"unknown share {share!r}; one of {', '.join(SHARES)}")
    block = record.get("bootstrap")
    if not isinstance(block, Mapping) or not isinstance(block.get("frequencies"), list):
        return {}
    out: dict[Edge, float] = {}
    for item in block["frequencies"]:
        if isinstance(item, Mapping) and isinstance(item.get(share), int | float):
            a, b = item["edge"]
            out[(str(a), str(b))] = float(item[share])
    return dict(sorted(out.items()))


def replicates(record: Mapping[str, Any]) -> int | None:
    block = record.get("bootstrap")
    if isinstance(block, Mapping) and isinstance(block.get("replicates"), int):
        return int(block["replicates"])
    return None
