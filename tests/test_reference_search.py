"""Greedy hill climbing against pgmpy's HillClimbSearch on data sampled from known networks.

Both searches start from the empty graph with no constraints. pgmpy 1.1.2's search runs
with its defaults (a tabu list of 100 moves and a stopping threshold epsilon = 1e-4);
ours is best-improvement hill climbing, with moves tied within its tolerance (the two
directions of a new edge, under a score-equivalent score) chosen by a seeded generator.
Two checks:

* Local optimality, cross-checked: pgmpy's HillClimbSearch started from our final graph
  finds no move (add, delete, reverse) that improves pgmpy's own score by epsilon.
* Quality: ours ends at least as high as pgmpy's search, less a margin of the score's
  magnitude, with both graphs scored by pgmpy's own score on the same rows.

Why the ALARM margin is 1% and not 0.1%: greedy searches from the empty graph end in
different local optima depending on how ties are broken (the first edge X -> Y and
Y -> X score the same under a score-equivalent score). Measured on these 10,000 ALARM
rows with BIC: our final score over 8 column orders ranged from -107,268 to -108,083
(about 0.75% apart); pgmpy's, whose order follows string hashing (PYTHONHASHSEED), ranged
from -107,690 to -108,772 in nine runs under different hash seeds. With the sorted column
order used here we end at -107,915, 0.21% below pgmpy's best run, and pgmpy's search
started from our graph finds no improving move: a 0.1% margin fails for some hash seeds
through no fault of either search. Those figures were taken with a fixed tie rule (lowest
source first); that rule orients every early edge the same way and was measured to cost
0.3% to 0.8% of BIC on four ALARM samples, which is why ties are now seeded.
(pgmpy's best run is not a local optimum of BIC: its
tabu list blocked a move that our engine, started from that graph, takes for +99.6.)
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import pytest
from conftest import Network, pgmpy_dag, relative_gap

from runner.constraints import build_constraints
from runner.graph import edges_from_parents, is_acyclic, structural_hamming_distance
from runner.scores import build_scorer
from runner.search import Budget, MoveEngine, SearchOutcome, hill_climb

ASIA_MARGIN = 1e-3  # 0.1% of the reference score's magnitude
ALARM_MARGIN = 1e-2  # 1%: see the module docstring

# pgmpy 1.1.2 deprecates pgmpy.estimators.HillClimbSearch (it names the warning's caller,
# so the project-wide pgmpy filter does not catch it).
pytestmark = pytest.mark.filterwarnings("ignore:HillClimbSearch is deprecated:FutureWarning")


def our_search(network: Network, score: str, ess: float) -> SearchOutcome:
    scorer = build_scorer(score, network.codes, network.arities, ess=ess)
    engine = MoveEngine(scorer, build_constraints(network.names))
    return hill_climb(engine, Budget(), rng=np.random.default_rng(0))


def pgmpy_score(network: Network, score: str, ess: float) -> Any:
    """reference: pgmpy 1.1.2's structure score object of the same name."""
    import pgmpy.estimators as estimators

    if score == "bic":
        return estimators.BIC(network.frame)
    if score == "k2":
        return estimators.K2(network.frame)
    if score == "bdeu":
        return estimators.BDeu(network.frame, equivalent_sample_size=ess)
    raise ValueError(score)


def compare(network: Network, score: str, ess: float, margin: float,
            capsys: pytest.CaptureFixture[str]) -> None:
    from pgmpy.estimators import HillClimbSearch

    outcome = our_search(network, score, ess)
    assert outcome.stop_reason == "local_optimum"
    assert is_acyclic(outcome.parent_sets)
    reference = pgmpy_score(network, score, ess)
    theirs_dag = HillClimbSearch(network.frame).estimate(scoring_method=reference,
                                                         show_progress=False)
    theirs_score = reference.score(theirs_dag)
    # Our own total of our graph is pgmpy's score of it (so the comparison is like for like).
    ours_by_pgmpy = reference.score(pgmpy_dag(network.names, outcome.parent_sets))
    assert relative_gap(outcome.score, ours_by_pgmpy) <= 1e-6
    # pgmpy's search from our graph: no improving move, so the graph does not change.
    ours_dag = pgmpy_dag(network.names, outcome.parent_sets)
    polished = HillClimbSearch(network.frame).estimate(scoring_method=reference,
                                                       start_dag=ours_dag.copy(),
                                                       show_progress=False)
    assert set(polished.edges()) == set(ours_dag.edges())

    true_edges = network.true_edges()
    ours_edges = edges_from_parents(network.names, outcome.parent_sets)
    theirs_edges = sorted((str(a), str(b)) for a, b in theirs_dag.edges())
    true_score = reference.score(network.model)
    with capsys.disabled():
        print(f"\n{network.name} ({len(network.frame):,} rows, {score}"
              f"{f', ess {ess:g}' if score == 'bdeu' else ''}): "
              f"dagmill {outcome.score:.3f} in {outcome.steps} steps, "
              f"SHD {structural_hamming_distance(ours_edges, true_edges)}; "
              f"pgmpy HillClimbSearch {theirs_score:.3f}, "
              f"SHD {structural_hamming_distance(theirs_edges, true_edges)}; "
              f"true graph {true_score:.3f}")
    assert outcome.score >= theirs_score - margin * abs(theirs_score)


@pytest.mark.parametrize(("score", "ess"), [("bic", 1.0), ("k2", 1.0), ("bdeu", 10.0)])
def test_hill_climb_matches_pgmpy_on_asia(
    asia: Network, score: str, ess: float, capsys: pytest.CaptureFixture[str]
) -> None:
    """reference: pgmpy 1.1.2 HillClimbSearch and its BIC / K2 / BDeu, on 5,000 rows sampled
    by pgmpy from ASIA (Lauritzen & Spiegelhalter 1988)."""
    compare(asia, score, ess, ASIA_MARGIN, capsys)


@pytest.mark.slow
def test_hill_climb_matches_pgmpy_on_alarm(
    alarm: Network, capsys: pytest.CaptureFixture[str]
) -> None:
    """reference: pgmpy 1.1.2 HillClimbSearch with its BIC ('bic-d'), on 10,000 rows
    sampled by pgmpy from ALARM (Beinlich et al. 1989, bundled with pgmpy)."""
    compare(alarm, "bic", 1.0, ALARM_MARGIN, capsys)


@pytest.mark.slow
def test_hill_climb_matches_pgmpy_on_alarm_over_samples(capsys: pytest.CaptureFixture[str]
                                                        ) -> None:
    """The 0.1% condition, averaged over tie-breaking luck: on four independent 10,000-row
    ALARM samples (Beinlich et al. 1989; pgmpy 1.1.2's sampler, seeds 1 to 4), the mean of
    (ours - pgmpy) / |pgmpy| BIC is at least -0.1%, and no sample is below -1%. pgmpy's own
    result moves with PYTHONHASHSEED (see the module docstring), so a single sample cannot
    carry a 0.1% bound; measured once with seeded ties: +0.41%, +0.84%, +0.01%, +0.02%."""
    from conftest import sampled_network

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from pgmpy.estimators import BIC, HillClimbSearch

        gaps = []
        for seed in (1, 2, 3, 4):
            network = sampled_network("alarm", 10_000, seed)
            scorer = build_scorer("bic", network.codes, network.arities)
            ours = hill_climb(MoveEngine(scorer, build_constraints(network.names)), Budget(),
                              rng=np.random.default_rng(0))
            theirs = HillClimbSearch(network.frame).estimate(scoring_method="bic-d",
                                                             show_progress=False)
            reference = BIC(network.frame).score(theirs)
            gaps.append((ours.score - reference) / abs(reference))
            with capsys.disabled():
                print(f"\nALARM seed {seed}: dagmill {ours.score:.2f}, pgmpy {reference:.2f}, "
                      f"gap {100 * gaps[-1]:+.3f}%")
    assert sum(gaps) / len(gaps) >= -1e-3
    assert min(gaps) >= -1e-2
