"""Held-out evaluation: a seeded share of rows kept out of learning, then scored.

The split draws a permutation of the row indices from ``numpy.random.default_rng(
SeedSequence(seed))`` and holds out the first ``round(holdout * rows)`` of them (at least
one, and at least one row is kept for learning). Both index lists are returned sorted, so
the learning rows keep the file's order.

The held-out fit of a graph is the mean log-likelihood (natural log) per held-out row
under tables fitted on the learning rows with the run's pseudo-count; the empty graph
(every variable on its own) is scored the same way beside it. Held-out cells whose state
or parent configuration the learning rows lack get their probability from the
pseudo-count alone; they are counted in the record.

Under a Gaussian score the held-out fit is the mean log density (natural log) per
held-out row under the linear-Gaussian families fitted on the learning rows, the empty
graph's being each column's own normal with the learning rows' mean and ML variance.
A density has no unseen cells; those counts are zero.

The totals are correctly rounded sums (``math.fsum``) of the per-row values, which add
the variables' terms element-wise in column order with logarithms by the scalar
``runner.scores.elementary.ln``: the stored numbers depend neither on the machine (no BLAS, no numpy
reduction or vectorised logarithm) nor on the order of the held-out rows.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from runner.fit import (
    DiscreteFamily,
    fit_discrete,
    fit_gaussian,
    log_likelihood_rows,
    log_likelihood_total,
)
from runner.scores.elementary import ln_scalar
from runner.scores.fixed_order import sum_floats
from runner.scores.gaussian import GaussianStatistics, LinearGaussianFamily

SPLIT_RULE = ("seeded permutation (numpy SeedSequence(seed)); the first round(holdout * rows) "
              "rows of it are held out")


def split_rows(n_rows: int, holdout: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """``(learn, held_out)`` sorted row indices; ``held_out`` has ``round(holdout * n)``
    rows, clipped to [1, n - 1] when n >= 2."""
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    order = rng.permutation(n_rows)
    size = round(holdout * n_rows)
    if n_rows >= 2:
        size = min(max(size, 1), n_rows - 1)
    return np.sort(order[size:]), np.sort(order[:size])


def held_out_fit(learn_codes: np.ndarray, held_codes: np.ndarray, arities: np.ndarray,
                 families: Sequence[DiscreteFamily], pseudo_count: float,
                 names: Sequence[str]) -> dict[str, Any]:
    """The record's ``evaluation.log_likelihood`` and ``evaluation.unseen`` blocks."""
    rows = held_codes.shape[1]
    learned, unseen = log_likelihood_rows(families, held_codes, pseudo_count)
    empty_fams = fit_discrete(learn_codes, arities, [() for _ in range(len(arities))])
    empty, empty_unseen = log_likelihood_rows(empty_fams, held_codes, pseudo_count)
    learned_total, empty_total = log_likelihood_total(learned), log_likelihood_total(empty)
    per_row = learned_total / rows if rows else 0.0
    empty_per_row = empty_total / rows if rows else 0.0
    return {
        "log_likelihood": {
            "learned": learned_total, "empty": empty_total,
            "learned_per_row": per_row, "empty_per_row": empty_per_row,
            "difference_per_row": per_row - empty_per_row,
        },
        "unseen": {
            "configurations": unseen["configurations"],
            "states": unseen["states"],
            "empty_graph_states": empty_unseen["states"],
            "by_variable": {names[v]: counts
                            for v, counts in sorted(unseen["by_variable"].items())},
        },
    }


def gaussian_log_density_rows(families: Sequence[LinearGaussianFamily],
                              parent_sets: Sequence[Sequence[int]],
                              values: np.ndarray) -> np.ndarray:
    """Per row, the sum over variables of ln N(x_c; intercept + beta . x_parents, var).

    Element-wise arithmetic in a fixed order (the mean adds the parents' terms in the
    family's order, the row adds the variables in column order) and the one logarithm of
    each family, ln(2 pi var), by our scalar ``ln_scalar``: the same bits on every machine."""
    total = np.zeros(values.shape[1])
    for child, (fam, parents) in enumerate(zip(families, parent_sets, strict=True)):
        mean = np.full(values.shape[1], fam.intercept)
        for p, b in zip(parents, fam.coefficients, strict=True):
            mean += b * values[p]
        resid = values[child] - mean
        total += -0.5 * (ln_scalar(2.0 * math.pi * fam.variance)
                         + resid * resid / fam.variance)
    return total


def gaussian_held_out_fit(learn_values: np.ndarray | GaussianStatistics,
                          held_values: np.ndarray, families: Sequence[LinearGaussianFamily],
                          parent_sets: Sequence[Sequence[int]]) -> dict[str, Any]:
    """The record's ``evaluation`` blocks for a linear-Gaussian network; the empty graph
    is fitted on the learning rows (``learn_values``, or their statistics, the scorer's,
    when already computed)."""
    rows = held_values.shape[1]
    empty_sets: list[tuple[int, ...]] = [() for _ in range(held_values.shape[0])]
    learned = sum_floats(gaussian_log_density_rows(families, parent_sets, held_values))
    empty = sum_floats(gaussian_log_density_rows(fit_gaussian(learn_values, empty_sets),
                                                 empty_sets, held_values))
    per_row, empty_per_row = (learned / rows, empty / rows) if rows else (0.0, 0.0)
    return {
        "measure": "log density (linear-Gaussian)",
        "log_likelihood": {"learned": learned, "empty": empty, "learned_per_row": per_row,
                           "empty_per_row": empty_per_row,
                           "difference_per_row": per_row - empty_per_row},
        "unseen": {"configurations": 0, "states": 0, "empty_graph_states": 0,
                   "by_variable": {}},
    }


# --------------------------------------------------------------------------- records


def held_out_summary(record: Mapping[str, Any]) -> dict[str, Any] | None:
    """A run's held-out fit as stored, or None when it has none."""
    ev = record.get("evaluation")
    if not isinstance(ev, Mapping) or "log_likelihood" not in ev:
        return None
    return ev  # type: ignore[return-value]


def measure_name(ev: Mapping[str, Any]) -> str:
    """What a held-out fit measures: a log density (linear-Gaussian) or a log-likelihood."""
    return "log density" if "measure" in ev else "log-likelihood"


def held_out_comparison(a: Mapping[str, Any], b: Mapping[str, Any]) -> dict[str, Any] | None:
    """Held-out log-likelihood per row of both runs and B - A, when both have one;
    ``same_rows`` says whether they held out the same rows of the same data."""
    ea, eb = held_out_summary(a), held_out_summary(b)
    if ea is None or eb is None:
        return None
    la, lb = ea["log_likelihood"]["learned_per_row"], eb["log_likelihood"]["learned_per_row"]
    same = (a["data"]["sha256"] == b["data"]["sha256"]
            and (ea["holdout"], ea["seed"]) == (eb["holdout"], eb["seed"]))
    return {"a_per_row": la, "b_per_row": lb, "delta_per_row": lb - la, "same_rows": same}
