"""Expected-count family scores of incomplete discrete data, the scores of structural EM
(Friedman 1997, 1998).

Under ``dataset.missing: structural-em`` a row with missing cells stands for every
*completion* of it: each way of filling its missing cells with states of their columns.
Given a network (a DAG and its conditional probability tables), each completion gets its
posterior probability given the row's observed cells (the E-step of Dempster, Laird &
Rubin 1977), and a family's *expected counts* are the counts over all completions, each
weighted by its posterior (a complete row is its own completion, weight 1). A penalised
log-likelihood score of those counts (loglik, AIC or BIC; N = the rows of the data) is
decomposable like the complete-data score, so the move engine and every search method
work on it unchanged; :mod:`runner.structural_em` alternates such a search with new
posteriors.

Posteriors. For a fixed DAG the tables are fitted by EM from uniform completion weights:
tables from the weighted counts (plus one pseudo-row per parent configuration spread
evenly over the child's states, which keeps every completion possible), then each
completion's weight is the product of the table entries of the families touching a
missing cell, normalised over the completions of its row; repeated until no weight moves
by more than :data:`EM_TOLERANCE` (at most :data:`EM_ITERATIONS` times). The weights of a
DAG are a deterministic function of the DAG and the data, so a graph's score can be
recomputed from a stored record (:class:`SelfWeightedScorer`).

Determinism: weights are products, quotients and element-wise sums of floats in a fixed
order (no reductions whose order the machine picks); counts are ``numpy.bincount`` sums
in row order; logarithms are :func:`runner.scores.elementary.ln`; totals ``math.fsum``.
The same data and DAG give the same bits on every machine.

Complexity: a row with missing cells in columns M has prod_{v in M} r_v completions; the
completed table is refused above :data:`COMPLETION_LIMIT` columns (a data set with many
gaps per row is better served by ``available-case``). One EM iteration costs O(n M) for
n variables and M completions; a family score O(M log M).

Assumption: values missing at random (the chance that a cell is missing may depend on
observed values, not on the missing ones; Rubin 1976). Under that assumption the expected
counts use the information in the incomplete rows that complete-case analysis
(``drop-rows``) throws away.

References
----------
Dempster, A. P., Laird, N. M. & Rubin, D. B. (1977). Maximum likelihood from incomplete
data via the EM algorithm. Journal of the Royal Statistical Society B, 39(1), 1-38.
Friedman, N. (1997). Learning belief networks in the presence of missing values and
hidden variables. Proceedings of ICML 1997, 125-133.
Friedman, N. (1998). The Bayesian structural EM algorithm. Proceedings of UAI 1998,
129-138.
Rubin, D. B. (1976). Inference and missing data. Biometrika, 63(3), 581-592.
"""

from __future__ import annotations

import math
from collections import OrderedDict
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from runner.scores.available import penalty_per_parameter
from runner.scores.cache import CachedScorer, mask_members, parent_mask
from runner.scores.counts import configuration_codes
from runner.scores.elementary import ln
from runner.scores.likelihood import free_parameters

#: The most completed rows (columns of the completed table) a data set may need.
COMPLETION_LIMIT = 20_000_000
#: EM stops when no completion weight changes by more than this.
EM_TOLERANCE = 1e-9
#: ... or after this many iterations.
EM_ITERATIONS = 200
#: Pseudo-rows per parent configuration in the tables that give the posteriors.
EM_PRIOR = 1.0


class TooManyCompletions(ValueError):
    """The completed table would exceed :data:`COMPLETION_LIMIT` columns."""


@dataclass(frozen=True)
class Pattern:
    """The rows missing exactly the columns ``missing``: completed columns
    ``start:stop`` of the completed table, ``width`` completions per row, row-major."""

    missing: tuple[int, ...]
    start: int
    stop: int
    width: int


@dataclass(frozen=True)
class Completions:
    """Every completion of every row: ``codes`` (n_vars x M, no missing code left),
    ``source`` (the row each completion comes from), the missingness ``patterns`` and
    the data's ``n_rows``."""

    codes: np.ndarray
    source: np.ndarray
    patterns: tuple[Pattern, ...]
    n_rows: int

    @property
    def size(self) -> int:
        return int(self.codes.shape[1])


def completed_size(codes: np.ndarray, arities: np.ndarray) -> int:
    """How many completed rows :func:`complete_rows` would make (exact integer)."""
    missing = (codes >= np.asarray(arities)[:, None]) & (np.asarray(arities) > 0)[:, None]
    per_row = np.ones(codes.shape[1], dtype=object)
    for v in np.flatnonzero(missing.any(axis=1)).tolist():
        per_row[missing[v]] *= int(arities[v])
    return int(per_row.sum())


def complete_rows(codes: np.ndarray, arities: np.ndarray,
                  limit: int = COMPLETION_LIMIT) -> Completions:
    """The completions of every row of ``codes`` (n_vars x N; a missing cell carries its
    column's arity as code), grouped by missingness pattern in the order of the patterns'
    sorted missing-column tuples; within a pattern, row by row, the completions in
    mixed-radix order of the missing columns (first column most significant).

    Raises
    ------
    TooManyCompletions
        When more than ``limit`` completed rows would be needed.
    """
    arities = np.asarray(arities, dtype=np.int64)
    n_vars, n_rows = codes.shape
    size = completed_size(codes, arities)
    if size > limit:
        raise TooManyCompletions(
            f"{size:,} completed rows would be needed (at most {limit:,})")
    missing = (codes >= arities[:, None]) & (arities > 0)[:, None]
    kinds, inverse = np.unique(missing.T, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    groups = {tuple(np.flatnonzero(kind).tolist()): np.flatnonzero(inverse == i)
              for i, kind in enumerate(kinds)}
    blocks: list[np.ndarray] = []
    sources: list[np.ndarray] = []
    patterns: list[Pattern] = []
    start = 0
    for cols in sorted(groups):
        rows = groups[cols]
        width = 1
        for v in cols:
            width *= int(arities[v])
        block = np.repeat(codes[:, rows], width, axis=1)
        if cols:
            grids = np.meshgrid(*[np.arange(int(arities[v])) for v in cols], indexing="ij")
            for v, grid in zip(cols, grids, strict=True):
                block[v] = np.tile(grid.reshape(-1).astype(block.dtype), rows.size)
        blocks.append(block)
        sources.append(np.repeat(rows, width))
        patterns.append(Pattern(cols, start, start + block.shape[1], width))
        start += block.shape[1]
    table = (np.concatenate(blocks, axis=1) if blocks
             else np.zeros((n_vars, 0), dtype=codes.dtype))
    source = np.concatenate(sources) if sources else np.zeros(0, dtype=np.int64)
    return Completions(table, source.astype(np.int64), tuple(patterns), n_rows)


def _family_cells(codes: np.ndarray, arities: np.ndarray, child: int,
                  parents: Sequence[int]) -> tuple[np.ndarray, np.ndarray, int]:
    """Per completed row, the index of its (configuration, child state) cell among the
    occurring cells in ascending order, the cells' configuration index, and q."""
    r = int(arities[child])
    config, bound, q = configuration_codes(codes, arities, list(parents))
    if bound * r >= 1 << 62:
        _, config = np.unique(config, return_inverse=True)
    cell = config.astype(np.int64) * r + codes[child].astype(np.int64)
    cells, inverse = np.unique(cell, return_inverse=True)
    _, config_of_cell = np.unique(cells // r, return_inverse=True)
    return inverse.reshape(-1), config_of_cell.reshape(-1), q


def _weighted(cells: tuple[np.ndarray, np.ndarray], weights: np.ndarray
              ) -> tuple[np.ndarray, np.ndarray]:
    """``(n_jk, n_j)`` of a family's cells (:func:`_family_cells`) under ``weights``."""
    inverse, config_of_cell = cells
    n_jk = np.bincount(inverse, weights=weights)
    return n_jk, np.bincount(config_of_cell, weights=n_jk)


def expected_counts(completions: Completions, weights: np.ndarray, arities: np.ndarray,
                    child: int, parents: Sequence[int]) -> tuple[np.ndarray, np.ndarray, int]:
    """Expected counts of a family: ``(n_jk, n_j, q)`` with one entry of ``n_jk`` per
    occurring (configuration, child state) cell, ``n_j`` per occurring configuration."""
    inverse, config_of_cell, q = _family_cells(completions.codes, arities, child, parents)
    n_jk, n_j = _weighted((inverse, config_of_cell), weights)
    return n_jk, n_j, q


def expected_log_likelihood(n_jk: np.ndarray, n_j: np.ndarray) -> float:
    """sum_jk n_jk ln n_jk - sum_j n_j ln n_j of expected (real) counts, 0 ln 0 = 0."""
    a = n_jk[n_jk > 0]
    b = n_j[n_j > 0]
    return math.fsum((a * ln(a)).tolist()) - math.fsum((b * ln(b)).tolist())


def _table_lookup(cells: tuple[np.ndarray, np.ndarray], weights: np.ndarray, r: int,
                  prior: float) -> np.ndarray:
    """Per completed row, its family's fitted probability of the row's child state:
    (n_jk + a) / (n_j + a r) with a = prior / r."""
    inverse, config_of_cell = cells
    n_jk, n_j = _weighted(cells, weights)
    theta = (n_jk + prior / r) / (n_j[config_of_cell] + prior)
    return np.asarray(theta[inverse])


def em_weights(completions: Completions, arities: np.ndarray,
               parent_sets: Sequence[Sequence[int]], tolerance: float = EM_TOLERANCE,
               iterations: int = EM_ITERATIONS,
               prior: float = EM_PRIOR) -> tuple[np.ndarray, int]:
    """Posterior weights of the completions under the DAG ``parent_sets`` with tables
    fitted by EM (module doc); returns ``(weights, iterations run)``.

    Complexity: O(iterations x n x M log M) for M completions.
    """
    arities = np.asarray(arities, dtype=np.int64)
    n_vars = completions.codes.shape[0]
    weights = np.ones(completions.size, dtype=np.float64)
    for pattern in completions.patterns:
        if pattern.width > 1:
            weights[pattern.start:pattern.stop] = 1.0 / pattern.width
    incomplete = [p for p in completions.patterns if p.missing]
    if not incomplete:
        return weights, 0
    touched: dict[tuple[int, ...], list[int]] = {}
    for p in incomplete:
        cols = set(p.missing)
        touched[p.missing] = [v for v in range(n_vars)
                              if v in cols or cols.intersection(parent_sets[v])]
    needed = sorted({v for vs in touched.values() for v in vs})
    cells = {v: _family_cells(completions.codes, arities, v, parent_sets[v])[:2]
             for v in needed}  # the cells stay; only their weights change
    done = 0
    for done in range(1, iterations + 1):  # noqa: B007 - the count is returned
        theta = {v: _table_lookup(cells[v], weights, int(arities[v]), prior) for v in needed}
        new = weights.copy()
        for p in incomplete:
            block = np.ones(p.stop - p.start, dtype=np.float64)
            for v in touched[p.missing]:
                block *= theta[v][p.start:p.stop]
            grid = block.reshape(-1, p.width)
            total = grid[:, 0].copy()
            for j in range(1, p.width):
                total += grid[:, j]
            safe = np.where(total > 0, total, 1.0)
            grid = np.where(total[:, None] > 0, grid / safe[:, None], 1.0 / p.width)
            new[p.start:p.stop] = grid.reshape(-1)
        moved = float(np.max(np.abs(new - weights)))
        weights = new
        if moved <= tolerance:
            break
    return weights, done


class ExpectedCountScorer(CachedScorer):
    """Penalised log-likelihood family scores (``loglik``, ``aic``, ``bic``) of the
    expected counts under fixed completion ``weights`` (module doc), cached."""

    def __init__(self, name: str, completions: Completions, weights: np.ndarray,
                 arities: np.ndarray, em_iterations: int = 0,
                 cache_limit: int | None = None) -> None:
        super().__init__(int(completions.codes.shape[0]), completions.n_rows, cache_limit)
        self.name = name
        self.completions = completions
        self.weights = weights
        self.arities = np.asarray(arities, dtype=np.int64)
        self.penalty = penalty_per_parameter(name, completions.n_rows)
        self.em_iterations = em_iterations

    def _compute(self, child: int, mask: int) -> float:
        parents = mask_members(mask)
        n_jk, n_j, q = expected_counts(self.completions, self.weights, self.arities, child,
                                       parents)
        k = free_parameters(q, int(self.arities[child]))
        return expected_log_likelihood(n_jk, n_j) - self.penalty * k


class SelfWeightedScorer:
    """A DAG's score under its own completion weights (:func:`em_weights` for that DAG):
    what ``structural-em`` stores and what a rescore recomputes.

    :meth:`for_graph` gives the (cached) expected-count scorer of one DAG, the scorer a
    structural EM round searches with.
    """

    def __init__(self, name: str, completions: Completions, arities: np.ndarray) -> None:
        self.name = name
        self.completions = completions
        self.arities = np.asarray(arities, dtype=np.int64)
        self.n_vars = int(completions.codes.shape[0])
        self.n_rows = completions.n_rows
        self._scorers: OrderedDict[tuple[int, ...], ExpectedCountScorer] = OrderedDict()

    def for_graph(self, parent_sets: Sequence[Iterable[int]]) -> ExpectedCountScorer:
        """The expected-count scorer under the completion weights of ``parent_sets``."""
        sets = [tuple(sorted(ps)) for ps in parent_sets]
        key = tuple(parent_mask(ps) for ps in sets)
        scorer = self._scorers.get(key)
        if scorer is None:
            weights, iterations = em_weights(self.completions, self.arities, sets)
            scorer = ExpectedCountScorer(self.name, self.completions, weights, self.arities,
                                         iterations)
            self._scorers[key] = scorer
            if len(self._scorers) > 4:
                self._scorers.popitem(last=False)
        return scorer

    def total(self, parent_sets: Sequence[Iterable[int]]) -> float:
        """The DAG's score under its own weights (exactly rounded sum of its families)."""
        sets = [tuple(sorted(ps)) for ps in parent_sets]
        return self.for_graph(sets).total(sets)

    def families(self, parent_sets: Sequence[Iterable[int]]) -> list[float]:
        """Each family's score under the DAG's own weights, in column order."""
        sets = [tuple(sorted(ps)) for ps in parent_sets]
        return self.for_graph(sets).families(sets)
