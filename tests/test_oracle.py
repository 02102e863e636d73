"""The optimised move engine against a straightforward recompute-everything oracle.

The oracle keeps no delta table, no reachability matrix and no cache: at every step it
lists every (kind, source, target), tests legality by a fresh acyclicity check and the
constraints, and scores every candidate graph's changed families from scratch.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.constraints import Constraints, build_constraints
from runner.data import encode_frame
from runner.graph import is_acyclic
from runner.scores import build_scorer
from runner.scores.counts import family_counts
from runner.scores.likelihood import bic_family
from runner.search import Budget, Move, MoveEngine, hill_climb
from runner.search.engine import KINDS, RELATIVE_TOLERANCE


def fresh_family(codes: np.ndarray, arities: np.ndarray, child: int, parents: list[int]
                 ) -> float:
    table, q = family_counts(codes, arities, child, sorted(parents))
    return bic_family(table, q, codes.shape[1])


def applied(parents: list[list[int]], move: Move) -> list[list[int]] | None:
    """The parent sets after ``move``, or None when the move does not apply."""
    out = [list(p) for p in parents]
    s, t = move.source, move.target
    present = s in out[t]
    if move.kind == "add":
        if present or t in out[s]:
            return None
        out[t].append(s)
    elif not present:
        return None
    elif move.kind == "delete":
        out[t].remove(s)
    else:
        out[t].remove(s)
        out[s].append(t)
    return out


def oracle_legal(parents: list[list[int]], move: Move, constraints: Constraints) -> bool:
    after = applied(parents, move)
    if after is None or not is_acyclic(after):
        return False
    return constraints.admits(after)


def oracle_deltas(codes: np.ndarray, arities: np.ndarray, parents: list[list[int]],
                  constraints: Constraints) -> dict[Move, float]:
    n = len(parents)
    out = {}
    for kind in KINDS:
        for s in range(n):
            for t in range(n):
                move = Move(kind, s, t)
                if s == t or not oracle_legal(parents, move, constraints):
                    continue
                after = applied(parents, move)
                assert after is not None
                changed = {t} if kind != "reverse" else {s, t}
                out[move] = sum(fresh_family(codes, arities, c, after[c])
                                - fresh_family(codes, arities, c, parents[c]) for c in changed)
    return out


def oracle_hill_climb(codes: np.ndarray, arities: np.ndarray, constraints: Constraints
                      ) -> list[list[int]]:
    n = codes.shape[0]
    parents: list[list[int]] = [[] for _ in range(n)]
    for i, j in sorted(constraints.required):
        parents[j].append(i)
    while True:
        deltas = oracle_deltas(codes, arities, parents, constraints)
        total = sum(fresh_family(codes, arities, c, parents[c]) for c in range(n))
        if not deltas:
            return parents
        tolerance = RELATIVE_TOLERANCE * max(1.0, abs(total))
        best = max(deltas.values())
        # same rule as the engine: deltas within the tolerance of the best are tied, and
        # ties go by kind order, then source, then target
        move = min((m for m, d in deltas.items() if d >= best - tolerance),
                   key=lambda m: (KINDS.index(m.kind), m.source, m.target))
        if deltas[move] <= tolerance:
            return parents
        after = applied(parents, move)
        assert after is not None
        parents = after


@st.composite
def cases(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, Constraints, list[list[int]]]:
    n = draw(st.integers(3, 6))
    rows = draw(st.integers(30, 200))
    rng = np.random.default_rng(draw(st.integers(0, 10_000)))
    arities = np.array([draw(st.integers(2, 3)) for _ in range(n)])
    codes = np.stack([rng.integers(0, a, rows) for a in arities]).astype(np.uint8)
    for v in range(1, n):  # some dependence, so moves have real gains
        codes[v] = np.where(rng.random(rows) < 0.5, codes[v - 1] % arities[v], codes[v])
    names = [f"x{i}" for i in range(n)]
    cap = draw(st.none() | st.integers(1, 3))
    forbidden = draw(st.lists(st.tuples(st.sampled_from(names), st.sampled_from(names))
                              .filter(lambda e: e[0] != e[1]), max_size=3, unique=True))
    constraints = build_constraints(names, forbidden=forbidden, parent_cap=cap)
    # a random legal graph, reached by random legal moves
    parents: list[list[int]] = [[] for _ in range(n)]
    for _ in range(draw(st.integers(0, 8))):
        move = Move(draw(st.sampled_from(KINDS)), draw(st.integers(0, n - 1)),
                    draw(st.integers(0, n - 1)))
        if move.source != move.target and oracle_legal(parents, move, constraints):
            after = applied(parents, move)
            assert after is not None
            parents = after
    return codes, arities, constraints, parents


@settings(max_examples=40, deadline=None)
@given(cases())
def test_engine_deltas_equal_the_oracle(case: tuple) -> None:
    codes, arities, constraints, parents = case
    engine = MoveEngine(build_scorer("bic", codes, arities), constraints, parents)
    ours = {m: d for m, d in engine.legal_moves()}
    oracle = oracle_deltas(codes, arities, parents, constraints)
    assert set(ours) == set(oracle)
    for move, delta in oracle.items():
        assert ours[move] == pytest.approx(delta, rel=1e-12, abs=1e-9), move


def sampled(network: str, rows: int, seed: int):  # type: ignore[no-untyped-def]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from pgmpy.utils import get_example_model

        return get_example_model(network).simulate(rows, seed=seed, show_progress=False)


@pytest.mark.parametrize("network, rows", [
    ("asia", 5000), pytest.param("alarm", 2000, marks=pytest.mark.slow)])
def test_final_graphs_equal_the_oracle(network: str, rows: int) -> None:
    # networks: ASIA (Lauritzen & Spiegelhalter 1988) and ALARM (Beinlich et al. 1989), as
    # bundled with pgmpy 1.1.2, sampled with pgmpy's sampler
    data = encode_frame(sampled(network, rows, seed=2).astype(str))
    constraints = build_constraints(data.names, parent_cap=3 if network == "alarm" else None)
    engine = MoveEngine(build_scorer("bic", data.codes, data.arities), constraints)
    ours = hill_climb(engine, Budget()).parent_sets
    oracle = oracle_hill_climb(data.codes, data.arities, constraints)
    assert [tuple(sorted(p)) for p in oracle] == [tuple(p) for p in ours]
