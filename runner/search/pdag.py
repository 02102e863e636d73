"""Partially directed graphs over variable indices, as bitmasks, and the graph math that
equivalence-class search needs: the CPDAG of a DAG, a consistent extension of a PDAG,
semi-directed reachability and background knowledge.

A node's neighbours are Python ``int`` bitmasks (bit ``v`` set for node ``v``), so set
operations on families (union, clique tests, subsets) are single integer operations.
``Pdag.parents[v]`` holds the directed edges into ``v``, ``children[v]`` those out of
``v`` and ``neighbours[v]`` the undirected edges at ``v``; the three are kept mutually
consistent by every function here.
"""

from __future__ import annotations

import heapq
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from runner.graph import topological_order


def bit(v: int) -> int:
    return 1 << v


def members(mask: int) -> Iterator[int]:
    """The members of a bitmask, lowest first."""
    while mask:
        low = mask & -mask
        yield low.bit_length() - 1
        mask ^= low


def mask_of(nodes: Iterable[int]) -> int:
    out = 0
    for v in nodes:
        out |= 1 << v
    return out


@dataclass(frozen=True)
class Pdag:
    """A partially directed graph on nodes ``0 .. n-1`` (see the module docstring)."""

    parents: tuple[int, ...]
    children: tuple[int, ...]
    neighbours: tuple[int, ...]

    @property
    def n(self) -> int:
        return len(self.parents)

    def adjacent(self, v: int) -> int:
        """Every node joined to ``v`` by an edge of any kind."""
        return self.parents[v] | self.children[v] | self.neighbours[v]

    def is_clique(self, mask: int) -> bool:
        """True when every two members of ``mask`` are adjacent."""
        return all(mask & ~bit(v) & ~self.adjacent(v) == 0 for v in members(mask))

    def edge_count(self) -> int:
        directed = sum(p.bit_count() for p in self.parents)
        return directed + sum(m.bit_count() for m in self.neighbours) // 2

    def directed_edges(self) -> list[tuple[int, int]]:
        return [(p, c) for c in range(self.n) for p in members(self.parents[c])]

    def undirected_edges(self) -> list[tuple[int, int]]:
        return [(a, b) for a in range(self.n) for b in members(self.neighbours[a]) if a < b]


def pdag_from_edges(n: int, directed: Iterable[tuple[int, int]],
                    undirected: Iterable[tuple[int, int]] = ()) -> Pdag:
    parents, children, neighbours = [0] * n, [0] * n, [0] * n
    for a, b in directed:
        parents[b] |= bit(a)
        children[a] |= bit(b)
    for a, b in undirected:
        neighbours[a] |= bit(b)
        neighbours[b] |= bit(a)
    return Pdag(tuple(parents), tuple(children), tuple(neighbours))


def dag_as_pdag(parent_masks: Sequence[int]) -> Pdag:
    """A DAG (one parent mask per node) as a PDAG with every edge directed."""
    n = len(parent_masks)
    children = [0] * n
    for c, mask in enumerate(parent_masks):
        for p in members(mask):
            children[p] |= bit(c)
    return Pdag(tuple(parent_masks), tuple(children), (0,) * n)


def cpdag_of_dag(parent_masks: Sequence[int]) -> Pdag:
    """The CPDAG of a DAG: compelled edges directed, reversible ones undirected.

    Chickering's (1995) Label-Edges algorithm ("A transformational characterization of
    equivalent Bayesian network structures", UAI 11): edges are visited by their child's
    topological position, and among one child's edges by the parent's position from last
    to first; O(E * max in-degree) after the O(V + E) topological sort.
    """
    n = len(parent_masks)
    order = topological_order([list(members(m)) for m in parent_masks])
    if order is None:
        raise ValueError("not a DAG: the parent sets form a cycle")
    position = [0] * n
    for k, v in enumerate(order):
        position[v] = k
    compelled = [0] * n  # compelled parents per child
    reversible = [0] * n
    for y in order:
        unknown = parent_masks[y]
        while unknown:
            x = max(members(unknown), key=position.__getitem__)
            done = False
            for w in members(compelled[x]):
                if not parent_masks[y] & bit(w):
                    compelled[y] |= unknown
                    unknown = 0
                    done = True
                    break
                compelled[y] |= bit(w)
                unknown &= ~bit(w)
            if done:
                continue
            others = parent_masks[y] & ~bit(x) & ~parent_masks[x]
            if others:
                compelled[y] |= unknown
            else:
                reversible[y] |= unknown
            unknown = 0
    children = [0] * n
    neighbours = [0] * n
    for y in range(n):
        for x in members(compelled[y]):
            children[x] |= bit(y)
        for x in members(reversible[y]):
            neighbours[x] |= bit(y)
            neighbours[y] |= bit(x)
    return Pdag(tuple(compelled), tuple(children), tuple(neighbours))


def consistent_extension(pdag: Pdag, cap: int | None = None) -> list[int] | None:
    """A DAG with the skeleton, the directed edges and the v-structures of ``pdag``, as
    parent masks; None when there is none.

    Dor & Tarsi (1992), "A simple algorithm to construct a consistent extension of a
    partially oriented graph" (Technical Report R-185, UCLA): repeatedly take a node with
    no outgoing directed edge whose undirected neighbours are adjacent to all its other
    adjacent nodes, direct its undirected edges into it and remove it. Any such choice
    succeeds when an extension exists; among the candidates, the lowest index whose
    parent count stays within ``cap`` is taken first, so a capped extension is found
    where the order allows one. O((V + E) log V) with a candidate heap.
    """
    n = pdag.n
    parents = list(pdag.parents)
    children = list(pdag.children)
    neighbours = list(pdag.neighbours)
    result = list(pdag.parents)
    limit = n if cap is None else cap

    def key(x: int) -> tuple[int, int] | None:
        if children[x]:
            return None
        adjacent = parents[x] | neighbours[x]
        for y in members(neighbours[x]):
            if adjacent & ~bit(y) & ~(parents[y] | children[y] | neighbours[y]):
                return None
        return (int((parents[x] | neighbours[x]).bit_count() > limit), x)

    removed = [False] * n
    heap = [k for k in map(key, range(n)) if k is not None]
    heapq.heapify(heap)
    left = n
    while left:
        if not heap:
            return None
        over, x = heapq.heappop(heap)
        if removed[x]:
            continue
        current = key(x)
        if current is None or current[0] != over:  # its parent count fell since it was queued
            if current is not None:
                heapq.heappush(heap, current)
            continue
        removed[x] = True
        left -= 1
        result[x] = parents[x] | neighbours[x]
        here = bit(x)
        touched = parents[x] | neighbours[x]
        for y in members(neighbours[x]):
            neighbours[y] &= ~here
        for y in members(parents[x]):
            children[y] &= ~here
        for y in members(touched):
            k = key(y)
            if k is not None:
                heapq.heappush(heap, k)
    return result


def semi_directed_reachable(pdag: Pdag, source: int, blocked: int) -> int:
    """The nodes reached from ``source`` along semi-directed paths (each edge undirected
    or directed away from the source) that avoid the nodes of ``blocked``. O(V + E)."""
    seen = bit(source)
    frontier = seen
    while frontier:
        step = 0
        for v in members(frontier):
            step |= pdag.children[v] | pdag.neighbours[v]
        frontier = step & ~seen & ~blocked
        seen |= frontier
    return seen & ~bit(source)


@dataclass(frozen=True)
class Knowledge:
    """Background knowledge as masks (Meek 1995, "Causal inference and causal
    explanation with background knowledge", UAI 11): ``forbidden_into[v]`` holds the
    nodes ``u`` for which ``u -> v`` may never be an edge, ``required_into[v]`` those for
    which it must be one; ``cap`` bounds every node's parent count."""

    forbidden_into: tuple[int, ...]
    required_into: tuple[int, ...]
    cap: int

    @property
    def required_from(self) -> tuple[int, ...]:
        """Per node ``v``, the nodes ``u`` for which ``v -> u`` is required."""
        out = [0] * self.n
        for u, mask in enumerate(self.required_into):
            for v in members(mask):
                out[v] |= bit(u)
        return tuple(out)

    @classmethod
    def from_matrices(cls, allowed: np.ndarray, required: Iterable[tuple[int, int]],
                      cap: int) -> Knowledge:
        n = allowed.shape[0]
        forbidden = tuple(mask_of(np.flatnonzero(~allowed[:, v]).tolist()) & ~bit(v)
                          for v in range(n))
        required_into = [0] * n
        for a, b in required:
            required_into[b] |= bit(a)
        return cls(forbidden, tuple(required_into), cap)

    @property
    def n(self) -> int:
        return len(self.forbidden_into)

    def is_empty(self) -> bool:
        return not any(self.forbidden_into) and not any(self.required_into) and (
            self.cap >= self.n - 1)

    def may_join(self, a: int, b: int) -> bool:
        """True when ``a`` and ``b`` may be adjacent in at least one direction."""
        return not (self.forbidden_into[b] & bit(a) and self.forbidden_into[a] & bit(b))

    def must_join(self, a: int, b: int) -> bool:
        return bool(self.required_into[b] & bit(a) or self.required_into[a] & bit(b))

    def orient(self, pdag: Pdag) -> Pdag | None:
        """``pdag`` with each undirected edge directed the only way the knowledge allows;
        None when a directed edge contradicts the knowledge or an edge has no direction
        left."""
        parents, children, neighbours = list(pdag.parents), list(pdag.children), list(
            pdag.neighbours)
        required_from = self.required_from
        for v in range(pdag.n):
            if parents[v] & self.forbidden_into[v] or children[v] & self.required_into[v]:
                return None
            # undirected u - v where u -> v is ruled out or v -> u is required: v -> u
            for u in members(neighbours[v] & (self.forbidden_into[v] | required_from[v])):
                if self.forbidden_into[u] & bit(v) or self.required_into[v] & bit(u):
                    return None
                neighbours[v] &= ~bit(u)
                neighbours[u] &= ~bit(v)
                children[v] |= bit(u)
                parents[u] |= bit(v)
        return Pdag(tuple(parents), tuple(children), tuple(neighbours))


def member_under_knowledge(cpdag: Pdag, knowledge: Knowledge) -> list[int] | None:
    """A DAG of the class ``cpdag`` that honours the knowledge and the cap, as parent
    masks; None when the search for one fails.

    The knowledge orients the class's undirected edges (Meek 1995); a consistent
    extension of the result (Dor & Tarsi 1992) is a member of the class exactly when it
    has the class's v-structures, which is checked by comparing CPDAGs.
    """
    oriented = knowledge.orient(cpdag)
    if oriented is None:
        return None
    dag = consistent_extension(oriented, knowledge.cap)
    if dag is None or any(m.bit_count() > knowledge.cap for m in dag):
        return None
    if oriented != cpdag and cpdag_of_dag(dag) != cpdag:
        return None
    return dag
