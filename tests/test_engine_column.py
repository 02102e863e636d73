"""The move engine's column fill and legality against the one-family-at-a-time engine:
the same deltas, masks, moves, counters and budget stops (the record stores the
evaluations and cache hits, and an evaluation budget stops a fill where it stops)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np
from conftest import ALL_SCORES, ConstraintCase, DataCase, constraint_cases, data_cases, random_dag
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import Constraints, build_constraints
from runner.scores import build_scorer
from runner.scores.cache import parent_mask
from runner.search import Budget, MoveEngine, hill_climb
from runner.search.budget import FillCheck
from runner.search.engine import KINDS, Move


class FamilyAtATimeEngine(MoveEngine):
    """The engine as it was: every variable visited, one family score each, the
    reversal paths by a float matrix product, and the best move chosen from the dense
    n x n delta tables."""

    def _refresh_column(self, child: int, check: FillCheck | None = None) -> bool:
        scorer = self.scorer
        mask = parent_mask(self.parents(child))
        base = scorer.family_by_mask(child, mask)
        self.family[child] = base
        column = np.full(self.n, np.nan)
        room = int(self.adjacency[:, child].sum()) < self.cap
        for p in range(self.n):
            if p == child:
                continue
            if check is not None and check(scorer.evaluations) is not None:
                return False
            if self.adjacency[p, child]:
                if not self.required[p, child]:
                    column[p] = scorer.family_by_mask(child, mask & ~(1 << p)) - base
            elif room and self.allowed[p, child]:
                column[p] = scorer.family_by_mask(child, mask | (1 << p)) - base
        self.toggle[:, child] = column
        return True

    def legal_masks(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        a = self.adjacency
        room = a.sum(axis=0) < self.cap
        add = self.allowed & ~a & ~self.reach.T & room[None, :]
        delete = a & ~self.required
        other_path = (a.astype(np.float32) @ self.reach.astype(np.float32)) > 0
        reverse = delete & self.allowed.T & room[:, None] & ~other_path
        return add, delete, reverse

    def best_move(self, exclude: Iterable[Move] = (),
                  rng: np.random.Generator | None = None,
                  kinds: Sequence[str] = KINDS) -> tuple[Move, float] | None:
        return self._best_in_tables(exclude, rng, kinds)  # the dense tables, always


Case = tuple[DataCase, ConstraintCase, str, int | None, float | None, int]


@st.composite
def climb_cases(draw: st.DrawFn) -> Case:
    data = draw(data_cases(n_vars=(3, 8), rows=(30, 200)))
    constraints = draw(constraint_cases(data.n_vars))
    score = draw(st.sampled_from(ALL_SCORES))
    evaluations = draw(st.one_of(st.none(), st.integers(0, 80)))
    seconds = draw(st.sampled_from([None, 1e6]))
    seed = draw(st.integers(0, 1000))
    return data, constraints, score, evaluations, seconds, seed


@settings(max_examples=60, deadline=None)
@given(case=climb_cases(), numba=st.booleans())
def test_a_climb_is_the_same_as_one_family_at_a_time(case: Case, numba: bool) -> None:
    """Hill climbing from the required edges, under an evaluation budget that may stop
    the first fill in the middle of a column: the same graph, score, steps, stop reason,
    evaluations and cache hits, and the same deltas left in the table."""
    data, constraints, score, evaluations, seconds, seed = case
    outcomes = []
    for engine_type in (FamilyAtATimeEngine, MoveEngine):
        scorer = build_scorer(score, data.codes, data.arities)
        if numba and engine_type is MoveEngine:
            scorer._choice = "numba"  # type: ignore[attr-defined]
        budget = Budget(max_evaluations=evaluations, max_seconds=seconds)
        engine = engine_type(scorer, constraints.constraints, constraints.start(), budget)
        engine.SPARSE_SHARE = 1.0  # the new engine's moves over the known pairs only
        outcome = hill_climb(engine, budget, rng=np.random.default_rng(seed))
        outcomes.append((outcome.parent_sets, outcome.score, outcome.steps,
                         outcome.stop_reason, outcome.evaluations, outcome.cache_hits,
                         engine.stopped, engine.toggle.tobytes()))
    assert outcomes[0] == outcomes[1]


def _random_problem(n: int, rng: np.random.Generator, density: float, cap: int,
                    required_share: float = 0.0) -> tuple[list[tuple[int, ...]], Constraints]:
    """A random DAG and constraints it satisfies: random forbidden pairs off its edges,
    a parent cap it keeps, a share of its edges required."""
    parent_sets = random_dag(n, rng, density)
    names = [f"v{i}" for i in range(n)]
    forbidden = [(names[a], names[b]) for a in range(n) for b in range(n)
                 if a != b and rng.random() < 0.2 and a not in parent_sets[b]]
    cap = max(cap, max((len(ps) for ps in parent_sets), default=0))
    required = [(names[p], names[c]) for c, ps in enumerate(parent_sets) for p in ps
                if rng.random() < required_share]
    return parent_sets, build_constraints(names, forbidden=forbidden, required=required,
                                          parent_cap=cap)


@settings(max_examples=60, deadline=None)
@given(n=st.integers(2, 12), seed=st.integers(0, 10**6), cap=st.integers(1, 4),
       density=st.sampled_from([0.1, 0.3, 0.6]))
def test_the_legal_masks_equal_those_of_the_matrix_product(
        n: int, seed: int, cap: int, density: float) -> None:
    """Reversal legality (i reaches j other than by the edge) by boolean rows of the
    edges equals the float matrix product's, on random DAGs with random forbidden pairs."""
    parent_sets, constraints = _random_problem(n, np.random.default_rng(seed), density, cap)
    codes = np.zeros((n, 1), dtype=np.uint8)
    scorer = build_scorer("bic", codes, np.full(n, 2, dtype=np.int64))
    new = MoveEngine(scorer, constraints, parent_sets)
    old = FamilyAtATimeEngine(scorer, constraints, parent_sets)
    for got, expected in zip(new.legal_masks(), old.legal_masks(), strict=True):
        assert np.array_equal(got, expected)


class Recorder:
    """A scorer that records the candidates of each column it is asked for."""

    def __init__(self, n: int) -> None:
        self.inner = build_scorer("bic", np.zeros((n, 1), np.uint8), np.full(n, 2, np.int64))
        self.columns: list[tuple[int, list[int]]] = []

    def __getattr__(self, name: str) -> object:
        return getattr(self.inner, name)

    def column_scores(self, child: int, mask: int, candidates: list[int]) -> np.ndarray:
        self.columns.append((child, list(candidates)))
        return self.inner.column_scores(child, mask, candidates)


def test_a_column_asks_only_for_the_allowed_and_present_parents() -> None:
    """With most pairs forbidden (candidate parents only), a fill scores O(n k) families."""
    n = 12
    names = [f"v{i}" for i in range(n)]
    keep = {(i, (i + 1) % n) for i in range(n)} | {(i, (i + 2) % n) for i in range(n)}
    forbidden = [(names[a], names[b]) for a in range(n) for b in range(n)
                 if a != b and (a, b) not in keep]
    recorder = Recorder(n)
    MoveEngine(recorder, build_constraints(names, forbidden=forbidden))  # type: ignore[arg-type]
    assert recorder.columns == [(c, sorted([(c - 1) % n, (c - 2) % n])) for c in range(n)]


@settings(max_examples=80, deadline=None)
@given(n=st.integers(2, 9), seed=st.integers(0, 10**6), cap=st.integers(1, 4),
       density=st.sampled_from([0.0, 0.2, 0.5]), ties=st.booleans())
def test_the_best_move_over_known_pairs_is_the_dense_tables_choice(
        n: int, seed: int, cap: int, density: float, ties: bool) -> None:
    """On random DAGs, constraints and data (with many exact ties when the data are
    constant), with random moves excluded (tabu), random kinds and seeded tie-breaking,
    the best move found over the pairs with a known delta is the one the dense n x n
    tables give (the engine as it was), delta included."""
    rng = np.random.default_rng(seed)
    parent_sets, constraints = _random_problem(n, rng, density, cap, required_share=0.2)
    rows = 40
    codes = (np.zeros((n, rows)) if ties else rng.integers(0, 3, (n, rows))).astype(np.uint8)
    scorer = build_scorer("bic", codes, np.full(n, 3, dtype=np.int64))
    engine = MoveEngine(scorer, constraints, parent_sets)
    engine.SPARSE_SHARE = 1.0  # always over the known pairs (wide data with candidates)
    moves = [Move(k, s, t) for k in KINDS for s in range(n) for t in range(n) if s != t]
    for trial in range(4):
        exclude = [moves[i] for i in rng.choice(len(moves), size=min(len(moves), trial * 2),
                                                 replace=False)]
        kinds = [k for k in KINDS if rng.random() < 0.8] or ["add"]
        tie_seed = int(rng.integers(1000))
        got = engine.best_move(exclude, np.random.default_rng(tie_seed), kinds)
        expected = FamilyAtATimeEngine.best_move(engine, exclude,
                                                 np.random.default_rng(tie_seed), kinds)
        assert got == expected
        assert engine.best_move(exclude, None, kinds) == FamilyAtATimeEngine.best_move(
            engine, exclude, None, kinds)


class SmallBatchEngine(MoveEngine):
    """The engine computing a few columns ahead at a time (batch boundaries inside the
    fill, where an evaluation budget may stop it)."""

    PREFETCH_FAMILIES = 7


@settings(max_examples=40, deadline=None)
@given(case=climb_cases())
def test_columns_computed_ahead_change_nothing(case: Case) -> None:
    """A scorer with a batch backend (values computed ahead, then taken by the lookups)
    gives the same climb, counters, budget stop and deltas as one computing at each
    lookup: what is computed ahead is neither cached nor counted until asked for."""
    data, constraints, score, evaluations, seconds, seed = case
    outcomes = []
    for batches in (False, True):
        scorer = build_scorer(score, data.codes, data.arities)
        scorer.batches = batches  # type: ignore[misc]
        budget = Budget(max_evaluations=evaluations, max_seconds=seconds)
        engine = SmallBatchEngine(scorer, constraints.constraints, constraints.start(), budget)
        outcome = hill_climb(engine, budget, rng=np.random.default_rng(seed))
        outcomes.append((outcome.parent_sets, outcome.score, outcome.steps,
                         outcome.stop_reason, outcome.evaluations, outcome.cache_hits,
                         engine.stopped, engine.toggle.tobytes()))
        assert not scorer._ready  # type: ignore[attr-defined]
    assert outcomes[0] == outcomes[1]
