"""Facts about scores and searches that the whole pipeline agrees on, at its top, so
that the spec, the scores and the searches read them from one place."""

from __future__ import annotations

#: Scores under which Markov-equivalent DAGs always score the same (Chickering 1995):
#: every score here except K2, whose uniform Dirichlet prior is not likelihood-equivalent
#: (Heckerman, Geiger & Chickering 1995).
SCORE_EQUIVALENT_SCORES = frozenset(
    {"loglik", "aic", "bic", "bdeu", "gaussian-loglik", "gaussian-bic", "bge"})


def default_method(score: str) -> str:
    """The search a spec gets when it names none: Greedy Equivalence Search under a
    score-equivalent score (it reached the generating network's score on the benchmark
    networks, see the README), greedy hill climbing otherwise."""
    return "ges" if score in SCORE_EQUIVALENT_SCORES else "hill-climb"
