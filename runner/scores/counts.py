"""Contingency counts of a family, by mixed-radix codes and ``numpy.bincount``.

A family is a child and its parent set. Each row of the data gets a parent
configuration code ``j = sum_p x_p * prod_{p' after p} r_p'`` (mixed radix over the
parents' arities) and a family code ``j * r_child + x_child``. One ``bincount`` over
the family codes gives every count N_ijk at once. Only the parent configurations
that occur in the data are kept: the others contribute nothing to any score here.

Complexity: O(N * |parents|) for the codes plus O(N + q * r) for the count, where q is
the number of parent configurations; when q * r is much larger than N the codes are
compacted with ``numpy.unique`` first (O(N log N)) so memory stays O(N).

:class:`CountScorer` binds a count-table score ``f(table, q, n_rows)`` to encoded data:
the :class:`~runner.scores.protocol.Scorer` of the discrete scores.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from runner.scores.cache import CachedScorer, mask_members

#: A score of one family from its count table: ``f(table, q, n_rows) -> float``.
CountFamilyScore = Callable[[np.ndarray, int, int], float]

# Above this many cells (relative to the rows) a dense bincount wastes memory, and the
# occurring family codes are compacted with numpy.unique instead.
DENSE_CELLS_PER_ROW = 4
DENSE_CELLS_FLOOR = 1 << 16


def code_dtype(cells: int) -> type[np.unsignedinteger]:
    """Smallest unsigned integer type that holds codes below ``cells``."""
    if cells <= 1 << 8:
        return np.uint8
    if cells <= 1 << 16:
        return np.uint16
    if cells <= 1 << 32:
        return np.uint32
    return np.uint64


# Codes are compacted (renumbered to the occurring configurations) before they could
# overflow 64 bits; the number of possible configurations is still reported exactly.
COMPACT_ABOVE = 1 << 62


def configuration_codes(
    codes: np.ndarray, arities: np.ndarray, variables: Sequence[int]
) -> tuple[np.ndarray, int, int]:
    """Mixed-radix code of each row's joint state of ``variables``.

    ``codes`` has shape (n_vars, n_rows). Returns ``(code, bound, possible)``: an integer
    array of length n_rows with every value below ``bound``, and the number of possible
    joint states (the product of the arities; 1 for no variables). ``bound`` equals
    ``possible`` unless the codes had to be renumbered to stay within 64 bits.
    """
    n_rows = codes.shape[1]
    if not variables:
        return np.zeros(n_rows, dtype=np.uint8), 1, 1
    possible = 1
    for v in variables:
        possible *= int(arities[v])
    bound = int(arities[variables[0]])
    out = codes[variables[0]].astype(code_dtype(possible if possible < COMPACT_ABOVE else 1 << 64))
    for v in variables[1:]:
        r = int(arities[v])
        if bound * r >= COMPACT_ABOVE:
            occurring, inverse = np.unique(out, return_inverse=True)
            out, bound = inverse.astype(np.uint64), int(occurring.size)
        out *= out.dtype.type(r)  # in place: ``out`` is always a fresh array here
        out += codes[v]
        bound *= r
    return out, bound, possible


def family_counts(
    codes: np.ndarray, arities: np.ndarray, child: int, parents: Sequence[int]
) -> tuple[np.ndarray, int]:
    """Counts N_jk of the child's states k per occurring parent configuration j.

    Returns ``(table, q)``: ``table`` has shape (q_occurring, r_child) with every row
    summing to at least 1, and ``q`` is the number of possible parent configurations
    (the product of the parents' arities), which penalties and priors need.
    """
    r = int(arities[child])
    n_rows = codes.shape[1]
    if not parents:
        table = np.bincount(codes[child], minlength=r).reshape(1, r)
        return table, 1
    parent_code, bound, q = configuration_codes(codes, arities, list(parents))
    if bound * r >= COMPACT_ABOVE:
        occurring, inverse = np.unique(parent_code, return_inverse=True)
        parent_code, bound = inverse.astype(np.uint64), int(occurring.size)
    cells = bound * r
    dtype = code_dtype(cells)
    family_code = parent_code.astype(dtype, copy=False) * dtype(r) + codes[child]
    if cells <= max(DENSE_CELLS_PER_ROW * n_rows, DENSE_CELLS_FLOOR):
        dense = np.bincount(family_code, minlength=cells).reshape(bound, r)
        return dense[dense.any(axis=1)], q
    occurring, counts = np.unique(family_code, return_counts=True)
    configs, row_of = np.unique(occurring // r, return_inverse=True)
    table = np.zeros((configs.size, r), dtype=np.int64)
    table[row_of, (occurring % r).astype(np.intp)] = counts
    return table, q


class CountScorer(CachedScorer):
    """Family scores of discrete data from their count tables, cached (see
    :class:`~runner.scores.cache.CachedScorer`).

    ``codes`` has shape (n_vars, n_rows) and ``arities`` one entry per variable;
    ``function`` scores one family's count table (:func:`family_counts`).
    """

    def __init__(self, function: CountFamilyScore, codes: np.ndarray, arities: np.ndarray,
                 cache_limit: int | None = None) -> None:
        n_vars, n_rows = codes.shape
        super().__init__(int(n_vars), int(n_rows), cache_limit)
        self.function = function
        self.codes = codes
        self.arities = arities

    def _compute(self, child: int, mask: int) -> float:
        table, q = family_counts(self.codes, self.arities, child, mask_members(mask))
        return self.function(table, q, self.n_rows)
