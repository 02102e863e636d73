"""DAG operations on parent sets and edge lists: acyclicity, order, canonical hashing."""

from __future__ import annotations

import hashlib
import heapq
import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

Edge = tuple[str, str]


def edges_from_parents(names: Sequence[str], parent_sets: Sequence[Iterable[int]]) -> list[Edge]:
    """Sorted ``(from, to)`` name pairs of a DAG given as parent index sets."""
    return sorted((names[p], names[c]) for c, ps in enumerate(parent_sets) for p in ps)


def parents_from_edges(names: Sequence[str], edges: Iterable[Sequence[str]]) -> list[list[int]]:
    """Parent index lists (sorted) of a DAG given as name pairs."""
    index = {n: i for i, n in enumerate(names)}
    parents: list[list[int]] = [[] for _ in names]
    for a, b in edges:
        parents[index[b]].append(index[a])
    return [sorted(ps) for ps in parents]


def topological_order(parent_sets: Sequence[Iterable[int]]) -> list[int] | None:
    """A topological order (smallest index first among ready nodes), or None if cyclic.

    Kahn's algorithm (Kahn 1962), O(V + E).
    """
    n = len(parent_sets)
    children: list[list[int]] = [[] for _ in range(n)]
    indegree = [0] * n
    for c, ps in enumerate(parent_sets):
        for p in ps:
            children[p].append(c)
            indegree[c] += 1
    ready = [v for v in range(n) if indegree[v] == 0]
    heapq.heapify(ready)
    order = []
    while ready:
        v = heapq.heappop(ready)
        order.append(v)
        for c in children[v]:
            indegree[c] -= 1
            if indegree[c] == 0:
                heapq.heappush(ready, c)
    return order if len(order) == n else None


def is_acyclic(parent_sets: Sequence[Iterable[int]]) -> bool:
    return topological_order(parent_sets) is not None


def canonical_edges_json(edges: Iterable[Sequence[str]]) -> str:
    """The canonical text of an edge list: sorted ``[from, to]`` pairs, compact JSON."""
    return json.dumps(sorted([list(e) for e in edges]), separators=(",", ":"), ensure_ascii=False)


def graph_sha256(edges: Iterable[Sequence[str]]) -> str:
    """sha256 of the canonical edge list; equal graphs hash equally whatever the order."""
    return hashlib.sha256(canonical_edges_json(edges).encode("utf-8")).hexdigest()


def structural_hamming_distance(a: Iterable[Sequence[str]], b: Iterable[Sequence[str]]) -> int:
    """SHD between two DAGs: pairs of nodes whose edge differs (missing, extra or reversed).

    A reversed edge counts once (Tsamardinos, Brown & Aliferis 2006).
    """
    ea = {tuple(e) for e in a}
    eb = {tuple(e) for e in b}
    pairs = {frozenset(e) for e in ea | eb}
    distance = 0
    for pair in pairs:
        x, y = sorted(pair)
        if ((x, y) in ea, (y, x) in ea) != ((x, y) in eb, (y, x) in eb):
            distance += 1
    return distance


# -- equivalence classes ----------------------------------------------------------------

def _order_edges(names: Sequence[str], edges: set[Edge]) -> list[Edge]:
    """Chickering's edge order: by the child's topological position ascending, then the
    parent's topological position descending."""
    index = {n: i for i, n in enumerate(names)}
    parent_sets: list[list[int]] = [[] for _ in names]
    for a, b in edges:
        parent_sets[index[b]].append(index[a])
    order = topological_order(parent_sets)
    if order is None:
        raise ValueError("not a DAG: the edges form a cycle")
    position = {names[v]: k for k, v in enumerate(order)}
    return sorted(edges, key=lambda e: (position[e[1]], -position[e[0]]))


def compelled_edges(names: Sequence[str], edges: Iterable[Sequence[str]]) -> set[Edge]:
    """The edges of a DAG that are compelled (directed in every equivalent DAG).

    Chickering's (1995) Label-Edges algorithm, O(E * max in-degree) after an
    O(V + E) topological sort. The other edges are reversible.
    """
    edge_set = {(str(a), str(b)) for a, b in edges}
    parents: dict[str, set[str]] = {n: set() for n in names}
    for a, b in edge_set:
        parents[b].add(a)
    label: dict[Edge, str] = {}
    for x, y in _order_edges(names, edge_set):
        if (x, y) in label:
            continue
        done = False
        for w in sorted(parents[x]):
            if label.get((w, x)) != "compelled":
                continue
            if w not in parents[y]:
                for z in parents[y]:
                    label[(z, y)] = "compelled"
                done = True
                break
            label[(w, y)] = "compelled"
        if done:
            continue
        has_other = any(z != x and z not in parents[x] for z in parents[y])
        mark = "compelled" if has_other else "reversible"
        for z in parents[y]:
            label.setdefault((z, y), mark)
        label[(x, y)] = label.get((x, y), mark)
    return {e for e, m in label.items() if m == "compelled"}


@dataclass(frozen=True)
class Cpdag:
    """A completed partially directed acyclic graph: the equivalence class of a DAG.

    ``directed`` holds the compelled edges; ``undirected`` the reversible ones, each as a
    sorted name pair.
    """

    directed: frozenset[Edge]
    undirected: frozenset[Edge]

    def marks(self) -> dict[frozenset[str], Edge | None]:
        """Per adjacent node pair: the directed edge, or None when undirected."""
        out: dict[frozenset[str], Edge | None] = {frozenset(e): e for e in self.directed}
        out.update({frozenset(e): None for e in self.undirected})
        return out


def cpdag(names: Sequence[str], edges: Iterable[Sequence[str]]) -> Cpdag:
    """The CPDAG of a DAG (Chickering 1995): compelled edges directed, the rest undirected."""
    edge_set = {(str(a), str(b)) for a, b in edges}
    compelled = compelled_edges(names, edge_set)
    undirected = {tuple(sorted(e)) for e in edge_set - compelled}
    return Cpdag(frozenset(compelled), frozenset(undirected))  # type: ignore[arg-type]


def cpdag_shd(a: Cpdag, b: Cpdag) -> int:
    """Structural Hamming distance between two PDAGs (Tsamardinos, Brown & Aliferis 2006):
    the node pairs whose edge is missing, extra, or differently oriented or undirected."""
    ma, mb = a.marks(), b.marks()
    pairs = set(ma) | set(mb)
    return sum(1 for p in pairs if (p in ma, ma.get(p)) != (p in mb, mb.get(p)))


def v_structures(edges: Iterable[Sequence[str]]) -> set[tuple[str, str, str]]:
    """Unshielded colliders a -> c <- b with a, b non-adjacent, as (min(a,b), c, max(a,b))."""
    edge_set = {(str(x), str(y)) for x, y in edges}
    adjacent = {frozenset(e) for e in edge_set}
    parents: dict[str, list[str]] = {}
    for x, y in edge_set:
        parents.setdefault(y, []).append(x)
    out = set()
    for c, ps in parents.items():
        ps = sorted(ps)
        for i, a in enumerate(ps):
            for b in ps[i + 1:]:
                if frozenset((a, b)) not in adjacent:
                    out.add((a, c, b))
    return out


def same_equivalence_class(a: Iterable[Sequence[str]], b: Iterable[Sequence[str]]) -> bool:
    """Markov equivalence: same skeleton and same v-structures (Verma & Pearl 1990)."""
    ea = [tuple(e) for e in a]
    eb = [tuple(e) for e in b]
    skeleton = {frozenset(e) for e in ea} == {frozenset(e) for e in eb}
    return skeleton and v_structures(ea) == v_structures(eb)
