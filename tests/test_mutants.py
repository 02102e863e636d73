"""Tests aimed at mutations of the code that the rest of the suite let survive.

Each test states the property it checks. Four rules are pinned down here:

* tiers with ``within_tier: allowed`` allow same-tier edges both ways (and ``forbidden``
  refuses them), checked against a reference rule written independently of the code;
* ``first-ascent`` applies the first improving move of its seeded order, not the best one;
* tabu search takes a tabu move that aspires (reaches a score better than any seen so
  far) and refuses one that does not (Glover 1989);
* ``stochastic`` draws an improving move with probability proportional to its gain.

The search tests run on a hand-built decomposable score (:class:`TableScorer`: each
family's score read from a table), so every delta, tie and local optimum is known
exactly and chosen by the test, not found by a scan of random data.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping

import numpy as np
import pytest
from conftest import DataCase, data_cases
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scipy import stats

from runner.constraints import build_constraints
from runner.scores import build_scorer
from runner.scores.cache import CachedScorer, mask_members
from runner.scores.protocol import Scorer
from runner.search import Budget, Move, MoveEngine, local_search
from runner.search.tabu import tabu_search

# --------------------------------------------------------------------------- a table score


class TableScorer(CachedScorer):
    """A decomposable score given family by family: ``table[(child, parents)]`` is the
    score of ``child`` with exactly the (sorted) ``parents``; a family not in the table
    scores ``default`` (0 for the empty parent set). The same cache and counters as the
    data scorers (like them, it implements only ``_compute``)."""

    def __init__(self, n_vars: int, table: Mapping[tuple[int, tuple[int, ...]], float],
                 default: float) -> None:
        super().__init__(n_vars, 1)
        self.table = dict(table)
        self.default = default

    def _compute(self, child: int, mask: int) -> float:
        parents = mask_members(mask)
        if (child, parents) in self.table:
            return self.table[(child, parents)]
        return 0.0 if not parents else self.default


# Four variables, empty start. The only improving moves are four additions, with the
# gains below (every other addition costs 5, and larger parent sets 10).
GAINS = {Move("add", 0, 3): 1.0, Move("add", 1, 3): 2.0, Move("add", 2, 3): 3.0,
         Move("add", 0, 1): 4.0}
STEEPEST = Move("add", 0, 1)


def gains_scorer() -> TableScorer:
    table: dict[tuple[int, tuple[int, ...]], float] = {}
    for child in range(4):
        for parent in range(4):
            if parent != child:
                table[(child, (parent,))] = GAINS.get(Move("add", parent, child), -5.0)
    return TableScorer(4, table, default=-10.0)


def first_moves(method: str, seeds: range, scorer: Scorer) -> list[Move]:
    """The first move ``method`` applies from the empty graph, one run per seed."""
    constraints = build_constraints([f"v{i}" for i in range(scorer.n_vars)])
    out = []
    for seed in seeds:
        search = local_search(method, np.random.default_rng(seed))
        trace = search(MoveEngine(scorer, constraints), Budget(max_steps=1)).trace
        out.append(Move(trace[0].move, trace[0].source, trace[0].target))
    return out


def chi_square_p_value(moves: list[Move], expected: Mapping[Move, float]) -> float:
    """Pearson's chi-square goodness of fit of the observed moves to the probabilities
    ``expected`` (a move outside them gives p = 0)."""
    counts = Counter(moves)
    if set(counts) - set(expected):
        return 0.0
    observed = [counts[m] for m in expected]
    probabilities = np.array(list(expected.values()))
    return float(stats.chisquare(observed, probabilities * len(moves)).pvalue)


# Significance of the distribution tests. The seeds are fixed, so each test is
# deterministic; over a random choice of seeds the correct code would fail with
# probability ALPHA (the chi-square approximation is good here: every expected count is
# at least 100).
ALPHA = 1e-6


# --------------------------------------------------------------------------- 1. tiers


def reference_allowed(tiers: list[list[str]], within_tier: str, source: str,
                      target: str) -> bool:
    """The tier rule from the spec's wording, independently of the code: no self-loops;
    a variable in no tier is unconstrained; an edge from an earlier tier to a later one is
    allowed, from a later to an earlier one never; within one tier only when
    ``within_tier`` is ``allowed``."""
    if source == target:
        return False
    position = {name: k for k, tier in enumerate(tiers) for name in tier}
    if source not in position or target not in position:
        return True
    if position[source] == position[target]:
        return within_tier == "allowed"
    return position[source] < position[target]


@st.composite
def tier_layouts(draw: st.DrawFn) -> tuple[list[str], list[list[str]]]:
    """Names and tiers: each variable in one of up to four tiers or in none; variable
    indices unrelated to the tier order; tiers listed in a shuffled inner order."""
    n = draw(st.integers(2, 8))
    n_tiers = draw(st.integers(1, 4))
    tier_of = draw(st.lists(st.integers(-1, n_tiers - 1), min_size=n, max_size=n))
    names = [f"v{i}" for i in range(n)]
    tiers = [draw(st.permutations([names[v] for v in range(n) if tier_of[v] == t]))
             for t in range(n_tiers)]
    return names, [list(t) for t in tiers if t]


@settings(max_examples=200, deadline=None)
@given(tier_layouts(), st.sampled_from(["allowed", "forbidden"]))
@example((["a", "b", "c", "d"], [["a", "b"], ["c"]]), "allowed")
@example((["a", "b", "c", "d"], [["a", "b"], ["c"]]), "forbidden")
def test_tier_rule_matches_the_reference_rule_edge_by_edge(
    layout: tuple[list[str], list[list[str]]], within_tier: str
) -> None:
    # Property: build_constraints' allowed matrix is the reference tier rule, pair by pair.
    names, tiers = layout
    allowed = build_constraints(names, tiers, within_tier).allowed
    for i, source in enumerate(names):
        for j, target in enumerate(names):
            assert bool(allowed[i, j]) == reference_allowed(tiers, within_tier, source,
                                                            target), (source, target)


def test_within_tier_allowed_and_forbidden_on_a_named_case() -> None:
    # Property: tiers [a, b] then [c], d in no tier. With within_tier: allowed, a -> b and
    # b -> a are both allowed, a -> c (earlier to later) is and c -> a is not, and d is
    # unconstrained; with forbidden, a -> b and b -> a are refused and the rest unchanged.
    names = ["a", "b", "c", "d"]
    tiers = [["a", "b"], ["c"]]

    def edge(constraints_allowed: np.ndarray, s: str, t: str) -> bool:
        return bool(constraints_allowed[names.index(s), names.index(t)])

    allowed = build_constraints(names, tiers, "allowed").allowed
    assert edge(allowed, "a", "b") and edge(allowed, "b", "a")
    assert edge(allowed, "a", "c") and edge(allowed, "b", "c")
    assert not edge(allowed, "c", "a") and not edge(allowed, "c", "b")
    assert all(edge(allowed, "d", x) and edge(allowed, x, "d") for x in "abc")
    forbidden = build_constraints(names, tiers, "forbidden").allowed
    assert not edge(forbidden, "a", "b") and not edge(forbidden, "b", "a")
    assert edge(forbidden, "a", "c") and not edge(forbidden, "c", "a")
    assert all(edge(forbidden, "d", x) and edge(forbidden, x, "d") for x in "abc")
    # the default is "allowed"
    assert (build_constraints(names, tiers).allowed == allowed).all()


# --------------------------------------------------------------------------- 2. first-ascent


@pytest.mark.parametrize("sample", [None, 0.25, 3])
def test_first_ascent_applies_the_first_improving_move_of_its_seeded_order(
    sample: float | int | None,
) -> None:
    # Property: each step visits the legal moves (engine.legal_moves, canonical order) in
    # the order of a fresh permutation drawn from the run's generator, and applies the
    # first improving one ("first improvement", Hansen & Mladenovic 2006), whatever the
    # sample share: the sampled moves are the head of that same order. Reconstructed
    # here for a case where the steepest move is first in only a quarter of the orders.
    scorer = gains_scorer()
    constraints = build_constraints([f"v{i}" for i in range(4)])
    not_steepest = 0
    for seed in range(40):
        engine = MoveEngine(scorer, constraints)
        moves = engine.legal_moves()
        order = np.random.default_rng(seed).permutation(len(moves))
        expected = next(moves[k][0] for k in order if moves[k][1] > engine.tolerance())
        search = local_search("first-ascent", np.random.default_rng(seed), sample=sample)
        first = search(engine, Budget(max_steps=1)).trace[0]
        assert Move(first.move, first.source, first.target) == expected, seed
        not_steepest += expected != STEEPEST
    assert not_steepest > 0  # the case separates first from best improvement


@settings(max_examples=15, deadline=None)
@given(data_cases(n_vars=(3, 5), rows=(50, 150)), st.integers(0, 2**32 - 1))
def test_first_ascent_trajectory_is_the_replayed_first_improvement_rule(
    case: DataCase, seed: int
) -> None:
    # Property: on random data (BIC), the whole first-ascent path from the empty graph is
    # the path of the rule replayed step by step with a generator of the same seed.
    names = case.names
    scorer = build_scorer("bic", case.codes, case.arities)
    constraints = build_constraints(names)
    out = local_search("first-ascent", np.random.default_rng(seed))(
        MoveEngine(scorer, constraints), Budget())
    engine, rng, replay = MoveEngine(scorer, constraints), np.random.default_rng(seed), []
    while True:
        moves = engine.legal_moves()
        order = rng.permutation(len(moves))
        move = next((moves[k][0] for k in order if moves[k][1] > engine.tolerance()), None)
        if move is None:
            break
        engine.apply(move)
        replay.append(move)
    assert [Move(r.move, r.source, r.target) for r in out.trace] == replay
    assert out.stop_reason == "local_optimum"


def test_first_ascent_first_move_is_uniform_over_improving_moves() -> None:
    # Property: the first improving move of a uniformly random order is uniform over the
    # improving moves, whatever their gains; hill climbing's is always the steepest one.
    # Four improving moves with gains 1, 2, 3, 4; 400 seeds; chi-square at ALPHA. A rule
    # taking the best move gives 400 x the steepest: chi-square 1200, p ~ 1e-259.
    scorer = gains_scorer()
    seeds = range(400)
    uniform = {m: 1 / len(GAINS) for m in GAINS}
    assert chi_square_p_value(first_moves("first-ascent", seeds, scorer), uniform) > ALPHA
    assert set(first_moves("hill-climb", range(20), scorer)) == {STEEPEST}


# --------------------------------------------------------------------------- 3. tabu


def test_tabu_takes_a_tabu_move_that_aspires_and_refuses_one_that_does_not() -> None:
    # Property (Glover 1989, "Tabu Search - Part I", ORSA J. Computing 1(3), aspiration by
    # objective): a tabu move is taken when it reaches a score better than any seen so
    # far; a tabu move that does not is passed over for the best non-tabu move.
    #
    # Child C = 3 with candidate parents P = 0, Q = 1, R = 2, parent cap 2. Family scores
    # of C: {} 0, {P} 60, {Q} 50, {R} 80, {P, R} 100, {Q, R} 90, {P, Q} 120; P, Q, R score
    # 0 without parents and -1000 with any. The start {P, R} -> C is a local optimum
    # (100): deletions lose, additions to C break the cap. The escape then runs:
    #   1. delete P -> C   (-20, the least loss)                          score  80
    #   2. add Q -> C      (+10; add P -> C gains 20 but is tabu and only
    #                       gets back to 100, no better than the best)     score  90
    #   3. delete R -> C   (-40; delete Q -> C loses 10 but is tabu)       score  50
    #   4. add P -> C      (+70, tabu since step 1, reaches 120 > 100: it aspires) 120
    # Without aspiration, step 4 would take a -1000 move and the best would stay 100.
    P, Q, R, C = range(4)
    table = {(C, ()): 0.0, (C, (P,)): 60.0, (C, (Q,)): 50.0, (C, (R,)): 80.0,
             (C, (P, R)): 100.0, (C, (Q, R)): 90.0, (C, (P, Q)): 120.0}
    scorer = TableScorer(4, table, default=-1000.0)
    constraints = build_constraints(["P", "Q", "R", "C"], parent_cap=2)
    start = [(), (), (), (P, R)]
    out = tabu_search(MoveEngine(scorer, constraints, start), Budget(), tenure=3, patience=4)
    escape = [(r.move, r.source, r.target, r.score) for r in out.trace[:4]]
    assert escape == [("delete", P, C, 80.0), ("add", Q, C, 90.0), ("delete", R, C, 50.0),
                      ("add", P, C, 120.0)]
    assert out.score == 120.0 and out.parent_sets[C] == (P, Q)
    # the same with the run's generator (no ties here, so it changes nothing)
    seeded = tabu_search(MoveEngine(scorer, constraints, start), Budget(), tenure=3,
                         patience=4, rng=np.random.default_rng(0))
    assert [(r.move, r.source, r.target) for r in seeded.trace[:4]] == [e[:3] for e in escape]


# --------------------------------------------------------------------------- 4. stochastic


def test_stochastic_draws_improving_moves_in_proportion_to_their_gains() -> None:
    # Property (stochastic hill climbing, Russell & Norvig 2010, section 4.1.1, as
    # documented in runner/search/stochastic.py): from one state, the first move is
    # each improving move m with probability gain(m) / sum of gains. Gains 1, 2, 3, 4
    # (p = 0.1 .. 0.4); 1,000 seeds; chi-square at ALPHA (false failure 1e-6). A uniform
    # draw (p = 0.25 each) has noncentrality 1000 x 0.302 = 302 against a critical value
    # of 30.7 (3 degrees of freedom): it passes with probability about 4e-33.
    scorer = gains_scorer()
    total = sum(GAINS.values())
    expected = {m: g / total for m, g in GAINS.items()}
    moves = first_moves("stochastic", range(1000), scorer)
    assert chi_square_p_value(moves, expected) > ALPHA
