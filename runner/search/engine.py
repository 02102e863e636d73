"""The move engine shared by every search method.

It holds one DAG and knows the three operators on it (add, delete and reverse an edge),
which moves are legal (acyclicity, the allowed-edge matrix from tiers and forbidden
pairs, required edges, the parent cap), and every move's score change. Search methods
only choose among the moves the engine offers.

Deltas. Because the score decomposes over families, the change of adding or deleting
i -> j touches only the family of j, and a reversal touches the families of i and j
(Heckerman, Geiger & Chickering 1995). The engine keeps a table ``toggle[i, j]``: the
change of family j's score when i enters or leaves j's parent set. Column j depends
only on j's parent set, so after a move only the columns of the children whose parent
sets changed are recomputed: the present parents that may leave and the allowed ones
that may enter (O(k) families when the allowed matrix holds k candidate parents per
variable), scored together by :meth:`~runner.scores.protocol.Scorer.column_scores` (the
count scorer builds the parent configuration code once for the whole column), with the
cache and counters of one family at a time.

Acyclicity. A reachability matrix ``reach[a, b]`` (a directed path a -> ... -> b of one
or more edges) is kept up to date: adding i -> j makes a cycle exactly when
``reach[j, i]``; reversing i -> j makes one exactly when i reaches j by a path other
than the edge itself, that is when another child of i reaches j: checked for the edges
only, in boolean arithmetic (O(e n), no floating-point product). An addition updates the
matrix by one outer product, O(n^2); a deletion recomputes it in topological order,
O(n (n + e)) with vectorised rows.

Budget. Filling the first delta table scores n (n - 1) families, which on wide data
takes far longer than a step. Given a budget, the fill checks it every few families
(:class:`~runner.search.budget.FillCheck`, consulted as if at every variable of a
column, the candidates before each consultation scored first, so that it stops where and
with the evaluations one family at a time would); when it runs out, the engine keeps the start
graph with its family scores, leaves the unfilled deltas out and sets ``stopped`` to the
stop reason: the searches then stop before choosing any move.

Ties. A search compares only these values: the deltas in ``toggle`` (one subtraction of
two family scores each; a reversal's delta adds two of them), and the tolerance
``RELATIVE_TOLERANCE * max(1, |score|)``, where ``score`` is the exactly rounded sum of
the family scores (``math.fsum``). A move improves when its delta exceeds the
tolerance; moves whose deltas are within the tolerance of the best are tied, and the
tie goes to the run's seeded generator or, without one, to the first kind in ``KINDS``,
then the lowest source, then the lowest target. The discrete family scores are the
same bits on every machine (:mod:`runner.scores.tables`), and so are these values and
every tie decision made from them.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from runner.constraints import Constraints
from runner.graph import topological_order
from runner.scores.cache import parent_mask
from runner.scores.protocol import Scorer
from runner.search.budget import Budget, FillCheck

KINDS = ("add", "delete", "reverse")

# A move counts as an improvement only when its delta exceeds this share of the score's
# magnitude: deltas are differences of large sums, and equal-scoring moves (a covered
# edge reversed under a score-equivalent score) must not look like gains from rounding.
RELATIVE_TOLERANCE = 1e-10


@dataclass(frozen=True, order=True)
class Move:
    """An operator applied to the edge ``source -> target`` (for reverse: the edge as it is)."""

    kind: str
    source: int
    target: int


def _consultations(check: FillCheck | None, count: int) -> range:
    """The positions among the next ``count`` calls of ``check`` at which it would look
    at its budget (every ``check.every`` calls; none without a budget that can stop a
    fill, or once it has stopped)."""
    if check is None or check.stopped is not None or check.budget is None or (
            check.budget.max_evaluations is None and check.budget.max_seconds is None):
        return range(0)
    return range((-check.calls) % check.every, count, check.every)


class BoundEngine:
    """What every search engine holds: a scorer and constraints over the same variables."""

    def __init__(self, scorer: Scorer, constraints: Constraints) -> None:
        if constraints.n_vars != scorer.n_vars:
            raise ValueError("constraints and data disagree on the number of variables")
        self.scorer = scorer
        self.constraints = constraints
        self.n = scorer.n_vars


class MoveEngine(BoundEngine):
    """A DAG under constraints with the score change of every move kept up to date.

    ``SPARSE_SHARE``: the best move is looked for over the pairs with a known delta when
    they are at most this share of all pairs (candidate parents), else over the dense
    tables (see :meth:`best_move`).

    With ``budget``, filling the first delta table stops when the budget runs out;
    ``stopped`` then holds the stop reason (None when the table is complete) and no move
    may be chosen: the engine holds the start graph and its score.
    """

    SPARSE_SHARE = 0.05
    #: Families of the first fill computed ahead in one batch by a scorer with a batch
    #: backend (a pool's workers, or the workers holding the rows).
    PREFETCH_FAMILIES = 20_000

    def __init__(
        self,
        scorer: Scorer,
        constraints: Constraints,
        parent_sets: Sequence[Iterable[int]] | None = None,
        budget: Budget | None = None,
    ) -> None:
        super().__init__(scorer, constraints)
        n = self.n
        self.allowed = constraints.allowed
        self.required = constraints.required_matrix()
        self.cap = constraints.cap()
        self.adjacency = np.zeros((n, n), dtype=bool)
        if parent_sets is not None:
            for child, parents in enumerate(parent_sets):
                for p in parents:
                    self.adjacency[p, child] = True
        if topological_order(self.parent_sets()) is None:
            raise ValueError("the starting graph has a cycle")
        self.reach = np.zeros((n, n), dtype=bool)
        self._recompute_reach()
        self.family = np.zeros(n, dtype=np.float64)
        self.toggle = np.full((n, n), np.nan, dtype=np.float64)
        # per column, the sources whose toggle delta is known (a move may exist)
        self._movable: list[np.ndarray] = [np.zeros(0, dtype=np.intp)] * n
        self._known = 0  # their total: the pairs with a known delta
        check = FillCheck(budget)
        self.stopped: str | None = None
        ahead = self._prefetch_size()
        for child in range(n):
            if self.stopped is None:
                if ahead and child % ahead == 0:  # the next columns in one batch
                    scorer.prefetch([self._column_request(c)
                                     for c in range(child, min(child + ahead, n))])
                if not self._refresh_column(child, check):
                    self.stopped = check.stopped
            else:  # the start graph's score stays whole: its family scores only
                self.family[child] = scorer.family_by_mask(
                    child, parent_mask(self.parents(child)))
        if ahead:
            scorer.discard_ready()

    # -- the graph -------------------------------------------------------------------
    def parents(self, child: int) -> tuple[int, ...]:
        return tuple(np.flatnonzero(self.adjacency[:, child]).tolist())

    def parent_sets(self) -> list[tuple[int, ...]]:
        return [self.parents(c) for c in range(self.n)]

    @property
    def score(self) -> float:
        """The DAG's score: the exactly rounded sum of the family scores (``math.fsum``),
        the same bits whatever the order of the additions."""
        return math.fsum(self.family.tolist())

    def tolerance(self) -> float:
        return RELATIVE_TOLERANCE * max(1.0, abs(self.score))

    # -- deltas ----------------------------------------------------------------------
    def _column(self, child: int) -> tuple[int, np.ndarray]:
        """Column ``child``'s parent mask and the candidates whose toggle deltas it keeps:
        the present parents that may leave, and the allowed ones that may enter while the
        cap leaves room."""
        present = self.adjacency[:, child]
        mask = parent_mask(np.flatnonzero(present).tolist())
        movable = present & ~self.required[:, child]
        if int(present.sum()) < self.cap:
            movable |= self.allowed[:, child] & ~present
        movable[child] = False
        return mask, np.flatnonzero(movable)

    def _column_request(self, child: int) -> tuple[int, int, list[int]]:
        """What :meth:`_refresh_column` will ask of the scorer for ``child``, as a request
        of :meth:`~runner.scores.cache.CachedScorer.prefetch`."""
        mask, candidates = self._column(child)
        return child, mask, candidates.tolist()

    def _prefetch_size(self) -> int:
        """How many columns of the first fill are computed ahead together: 0 when the
        scorer has no batch backend (``batches``), else enough columns for about
        :attr:`PREFETCH_FAMILIES` families (a budget is consulted between batches)."""
        if not getattr(self.scorer, "batches", False):
            return 0
        return max(1, self.PREFETCH_FAMILIES // max(1, self.n - 1))

    def _refresh_columns(self, children: Sequence[int]) -> None:
        """Refresh the columns of ``children`` after a move, computed ahead in one batch
        when the scorer has a batch backend."""
        batched = getattr(self.scorer, "batches", False)
        if batched:
            self.scorer.prefetch([self._column_request(c) for c in children])
        for child in children:
            self._refresh_column(child)
        if batched:
            self.scorer.discard_ready()

    def _refresh_column(self, child: int, check: FillCheck | None = None) -> bool:
        """Recompute family ``child`` and the toggle deltas of its candidate parents (the
        present ones that may leave, and the allowed ones that may enter while the cap
        leaves room), all scored in one column (:meth:`Scorer.column_scores`); False
        (the column left as it was, the family score updated) when ``check`` says the
        budget ran out.

        The check is consulted as if at every variable other than the child, in order,
        and the candidates before each consultation are scored first, so the fill stops
        at the same place and with the same evaluations as one family at a time.
        """
        scorer = self.scorer
        mask, candidates = self._column(child)
        base = scorer.family_by_mask(child, mask)
        self.family[child] = base
        column = np.full(self.n, np.nan)
        others = self.n - 1  # the variables the check is consulted at
        done = 0  # candidates scored so far
        for position in _consultations(check, others):
            # the variable at that position, and the candidates before it
            variable = position if position < child else position + 1
            upto = int(np.searchsorted(candidates, variable))
            if upto > done:
                part = candidates[done:upto]
                column[part] = scorer.column_scores(child, mask, part.tolist()) - base
                done = upto
            assert check is not None and check.budget is not None
            check.stopped = check.budget.fill_exhausted(scorer.evaluations)
            if check.stopped is not None:
                check.calls += position + 1
                return False
        if done < candidates.size:
            part = candidates[done:]
            column[part] = scorer.column_scores(child, mask, part.tolist()) - base
        if check is not None:
            check.calls += others
        self.toggle[:, child] = column
        self._known += candidates.size - self._movable[child].size
        self._movable[child] = candidates
        return True

    def delta_for_add(self, source: int, target: int) -> float:
        return float(self.toggle[source, target])

    def delta_for_delete(self, source: int, target: int) -> float:
        return float(self.toggle[source, target])

    def delta_for_reverse(self, source: int, target: int) -> float:
        return float(self.toggle[source, target] + self.toggle[target, source])

    def delta(self, move: Move) -> float:
        if move.kind == "reverse":
            return self.delta_for_reverse(move.source, move.target)
        return float(self.toggle[move.source, move.target])

    # -- legality --------------------------------------------------------------------
    def legal_masks(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Boolean (n x n) masks of the legal add, delete and reverse moves."""
        a = self.adjacency
        room = a.sum(axis=0) < self.cap
        add = self.allowed & ~a & ~self.reach.T & room[None, :]
        delete = a & ~self.required
        reverse = delete & self.allowed.T & room[:, None]
        sources, targets = np.nonzero(reverse)
        if sources.size:
            # i reaches j other than by the edge i -> j: some child c != j of i reaches j
            # (reach[j, j] is false in a DAG), for the edges only, in boolean arithmetic
            other_path = (a[sources] & self.reach[:, targets].T).any(axis=1)
            reverse[sources[other_path], targets[other_path]] = False
        return add, delete, reverse

    def delta_tables(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Deltas of the legal add, delete and reverse moves; -inf where illegal."""
        add_ok, delete_ok, reverse_ok = self.legal_masks()
        neg = -np.inf
        add = np.where(add_ok, self.toggle, neg)
        delete = np.where(delete_ok, self.toggle, neg)
        with np.errstate(invalid="ignore"):
            reverse = np.where(reverse_ok, self.toggle + self.toggle.T, neg)
        return add, delete, reverse

    def legal_moves(self) -> list[tuple[Move, float]]:
        """Every legal move with its delta, in canonical order (kind, source, target)."""
        out: list[tuple[Move, float]] = []
        for kind, table in zip(KINDS, self.delta_tables(), strict=True):
            sources, targets = np.nonzero(np.isfinite(table))
            out.extend(
                (Move(kind, int(s), int(t)), float(table[s, t]))
                for s, t in zip(sources, targets, strict=True)
            )
        return out

    def is_legal(self, move: Move) -> bool:
        masks = dict(zip(KINDS, self.legal_masks(), strict=True))
        return bool(masks[move.kind][move.source, move.target])

    def _best_in_tables(self, exclude: Iterable[Move], rng: np.random.Generator | None,
                        kinds: Sequence[str]) -> tuple[Move, float] | None:
        """:meth:`best_move` over the dense n x n delta tables."""
        tables = self.delta_tables()
        for kind, table in zip(KINDS, tables, strict=True):
            if kind not in kinds:
                table.fill(-np.inf)
        for move in exclude:
            tables[KINDS.index(move.kind)][move.source, move.target] = -np.inf
        best = max(float(t.max()) if t.size else -np.inf for t in tables)
        if not np.isfinite(best):
            return None
        near = best - self.tolerance()
        tied = [(kind, int(h)) for kind, table in zip(KINDS, tables, strict=True)
                for h in np.flatnonzero(table >= near)]
        kind, flat = tied[0] if rng is None or len(tied) == 1 else tied[
            int(rng.integers(len(tied)))]
        s, t = divmod(flat, self.n)
        return Move(kind, s, t), float(tables[KINDS.index(kind)][s, t])

    def _candidate_moves(self) -> tuple[np.ndarray, np.ndarray]:
        """Sources and targets of every pair with a known toggle delta, in ascending
        flat order (source, then target): the only pairs a move can be on."""
        sizes = [c.size for c in self._movable]
        if not self._known:
            empty = np.zeros(0, dtype=np.intp)
            return empty, empty
        sources = np.concatenate(self._movable)
        targets = np.repeat(np.arange(self.n, dtype=np.intp), sizes)
        order = np.argsort(sources * self.n + targets)
        return sources[order], targets[order]

    def best_move(self, exclude: Iterable[Move] = (),
                  rng: np.random.Generator | None = None,
                  kinds: Sequence[str] = KINDS) -> tuple[Move, float] | None:
        """The legal move of one of ``kinds`` with the largest delta, ``exclude`` aside.

        Deltas within the tolerance of the largest count as tied: the score-equivalent
        pair X -> Y and Y -> X, say, differ only by rounding. Ties go to the first kind in
        ``KINDS`` (add, delete, reverse), then the lowest source, then the lowest target,
        so the choice follows this rule and not the last bits of a sum.

        When few pairs have a known delta (candidate parents: O(n k) of them, at most
        :attr:`SPARSE_SHARE` of the n x n pairs), only those are looked at, plus O(e n)
        for the reversals' other paths; otherwise the n x n tables of
        :meth:`delta_tables`. Both give the same move (the same legality rules, the same
        order of ties).
        """
        if self._known > self.SPARSE_SHARE * self.n * self.n:
            return self._best_in_tables(exclude, rng, kinds)
        sources, targets = self._candidate_moves()
        a = self.adjacency
        present = a[sources, targets]
        room = a.sum(axis=0) < self.cap
        values = self.toggle[sources, targets]
        legal = {
            "add": ~present & self.allowed[sources, targets] & ~self.reach[targets, sources]
            & room[targets],
            "delete": present & ~self.required[sources, targets],
        }
        reverse = legal["delete"] & self.allowed[targets, sources] & room[sources]
        edges = np.flatnonzero(reverse)
        if edges.size:
            s_e, t_e = sources[edges], targets[edges]
            other_path = (a[s_e] & self.reach[:, t_e].T).any(axis=1)
            reverse[edges[other_path]] = False
        legal["reverse"] = reverse
        with np.errstate(invalid="ignore"):
            reversed_values = values + self.toggle[targets, sources]
        deltas = {"add": values, "delete": values, "reverse": reversed_values}
        chosen = {kind: np.where(legal[kind], deltas[kind], -np.inf) if kind in kinds
                  else np.full(values.size, -np.inf) for kind in KINDS}
        excluded = list(exclude)
        if excluded:
            flat = sources * self.n + targets
            for move in excluded:
                at = np.searchsorted(flat, move.source * self.n + move.target)
                if at < flat.size and flat[at] == move.source * self.n + move.target:
                    chosen[move.kind][at] = -np.inf
        best = max((float(v.max()) if v.size else -np.inf) for v in chosen.values())
        if not np.isfinite(best):
            return None
        near = best - self.tolerance()
        tied = [(kind, int(i)) for kind in KINDS for i in np.flatnonzero(chosen[kind] >= near)]
        kind, i = tied[0] if rng is None or len(tied) == 1 else tied[
            int(rng.integers(len(tied)))]
        return Move(kind, int(sources[i]), int(targets[i])), float(chosen[kind][i])

    # -- applying moves --------------------------------------------------------------
    def apply(self, move: Move) -> float:
        """Apply a legal move; return its delta. Only touched columns are recomputed."""
        delta = self.delta(move)
        s, t = move.source, move.target
        if move.kind == "add":
            self.adjacency[s, t] = True
            self._add_reach(s, t)
            self._refresh_columns([t])
        elif move.kind == "delete":
            self.adjacency[s, t] = False
            self._recompute_reach()
            self._refresh_columns([t])
        elif move.kind == "reverse":
            self.adjacency[s, t] = False
            self.adjacency[t, s] = True
            self._recompute_reach()
            self._refresh_columns([t, s])
        else:
            raise ValueError(f"unknown move kind {move.kind!r}")
        return delta

    def _add_reach(self, source: int, target: int) -> None:
        into = self.reach[:, source].copy()
        into[source] = True
        out_of = self.reach[target].copy()
        out_of[target] = True
        self.reach |= np.outer(into, out_of)

    def _recompute_reach(self) -> None:
        order = topological_order(self.parent_sets())
        if order is None:  # pragma: no cover - legality checks prevent this
            raise ValueError("graph became cyclic")
        reach = np.zeros((self.n, self.n), dtype=bool)
        for v in reversed(order):
            children = np.flatnonzero(self.adjacency[v])
            if children.size:
                row = np.asarray(reach[children].any(axis=0))
                row[children] = True
                reach[v] = row
        self.reach = reach
