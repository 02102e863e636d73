"""The engine of equivalence-class search: a CPDAG under background knowledge, the
Insert and Delete operators of Chickering (2002) with their score changes and validity,
and a queue that keeps every node pair's best operator up to date.

Operators (Chickering 2002, "Optimal structure identification with greedy search",
JMLR 3, theorems 15 and 17). For non-adjacent ``X``, ``Y`` and ``T`` a subset of ``Y``'s
undirected neighbours not adjacent to ``X``, ``Insert(X, Y, T)`` adds ``X -> Y`` and
directs every ``T - Y`` into ``Y``; with ``NA`` the undirected neighbours of ``Y``
adjacent to ``X``, it is valid when ``NA u T`` is a clique and every semi-directed path
from ``Y`` to ``X`` passes through ``NA u T``, and it changes the score by
``s(Y, NA u T u Pa(Y) u {X}) - s(Y, NA u T u Pa(Y))``. For adjacent ``X``, ``Y`` and
``H`` a subset of ``NA``, ``Delete(X, Y, H)`` removes the edge and directs ``Y - h``
(and ``X - h``) into ``h`` for each ``h`` in ``H``; it is valid when ``NA \\ H`` is a
clique, and changes the score by ``s(Y, (NA \\ H) u Pa(Y) \\ {X}) - s(Y, (NA \\ H) u
Pa(Y) u {X})``. Both need a score-equivalent score. After an operator the PDAG is
completed again: a consistent extension (Dor & Tarsi 1992), then its CPDAG
(Chickering 1995).

Background knowledge (tiers, forbidden and required edges, the parent cap) filters
operators: an ``Insert`` of an edge whose direction is forbidden and a ``Delete`` of a
required edge are never offered, and an operator whose resulting class has no member
honouring the knowledge is refused when applied (Meek 1995). The engine always holds
such a member, which is what a search returns.

Caching (Chickering 2002, section 5; Ramsey et al. 2017, "A million variables and
more", IJDSA 3): an operator for the pair ``(X, Y)`` depends only on ``Pa(Y)``,
``Ne(Y)``, the adjacencies of ``X`` and the adjacencies among ``Ne(Y)``. After an
operator on ``(A, B)`` only pairs whose target's parents or neighbours changed, whose
target has both ``A`` and ``B`` as neighbours, or whose source is ``A`` or ``B`` are
evaluated again; the semi-directed path condition, which is global, is checked when an
operator reaches the front of the queue.

Budget: the queue's first fill evaluates every pair; given a budget it checks it every few
pairs (:class:`~runner.search.budget.FillCheck`) and, when it runs out, stops with the
reason in ``stopped``: the phase then ends before applying any operator.
"""

from __future__ import annotations

import heapq
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field

import numpy as np

from runner.constraints import Constraints
from runner.scores.protocol import Scorer
from runner.search.budget import Budget, FillCheck
from runner.search.engine import RELATIVE_TOLERANCE, BoundEngine
from runner.search.pdag import (
    Knowledge,
    Pdag,
    bit,
    consistent_extension,
    cpdag_of_dag,
    mask_of,
    member_under_knowledge,
    members,
    semi_directed_reachable,
)

INSERT = "insert"
DELETE = "delete"


@dataclass(frozen=True, order=True)
class ClassMove:
    """``Insert(source, target, subset)`` or ``Delete(source, target, subset)``; the
    subset (``T`` or ``H``) is a bitmask of nodes."""

    kind: str
    source: int
    target: int
    subset: int


def cliques_within(pdag: Pdag, candidates: int, room: int) -> Iterator[int]:
    """Every clique of at most ``room`` members drawn from ``candidates`` (the empty one
    first), each once: a depth-first growth in index order."""
    yield 0
    if room <= 0:
        return
    stack: list[tuple[int, int, int]] = [(0, candidates, room)]
    while stack:
        clique, left, size = stack.pop()
        for v in members(left):
            left &= ~bit(v)
            grown = clique | bit(v)
            yield grown
            if size > 1:
                stack.append((grown, left & pdag.adjacent(v), size - 1))


class ClassEngine(BoundEngine):
    """An equivalence class of DAGs with a member that honours the constraints."""

    def __init__(self, scorer: Scorer, constraints: Constraints,
                 parent_sets: Sequence[Sequence[int]] | None = None) -> None:
        super().__init__(scorer, constraints)
        n = self.n
        self.knowledge = Knowledge.from_matrices(constraints.allowed, constraints.required,
                                                 constraints.cap())
        start = [mask_of(ps) for ps in parent_sets] if parent_sets else [0] * n
        self.cpdag = cpdag_of_dag(start)
        member = member_under_knowledge(self.cpdag, self.knowledge)
        if member is None:
            raise ValueError("the starting graph's class has no member within the constraints")
        self.dag = member
        self.score = scorer.total(self.parent_sets())
        self.changed_targets = 0
        self.changed_sources = 0

    def parent_sets(self) -> list[tuple[int, ...]]:
        """The member DAG the engine holds, as sorted parent tuples."""
        return [tuple(members(m)) for m in self.dag]

    def tolerance(self) -> float:
        return RELATIVE_TOLERANCE * max(1.0, abs(self.score))

    # -- operators and their score changes -------------------------------------------
    def insert_choices(self, x: int, y: int) -> Iterator[tuple[int, float]]:
        """``(T, delta)`` of every Insert(x, y, T) meeting the clique condition and the
        cap; none when x and y are adjacent or x -> y is forbidden."""
        g, k = self.cpdag, self.knowledge
        adjacent_x = g.adjacent(x)
        if x == y or adjacent_x & bit(y) or k.forbidden_into[y] & bit(x):
            return
        na = g.neighbours[y] & adjacent_x
        if not g.is_clique(na):
            return
        base = na | g.parents[y]
        room = k.cap - 1 - base.bit_count()
        if room < 0:
            return
        candidates = mask_of(t for t in members(g.neighbours[y] & ~adjacent_x)
                             if na & ~g.adjacent(t) == 0)
        family = self.scorer.family_by_mask
        for t in cliques_within(g, candidates, room):
            old = base | t
            yield t, family(y, old | bit(x)) - family(y, old)

    def delete_choices(self, x: int, y: int) -> Iterator[tuple[int, float]]:
        """``(H, delta)`` of every valid Delete(x, y, H); none when x and y are not joined
        by x - y or x -> y, or the edge is required."""
        g = self.cpdag
        if not (g.parents[y] | g.neighbours[y]) & bit(x) or self.knowledge.must_join(x, y):
            return
        na = g.neighbours[y] & g.adjacent(x)
        kept_parents = g.parents[y] & ~bit(x)
        family = self.scorer.family_by_mask
        for clique in cliques_within(g, na, na.bit_count()):
            new = clique | kept_parents
            yield na & ~clique, family(y, new) - family(y, new | bit(x))

    def choices(self, kind: str, x: int, y: int) -> Iterator[tuple[int, float]]:
        return self.insert_choices(x, y) if kind == INSERT else self.delete_choices(x, y)

    def is_valid(self, move: ClassMove) -> bool:
        """Whether ``move`` is valid on the current class (both conditions of its
        theorem, checked afresh)."""
        g, x, y, subset = self.cpdag, move.source, move.target, move.subset
        if move.kind == DELETE:
            if not (g.parents[y] | g.neighbours[y]) & bit(x):
                return False
            na = g.neighbours[y] & g.adjacent(x)
            return subset & ~na == 0 and g.is_clique(na & ~subset)
        if g.adjacent(x) & bit(y) or subset & ~(g.neighbours[y] & ~g.adjacent(x)):
            return False
        gate = (g.neighbours[y] & g.adjacent(x)) | subset
        return g.is_clique(gate) and not semi_directed_reachable(g, y, gate) & bit(x)

    # -- applying operators ----------------------------------------------------------
    def result_of(self, move: ClassMove) -> Pdag:
        """The PDAG that ``move`` leaves before completion."""
        g = self.cpdag
        parents, children, neighbours = list(g.parents), list(g.children), list(g.neighbours)
        x, y = move.source, move.target

        def direct(a: int, b: int) -> None:
            neighbours[a] &= ~bit(b)
            neighbours[b] &= ~bit(a)
            parents[b] |= bit(a)
            children[a] |= bit(b)

        if move.kind == INSERT:
            direct(x, y)
            for t in members(move.subset):
                direct(t, y)
        else:
            neighbours[x] &= ~bit(y)
            neighbours[y] &= ~bit(x)
            parents[y] &= ~bit(x)
            children[x] &= ~bit(y)
            for h in members(move.subset):
                direct(y, h)
                if neighbours[x] & bit(h):
                    direct(x, h)
        return Pdag(tuple(parents), tuple(children), tuple(neighbours))

    def apply(self, move: ClassMove, delta: float) -> bool:
        """Apply a valid operator whose score change is ``delta``; False (and nothing
        changed) when its class has no member within the constraints."""
        extension = consistent_extension(self.result_of(move))
        if extension is None:  # pragma: no cover - a valid operator always has one
            raise ValueError(f"{move} left a PDAG without a consistent extension")
        cpdag = cpdag_of_dag(extension)
        member = extension if self.knowledge.is_empty() else member_under_knowledge(
            cpdag, self.knowledge)
        if member is None:
            return False
        old = self.cpdag
        x, y = move.source, move.target
        targets = mask_of(v for v in range(self.n) if old.parents[v] != cpdag.parents[v]
                          or old.neighbours[v] != cpdag.neighbours[v])
        targets |= (old.neighbours[x] & old.neighbours[y]) | (
            cpdag.neighbours[x] & cpdag.neighbours[y])
        self.changed_targets, self.changed_sources = targets, bit(x) | bit(y)
        self.cpdag, self.dag = cpdag, member
        self.score += delta
        return True


    def adopt(self, parent_sets: Sequence[Sequence[int]], delta: float) -> None:
        """Move to the class of a DAG within the constraints whose score differs from
        the current one by ``delta``; that DAG becomes the member held."""
        self.dag = [mask_of(ps) for ps in parent_sets]
        self.cpdag = cpdag_of_dag(self.dag)
        self.score += delta


@dataclass
class OperatorQueue:
    """The best operator of one kind for every ordered pair, in a heap by score change.

    Entries carry the pair's version; re-evaluating a pair makes its older entries stale.
    A pair whose best operator failed the path condition or was refused by the knowledge
    is evaluated again with those checks and remembered (``rechecked``), since a later
    change elsewhere can lift them: :meth:`revisit` evaluates such pairs afresh.
    """

    engine: ClassEngine
    kind: str
    budget: Budget | None = None
    heap: list[tuple[float, int, int, int, int]] = field(default_factory=list)
    version: dict[tuple[int, int], int] = field(default_factory=dict)
    refused: dict[tuple[int, int], set[int]] = field(default_factory=dict)
    rechecked: set[tuple[int, int]] = field(default_factory=set)
    stopped: str | None = None  # the budget's stop reason when the first fill ran out

    def __post_init__(self) -> None:
        tolerance = self.engine.tolerance()
        check = FillCheck(self.budget, every=1)  # a pair scores several families
        scorer = self.engine.scorer
        for y in range(self.engine.n):
            for x in self.sources(y):
                if check(scorer.evaluations) is not None:
                    self.stopped = check.stopped
                    return
                self.evaluate(x, y, tolerance=tolerance)

    def sources(self, y: int) -> Iterator[int]:
        """The nodes that can be the first argument of an operator into ``y``."""
        if self.kind == INSERT:
            return iter(range(self.engine.n))
        g = self.engine.cpdag
        return members(g.parents[y] | g.neighbours[y])

    def evaluate(self, x: int, y: int, check_paths: bool = False,
                 tolerance: float | None = None) -> None:
        """Queue the pair's best improving operator (ties: the smaller subset), skipping
        refused ones; with ``check_paths`` only a fully valid one."""
        pair = (x, y)
        version = self.version.get(pair, 0) + 1
        self.version[pair] = version
        if tolerance is None:
            tolerance = self.engine.tolerance()
        refused = self.refused.get(pair, ())
        choices = [c for c in self.engine.choices(self.kind, x, y)
                   if c[1] > tolerance and c[0] not in refused]
        if len(choices) > 1:
            choices.sort(key=lambda c: (-c[1], c[0]))
        if check_paths:
            self.rechecked.add(pair)
            choices = [c for c in choices
                       if self.engine.is_valid(ClassMove(self.kind, x, y, c[0]))][:1]
        if choices:
            subset, delta = choices[0]
            heapq.heappush(self.heap, (-delta, x, y, subset, version))

    def refresh(self) -> None:
        """Evaluate again the pairs the last applied operator can have changed."""
        engine = self.engine
        pairs = {(x, y) for y in members(engine.changed_targets) for x in self.sources(y)}
        for x in members(engine.changed_sources):
            pairs |= {(x, y) for y in (range(engine.n) if self.kind == INSERT
                                       else members(engine.cpdag.adjacent(x)))}
        tolerance = engine.tolerance()
        for pair in sorted(pairs):
            self.refused.pop(pair, None)
            self.rechecked.discard(pair)
            self.evaluate(*pair, tolerance=tolerance)

    def revisit(self) -> bool:
        """Evaluate afresh the pairs last evaluated under the path and knowledge checks;
        False when there are none."""
        pairs = sorted(self.rechecked)
        self.rechecked.clear()
        self.refused.clear()
        tolerance = self.engine.tolerance()
        for pair in pairs:
            self.evaluate(*pair, tolerance=tolerance)
        return bool(pairs)

    def refuse(self, move: ClassMove) -> None:
        pair = (move.source, move.target)
        self.refused.setdefault(pair, set()).add(move.subset)
        self.evaluate(*pair, check_paths=True)

    def _current(self, entry: tuple[float, int, int, int, int]) -> bool:
        return self.version.get((entry[1], entry[2])) == entry[4]

    def pop(self, rng: np.random.Generator | None) -> tuple[ClassMove, float] | None:
        """The best valid operator, ties within the engine's tolerance chosen among by
        ``rng`` (or the lowest pair without one); None when none improves."""
        heap = self.heap
        while heap:
            if not self._current(heap[0]):
                heapq.heappop(heap)
                continue
            near = -heap[0][0] - self.engine.tolerance()
            tied = []
            while heap and -heap[0][0] >= near:
                entry = heapq.heappop(heap)
                if self._current(entry):
                    tied.append(entry)
            tied.sort(key=lambda e: (e[1], e[2], e[3]))
            pick = 0 if rng is None or len(tied) == 1 else int(rng.integers(len(tied)))
            for k, entry in enumerate(tied):
                if k != pick:
                    heapq.heappush(heap, entry)
            minus_delta, x, y, subset, _ = tied[pick]
            move = ClassMove(self.kind, x, y, subset)
            if self.engine.is_valid(move):
                return move, -minus_delta
            self.evaluate(x, y, check_paths=True)
        return None
