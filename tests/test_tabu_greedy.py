"""Tabu search never ends below greedy hill climbing; restarts are recorded run by run;
every method's graph honours every constraint, checked edge by edge against the spec's
lists."""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import ConstraintCase, constraint_cases
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.cli import main
from runner.constraints import build_constraints
from runner.data import encode_frame
from runner.graph import topological_order
from runner.scores import build_scorer
from runner.search import (
    LOCAL_METHODS,
    Budget,
    MoveEngine,
    RunSummary,
    SearchOutcome,
    hill_climb,
    local_search,
    with_restarts,
)
from runner.search.exact import exact_search
from runner.search.ges import greedy_equivalence_search
from runner.search.order import order_search

# --------------------------------------------------------------------------- data


def sampled_frame(seed: int, n: int, rows: int) -> pd.DataFrame:
    """``rows`` rows forward-sampled from a random discrete network on ``v0 .. v{n-1}``:
    each pair of a random variable order joined with probability 1/2 (at most three
    parents), two or three states per variable, and each conditional distribution drawn
    from a Dirichlet(0.6), peaked, so the dependence is strong. States are ``s0``, ``s1``,
    ... as text."""
    rng = np.random.default_rng(seed)
    order = [int(v) for v in rng.permutation(n)]
    parents: list[list[int]] = [[] for _ in range(n)]
    for b in range(1, n):
        for a in range(b):
            if rng.random() < 0.5 and len(parents[order[b]]) < 3:
                parents[order[b]].append(order[a])
    arities = [int(a) for a in rng.integers(2, 4, n)]
    codes = np.zeros((n, rows), dtype=np.int64)
    for v in order:
        config = np.zeros(rows, dtype=np.int64)
        for p in parents[v]:
            config = config * arities[p] + codes[p]
        q = int(np.prod([arities[p] for p in parents[v]]))
        table = rng.dirichlet(np.full(arities[v], 0.6), size=q)
        below = table.cumsum(axis=1)[config] < rng.random(rows)[:, None]
        codes[v] = np.minimum(below.sum(axis=1), arities[v] - 1)
    return pd.DataFrame({f"v{v}": [f"s{c}" for c in codes[v]] for v in range(n)})


def encoded(seed: int, n: int, rows: int) -> tuple[np.ndarray, list[int], list[str]]:
    """``(codes, arities, names)`` of :func:`sampled_frame`, encoded as a run encodes it."""
    data = encode_frame(sampled_frame(seed, n, rows))
    return data.codes, list(data.arities), list(data.names)


@dataclass(frozen=True)
class Case:
    """Sampled data (by its seed) and random consistent constraints on its variables."""

    data_seed: int
    n: int
    rows: int
    rules: ConstraintCase

    def data(self) -> tuple[np.ndarray, list[int]]:
        codes, arities, _ = encoded(self.data_seed, self.n, self.rows)
        return codes, arities

    def __repr__(self) -> str:  # hypothesis prints this on failure
        return (f"Case(data_seed={self.data_seed}, n={self.n}, rows={self.rows}, "
                f"constraints={self.rules.description})")


@st.composite
def cases(draw: st.DrawFn, n_vars: tuple[int, int], unconstrained: bool = True) -> Case:
    """Sampled data and random consistent constraints (tiers, within-tier rule, forbidden
    pairs, required edges forming a capped DAG, a parent cap) on the same variables; with
    ``unconstrained``, no constraints at all in about half the cases."""
    n = draw(st.integers(*n_vars))
    return Case(draw(st.integers(0, 2**32 - 1)), n, draw(st.integers(150, 400)),
                draw(constraint_cases(n, trivial_allowed=unconstrained)))


# --------------------------------------------------------------------------- tabu vs greedy


@settings(max_examples=100, deadline=None)
@given(cases((5, 7)), st.integers(0, 2**32 - 1),
       st.none() | st.integers(1, 30), st.none() | st.integers(5, 400))
def test_tabu_is_never_below_hill_climbing_with_the_same_seed_and_budget(
    case: Case, seed: int, max_steps: int | None, max_evaluations: int | None,
) -> None:
    (codes, arities), rules = case.data(), case.rules
    outcomes = {}
    for method in ("hill-climb", "tabu"):
        scorer = build_scorer("bic", codes, arities)  # its own cache: evaluations count alike
        engine = MoveEngine(scorer, rules.constraints, rules.start())
        search = local_search(method, np.random.default_rng(seed), patience=20)
        outcomes[method] = search(engine, Budget(max_steps=max_steps,
                                                 max_evaluations=max_evaluations))
    greedy, tabu = outcomes["hill-climb"], outcomes["tabu"]
    assert tabu.score >= greedy.score - 1e-9 * max(1.0, abs(greedy.score))
    # the first phase is the greedy climb itself: the same moves, drawn alike
    assert tabu.trace[:greedy.steps] == greedy.trace
    assert [r.step for r in tabu.trace] == list(range(1, tabu.steps + 1))
    if greedy.stop_reason != "local_optimum":  # the budget stopped the greedy phase
        assert (tabu.stop_reason, tabu.steps, tabu.parent_sets) == (
            greedy.stop_reason, greedy.steps, greedy.parent_sets)
    assert tabu.score == pytest.approx(
        build_scorer("bic", codes, arities).total(tabu.parent_sets), rel=1e-12)


# --------------------------------------------------------------------------- restarts

# Pinned case, found by scanning sampled_frame seeds 0-39 (5 variables, 300 rows) and
# search seeds 0-4 for hill climbing with two restarts of five kicks: the first restart
# ends above the first run, the second ends below it.
RESTART_CASE = {"data_seed": 2, "n": 5, "rows": 300, "seed": 2, "restarts": 2, "kick": 5}


def restarted_hill_climb() -> tuple[SearchOutcome, list[RunSummary]]:
    """The pinned case: hill climbing with restarts, no constraints, from the empty graph."""
    c = RESTART_CASE
    codes, arities, names = encoded(c["data_seed"], c["n"], c["rows"])
    scorer = build_scorer("bic", codes, arities)
    constraints = build_constraints(names)
    rng = np.random.default_rng(c["seed"])
    empty: list[list[int]] = [[] for _ in names]
    return with_restarts(local_search("hill-climb", rng),
                         lambda ps: MoveEngine(scorer, constraints, ps), empty, Budget(),
                         rng, c["restarts"], c["kick"])


def test_restarts_can_improve_and_each_run_is_recorded() -> None:
    c = RESTART_CASE
    outcome, runs = restarted_hill_climb()
    codes, arities, names = encoded(c["data_seed"], c["n"], c["rows"])
    scorer = build_scorer("bic", codes, arities)
    ends = [r.end_score for r in runs]
    print("runs:", [(r.run, r.kicks, round(r.start_score, 3), round(r.end_score, 3))
                    for r in runs])
    assert [r.run for r in runs] == list(range(c["restarts"] + 1))
    assert [r.kicks for r in runs] == [0] + [c["kick"]] * c["restarts"]
    assert outcome.score > runs[0].end_score + 1.0  # a restart improved, clearly
    assert ends[-1] < max(ends)  # a later run ended lower, and the best was kept
    assert outcome.score == max(ends)
    assert outcome.score == pytest.approx(scorer.total(outcome.parent_sets), rel=1e-12)
    # run 0 is plain hill climbing from the empty graph with the same seed
    first = hill_climb(MoveEngine(build_scorer("bic", codes, arities), build_constraints(names)),
                       Budget(), rng=np.random.default_rng(c["seed"]))
    assert runs[0].start_score == pytest.approx(scorer.total([() for _ in names]), rel=1e-12)
    assert (runs[0].end_score, runs[0].steps) == (first.score, first.steps)
    # each run, read back from the trace: its kicks lead to its start score, and (hill
    # climbing ends on its last move) its last move to its end score
    rows = list(outcome.trace)
    for run in runs:
        kicks = [r for r in rows[:run.kicks] if r.move.startswith("kick-")]
        assert len(kicks) == run.kicks
        if kicks:
            assert kicks[-1].score == run.start_score
        moves, rows = rows[run.kicks:run.kicks + run.steps], rows[run.kicks + run.steps:]
        assert len(moves) == run.steps and not any(r.move.startswith("kick-") for r in moves)
        assert moves[-1].score == run.end_score
        assert run.end_score >= run.start_score
    assert not rows
    assert outcome.steps == sum(r.steps for r in runs)


def test_a_run_record_keeps_one_entry_per_restart(tmp_path: Path,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    c = RESTART_CASE
    sampled_frame(c["data_seed"], c["n"], c["rows"]).to_csv(
        tmp_path / "data.csv", index=False, lineterminator="\n")
    (tmp_path / "spec.yaml").write_text(
        "name: restarted\ndataset:\n  path: data.csv\nscore: {name: bic}\n"
        f"search:\n  method: hill-climb\n  seed: {c['seed']}\n  restarts: {c['restarts']}\n"
        f"  kick: {c['kick']}\n")
    code = main(["run", str(tmp_path / "spec.yaml"), "--json", "--quiet", "--workers", "1",
                 "--results", str(tmp_path / "results")])
    out = capsys.readouterr().out
    assert code == 0, out
    folder = Path(json.loads(out)["runs"][0]["folder"])
    record = json.loads((folder / "run.json").read_text())
    outcome, runs = restarted_hill_climb()
    assert record["search"]["runs"] == [
        {"run": r.run, "kicks": r.kicks, "start_score": r.start_score,
         "end_score": r.end_score, "steps": r.steps, "stop_reason": r.stop_reason}
        for r in runs]
    assert len(record["search"]["runs"]) == c["restarts"] + 1
    assert record["score"]["value"] == pytest.approx(
        max(r["end_score"] for r in record["search"]["runs"]), rel=1e-12)
    assert record["search"]["steps"] == outcome.steps


# --------------------------------------------------------------------------- constraints


def assert_honours_constraints(
    names: Sequence[str],
    edges: Iterable[Sequence[str]],
    tiers: Sequence[Sequence[str]],
    within_tier: str,
    forbidden: Iterable[Sequence[str]],
    required: Iterable[Sequence[str]],
    cap: int | None,
) -> None:
    """Fail unless the graph ``edges`` (parent, child names) honours the spec's lists, each
    rule checked edge by edge from first principles: no edge from a later tier to an
    earlier one, none within a tier when ``within_tier`` is ``"forbidden"``, no forbidden
    pair, every required pair present, at most ``cap`` parents per node, and no cycle."""
    edge_list = [(str(a), str(b)) for a, b in edges]
    edge_set = set(edge_list)
    assert len(edge_set) == len(edge_list), f"repeated edge in {edge_list}"
    assert all(a in names and b in names and a != b for a, b in edge_list), edge_list
    tier_of = {v: t for t, tier in enumerate(tiers) for v in tier}
    for a, b in edge_list:
        if a in tier_of and b in tier_of:
            assert tier_of[a] <= tier_of[b], f"{a} -> {b} points back from a later tier"
            if within_tier == "forbidden":
                assert tier_of[a] != tier_of[b], f"{a} -> {b} lies within a tier"
    for a, b in forbidden:
        assert (a, b) not in edge_set, f"forbidden {a} -> {b} is present"
    for a, b in required:
        assert (a, b) in edge_set, f"required {a} -> {b} is missing"
    if cap is not None:
        for v in names:
            count = sum(1 for _, b in edge_list if b == v)
            assert count <= cap, f"{v} has {count} parents, over the cap {cap}"
    # acyclic: peel off nodes without parents until none is left
    remaining, left = set(names), set(edge_set)
    while remaining:
        sources = {v for v in remaining if not any(b == v for _, b in left)}
        assert sources, f"cycle among {sorted(remaining)}"
        remaining -= sources
        left = {(a, b) for a, b in left if a not in sources}


CHECKER_RULES = {"tiers": [["a"], ["b", "c"]], "within_tier": "forbidden",
                 "forbidden": [("d", "c")], "required": [("a", "b")], "cap": 2}


@pytest.mark.parametrize(("edges", "words"), [
    ([("a", "b"), ("b", "a")], "later tier"),
    ([("a", "b"), ("b", "c")], "within a tier"),
    ([("a", "b"), ("d", "c")], "forbidden d -> c"),
    ([("a", "c")], "required a -> b"),
    ([("a", "b"), ("a", "d"), ("b", "d"), ("c", "d")], "over the cap"),
    ([("a", "b"), ("b", "d"), ("d", "b")], "cycle"),
    ([("a", "b"), ("b", "d"), ("d", "a")], "cycle"),
])
def test_the_checker_catches_each_broken_rule(edges: list[tuple[str, str]], words: str) -> None:
    with pytest.raises(AssertionError, match=words):
        assert_honours_constraints(["a", "b", "c", "d"], edges, **CHECKER_RULES)
    assert_honours_constraints(["a", "b", "c", "d"], [("a", "b"), ("c", "d"), ("b", "d")],
                               **CHECKER_RULES)


def named_edges(names: Sequence[str], parent_sets: Sequence[Sequence[int]]
                ) -> list[tuple[str, str]]:
    return [(names[p], names[c]) for c, ps in enumerate(parent_sets) for p in ps]


def spec_lists(rules: ConstraintCase) -> dict:
    """The constraint case as the spec's lists, by name."""
    d, names = rules.description, rules.names
    if d.get("trivial"):
        return {"tiers": [], "within_tier": "allowed", "forbidden": [], "required": [],
                "cap": None}
    return {"tiers": d["tiers"], "within_tier": d["within_tier"],
            "forbidden": [(names[a], names[b]) for a, b in d["forbidden"]],
            "required": [(names[a], names[b]) for a, b in d["required"]],
            "cap": d["parent_cap"]}


@settings(max_examples=60, deadline=None)
@given(cases((4, 6), unconstrained=False), st.integers(0, 2**32 - 1), st.integers(1, 2))
def test_every_method_honours_every_constraint(case: Case, seed: int, restarts: int) -> None:
    (codes, arities), rules = case.data(), case.rules
    names, lists = rules.names, spec_lists(rules)
    scorer = build_scorer("bic", codes, arities)
    graphs: dict[str, list[tuple[int, ...]]] = {}
    for method in LOCAL_METHODS:
        for r in (0, restarts):
            rng = np.random.default_rng(seed)
            outcome, _ = with_restarts(
                local_search(method, rng, patience=15),
                lambda ps: MoveEngine(scorer, rules.constraints, ps), rules.start(),
                Budget(max_steps=300), rng, r, 3)
            graphs[f"{method} restarts={r}"] = outcome.parent_sets
    graphs["ges"] = greedy_equivalence_search(scorer, rules.constraints, Budget(),
                                              np.random.default_rng(seed),
                                              rules.start()).parent_sets
    order = topological_order(rules.start())
    assert order is not None
    graphs["order"] = order_search(scorer, rules.constraints, order, Budget(), names)[0].parent_sets
    if len(names) <= 5:
        graphs["exact"] = exact_search(scorer, rules.constraints, Budget(), names)[0].parent_sets
    for label, parent_sets in graphs.items():
        try:
            assert_honours_constraints(names, named_edges(names, parent_sets), **lists)
        except AssertionError as failure:
            raise AssertionError(f"{label}: {failure}") from None


CONSTRAINED_SPEC = """\
name: constrained
dataset:
  path: data.csv
tiers:
  - [v0, v1]
  - [v2, v3]
  - [v4]
within_tier: forbidden
forbidden:
  - [v0, v4]
  - [v3, v4]
required:
  - [v1, v3]
parent_cap: 1
score: {name: bic}
search:
  method: METHOD
  seed: 4
"""


@pytest.mark.parametrize("method", [*LOCAL_METHODS, "ges", "order", "exact"])
def test_the_stored_graph_of_every_method_honours_the_spec(
    method: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    sampled_frame(3, 5, 400).to_csv(tmp_path / "data.csv", index=False, lineterminator="\n")
    spec = CONSTRAINED_SPEC.replace("METHOD", method)
    if method in LOCAL_METHODS:
        spec += "  restarts: 2\n  kick: 3\n"
    (tmp_path / "spec.yaml").write_text(spec)
    code = main(["run", str(tmp_path / "spec.yaml"), "--json", "--quiet", "--workers", "1",
                 "--results", str(tmp_path / "results")])
    out = capsys.readouterr().out
    assert code == 0, out
    record = json.loads((Path(json.loads(out)["runs"][0]["folder"]) / "run.json").read_text())
    assert_honours_constraints(
        [f"v{i}" for i in range(5)], record["edges"],
        tiers=[["v0", "v1"], ["v2", "v3"], ["v4"]], within_tier="forbidden",
        forbidden=[("v0", "v4"), ("v3", "v4")], required=[("v1", "v3")], cap=1)
