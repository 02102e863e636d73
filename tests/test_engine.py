"""The move engine: deltas against fresh full scores, legality from first principles, and
hill climbing under random constraints."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from conftest import (
    ALL_SCORES,
    ConstraintCase,
    DataCase,
    ParentSets,
    apply_to_parent_sets,
    constraint_cases,
    data_cases,
    dependent_codes,
    every_move,
    reference_legal,
    relative_gap,
)
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import build_constraints
from runner.graph import is_acyclic
from runner.scores import build_scorer
from runner.search import Budget, Move, MoveEngine, hill_climb

REL = 1e-9


def fresh_total(case: DataCase, name: str, ess: float, parent_sets: ParentSets) -> float:
    """The full score of a DAG from a scorer built for this call alone (no shared cache)."""
    return build_scorer(name, case.codes, case.arities, ess=ess).total(parent_sets)


@st.composite
def engine_cases(
    draw: st.DrawFn, rows: tuple[int, int] = (50, 300), walk: int = 15
) -> tuple[DataCase, ConstraintCase, str, float, list[int]]:
    data = draw(data_cases(rows=rows))
    constraints = draw(constraint_cases(data.n_vars))
    name = draw(st.sampled_from(ALL_SCORES))
    ess = draw(st.sampled_from([0.5, 1.0, 10.0]))
    picks = draw(st.lists(st.integers(0, 10**6), max_size=walk))
    return data, constraints, name, ess, picks


# --------------------------------------------------------------------------- (a) deltas


@settings(max_examples=40, deadline=None)
@given(case=engine_cases())
def test_deltas_equal_fresh_full_score_differences(
    case: tuple[DataCase, ConstraintCase, str, float, list[int]],
) -> None:
    """Decomposability (Heckerman, Geiger & Chickering 1995): each move's delta, kept
    incrementally by the engine, equals the full score after the move minus the full score
    before it, both from fresh scorers. Tolerance: 1e-9 of the total's magnitude (a delta
    is a difference of two totals)."""
    data, cc, name, ess, picks = case
    scorer = build_scorer(name, data.codes, data.arities, ess=ess)
    engine = MoveEngine(scorer, cc.constraints, cc.start())
    tracked = cc.start()
    for pick in picks:
        legal = engine.legal_moves()
        if not legal:
            break
        move, offered_delta = legal[pick % len(legal)]
        delta = engine.apply(move)
        assert delta == offered_delta
        before = fresh_total(data, name, ess, tracked)
        after_sets = apply_to_parent_sets(tracked, move)
        assert after_sets is not None
        after = fresh_total(data, name, ess, after_sets)
        assert relative_gap(delta, after - before, scale=before) <= REL, (move, delta)
        tracked = after_sets
        assert engine.parent_sets() == tracked
        assert relative_gap(engine.score, after) <= REL
    base = fresh_total(data, name, ess, tracked)
    assert relative_gap(engine.score, base) <= REL
    for move, delta in engine.legal_moves():
        assert np.isfinite(delta), move
        after_sets = apply_to_parent_sets(tracked, move)
        assert after_sets is not None
        expected = fresh_total(data, name, ess, after_sets) - base
        assert relative_gap(delta, expected, scale=base) <= REL, (move, delta, expected)
        assert engine.delta(move) == delta


# --------------------------------------------------------------------------- (b) legality


@settings(max_examples=50, deadline=None)
@given(case=engine_cases(rows=(10, 40), walk=30))
def test_legal_moves_are_exactly_the_admissible_ones(
    case: tuple[DataCase, ConstraintCase, str, float, list[int]],
) -> None:
    """At every graph along a random walk, the moves offered are exactly those that apply
    (the edge is there to delete or reverse, absent to add), keep the graph acyclic, and
    keep every constraint (allowed edges, required edges, the parent cap)."""
    data, cc, name, ess, picks = case
    engine = MoveEngine(build_scorer(name, data.codes, data.arities, ess=ess), cc.constraints,
                        cc.start())
    moves = every_move(data.n_vars)
    for pick in [*picks, None]:
        current = engine.parent_sets()
        assert is_acyclic(current)
        assert cc.constraints.admits(current)
        offered = {m for m, _ in engine.legal_moves()}
        expected = {m for m in moves if reference_legal(current, cc.constraints, m)}
        assert offered == expected, (current, offered ^ expected)
        for m in moves:
            assert engine.is_legal(m) == (m in expected), m
        if pick is None or not offered:
            break
        ordered = sorted(offered)
        engine.apply(ordered[pick % len(ordered)])


def test_reversal_that_would_close_a_cycle_is_not_offered() -> None:
    """a -> b -> c with a -> c: reversing a -> c gives c -> a -> b -> c, a cycle; reversing
    a -> b or b -> c does not (each leaves no other directed path between its ends)."""
    codes = np.zeros((3, 5), dtype=np.uint8)
    engine = MoveEngine(build_scorer("bic", codes, [2, 2, 2]),
                        build_constraints(["a", "b", "c"]), [(), (0,), (0, 1)])
    assert not engine.is_legal(Move("reverse", 0, 2))
    assert engine.is_legal(Move("reverse", 0, 1))
    assert engine.is_legal(Move("reverse", 1, 2))
    assert not engine.is_legal(Move("add", 2, 0))  # a is an ancestor of c
    assert engine.is_legal(Move("delete", 0, 2))


def test_required_forbidden_and_cap_restrict_moves() -> None:
    names = ["a", "b", "c"]
    codes = np.zeros((3, 5), dtype=np.uint8)
    constraints = build_constraints(names, forbidden=[("c", "a")], required=[("a", "b")],
                                    parent_cap=1)
    engine = MoveEngine(build_scorer("bic", codes, [2, 2, 2]), constraints, [(), (0,), ()])
    assert not engine.is_legal(Move("delete", 0, 1))  # required
    assert not engine.is_legal(Move("reverse", 0, 1))  # would drop a required edge
    assert not engine.is_legal(Move("add", 2, 0))  # forbidden
    assert not engine.is_legal(Move("add", 2, 1))  # b is at the cap
    assert engine.is_legal(Move("add", 0, 2))
    assert engine.is_legal(Move("add", 1, 2))
    engine.apply(Move("add", 1, 2))
    # Reversing b -> c would give b a second parent, past the cap of 1.
    assert not engine.is_legal(Move("reverse", 1, 2))
    assert Move("reverse", 1, 2) not in {m for m, _ in engine.legal_moves()}


def test_tiers_forbid_edges_into_earlier_tiers() -> None:
    names = ["a", "b", "c"]
    codes = np.zeros((3, 5), dtype=np.uint8)
    constraints = build_constraints(names, tiers=[["a"], ["b", "c"]], within_tier="forbidden")
    engine = MoveEngine(build_scorer("bic", codes, [2, 2, 2]), constraints, [(), (), ()])
    offered = {m for m, _ in engine.legal_moves()}
    assert offered == {Move("add", 0, 1), Move("add", 0, 2)}


def test_cyclic_start_is_refused() -> None:
    codes = np.zeros((2, 5), dtype=np.uint8)
    with pytest.raises(ValueError, match="cycle"):
        MoveEngine(build_scorer("bic", codes, [2, 2]), build_constraints(["a", "b"]),
                   [(1,), (0,)])


# --------------------------------------------------------------------------- (c) hill climbing


@settings(max_examples=40, deadline=None)
@given(case=engine_cases())
def test_hill_climb_honours_constraints(
    case: tuple[DataCase, ConstraintCase, str, float, list[int]],
) -> None:
    """From the required edges, greedy hill climbing ends on an acyclic graph that the
    constraints admit, holding every required edge, at a local optimum whose score is the
    fresh full score, with a trace whose scores never go down."""
    data, cc, name, ess, _ = case
    engine = MoveEngine(build_scorer(name, data.codes, data.arities, ess=ess), cc.constraints,
                        cc.start())
    start_score = engine.score
    outcome = hill_climb(engine, Budget())
    graph = [tuple(ps) for ps in outcome.parent_sets]
    assert is_acyclic(graph)
    assert cc.constraints.admits(graph)
    assert all(i in graph[j] for i, j in cc.constraints.required)
    assert outcome.stop_reason == "local_optimum"
    assert outcome.steps == len(outcome.trace)
    assert relative_gap(outcome.score, fresh_total(data, name, ess, graph)) <= REL
    best = engine.best_move()
    assert best is None or best[1] <= engine.tolerance()
    scores = [start_score] + [row.score for row in outcome.trace]
    assert all(b > a for a, b in itertools.pairwise(scores))


def test_hill_climb_respects_the_step_budget() -> None:
    rng = np.random.default_rng(5)
    codes = dependent_codes([3, 3, 3, 3, 3], 400, rng)
    engine = MoveEngine(build_scorer("bic", codes, [3] * 5),
                        build_constraints([f"v{i}" for i in range(5)]))
    outcome = hill_climb(engine, Budget(max_steps=2))
    assert outcome.steps == 2
    assert outcome.stop_reason == "max_steps"
