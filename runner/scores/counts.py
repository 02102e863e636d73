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
the :class:`~runner.scores.protocol.Scorer` of the discrete scores. It counts with the
compiled kernel of :mod:`runner.scores.kernel` (numba: one pass over the rows, the same
tables) when numba is installed and the family's dense table fits
(:func:`dense_limit`), and with :func:`family_counts` otherwise. The environment
variable ``DAGMILL_KERNEL`` chooses: ``numpy`` the numpy path always, ``numba`` the
kernel or an error when numba is missing; unset, the numpy path until a scorer has
counted :data:`AUTO_AFTER_ROWS` rows x families (or until the kernel is loaded in the
process), then the kernel if numba imports (a small search never pays for importing
numba). Either way the tables, and so every
score, are the same bits.
"""

from __future__ import annotations

import importlib
import os
import sys
from collections.abc import Callable, Sequence
from functools import cache
from types import ModuleType

import numpy as np

from runner.errors import EnvironmentFault
from runner.scores.cache import CachedScorer, mask_members
from runner.scores.likelihood import column_form

#: A score of one family from its count table: ``f(table, q, n_rows) -> float``.
CountFamilyScore = Callable[[np.ndarray, int, int], float]

# Above this many cells (relative to the rows) a dense bincount wastes memory, and the
# occurring family codes are compacted with numpy.unique instead.
DENSE_CELLS_PER_ROW = 4
DENSE_CELLS_FLOOR = 1 << 16

#: The environment variable that chooses the counting path (:data:`KERNELS`).
KERNEL_VARIABLE = "DAGMILL_KERNEL"
#: Its values: the compiled kernel, or the numpy path.
KERNELS = ("numba", "numpy")
#: The module of the compiled kernel, imported at a count (it imports numba).
KERNEL_MODULE = "runner.scores.kernel"


def dense_limit(n_rows: int) -> int:
    """Most (configuration x child state) cells a family of ``n_rows`` rows is counted
    in densely; above it the occurring codes are compacted with ``numpy.unique``."""
    return max(DENSE_CELLS_PER_ROW * n_rows, DENSE_CELLS_FLOOR)


#: Unset, the kernel is loaded once the numpy path has counted this many rows x
#: families (about half a second of counting): importing numba and loading the compiled
#: code takes about a second, more than a small search spends counting.
AUTO_AFTER_ROWS = 100_000_000


def kernel_choice() -> str:
    """``DAGMILL_KERNEL``'s value: one of :data:`KERNELS`, or ``""`` when unset (the
    kernel once a scorer has counted :data:`AUTO_AFTER_ROWS` rows, if numba imports).

    Raises
    ------
    EnvironmentFault
        It names no kernel.
    """
    choice = os.environ.get(KERNEL_VARIABLE, "").strip().lower()
    if choice not in ("", *KERNELS):
        raise EnvironmentFault(
            f"{KERNEL_VARIABLE}={choice!r} names no counting kernel: use one of "
            f"{', '.join(KERNELS)}, or leave it unset")
    return choice


def kernel_loaded() -> bool:
    """Whether the compiled kernel is imported in this process already."""
    return KERNEL_MODULE in sys.modules


def counting_kernel(choice: str) -> ModuleType | None:
    """The compiled counting kernel (:mod:`runner.scores.kernel`) for ``choice`` (a
    value of :func:`kernel_choice`), or None for the numpy path; numba is imported here,
    at a count, never when ``runner`` is imported.

    Raises
    ------
    EnvironmentFault
        ``choice`` is ``numba`` and numba does not import.
    """
    if choice == "numpy":
        return None
    return _kernel(choice)


@cache
def _kernel(choice: str) -> ModuleType | None:
    try:
        return importlib.import_module(KERNEL_MODULE)
    except ImportError as exc:
        if choice == "numba":
            raise EnvironmentFault(
                f"{KERNEL_VARIABLE}=numba but numba does not import ({exc}): install it "
                f"(pip install 'numba>=0.60') or set {KERNEL_VARIABLE}=numpy") from exc
        return None


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
    if cells <= dense_limit(n_rows):
        dense = np.bincount(family_code, minlength=cells).reshape(bound, r)
        return dense[dense.any(axis=1)], q
    occurring, counts = np.unique(family_code, return_counts=True)
    configs, row_of = np.unique(occurring // r, return_inverse=True)
    table = np.zeros((configs.size, r), dtype=np.int64)
    table[row_of, (occurring % r).astype(np.intp)] = counts
    return table, q


def configurations(arities: np.ndarray, variables: Sequence[int]) -> int:
    """Number of joint states of ``variables``: the product of their arities (1 for none)."""
    possible = 1
    for v in variables:
        possible *= int(arities[v])
    return possible


class CountScorer(CachedScorer):
    """Family scores of discrete data from their count tables, cached (see
    :class:`~runner.scores.cache.CachedScorer`).

    ``codes`` has shape (n_vars, n_rows) and ``arities`` one entry per variable;
    ``function`` scores one family's count table (:func:`family_counts`). The compiled
    kernel trusts every code to be below its variable's arity: it is checked once, when
    the kernel is chosen, and data where it fails are counted by the numpy path.
    """

    def __init__(self, function: CountFamilyScore, codes: np.ndarray, arities: np.ndarray,
                 cache_limit: int | None = None) -> None:
        n_vars, n_rows = codes.shape
        super().__init__(int(n_vars), int(n_rows), cache_limit)
        self.function = function
        self.column_function = column_form(function)
        self.codes = codes
        self.arities = arities
        self._limit = dense_limit(int(n_rows))
        self._arities = np.asarray(arities, dtype=np.int64)  # as the kernel takes them
        self._dense: np.ndarray | None = None  # the kernel's scratch table, all zero
        self._code = np.zeros(0, dtype=np.int64)
        self._choice: str | None = None  # DAGMILL_KERNEL, read at the first count
        self._settled = codes.dtype not in (np.uint8, np.uint16)
        self._kernel_module: ModuleType | None = None
        self._counted = 0  # rows x families counted by the numpy path

    def _kernel(self) -> ModuleType | None:
        """The counting kernel once chosen (None: the numpy path, for now or for good)."""
        if self._settled:
            return self._kernel_module
        if self._choice is None:
            self._choice = kernel_choice()
        if self._choice == "numpy":
            self._settled = True
        elif (self._choice == "numba" or self._counted >= AUTO_AFTER_ROWS
              or kernel_loaded()):  # loaded already: no cost left to avoid
            if self._codes_in_range():
                self._kernel_module = counting_kernel(self._choice)
            self._settled = True
        return self._kernel_module

    def __getstate__(self) -> dict[str, object]:
        """A copy for another process (a pool or cluster worker) chooses its counting
        path again there: a module and the scratch buffers do not travel."""
        state = dict(self.__dict__)
        if state["_kernel_module"] is not None:
            state.update(_kernel_module=None, _settled=False, _choice=None)
        state.update(_dense=None, _code=np.zeros(0, dtype=np.int64))
        return state

    def _codes_in_range(self) -> bool:
        """Whether every code is below its variable's arity (the kernel trusts it)."""
        codes = self.codes
        if codes.size == 0:
            return True
        return not bool((codes.max(axis=1) >= self._arities).any())

    def _scratch(self) -> tuple[np.ndarray, np.ndarray]:
        """The kernel's reused buffers: the dense table (all zero between counts) and a
        configuration code per row."""
        if self._dense is None:
            self._dense = np.zeros(self._limit, dtype=np.int64)
            self._code = np.zeros(self.n_rows, dtype=np.int64)
        return self._dense, self._code

    def counts(self, child: int, parents: Sequence[int]) -> tuple[np.ndarray, int]:
        """The count table and ``q`` of ``child`` given the sorted ``parents``, as
        :func:`family_counts` gives them (by the kernel when it applies)."""
        kernel = self._kernel()
        q = configurations(self.arities, parents)
        if kernel is None or q * int(self.arities[child]) > self._limit:
            self._counted += self.n_rows
            return family_counts(self.codes, self.arities, child, parents)
        return kernel.family_table(self.codes, self._arities, child, list(parents),
                                   *self._scratch()), q

    def _compute(self, child: int, mask: int) -> float:
        table, q = self.counts(child, mask_members(mask))
        return self.function(table, q, self.n_rows)

    def column_tables(self, child: int, mask: int,
                      candidates: Sequence[int]) -> list[tuple[np.ndarray, int]]:
        """The count tables and ``q`` of ``child`` given ``mask`` with each candidate's bit
        flipped, as :meth:`counts` gives them; with the kernel, every added parent counted
        from one configuration code of ``mask``, removals and tables too large for the
        dense count one by one. The cache and counters are not touched."""
        kernel = self._kernel()
        parents = list(mask_members(mask))
        found: dict[int, tuple[np.ndarray, int]] = {}
        if kernel is not None:
            q = configurations(self.arities, parents)
            base = q * int(self.arities[child])
            added = [p for p in candidates
                     if not mask >> p & 1 and base * int(self.arities[p]) <= self._limit]
            if added:
                tables = kernel.column_tables(self.codes, self._arities, child, parents,
                                              added, *self._scratch())
                for p, table in zip(added, tables, strict=True):
                    found[p] = (table, q * int(self.arities[p]))
        for p in candidates:
            if p not in found:
                found[p] = self.counts(child, mask_members(mask ^ (1 << p)))
        return [found[p] for p in candidates]

    def _compute_column(self, child: int, mask: int, candidates: Sequence[int]) -> list[float]:
        """The column's tables (:meth:`column_tables`) scored together when the score has
        a several-tables form (:func:`runner.scores.likelihood.column_form`: the same bits
        as one by one)."""
        pairs = self.column_tables(child, mask, candidates)
        if self.column_function is not None:
            return self.column_function([t for t, _ in pairs], [q for _, q in pairs],
                                        self.n_rows)
        return [self.function(table, q, self.n_rows) for table, q in pairs]
